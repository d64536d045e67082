"""Small helpers that turn out-of-range physics into clear ``ValueError``s."""
from __future__ import annotations

import numpy as np

__all__ = ["check_range", "as_float_array"]


def as_float_array(x, name: str) -> np.ndarray:
    try:
        arr = np.asarray(x, dtype=float)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be numeric, got {x!r}") from None
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} must be finite (got NaN or infinity)")
    return arr


def check_range(x, name: str, lo: float, hi: float, *, what: str = "calibrated range") -> np.ndarray:
    """Return ``x`` as a float array, raising ``ValueError`` if any value lies outside [lo, hi]."""
    arr = as_float_array(x, name)
    if arr.size and (arr.min() < lo or arr.max() > hi):
        bad = arr.min() if arr.min() < lo else arr.max()
        raise ValueError(f"{name} = {bad:g} is outside the {what} [{lo:g}, {hi:g}]")
    return arr


def check_interval(pair, name: str, lo_name: str = "lo", hi_name: str = "hi") -> tuple[float, float]:
    """``(lo, hi)`` floats of a two-number interval, finite with ``hi > lo`` (ValueError naming ``name``)."""
    try:
        lo, hi = (float(v) for v in pair)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a pair ({lo_name}, {hi_name}), got {pair!r}") from None
    if not (np.isfinite(lo) and np.isfinite(hi) and hi > lo):
        raise ValueError(f"{name} must be finite with {lo_name} < {hi_name} (hi > lo), got {pair!r}")
    return lo, hi
