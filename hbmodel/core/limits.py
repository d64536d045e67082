"""Resource budgets: what a run will need, estimated from its arguments before any heavy work.

Every command sizes its run first -- memory, disk and number of models -- and refuses, with one
line naming the estimate and the limit, what the machine cannot give.  The limits are

* memory: 80 % of the memory available now (``MemAvailable`` of ``/proc/meminfo``, else
  ``os.sysconf``; lowered by a cgroup memory limit or an address-space ``ulimit -v``);
* disk: 90 % of the free space of the file system that receives the output
  (:func:`shutil.disk_usage` of the output folder, or of its nearest existing parent);
* models: :data:`MAX_MODELS` model populations per grid;

each overridden by ``--max-memory SIZE``, ``--max-disk SIZE`` or ``--max-models N``.  Sizes are
written like ``4G``, ``500M``, ``1.5T`` or a plain number of bytes (binary units: 1K = 1024 bytes).

The per-value sizes below were measured on hbmodel mocks (astropy 6 / pyarrow writers, 2 and 8
bands, 10^5-4x10^5 rows) and rounded up; ``tests/test_resources.py`` checks them against real
files within a factor of 2.
"""
from __future__ import annotations

import argparse
import math
import os
import re
import shutil
from dataclasses import dataclass
from pathlib import Path

__all__ = ["ResourceError", "Estimate", "parse_size", "format_size", "available_memory_bytes",
           "free_disk_bytes", "memory_limit", "disk_limit", "check_budget", "check_free_disk",
           "table_disk_bytes", "table_memory_bytes", "catalog_memory_bytes", "MAX_MODELS",
           "BASE_MEMORY_BYTES"]

#: Default largest number of model populations in one prediction grid (about 10 minutes).
MAX_MODELS = 10000
#: Memory of a Python process running hbmodel before any star is made (interpreter, numpy, pyarrow or
#: astropy, the population's look-up tables), rounded up from measured peaks: a 10-HB-star mock 92 MB
#: (132 MB while the start-up path imported scipy), ``distance`` of a 400-HB-star catalogue 122 MB.
BASE_MEMORY_BYTES = 200 * 2**20
#: Fractions of the machine's available memory / free disk that a run may use by default.
MEMORY_FRACTION = 0.8
DISK_FRACTION = 0.9

_UNITS = {"": 1, "B": 1, "K": 2**10, "M": 2**20, "G": 2**30, "T": 2**40, "P": 2**50}
_SIZE_RE = re.compile(r"^\s*([0-9]*\.?[0-9]+(?:[eE][+-]?[0-9]+)?)\s*([KMGTP]?)(?:I?B)?\s*$", re.IGNORECASE)

# Bytes per table cell on disk and in memory while the table is made and written, by output format.
# Memory: peak resident growth per cell of `hbmodel mock` (drawing, observing and writing); the ECSV
# writer formats every cell as a Python string, hence its much larger figure.
_DISK_PER_CELL = {"parquet": 9.0, "fits": 8.0, "csv": 18.0, "ecsv": 18.0, "votable": 34.0}
# The same for the float32 columns of a mock catalogue (measured on a 2-band mock of 5x10^3 stars;
# Parquet compressed with zstd, floats byte-stream-split: 2.0 bytes per cell, 29 bytes per star).
_DISK_PER_CELL_F32 = {"parquet": 2.0, "fits": 4.0, "csv": 15.0, "ecsv": 9.0, "votable": 26.0}
_MEMORY_PER_CELL = {"parquet": 24.0, "fits": 24.0, "csv": 40.0, "ecsv": 160.0, "votable": 40.0}
# Peak memory of reading a catalogue, per byte of file (measured: FITS 1.3, CSV 4.5, Parquet 7,
# ECSV 9.6), rounded up; a gzipped file is counted at four times its size.
_READ_PER_BYTE = {"parquet": 8.0, "fits": 2.0, "csv": 6.0, "ecsv": 12.0, "votable": 12.0}


class ResourceError(ValueError):
    """A run would need more memory, disk or models than allowed (one-line message, exit status 2)."""


# --------------------------------------------------------------------------- sizes
def parse_size(text) -> int:
    """``'4G'`` -> 4294967296; ``'500M'``, ``'1.5T'``, ``'2048'`` (bytes), ``'4GiB'``, ``'4gb'`` also work."""
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        value, unit = float(text), ""
    else:
        m = _SIZE_RE.match(str(text))
        if not m:
            raise ValueError(f"size {text!r} not understood: give a number with an optional unit K, M, G or T "
                             "(e.g. 4G, 500M)")
        value, unit = float(m.group(1)), m.group(2).upper()
    n = value * _UNITS[unit]
    if not (math.isfinite(n) and n > 0):
        raise ValueError(f"size {text!r} must be positive")
    return int(n)


def size_argument(text) -> int:
    """argparse ``type=`` for size options: a one-line usage error for a bad size."""
    try:
        return parse_size(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def format_size(n_bytes: float) -> str:
    """Bytes -> ``'38.2 GiB'``, ``'512 MiB'``, ``'12 KiB'``."""
    n = float(n_bytes)
    for unit in ("B", "KiB", "MiB", "GiB", "TiB", "PiB"):
        if abs(n) < 1024 or unit == "PiB":
            return f"{n:.0f} {unit}" if unit == "B" or abs(n) >= 100 else f"{n:.1f} {unit}"
        n /= 1024
    return f"{n:.1f} PiB"  # pragma: no cover


# --------------------------------------------------------------------------- the machine
def _read_int(path: str) -> int | None:
    try:
        with open(path, encoding="ascii") as fh:
            text = fh.read().strip()
        return int(text) if text.isdigit() else None
    except (OSError, ValueError):
        return None


def available_memory_bytes() -> int | None:
    """Memory a new allocation can get now: ``MemAvailable`` (Linux) or free physical pages, lowered by a
    cgroup v2 memory limit and by an address-space limit (``ulimit -v``); None if unknown."""
    avail = None
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    avail = int(line.split()[1]) * 1024
                    break
    except (OSError, ValueError, IndexError):
        pass
    if avail is None:
        try:
            avail = os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
        except (ValueError, OSError, AttributeError):
            avail = None
    caps = []
    cg_max, cg_cur = _read_int("/sys/fs/cgroup/memory.max"), _read_int("/sys/fs/cgroup/memory.current")
    if cg_max is not None and cg_cur is not None:
        caps.append(max(cg_max - cg_cur, 0))
    try:
        import resource
        soft, _hard = resource.getrlimit(resource.RLIMIT_AS)
        if soft != resource.RLIM_INFINITY:
            caps.append(max(soft - _own_virtual_bytes(), 0))
    except (ImportError, OSError, ValueError):
        pass
    values = [v for v in [avail, *caps] if v is not None]
    return min(values) if values else None


def _own_virtual_bytes() -> int:
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmSize:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    return 0


def _existing(path) -> Path:
    p = Path(os.fspath(path)).absolute()
    while not p.exists() and p != p.parent:
        p = p.parent
    return p if p.is_dir() else p.parent


def free_disk_bytes(path) -> int:
    """Free bytes (for this user) on the file system that holds ``path`` or would hold it once created."""
    return int(shutil.disk_usage(_existing(path)).free)


def memory_limit(max_memory=None) -> tuple[float, str]:
    """(limit in bytes, how it was set) for a run: ``max_memory`` if given, else 80 % of the available memory."""
    if max_memory is not None:
        n = parse_size(max_memory)
        return n, f"the --max-memory limit of {format_size(n)}"
    avail = available_memory_bytes()
    if avail is None:
        return math.inf, "no known limit"
    return MEMORY_FRACTION * avail, (f"the limit of {format_size(MEMORY_FRACTION * avail)} "
                                     f"({MEMORY_FRACTION:.0%} of the {format_size(avail)} available)")


def disk_limit(path, max_disk=None) -> tuple[float, str]:
    """(limit in bytes, how it was set): ``max_disk`` if given, else 90 % of the free space at ``path``."""
    if max_disk is not None:
        n = parse_size(max_disk)
        return n, f"the --max-disk limit of {format_size(n)}"
    free = free_disk_bytes(path)
    return DISK_FRACTION * free, (f"the limit of {format_size(DISK_FRACTION * free)} "
                                  f"({DISK_FRACTION:.0%} of the {format_size(free)} free at {_existing(path)})")


# --------------------------------------------------------------------------- estimates
def _table_format(path) -> str:
    name = Path(os.fspath(path)).name
    suffixes = [s.lower() for s in Path("x" + name if name.startswith(".") else name).suffixes]
    if suffixes and suffixes[-1] == ".gz":
        suffixes = suffixes[:-1]
    ext = suffixes[-1] if suffixes else ""
    return {".fit": "fits", ".fts": "fits", ".fits": "fits", ".csv": "csv", ".ecsv": "ecsv", ".vot": "votable",
            ".xml": "votable", ".parquet": "parquet"}.get(ext, "ecsv")


def table_disk_bytes(n_rows: float, n_columns: int, path, *, float32: bool = False) -> float:
    """Estimated size of a numeric table of ``n_rows`` x ``n_columns`` written to ``path`` (format by
    extension); ``float32``: the compact columns of a mock catalogue."""
    per_cell = _DISK_PER_CELL_F32 if float32 else _DISK_PER_CELL
    return float(n_rows) * n_columns * per_cell[_table_format(path)]


def table_memory_bytes(n_rows: float, n_columns: int, path=".parquet") -> float:
    """Estimated peak memory (beyond :data:`BASE_MEMORY_BYTES`) of making and writing such a table."""
    return float(n_rows) * n_columns * _MEMORY_PER_CELL[_table_format(path)]


def catalog_memory_bytes(path) -> float:
    """Estimated peak memory of reading catalogue ``path`` (0 if it does not exist: the reader says so)."""
    try:
        size = os.path.getsize(path)
    except (OSError, TypeError):
        return 0.0
    gz = str(path).lower().endswith(".gz")
    return size * (4.0 if gz else 1.0) * _READ_PER_BYTE[_table_format(path)]


@dataclass(frozen=True)
class Estimate:
    """What a run will need.  ``what`` names the run in messages ("this mock"); ``detail`` says what the
    estimate counts ("5.1e+09 stars"); ``disk_path`` is where the output goes; ``seconds`` is optional."""

    what: str
    memory_bytes: float = 0.0
    disk_bytes: float = 0.0
    disk_path: object = None
    models: int = 0
    seconds: float | None = None
    detail: str = ""

    def _about(self) -> str:
        parts = [self.detail] if self.detail else []
        if self.seconds is not None and self.seconds >= 60:
            parts.append(f"about {_duration(self.seconds)}")
        return f" ({', '.join(parts)})" if parts else ""


def _duration(seconds: float) -> str:
    for unit, s in (("years", 3.156e7), ("days", 86400.0), ("hours", 3600.0), ("minutes", 60.0)):
        if seconds >= s:
            return f"{_count(seconds / s) if seconds / s >= 1000 else format(seconds / s, '.1f')} {unit}"
    return f"{seconds:.0f} s"


def _count(n) -> str:
    """1234567 -> '1,234,567'; astronomically large counts as '2.8e+300'."""
    return f"{int(n):,}" if n < 1e12 else f"{float(n):.3g}"


def check_budget(est: Estimate, *, max_memory=None, max_disk=None, max_models=None) -> None:
    """Raise :class:`ResourceError` (one line: the estimate and the limit) if ``est`` exceeds a limit."""
    if est.models:
        limit = MAX_MODELS if max_models is None else int(max_models)
        if est.models > limit:
            how = "the --max-models limit" if max_models is not None else "the default limit"
            raise ResourceError(f"{est.what} has {_count(est.models)} models{est._about()}, more than {how} of "
                                f"{limit:,} (raise it with --max-models N)")
    if est.memory_bytes:
        need = est.memory_bytes + BASE_MEMORY_BYTES
        limit, how = memory_limit(max_memory)
        if need > limit:
            raise ResourceError(f"{est.what} needs about {format_size(need)} of memory{est._about()}, more than "
                                f"{how}; reduce the size, or set --max-memory SIZE")
    if est.disk_bytes:
        limit, how = disk_limit(est.disk_path if est.disk_path is not None else ".", max_disk)
        if est.disk_bytes > limit:
            raise ResourceError(f"{est.what} needs about {format_size(est.disk_bytes)} of disk{est._about()}, "
                                f"more than {how}; reduce the size, or set --max-disk SIZE")


def check_free_disk(path, need_bytes: float, what: str) -> None:
    """Raise :class:`ResourceError` unless the file system of ``path`` has ``need_bytes`` free beyond a
    small reserve (the larger of 64 MiB and 1 % of the need) -- the check before each written partition."""
    free = free_disk_bytes(path)
    reserve = max(64 * 2**20, 0.01 * need_bytes)
    if need_bytes + reserve > free:
        raise ResourceError(f"{what} needs about {format_size(need_bytes)} of disk but only {format_size(free)} "
                            f"is free at {_existing(path)}")


# --------------------------------------------------------------------------- per-command estimates
#: Upper bounds of a mass-loss fit's chain: walkers (emcee's max(16, 2d + 2), d <= 11 parameters) and
#: the columns of the posterior table (parameters plus derived quantities).
_FIT_WALKERS, _FIT_PARAMS, _FIT_POSTERIOR_COLUMNS = 24, 12, 16
#: Memory of a fit or distance run beyond its catalogue (likelihood tables, figures), rounded up.  The fit's
#: is its measured peak resident size (scripts/bench_fit.py, 2,031 stars, whole process: 487 MB before the
#: pre-convolved reddening basis, 537 MB with it), so the interpreter, imports and the basis ladder count.
_TASK_MEMORY_BYTES = {"fit": 600 * 2**20, "distance": 100 * 2**20, "classify": 100 * 2**20}
#: Disk of one result folder besides the posterior (JSON, report, four PNG figures).
_RESULT_DIR_BYTES = 2 * 2**20


def fit_estimate(catalog=None, masses=None, *, max_steps: int = 6000, out_dir=None, what="this fit") -> Estimate:
    """Memory and disk of ``hbmodel fit``: the catalogues read, the emcee chain of ``max_steps`` steps
    (grown in place, copied when read: three copies), and the posterior table written to ``out_dir``."""
    steps = max(int(max_steps), 0)
    chain = 3.0 * _FIT_WALKERS * steps * (_FIT_PARAMS + 1) * 8.0
    rows = 0.8 * _FIT_WALKERS * steps  # after burn-in, before thinning (an upper bound)
    mem = (catalog_memory_bytes(catalog) if catalog else 0.0) + (catalog_memory_bytes(masses) if masses else 0.0)
    mem += _TASK_MEMORY_BYTES["fit"] + chain + table_memory_bytes(rows, _FIT_POSTERIOR_COLUMNS, "x.ecsv")
    disk = table_disk_bytes(rows, _FIT_POSTERIOR_COLUMNS, "x.ecsv") + _RESULT_DIR_BYTES if out_dir else 0.0
    return Estimate(what, memory_bytes=mem, disk_bytes=disk, disk_path=out_dir,
                    detail=f"{steps:,} steps of {_FIT_WALKERS} walkers at most")


def catalog_task_estimate(task: str, catalog, *, out=None, what=None) -> Estimate:
    """Memory and disk of ``distance`` or ``classify`` on ``catalog``: reading it (and, for ``classify``,
    writing it back with one more column to the table ``out``)."""
    read = catalog_memory_bytes(catalog)
    try:
        size = float(os.path.getsize(catalog))
    except (OSError, TypeError):
        size = 0.0
    mem, disk, path = read + _TASK_MEMORY_BYTES[task], 0.0, None
    if task == "classify" and out is not None:
        # the catalogue may hold compact float32 columns: the smaller bytes per cell read (a larger growth)
        fmt_in = _table_format(catalog)
        grow = _DISK_PER_CELL[_table_format(out)] / min(_DISK_PER_CELL[fmt_in], _DISK_PER_CELL_F32[fmt_in])
        disk, path = 1.2 * size * grow * (4.0 if str(catalog).lower().endswith(".gz") else 1.0), Path(out).parent
        mem += read * _MEMORY_PER_CELL[_table_format(out)] / _MEMORY_PER_CELL["parquet"]
    elif out is not None:
        disk, path = float(_RESULT_DIR_BYTES), out
    return Estimate(what or f"this {task} run", memory_bytes=mem, disk_bytes=disk, disk_path=path,
                    detail=f"a catalogue of {format_size(size)}")


def batch_estimate(jobs, task: str, *, n_jobs: int, scheduler=None, out_dir=None) -> Estimate:
    """Memory and disk of ``hbmodel batch``: the ``n_jobs`` largest jobs running at once on this machine
    (none with a Dask ``scheduler``: its workers' memory is theirs), one result folder per job."""
    per_job = []
    for job in jobs:
        cat = job.get("catalog")
        if task == "fit":
            e = fit_estimate(cat, None, max_steps=6000, out_dir=None)
        else:
            e = catalog_task_estimate("distance", cat)
        per_job.append(e.memory_bytes)
    n_jobs = (os.cpu_count() or 1) if n_jobs == -1 else max(int(n_jobs), 1)
    workers = 0 if scheduler is not None else min(n_jobs, len(per_job))
    mem = sum(sorted(per_job, reverse=True)[:workers]) + max(workers - 1, 0) * BASE_MEMORY_BYTES
    # result.json (and error.json) per job, a summary row per job in two tables, the summary figure
    disk = len(per_job) * (64 * 2**10 + 2 * table_disk_bytes(1, 100, "x.csv")) + 4 * 2**20
    return Estimate(f"this batch of {len(per_job):,} {task} jobs", memory_bytes=mem, disk_bytes=disk,
                    disk_path=out_dir, detail=f"{workers} at a time")
