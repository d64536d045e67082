"""A small on-disk cache of derived arrays, so that a fresh process skips work (and imports) it has done before.

Entries are plain ``.npy`` arrays (read with ``allow_pickle=False``) in the user cache directory:
``$HBMODEL_CACHE_DIR`` if set, else ``$XDG_CACHE_HOME/hbmodel`` or ``~/.cache/hbmodel``.  An entry's
name is a SHA-256 digest of everything its content depends on -- the hbmodel version, the source of
the module that computes it, the library versions and the inputs (the caller lists them) -- so a
changed input, table row or code never meets a stale entry.  Writes go to a temporary file in the same
directory and are renamed into place (atomic: concurrent processes at worst compute the same entry
twice); the directory is kept below :data:`MAX_BYTES` by removing the least recently used entries.
Setting ``HBMODEL_NO_CACHE=1`` turns the cache off (every entry is then computed in memory).  Any
failure of the cache (read-only or full disk, damaged entry) falls back to computing the array.
"""
from __future__ import annotations

import hashlib
import os
from pathlib import Path

import numpy as np

from hbmodel.core.files import atomic_path

__all__ = ["cache_dir", "cached_array", "MAX_BYTES"]

#: Bound of the cache directory's size; beyond it the least recently used entries are removed.
MAX_BYTES = 64 * 2**20


def cache_dir() -> Path | None:
    """The cache directory, or None when the cache is turned off (``HBMODEL_NO_CACHE`` set, not 0)."""
    if os.environ.get("HBMODEL_NO_CACHE", "").strip() not in ("", "0"):
        return None
    base = os.environ.get("HBMODEL_CACHE_DIR", "").strip()
    if base:
        return Path(base)
    xdg = os.environ.get("XDG_CACHE_HOME", "").strip()
    return (Path(xdg) if xdg else Path.home() / ".cache") / "hbmodel"


def _digest(kind: str, key) -> str:
    from hbmodel.core.version import __version__
    text = repr((__version__, kind, key))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:40]


def _prune(directory: Path, limit: int) -> None:
    """Remove the least recently used entries until the directory holds at most 3/4 of ``limit``."""
    import time
    entries = []
    for p in directory.iterdir():
        try:
            st = p.stat()
        except OSError:
            continue
        if p.suffix == ".part":  # a writer stopped mid-way an hour ago or more: removed
            if st.st_mtime < time.time() - 3600:
                entries.append((0.0, st.st_size, p))
            continue
        if p.suffix == ".npy":
            entries.append((st.st_mtime, st.st_size, p))
    total = sum(e[1] for e in entries)
    if total <= limit and not any(e[0] == 0.0 for e in entries):
        return
    for _mtime, size, p in sorted(entries, key=lambda e: e[0]):
        if total <= 0.75 * limit and _mtime > 0.0:
            break
        try:
            p.unlink()
            total -= size
        except OSError:
            pass


def cached_array(kind: str, key, compute, *, limit: int | None = None) -> np.ndarray:
    """``compute()`` (a float array), stored on disk under ``kind`` and ``key`` and read back next time.

    ``key`` must be a ``repr``-stable value (tuples of str, int, float) naming every input of
    ``compute``, including the source digest of the code (:func:`source_digest`).  The returned array
    is read-only.  ``limit`` overrides :data:`MAX_BYTES` (tests)."""
    directory = cache_dir()
    name = f"{kind}-{_digest(kind, key)}.npy"
    if directory is not None:
        path = directory / name
        try:
            arr = np.load(path, allow_pickle=False)
            os.utime(path)  # recently used: pruned last
            arr.setflags(write=False)
            return arr
        except (OSError, ValueError, EOFError):  # absent or damaged: (re)compute below
            pass
    arr = np.ascontiguousarray(compute(), dtype=float)
    if directory is not None:
        try:
            directory.mkdir(parents=True, exist_ok=True)
            with atomic_path(directory / name) as tmp, open(tmp, "wb") as fh:
                np.save(fh, arr, allow_pickle=False)
            _prune(directory, MAX_BYTES if limit is None else int(limit))
        except OSError:
            pass
    arr.setflags(write=False)
    return arr


def source_digest(*modules) -> str:
    """SHA-256 digest (hex, 16 characters) of the source files of ``modules`` (part of a cache key)."""
    h = hashlib.sha256()
    for m in modules:
        try:
            h.update(Path(m.__file__).read_bytes())
        except (OSError, TypeError, AttributeError):
            h.update(repr(m).encode())
    return h.hexdigest()[:16]
