"""Access to the calibration tables in ``tables/`` (shipped as ``hbmodel.tables``).

Every table is a CSV file whose leading ``#`` lines name its source; the first
non-comment line holds the column names.  Tables are read once and returned as
read-only numpy arrays, so no caller can alter the calibration in place.
"""
from __future__ import annotations

import functools
import io
from importlib import resources

import numpy as np

__all__ = ["read_table", "table_header", "pchip_rows"]


def _text(name: str) -> str:
    try:
        return resources.files("hbmodel.tables").joinpath(name).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise FileNotFoundError(f"calibration table {name!r} is missing from the installation") from None


@functools.lru_cache(maxsize=None)
def read_table(name: str) -> dict[str, np.ndarray]:
    """Return the columns of calibration table ``name`` as read-only float arrays."""
    text = _text(name)
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    data = np.genfromtxt(io.StringIO("\n".join(lines)), delimiter=",", names=True,
                         dtype=float, encoding="utf-8")
    out = {}
    for col in data.dtype.names:
        arr = np.atleast_1d(np.array(data[col], dtype=float))
        arr.setflags(write=False)
        out[col] = arr
    return out


def table_header(name: str) -> str:
    """The provenance header (comment lines) of a calibration table."""
    return "\n".join(ln.lstrip("# ").rstrip() for ln in _text(name).splitlines()
                     if ln.lstrip().startswith("#"))


@functools.lru_cache(maxsize=None)
def pchip_rows(name: str, xcol: str, ycol: str, log_x: bool = True, log_y: bool = False):
    """Per-[M/H] monotone (PCHIP) interpolants of ``ycol`` against ``xcol`` in a long-format table.

    Returns ``(mh_values, interpolants, x_min, x_max)``; each row must share the same x grid."""
    from scipy.interpolate import PchipInterpolator
    t = read_table(name)
    mhs = np.unique(t["mh"])
    rows = []
    for m in mhs:
        sel = t["mh"] == m
        x = np.log10(t[xcol][sel]) if log_x else t[xcol][sel]
        y = np.log10(t[ycol][sel]) if log_y else t[ycol][sel]
        rows.append(PchipInterpolator(x, y, extrapolate=False))
    xs = t[xcol][t["mh"] == mhs[0]]
    return mhs, tuple(rows), float(xs.min()), float(xs.max())
