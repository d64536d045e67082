"""The package's one atomic file writer and one JSON converter (issue 14: no duplicated helpers).

:func:`atomic_path` yields a temporary file beside the target and moves it into place only when the writer
finished: readers never see a half-written file, and an interrupted write leaves the old file (or none).
:func:`to_jsonable` turns numpy scalars/arrays, tuples, sets and paths into plain JSON values;
:func:`json_text` is the JSON text written or printed everywhere.  Higher rooms wrap these:
:mod:`hbmodel.io.catalogues` (``atomic_write_*``, tables, figures), :mod:`hbmodel.io.jobs` (batch records),
:mod:`hbmodel.core.cache`, the command line's printed JSON."""
from __future__ import annotations

import contextlib
import json
import math
import os
import tempfile
from collections.abc import Mapping
from pathlib import Path

import numpy as np

__all__ = ["umask", "atomic_path", "to_jsonable", "json_text"]


def umask() -> int:
    """The process umask, read without changing it (Linux); 0o022 if unknown."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError, IndexError):
        pass
    return 0o022


def _unlink_quietly(path) -> None:
    with contextlib.suppress(FileNotFoundError):
        os.unlink(path)


@contextlib.contextmanager
def atomic_path(path, *, force: bool = True, tmp_suffix: str = ".part"):
    """Yield a temporary path beside ``path`` (``.<name>.<random><tmp_suffix>``; give the target's own
    suffix to writers that choose the format by extension); when the block ends without an exception
    the file gets the user's usual mode (mkstemp makes 0600 files), is synced to disk and moved onto
    ``path``.  ``force=False`` never replaces an existing file: :class:`FileExistsError` (also when the
    target appeared meanwhile -- ``link(2)`` fails then).  On any exception the temporary is removed and
    the exception passes on."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=tmp_suffix)
    os.close(fd)
    try:
        yield Path(tmp)
        os.chmod(tmp, 0o666 & ~umask())
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        if force:
            os.replace(tmp, path)
        else:
            try:
                os.link(tmp, path)
            except FileExistsError:
                raise
            except OSError:  # file system without hard links
                if path.exists():
                    raise FileExistsError(f"{path} exists") from None
                os.replace(tmp, path)
    finally:
        _unlink_quietly(tmp)


def to_jsonable(obj, *, nan_to_none: bool = True):
    """Plain-Python copy of ``obj`` for JSON: numpy -> lists/scalars, tuples/sets -> lists, paths ->
    strings, mapping keys -> strings, NaN/inf -> None (kept with ``nan_to_none=False``).  Other types
    raise ValueError (one line)."""
    if isinstance(obj, Mapping):
        return {str(k): to_jsonable(v, nan_to_none=nan_to_none) for k, v in obj.items()}
    if isinstance(obj, np.ndarray):
        return to_jsonable(obj.tolist(), nan_to_none=nan_to_none)
    if isinstance(obj, (list, tuple)):
        return [to_jsonable(v, nan_to_none=nan_to_none) for v in obj]
    if isinstance(obj, (set, frozenset)):
        return [to_jsonable(v, nan_to_none=nan_to_none) for v in sorted(obj, key=repr)]
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        v = float(obj)
        return v if (math.isfinite(v) or not nan_to_none) else None
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    if obj is None or isinstance(obj, str):
        return obj
    raise ValueError(f"cannot write an object of type {type(obj).__name__} to JSON")


def json_text(obj, *, indent: int = 2, sort_keys: bool = True, nan_to_none: bool = True,
              ensure_ascii: bool = False) -> str:
    """JSON text of :func:`to_jsonable` ``(obj)`` (no trailing newline); NaN written as ``null`` unless
    ``nan_to_none=False`` (then as ``NaN``, which Python's json reads back)."""
    return json.dumps(to_jsonable(obj, nan_to_none=nan_to_none), indent=indent, sort_keys=sort_keys,
                      allow_nan=not nan_to_none, ensure_ascii=ensure_ascii)
