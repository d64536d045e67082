"""Access to the calibration tables in ``tables/`` (shipped as ``hbmodel.tables``).

Every table is a CSV file whose leading ``#`` lines name its source; the first
non-comment line holds the column names.  Tables are read once and returned as
read-only numpy arrays, so no caller can alter the calibration in place.

The calibration (:mod:`hbmodel.calibration`) evaluates the model with trial
coefficients through :func:`trial_tables`, a context manager that substitutes
table texts for the duration of a ``with`` block, in the current thread or task
only (a :class:`contextvars.ContextVar`; nothing global is mutated).  Loaders of
derived coefficients use :func:`table_cache` instead of ``functools.lru_cache``
so that their cache is keyed by the active substitution.
"""
from __future__ import annotations

import contextlib
import contextvars
import functools
import io
import itertools
from importlib import resources
from types import MappingProxyType

import numpy as np

__all__ = ["read_table", "table_header", "table_text", "pchip_rows", "table_cache", "trial_tables", "shipped_tables"]

_EMPTY = MappingProxyType({})
_TRIAL: contextvars.ContextVar = contextvars.ContextVar("hbmodel_trial_tables", default=(0, _EMPTY))
_GENERATION = itertools.count(1)  # a fresh cache key per trial block


def _shipped_text(name: str) -> str:
    try:
        return resources.files("hbmodel.tables").joinpath(name).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise FileNotFoundError(f"calibration table {name!r} is missing from the installation") from None


def _text(name: str) -> str:
    trial = _TRIAL.get()[1]
    return trial[name] if name in trial else _shipped_text(name)


def table_text(name: str) -> str:
    """The text of table ``name`` as the model sees it now (shipped, or a trial substitute)."""
    return _text(name)


def _key() -> int:
    """Cache key of the active trial block (0 = the shipped tables)."""
    return _TRIAL.get()[0]


def shipped_tables() -> bool:
    """True unless a :func:`trial_tables` block is active (what an on-disk cache may store)."""
    return _key() == 0


@contextlib.contextmanager
def trial_tables(texts: dict[str, str]):
    """Evaluate the model with the table texts ``texts`` (name -> CSV text) in place of the shipped ones.

    Used by the calibration only.  Nested blocks see the union (inner wins)."""
    merged = dict(_TRIAL.get()[1])
    merged.update(texts)
    token = _TRIAL.set((next(_GENERATION), MappingProxyType(merged)))
    try:
        yield
    finally:
        _TRIAL.reset(token)


def table_cache(func):
    """``functools.lru_cache`` for functions derived from calibration tables, keyed also by the
    active :func:`trial_tables` block, so trial coefficients never leak into or out of a cache."""
    @functools.lru_cache(maxsize=64)
    def cached(key, *args, **kwargs):
        return func(*args, **kwargs)

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        return cached(_key(), *args, **kwargs)

    wrapper.cache_clear = cached.cache_clear
    return wrapper


@table_cache
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


@table_cache
def pchip_rows(name: str, xcol: str, ycol: str, log_x: bool = True, log_y: bool = False):
    """Per-[M/H] monotone (PCHIP) interpolants of ``ycol`` against ``xcol`` in a long-format table.

    Returns ``(mh_values, interpolants, x_min, x_max)``; each row must share the same x grid.
    The interpolants are :class:`hbmodel.core.numerics.Pchip` (NaN outside the grid)."""
    from hbmodel.core.numerics import Pchip
    t = read_table(name)
    mhs = np.unique(t["mh"])
    rows = []
    for m in mhs:
        sel = t["mh"] == m
        x = np.log10(t[xcol][sel]) if log_x else t[xcol][sel]
        y = np.log10(t[ycol][sel]) if log_y else t[ycol][sel]
        rows.append(Pchip(x, y, extrapolate=False))
    xs = t[xcol][t["mh"] == mhs[0]]
    return mhs, tuple(rows), float(xs.min()), float(xs.max())
