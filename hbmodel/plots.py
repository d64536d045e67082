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


def plot_hb_type_grid(table, ax=None):
    """HB type versus [Fe/H], one line per value of the series parameter."""
    if ax is None:
        fig, ax = new_figure(figsize=(6, 4.5))
    else:
        fig = ax.figure
    series = str(table["series"][0])
    for v in np.unique(np.asarray(table["series_value"])):
        sel = np.asarray(table["series_value"]) == v
        label = f"{v:g} Gyr" if series == "age" else f"eta = {v:g}"
        ax.plot(np.asarray(table["hb_type"])[sel], np.asarray(table["feh"])[sel], marker="o", ms=3, label=label)
    ax.set_xlabel("HB type  (B − R)/(B + V + R)")
    ax.set_ylabel("[Fe/H]")
    ax.set_xlim(-1.05, 1.05)
    ax.legend(fontsize=8)
    return fig, ax


def plot_clump_grid(table, band, ax=None):
    """Clump absolute magnitude versus age, one line per [Fe/H] (the population-correction surface)."""
    if ax is None:
        fig, ax = new_figure(figsize=(6, 4.5))
    else:
        fig = ax.figure
    for f in np.unique(np.asarray(table["feh"])):
        sel = np.asarray(table["feh"]) == f
        ax.plot(np.asarray(table["age_gyr"])[sel], np.asarray(table[f"M_{band}"])[sel], marker="o", ms=3,
                label=f"[Fe/H] = {f:+.1f}")
    ax.set_xlabel("age [Gyr]")
    ax.set_ylabel(f"clump M_{band}")
    ax.invert_yaxis()
    ax.legend(fontsize=7)
    return fig, ax
