"""One plotting style for every figure hbmodel writes.

* axis labels carry units ("V [mag]", "V − I [mag]", "T_eff [K]"), built by the helpers below;
* magnitude axes point bright-side up (:func:`invert_mag_axis`);
* colours from the Okabe & Ito (2008, "Color Universal Design") palette, distinguishable with the
  common forms of colour blindness;
* figure sizes for a journal column (3.5 in) and a full page (7.1 in), constrained layout so no
  label is cut off;
* legends go where the fewest data points are, or outside the axes when every corner is crowded
  (:func:`place_legend`);
* :func:`save_figure` writes PNG plus a PDF beside it.

Object-oriented matplotlib only: figures are :class:`matplotlib.figure.Figure` instances with an
Agg canvas; pyplot (and its global figure manager) is never used.  Style parameters are applied with
``matplotlib.rc_context`` around the drawing code (:func:`styled`), so nothing global is changed.
"""
from __future__ import annotations

import functools
from pathlib import Path

import numpy as np

__all__ = ["OKABE_ITO", "COLUMN_WIDTH_IN", "PAGE_WIDTH_IN", "STYLE", "styled", "new_figure", "mag_label",
           "colour_label", "absmag_label", "TEFF_LABEL", "FEH_LABEL", "HB_MASS_LABEL", "invert_mag_axis",
           "place_legend", "points_under_legend", "legend_of", "save_figure", "format_feh", "SEQUENTIAL_CMAP",
           "DIVERGING_CMAP"]

#: Okabe & Ito (2008) colour-blind-safe palette.
OKABE_ITO = {
    "black": "#000000", "orange": "#E69F00", "sky_blue": "#56B4E9", "bluish_green": "#009E73",
    "yellow": "#F0E442", "blue": "#0072B2", "vermillion": "#D55E00", "reddish_purple": "#CC79A7",
}
#: Colour cycle for line plots (yellow last: weak on white).
CYCLE = [OKABE_ITO[k] for k in ("blue", "orange", "bluish_green", "vermillion", "reddish_purple", "sky_blue",
                                "black", "yellow")]
#: Perceptually uniform maps, readable in grey scale and by colour-blind readers.
SEQUENTIAL_CMAP = "cividis"
DIVERGING_CMAP = "PuOr_r"

COLUMN_WIDTH_IN = 3.5   # one journal column
PAGE_WIDTH_IN = 7.1     # full page width (two columns)

STYLE = {
    "font.size": 8.0, "axes.labelsize": 8.0, "axes.titlesize": 8.5, "xtick.labelsize": 7.0,
    "ytick.labelsize": 7.0, "legend.fontsize": 7.0, "legend.frameon": True, "legend.framealpha": 0.85,
    "axes.linewidth": 0.6, "lines.linewidth": 1.1, "xtick.direction": "in", "ytick.direction": "in",
    "xtick.top": True, "ytick.right": True, "xtick.minor.visible": True, "ytick.minor.visible": True,
    "savefig.dpi": 200, "figure.dpi": 100, "image.cmap": SEQUENTIAL_CMAP,
    "axes.prop_cycle": None,  # filled in below (needs matplotlib's cycler)
}

TEFF_LABEL = r"$T_\mathrm{eff}$ [K]"
FEH_LABEL = "[Fe/H] [dex]"
HB_MASS_LABEL = r"HB mass [$M_\odot$]"


def _style():
    from cycler import cycler
    return {**STYLE, "axes.prop_cycle": cycler(color=CYCLE)}


def styled(fn):
    """Decorator: run a plotting function inside ``rc_context(STYLE)`` (restored on return)."""
    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        import matplotlib
        with matplotlib.rc_context(_style()):
            return fn(*args, **kwargs)
    return wrapper


def new_figure(width="column", aspect=1.0, *, nrows=1, ncols=1, **subplot_kw):
    """A Figure (Agg canvas, constrained layout) of a journal ``width`` ("column" = 3.5 in, "page" =
    7.1 in, or inches) and height ``aspect * width``; returns ``(fig, axes)`` like ``subplots``."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    w = {"column": COLUMN_WIDTH_IN, "page": PAGE_WIDTH_IN}.get(width, width)
    w = float(w)
    import matplotlib
    with matplotlib.rc_context(_style()):
        fig = Figure(figsize=(w, aspect * w), layout="constrained")
        FigureCanvasAgg(fig)
        if nrows == 0:
            return fig, None
        axes = fig.subplots(nrows, ncols, **subplot_kw)
    return fig, axes


def mag_label(band: str) -> str:
    return f"{band} [mag]"


def colour_label(first: str, second: str) -> str:
    return f"{first} − {second} [mag]"


def absmag_label(band: str) -> str:
    return f"$M_{{{band}}}$ [mag]"


def format_feh(v: float) -> str:
    """'[Fe/H] = +0.20' with no negative zero ("-0.0" is a rounding artefact of the grid)."""
    v = float(v)
    if abs(v) < 5e-3:
        v = 0.0
    return f"[Fe/H] = {v:+.2f}".replace("+0.00", "0.00")


def invert_mag_axis(ax, axis: str = "y") -> None:
    """Bright magnitudes up (or left): invert the axis once (idempotent)."""
    if axis == "y" and not ax.yaxis_inverted():
        ax.invert_yaxis()
    elif axis == "x" and not ax.xaxis_inverted():
        ax.invert_xaxis()


_CANDIDATE_LOCS = ("upper right", "upper left", "lower left", "lower right", "upper center", "lower center",
                   "center left", "center right")


def points_under_legend(ax, legend, x, y, renderer=None) -> int:
    """Number of data points (x, y in data units) that the drawn ``legend`` covers."""
    x = np.asarray(x, float).ravel()
    y = np.asarray(y, float).ravel()
    ok = np.isfinite(x) & np.isfinite(y)
    if not ok.any():
        return 0
    renderer = renderer or ax.figure.canvas.get_renderer()
    bb = legend.get_window_extent(renderer)
    xy = ax.transData.transform(np.column_stack([x[ok], y[ok]]))
    inside = (xy[:, 0] >= bb.x0) & (xy[:, 0] <= bb.x1) & (xy[:, 1] >= bb.y0) & (xy[:, 1] <= bb.y1)
    return int(inside.sum())


def place_legend(ax, x=None, y=None, *, max_covered: int = 0, outside: str = "auto", **kwargs):
    """A legend at the location covering the fewest of the points ``(x, y)`` (data units); if every
    inside location covers more than ``max_covered`` points, the legend goes outside the axes: "below"
    (the panel keeps its width; "auto" for a one-panel figure) or to the "right" (the default "auto"
    with several panels).  Without points: matplotlib's ``loc="best"``."""
    import matplotlib
    with matplotlib.rc_context(_style()):
        if x is None:
            return ax.legend(loc="best", **kwargs)
        fig = ax.figure
        fig.canvas.draw()  # fixes the (constrained) layout and the data limits
        renderer = fig.canvas.get_renderer()
        best = None
        for loc in _CANDIDATE_LOCS:
            leg = ax.legend(loc=loc, **kwargs)
            n = points_under_legend(ax, leg, x, y, renderer)
            leg.remove()
            if best is None or n < best[0]:
                best = (n, loc)
            if n == 0:
                break
        if best[0] <= max_covered:
            return ax.legend(loc=best[1], **kwargs)
        if outside == "auto":
            outside = "below" if len(fig.axes) == 1 else "right"
        if outside == "below" and len(fig.axes) == 1:  # below the x label, room made by the layout
            return fig.legend(*ax.get_legend_handles_labels(), loc="outside lower center", ncols=2, **kwargs)
        return ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0, **kwargs)


def legend_of(ax):
    """The legend drawn for ``ax``: its own, or the figure's (a legend placed below a single panel)."""
    return ax.get_legend() or (ax.figure.legends[0] if ax.figure.legends else None)


def save_figure(fig, path, *, force: bool = False, pdf: bool = True) -> list[Path]:
    """Write ``fig`` to ``path`` (its extension decides the format) and, with ``pdf`` and a PNG path,
    a PDF beside it (vector, for a paper).  Atomic, no timestamps (see :func:`hbmodel.io.catalogues.atomic_savefig`)."""
    from hbmodel.io.catalogues import atomic_savefig
    path = Path(path)
    out = [atomic_savefig(fig, path, force=force, dpi=200)]
    if pdf and path.suffix.lower() == ".png":
        out.append(atomic_savefig(fig, path.with_suffix(".pdf"), force=force))
    return out
