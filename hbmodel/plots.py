"""Figures shared by the commands (matplotlib, Agg backend; nothing is displayed)."""
from __future__ import annotations

import numpy as np

#: Colours of our own choosing for the evolutionary phases in CMD plots.
PHASE_STYLE = {
    "rgb": dict(color="#8c5a2b", label="RGB"),
    "hb": dict(color="#1f6fb2", label="HB / clump"),
    "agb": dict(color="#6a9f3a", label="early AGB"),
    "field": dict(color="#9a9a9a", label="field"),
}


def new_figure(*args, **kwargs):
    import matplotlib
    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt
    return plt.subplots(*args, **kwargs)


def plot_cmd(table, mag_band: str, colour: tuple, ax=None, title=None):
    """CMD of a catalogue with a ``phase`` column: stars by phase, RR Lyrae ringed, magnitudes downward."""
    if ax is None:
        fig, ax = new_figure(figsize=(5.5, 6.5))
    else:
        fig = ax.figure
    c = np.asarray(table[colour[0]], float) - np.asarray(table[colour[1]], float)
    m = np.asarray(table[mag_band], float)
    phase = np.asarray(table["phase"]).astype(str) if "phase" in table.colnames else np.full(len(m), "hb")
    for ph, style in PHASE_STYLE.items():
        sel = phase == ph
        if sel.any():
            ax.scatter(c[sel], m[sel], s=3, lw=0, alpha=0.7, **style)
    if "is_rr" in table.colnames:
        rr = np.asarray(table["is_rr"], bool)
        if rr.any():
            ax.scatter(c[rr], m[rr], s=16, facecolors="none", edgecolors="#c2185b", lw=0.7, label="RR Lyrae")
    ax.set_xlabel(f"{colour[0]} − {colour[1]}")
    ax.set_ylabel(mag_band)
    if not ax.yaxis_inverted():
        ax.invert_yaxis()
    ax.legend(loc="upper right", fontsize=8, markerscale=2)
    if title:
        ax.set_title(title)
    return fig, ax
