"""Batch engine: run one task over many jobs (clusters, fields), locally or on Dask.

The engine knows nothing about physics.  A *task* is any picklable callable::

    task(job: dict, job_dir: pathlib.Path) -> dict

``job`` holds one row of the JOBS table (``name`` plus the task options, masked
cells left out, a relative ``catalog`` already resolved) and ``seed``, a stable
per-job integer (:func:`job_seed`, from ``zlib.crc32`` of the name, unless the
JOBS table has its own ``seed`` column).  The task returns a *flat* dict whose
values are numbers, booleans, strings or ``None``, or interval objects
``{"median": m, "lo": a, "hi": b}`` where ``lo``/``hi`` are the interval
*endpoints* (e.g. the 16th/84th percentiles), not error bar lengths.  The
summary flattens an interval to the columns ``<key>``, ``<key>_lo``,
``<key>_hi``.

Layout of ``out_dir`` after :func:`run_batch`::

    out_dir/.hbmodel-batch        marker: this directory belongs to a batch
    out_dir/<name>/result.json    one per finished job, written by the worker
    out_dir/<name>/error.json     one per failed job (reason + traceback)
    out_dir/summary.ecsv, .csv    one row per job
    out_dir/summary.png           every numeric result (with intervals) per job

Every file is written atomically (temporary file in the same directory, then
``os.replace``), and each ``result.json`` is written *inside the worker* as soon
as its job finishes, so killing a run loses nothing that had finished; a re-run
skips the finished jobs (unless ``force``) and retries the failed ones.  A
finished job is only skipped when the options stored in its ``result.json``
equal the current ones *and* its input files (``catalog``, ``masses``: see
``input_keys`` of :func:`run_batch`) have the same SHA-256 content hash as when it
ran, so editing a row of the JOBS table, or replacing a catalogue by a different
file under the same name, re-runs that job.

A JOBS table can be checked against a :class:`JobSchema` (``read_jobs(path,
schema=...)``), as a config file is: an unknown column is an error naming the
nearest valid one, required columns must be present and filled, and every cell
is converted by its column's parser, errors naming the row and the column.

Parallelism is joblib's (``n_jobs`` local processes, loky backend); with
``scheduler="tcp://host:port"`` the same ``joblib.Parallel`` call is sent to a
Dask distributed cluster through joblib's Dask backend.  On a multi-machine
cluster ``out_dir`` and the catalogues must be on a file system that every
worker sees, and hbmodel must be installed on the workers.

Size (910+ lines): the batch engine is one unit (job tables and their validation, local/Dask execution, resumable
records, chunked Parquet output) whose private helpers serve both ``run_batch`` and ``run_chunked``.
"""
from __future__ import annotations

import contextlib
import difflib
import hashlib
import json
import math
import os
import pathlib
import time
import traceback
import zlib
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field

import numpy as np

from hbmodel.core.files import atomic_path, json_text
from hbmodel.core.messages import compact, describe_exception
from hbmodel.core.progress import progress_bar

__all__ = ["read_jobs", "validate_jobs", "run_batch", "run_chunked", "job_seed", "flatten_result", "JobColumn", "JobSchema",
           "as_float", "as_int", "as_text", "file_digest"]

#: Seconds allowed to connect to a Dask scheduler before giving up.
SCHEDULER_TIMEOUT_S = 3.0

_BATCH_MARKER = ".hbmodel-batch"
_CHUNK_MANIFEST = ".hbmodel-chunks.json"
_RESULT = "result.json"
_ERROR = "error.json"
_RESERVED = {"summary.ecsv", "summary.csv", "summary.png", _BATCH_MARKER}
_BAD_NAME_CHARS = set('/\\<>:"|?*')
_INTERVAL_KEYS = ("median", "lo", "hi")


# --------------------------------------------------------------------------- helpers
def _reason(exc: BaseException) -> str:
    return compact(describe_exception(exc))


def _atomic_write_bytes(path: pathlib.Path, data: bytes) -> None:
    with atomic_path(path) as tmp:
        tmp.write_bytes(data)


def _atomic_write_json(path: pathlib.Path, obj) -> None:
    """A batch record (NaN kept: a failed number stays a number when read back)."""
    _atomic_write_bytes(path, (json_text(obj, indent=1, sort_keys=False, nan_to_none=False, ensure_ascii=True)
                               + "\n").encode())


def _atomic_path(path: pathlib.Path):
    """A temporary path beside ``path`` with its suffix (writers choose the format by it), moved onto ``path``
    on success."""
    return atomic_path(path, tmp_suffix=pathlib.Path(path).suffix)


def _read_json(path: pathlib.Path):
    try:
        with open(path, encoding="utf-8") as fh:
            return json.load(fh)
    except (OSError, ValueError):
        return None


def _py(value):
    """numpy scalar -> plain Python scalar (JSON friendly)."""
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, bytes):
        return value.decode()
    return value


def job_seed(name: str) -> int:
    """Stable per-job seed: ``zlib.crc32`` of the UTF-8 job name (never Python's ``hash``)."""
    return zlib.crc32(str(name).encode("utf-8"))


def _check_name(name: str) -> str | None:
    """Return why ``name`` cannot be a directory name, or None if it is fine."""
    if name.strip() == "":
        return "empty"
    if name != name.strip():
        return "leading/trailing white space"
    if name.startswith("."):
        return "starts with '.'"
    if any(c in _BAD_NAME_CHARS for c in name) or (os.sep in name) or (os.altsep and os.altsep in name):
        return "contains a path separator or one of <>:\"|?*"
    if any(ord(c) < 32 for c in name):
        return "contains a control character"
    if name in _RESERVED or name.lower() in _RESERVED:
        return "reserved for the batch summary"
    return None


def _validate_names(names: list[str]) -> None:
    bad = [(n, why) for n in names if (why := _check_name(n))]
    if bad:
        listed = ", ".join(f"{n!r} ({why})" for n, why in bad[:10])
        raise ValueError(f"job name(s) unsafe as directory names: {listed}")
    seen: dict[str, int] = {}
    for n in names:
        seen[n] = seen.get(n, 0) + 1
    dups = [n for n, k in seen.items() if k > 1]
    if dups:
        raise ValueError(f"duplicate job name(s): {', '.join(dups)}")
    folded: dict[str, list[str]] = {}
    for n in names:
        folded.setdefault(n.casefold(), []).append(n)
    clash = [" / ".join(v) for v in folded.values() if len(v) > 1]
    if clash:
        raise ValueError("job names differing only in letter case collide on case-insensitive "
                         f"file systems: {'; '.join(clash)}")


# --------------------------------------------------------------------------- job schemas
def as_float(value) -> float:
    """A finite number (a number, or text that reads as one)."""
    if isinstance(value, (bool, np.bool_)):
        raise ValueError(f"expected a number, got {value!r}")
    try:
        out = float(value.strip() if isinstance(value, str) else value)
    except (TypeError, ValueError):
        raise ValueError(f"expected a number, got {value!r}") from None
    if not math.isfinite(out):
        raise ValueError(f"expected a finite number, got {value!r}")
    return out


def as_int(value) -> int:
    """An integer: ``3``, ``"3"`` or ``3.0``; ``3.5`` is an error (never truncated)."""
    if isinstance(value, (bool, np.bool_)):
        raise ValueError(f"expected an integer, got {value!r}")
    if isinstance(value, (int, np.integer)):
        return int(value)
    try:
        x = float(value.strip() if isinstance(value, str) else value)
    except (TypeError, ValueError):
        raise ValueError(f"expected an integer, got {value!r}") from None
    if not (math.isfinite(x) and x == int(x)):
        raise ValueError(f"expected an integer, got {value!r}")
    return int(x)


def as_text(value) -> str:
    """Non-empty text."""
    text = str(value).strip()
    if not text:
        raise ValueError("expected text, got an empty cell")
    return text


@dataclass(frozen=True)
class JobColumn:
    """One column of a JOBS table: its parser (value -> value, ``ValueError`` with the reason) and
    whether every job must fill it."""

    parse: Callable = as_float
    required: bool = False
    help: str = ""


@dataclass(frozen=True)
class JobSchema:
    """The columns a task understands.  ``alternatives`` lists groups of column sets of which each
    job must fill exactly one set completely, e.g. ``((("age",), ("age_min", "age_max")),)``."""

    columns: Mapping[str, JobColumn]
    alternatives: tuple = ()
    _engine: Mapping[str, JobColumn] = field(default_factory=lambda: {
        "name": JobColumn(as_text, True, "job name (directory name)"),
        "seed": JobColumn(as_int, False, "random seed (default: crc32 of the name)")})

    def all_columns(self) -> dict:
        return {**self._engine, **self.columns}


def _cell_missing(col, i) -> bool:
    mask = getattr(col, "mask", None)
    if mask is not None and np.ndim(mask) and bool(mask[i]):
        return True
    v = _py(col[i])
    return v is None or (isinstance(v, str) and not v.strip())


def validate_jobs(table, schema: JobSchema, where: str = "jobs table"):
    """Check and convert a JOBS table against ``schema``; return a new table of converted values.

    One-line ``ValueError`` for an unknown column (naming the nearest valid one), a missing
    required column or cell, an unparsable cell (naming row and column) or a job that fills none
    or several of the ``alternatives``."""
    from astropy.table import MaskedColumn, Table

    cols = schema.all_columns()
    for c in table.colnames:
        if c not in cols:
            near = difflib.get_close_matches(c, list(cols), n=1, cutoff=0.5)
            hint = f"did you mean {near[0]!r}? " if near else ""
            raise ValueError(f"{where}: unknown column {c!r} ({hint}valid columns: {', '.join(cols)})")
    for c, spec in cols.items():
        if spec.required and c not in table.colnames:
            raise ValueError(f"{where}: required column {c!r} is missing ({spec.help or 'needed by the task'})")
    names = [str(_py(v)) for v in table["name"]]
    out = Table()
    for c in table.colnames:
        values, mask = [], []
        for i in range(len(table)):
            row = f"{where}, row {i + 1} (job {names[i]!r}), column {c!r}"
            if _cell_missing(table[c], i):
                if cols[c].required:
                    raise ValueError(f"{row}: empty, but every job needs it ({cols[c].help or 'required'})")
                values.append(None)
                mask.append(True)
                continue
            try:
                values.append(cols[c].parse(_py(table[c][i])))
            except ValueError as exc:
                raise ValueError(f"{row}: {compact(exc)}") from None
            mask.append(False)
        present = [v for v in values if v is not None]
        fill = present[0] if present else ""
        data = [fill if v is None else v for v in values]
        out[c] = MaskedColumn(data, mask=mask) if any(mask) else data
    for group in schema.alternatives:
        for i in range(len(table)):
            filled = [s for s in group if all(c in out.colnames and not np.ma.is_masked(out[c][i]) for c in s)]
            partial = [c for s in group for c in s if c in out.colnames and not np.ma.is_masked(out[c][i])]
            labels = " or ".join("+".join(s) for s in group)
            if len(filled) != 1 or len(partial) != len(filled[0] if filled else ()):
                got = ", ".join(partial) or "none"
                raise ValueError(f"{where}, row {i + 1} (job {names[i]!r}): give exactly one of {labels} "
                                 f"(given: {got})")
    out.meta.update(table.meta)
    return out


# --------------------------------------------------------------------------- jobs
def read_jobs(path, schema: JobSchema | None = None) -> "astropy.table.Table":  # noqa: F821
    """Read a JOBS table (CSV or ECSV), one row per job.

    Required column ``name`` (a safe directory name, unique); all other columns
    are task options (``catalog``, ``feh``, ``alpha_fe``, ``age``, ``bands``,
    ``distance_modulus``, ``dm_sd``, ``ebv``, ``ebv_sd``, ...).  A relative
    ``catalog`` path is resolved relative to the JOBS file's directory.
    Raises ``ValueError`` (one line) for a missing/unreadable/malformed file,
    a missing ``name`` column, an empty table, duplicate or unsafe names; with a
    ``schema``, also for anything :func:`validate_jobs` rejects.
    """
    from astropy.table import Table

    path = pathlib.Path(path)
    if not path.is_file():
        raise ValueError(f"jobs file not found: {path}")
    try:
        with open(path, "rb") as fh:
            head = fh.read(4096)
        head.decode("utf-8")
    except UnicodeDecodeError:
        raise ValueError(f"jobs file {path} is not a text CSV/ECSV table") from None
    except OSError as exc:
        raise ValueError(f"cannot read jobs file {path}: {_reason(exc)}") from None
    fmt = "ascii.ecsv" if head.lstrip().startswith(b"# %ECSV") or path.suffix.lower() == ".ecsv" \
        else "ascii.csv"
    try:
        table = Table.read(path, format=fmt, **({"comment": "#"} if fmt == "ascii.csv" else {}))
    except Exception as exc:  # astropy raises many types for malformed tables
        raise ValueError(f"cannot read jobs file {path} as {fmt[6:].upper()}: {_reason(exc)}") from None
    if "name" not in table.colnames:
        raise ValueError(f"jobs file {path} has no 'name' column (columns: {', '.join(table.colnames)})")
    if len(table) == 0:
        raise ValueError(f"jobs file {path} has no jobs (empty table)")
    if getattr(table["name"], "mask", None) is not None and np.any(table["name"].mask):
        raise ValueError(f"jobs file {path}: job name(s) empty in row(s) "
                         f"{', '.join(str(i + 1) for i in np.flatnonzero(table['name'].mask)[:10])}")
    names = [str(_py(v)) for v in table["name"]]
    _validate_names(names)
    table["name"] = names
    if "catalog" in table.colnames:
        base = path.resolve().parent
        col = table["catalog"]
        mask = getattr(col, "mask", None)
        resolved = []
        for i, v in enumerate(col):
            if mask is not None and mask[i]:
                resolved.append("")
                continue
            p = pathlib.Path(str(_py(v)))
            resolved.append(str(p if p.is_absolute() else (base / p)))
        table["catalog"] = resolved
        if mask is not None and np.any(mask):
            from astropy.table import MaskedColumn
            table["catalog"] = MaskedColumn(resolved, mask=np.asarray(mask))
    table.meta["jobs_file"] = str(path.resolve())
    if schema is not None:
        table = validate_jobs(table, schema, where=f"jobs file {path}")
    return table


def _jobs_as_dicts(jobs) -> list[dict]:
    """JOBS table / path / iterable of mappings -> list of plain job dicts."""
    from astropy.table import Table

    if isinstance(jobs, (str, os.PathLike)):
        jobs = read_jobs(jobs)
    if isinstance(jobs, Table):
        rows = []
        for row in jobs:
            d = {}
            for c in jobs.colnames:
                v = row[c]
                if np.ma.is_masked(v):
                    continue
                d[c] = _py(v)
            rows.append(d)
    elif isinstance(jobs, Iterable) and not isinstance(jobs, Mapping):
        rows = []
        for r in jobs:
            if not isinstance(r, Mapping):
                raise ValueError(f"each job must be a mapping with a 'name', got {type(r).__name__}")
            rows.append({str(k): _py(v) for k, v in r.items()})
    else:
        raise ValueError("jobs must be a JOBS table, a path to one, or a list of dicts")
    if not rows:
        raise ValueError("no jobs to run (empty jobs table)")
    missing = [i for i, r in enumerate(rows) if "name" not in r or r["name"] is None]
    if missing:
        raise ValueError(f"job(s) without a 'name' at row(s) {', '.join(str(i + 1) for i in missing[:10])}")
    for r in rows:
        r["name"] = str(r["name"])
        r.setdefault("seed", job_seed(r["name"]))
    _validate_names([r["name"] for r in rows])
    for r in rows:  # options must survive a JSON round trip (stored in result.json)
        try:
            json.dumps(r, allow_nan=True)
        except (TypeError, ValueError):
            raise ValueError(f"job {r['name']!r} has an option that is not a number or string") from None
    return rows


# --------------------------------------------------------------------------- results
def flatten_result(result: Mapping) -> dict:
    """Flatten a task result: intervals ``{"median","lo","hi"}`` -> key, key_lo, key_hi.

    Raises ``ValueError`` if a value is not a number/bool/string/None/interval.
    """
    if not isinstance(result, Mapping):
        raise ValueError(f"task must return a dict, got {type(result).__name__}")
    flat: dict = {}
    for key, value in result.items():
        key = str(key)
        if key in ("name", "status", "reason"):
            raise ValueError(f"task result key {key!r} is reserved for the summary")
        value = _py(value)
        if isinstance(value, Mapping):
            if set(value) != set(_INTERVAL_KEYS):
                raise ValueError(f"task result {key!r} is a dict but not an interval "
                                 f"{{'median','lo','hi'}} (keys: {', '.join(map(str, value))})")
            parts = {k: _py(value[k]) for k in _INTERVAL_KEYS}
            for k, v in parts.items():
                if not isinstance(v, (int, float)) or isinstance(v, bool):
                    raise ValueError(f"task result {key!r}.{k} must be a number, got {v!r}")
            flat[key] = float(parts["median"])
            flat[f"{key}_lo"] = float(parts["lo"])
            flat[f"{key}_hi"] = float(parts["hi"])
        elif value is None or isinstance(value, (bool, int, float, str)):
            flat[key] = value
        else:
            raise ValueError(f"task result {key!r} must be a number, string or interval, "
                             f"got {type(value).__name__}")
    clash = len(flat) != sum(1 + 2 * isinstance(_py(v), Mapping) for v in result.values())
    if clash:
        raise ValueError("task result keys collide after flattening (e.g. 'x' interval and 'x_lo')")
    return flat


#: Job options naming input files whose content a finished job depends on (see :func:`file_digest`).
INPUT_KEYS = ("catalog", "masses")


def file_digest(path) -> str | None:
    """SHA-256 of a file's bytes (``"sha256:<hex>"``); a directory (e.g. a Parquet dataset) hashes its
    files' relative names and bytes in sorted order; a missing path gives None (the job will fail)."""
    p = pathlib.Path(path)
    h = hashlib.sha256()

    def feed(f: pathlib.Path):
        with open(f, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                h.update(block)

    try:
        if p.is_file():
            feed(p)
        elif p.is_dir():
            for f in sorted(x for x in p.rglob("*") if x.is_file()):
                h.update(str(f.relative_to(p)).encode() + b"\0")
                feed(f)
                h.update(b"\0")
        else:
            return None
    except OSError:
        return None
    return "sha256:" + h.hexdigest()


def _input_digests(job: dict, keys) -> dict:
    return {k: file_digest(job[k]) for k in keys if isinstance(job.get(k), str) and job[k].strip()}


def _run_one(job: dict, task: Callable, job_dir: str, inputs: dict | None = None) -> dict:
    """Worker side: run one job, write result.json / error.json atomically, return a record."""
    job_dir = pathlib.Path(job_dir)
    job_dir.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    try:
        raw = task(dict(job), job_dir)
        flatten_result(raw)  # validate before anything is written
        raw = {str(k): ({kk: float(_py(vv)) for kk, vv in v.items()} if isinstance(v, Mapping)
                        else _py(v)) for k, v in raw.items()}
    except Exception as exc:  # any failure of the task is isolated to its job
        record = {"name": job["name"], "status": "failed", "reason": _reason(exc), "job": job,
                  "traceback": traceback.format_exc(limit=20)}
        _atomic_write_json(job_dir / _ERROR, record)
        return {"name": job["name"], "status": "failed", "reason": record["reason"]}
    record = {"name": job["name"], "status": "done", "job": job, "inputs": inputs or {}, "result": raw,
              "elapsed_s": round(time.perf_counter() - t0, 3)}
    _atomic_write_json(job_dir / _RESULT, record)
    with contextlib.suppress(FileNotFoundError):
        os.unlink(job_dir / _ERROR)
    return {"name": job["name"], "status": "done", "reason": "", "result": raw}


def _same_job(a: dict, b: dict) -> bool:
    dump = lambda d: json.dumps(d, sort_keys=True, allow_nan=True)  # noqa: E731
    try:
        return dump(a) == dump(b)
    except (TypeError, ValueError):
        return False


def _prepare_out_dir(out_dir: pathlib.Path, marker: str) -> None:
    if out_dir.exists() and not out_dir.is_dir():
        raise ValueError(f"output path exists and is not a directory: {out_dir}")
    if out_dir.is_dir() and any(out_dir.iterdir()) and not (out_dir / marker).exists():
        raise ValueError(f"output directory {out_dir} is not empty and was not made by hbmodel "
                         "batch; choose a new or empty directory")
    out_dir.mkdir(parents=True, exist_ok=True)
    if not (out_dir / marker).exists():
        _atomic_write_bytes(out_dir / marker, b"hbmodel batch output directory\n")


# --------------------------------------------------------------------------- execution
def _probe_scheduler(address: str) -> None:
    """Fail fast (one-line ValueError) if a tcp/tls scheduler address is malformed or refuses."""
    import socket

    from distributed.comm.addressing import parse_address, parse_host_port

    try:
        scheme, loc = parse_address(address)
        if scheme not in ("tcp", "tls"):
            return  # other transports: let distributed itself try
        host, port = parse_host_port(loc)
    except (ValueError, TypeError) as exc:
        raise ValueError(f"cannot reach Dask scheduler at {address}: bad address ({_reason(exc)})") from None
    try:
        with socket.create_connection((host, port), timeout=SCHEDULER_TIMEOUT_S):
            pass
    except OSError as exc:
        raise ValueError(f"cannot reach Dask scheduler at {address} ({_reason(exc)})") from None


@contextlib.contextmanager
def _executor(n_jobs, scheduler):
    """Yield the n_jobs to give joblib.Parallel, inside the right backend context."""
    import joblib

    if scheduler is None:
        if not isinstance(n_jobs, int) or isinstance(n_jobs, bool) or n_jobs == 0 or n_jobs < -1:
            raise ValueError(f"n_jobs must be a positive integer or -1 (all cores), got {n_jobs!r}")
        yield n_jobs
        return
    try:
        import distributed
    except ImportError:
        raise ValueError("scheduler= needs dask[distributed]: pip install 'hbmodel[dask]'") from None
    if isinstance(scheduler, distributed.Client):
        with scheduler.as_current(), joblib.parallel_config(backend="dask"):
            yield -1
        return
    if not isinstance(scheduler, str) or not scheduler.strip():
        raise ValueError(f"scheduler must be an address such as 'tcp://127.0.0.1:8786', got {scheduler!r}")
    address = scheduler.strip()
    _probe_scheduler(address)
    try:
        client = distributed.Client(address, timeout=SCHEDULER_TIMEOUT_S, set_as_default=False)
    except Exception as exc:
        raise ValueError(f"cannot reach Dask scheduler at {address} ({_reason(exc)})") from None
    try:
        with client.as_current(), joblib.parallel_config(backend="dask"):
            yield -1
    finally:
        client.close()


@contextlib.contextmanager
def _workers_ignore_interrupts():
    """Start worker processes with SIGINT blocked (the signal mask is inherited through fork and exec).

    A Ctrl-C then reaches only this process, which stops the workers and reports one line, instead of
    every worker printing its own traceback (a worker interrupted while still importing would).  A
    Ctrl-C during the block is held and delivered when it ends.  Same idea as loky's resource tracker;
    the resource trackers are started first because starting one unblocks SIGINT again."""
    import signal
    import threading

    if not hasattr(signal, "pthread_sigmask") or threading.current_thread() is not threading.main_thread():
        yield
        return
    from multiprocessing import resource_tracker as mp_tracker

    from joblib.externals.loky.backend import resource_tracker as loky_tracker
    # The trackers are separate processes writing to this stderr: after a Ctrl-C, loky's may warn about
    # a semaphore it cleans up itself (seen once under load), which would break the one-line report.
    # Its UserWarnings alone are silenced, through the environment it is started with.
    quiet = "ignore::UserWarning:" + loky_tracker.__name__
    if quiet not in os.environ.get("PYTHONWARNINGS", ""):
        os.environ["PYTHONWARNINGS"] = ",".join(filter(None, (os.environ.get("PYTHONWARNINGS"), quiet)))
    for tracker in (mp_tracker, loky_tracker):
        with contextlib.suppress(Exception):
            tracker.ensure_running()
    old = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT})
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


@contextlib.contextmanager
def _parallel_results(parallel, calls):
    """Run ``parallel(calls)`` with its workers started under :func:`_workers_ignore_interrupts` and yield
    the result generator; on the way out (finished, failed or interrupted) close it, which stops the
    workers, without joblib's warning about cancelled tasks (the caller reports the one line)."""
    import warnings

    results = None
    try:
        with _workers_ignore_interrupts():  # joblib starts its workers at the call
            results = parallel(calls)
        yield results
    finally:
        if results is not None:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                results.close()


def run_batch(jobs, task: Callable, out_dir, *, n_jobs: int = 1, scheduler=None,
              progress: bool | None = None, force: bool = False, input_keys=INPUT_KEYS):
    """Run ``task`` on every job; return the summary table (also written to ``out_dir``).

    Parameters
    ----------
    jobs : astropy Table (see :func:`read_jobs`), path to a JOBS file, or list of dicts.
    task : callable ``task(job: dict, job_dir: Path) -> dict`` (module-level, picklable).
    out_dir : directory for per-job results and the summary (created; must be new,
        empty or an earlier batch directory).
    n_jobs : local worker processes (joblib; -1 = all cores).  Ignored with ``scheduler``.
    scheduler : Dask scheduler address (``"tcp://host:port"``) or a ``distributed.Client``;
        the jobs then run on every worker of that cluster.
    progress : tqdm progress bar; ``None`` = only when stderr is a terminal.
    force : re-run jobs that already have a result.
    input_keys : job options that name input files; a finished job is re-run when the SHA-256
        of any of them differs from the one stored with its result (a replaced catalogue).

    Returns an astropy Table, one row per job in input order, with ``name``,
    ``status`` (``done`` / ``failed`` / ``skipped-done``), ``reason`` and the
    flattened result columns.
    """
    import joblib

    if not callable(task):
        raise ValueError(f"task must be callable, got {type(task).__name__}")
    rows = _jobs_as_dicts(jobs)
    out_dir = pathlib.Path(out_dir)
    check_batch_out_dir(out_dir, [job["name"] for job in rows])
    _prepare_out_dir(out_dir, _BATCH_MARKER)

    records: dict[str, dict] = {}
    todo = []
    digests = {job["name"]: _input_digests(job, input_keys) for job in rows}
    for job in rows:
        prev = None if force else _read_json(out_dir / job["name"] / _RESULT)
        if (isinstance(prev, dict) and prev.get("status") == "done"
                and isinstance(prev.get("result"), dict) and _same_job(prev.get("job"), job)
                and prev.get("inputs") == digests[job["name"]]):
            records[job["name"]] = {"name": job["name"], "status": "skipped-done", "reason": "",
                                    "result": prev["result"]}
        else:
            todo.append(job)

    bar = progress_bar(len(todo), progress, "hbmodel batch", "job")
    try:
        if todo:
            with _executor(n_jobs, scheduler) as nj:
                parallel = joblib.Parallel(n_jobs=nj, batch_size=1, pre_dispatch="2*n_jobs",
                                           return_as="generator_unordered")
                calls = (joblib.delayed(_run_one)(job, task, str(out_dir / job["name"]), digests[job["name"]])
                         for job in todo)
                with _parallel_results(parallel, calls) as results:
                    for rec in results:
                        records[rec["name"]] = rec
                        if bar is not None:
                            bar.update(1)
                            n_fail = sum(r["status"] == "failed" for r in records.values())
                            if n_fail:
                                bar.set_postfix(failed=n_fail)
    finally:
        if bar is not None:
            bar.close()

    summary = _summary_table([records[j["name"]] for j in rows])
    # the three summary files together or not at all: each goes to a temporary file first, and the
    # renames onto the final names happen only once all three are written
    with contextlib.ExitStack() as stack:
        ecsv, csv, png = (stack.enter_context(_atomic_path(out_dir / n)) for n in SUMMARY_FILES)
        summary.write(ecsv, format="ascii.ecsv", overwrite=True)
        summary.write(csv, format="ascii.csv", overwrite=True)
        summary_figure(summary).savefig(png, format="png", dpi=110)
    return summary


#: The summary files of a batch directory (written together at the end of a run).
SUMMARY_FILES = ("summary.ecsv", "summary.csv", "summary.png")


def check_batch_out_dir(out_dir, names=()) -> pathlib.Path:
    """Raise a one-line ``ValueError`` now, before any job runs, if the batch could not write its results
    into ``out_dir``: a path that is a file, a non-empty directory not made by hbmodel batch, a directory
    that cannot be created or written, a job directory (``<out>/<name>``) that is an existing file, or a
    summary file name taken by a directory.  Nothing is created."""
    out_dir = pathlib.Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise ValueError(f"output path exists and is not a directory: {out_dir}")
    if out_dir.is_dir():
        if any(out_dir.iterdir()) and not (out_dir / _BATCH_MARKER).exists():
            raise ValueError(f"output directory {out_dir} is not empty and was not made by hbmodel "
                             "batch; choose a new or empty directory")
        if not os.access(out_dir, os.W_OK | os.X_OK):
            raise ValueError(f"output directory {out_dir} is not writable")
        for name in names:
            p = out_dir / str(name)
            if p.exists() and not p.is_dir():
                raise ValueError(f"job {name!r}: {p} exists and is not a directory (its results go there)")
        for name in SUMMARY_FILES:
            if (out_dir / name).is_dir():
                raise ValueError(f"cannot write {out_dir / name}: it is an existing directory")
    else:
        parent = out_dir.parent
        while not parent.exists() and parent != parent.parent:
            parent = parent.parent
        if not parent.is_dir():
            raise ValueError(f"cannot create output directory {out_dir}: {parent} is not a directory")
        if not os.access(parent, os.W_OK | os.X_OK):
            raise ValueError(f"cannot create output directory {out_dir}: {parent} is not writable")
    return out_dir


def _summary_table(records: list[dict]):
    from astropy.table import MaskedColumn, Table

    flats = [flatten_result(r.get("result") or {}) for r in records]
    keys: list[str] = []
    for f in flats:
        keys.extend(k for k in f if k not in keys)
    table = Table()
    table["name"] = [r["name"] for r in records]
    table["status"] = [r["status"] for r in records]
    table["reason"] = [r.get("reason", "") or "" for r in records]
    for key in keys:
        vals = [f.get(key) for f in flats]
        present = [v for v in vals if v is not None]
        mask = np.array([v is None for v in vals])
        if present and all(isinstance(v, bool) for v in present):
            data, dtype = [bool(v) if v is not None else False for v in vals], bool
        elif present and all(isinstance(v, int) and not isinstance(v, bool) for v in present):
            data, dtype = [v if v is not None else 0 for v in vals], np.int64
        elif present and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in present):
            data, dtype = [float(v) if v is not None else np.nan for v in vals], float
        else:
            data, dtype = ["" if v is None else str(v) for v in vals], str
        table[key] = MaskedColumn(data, mask=mask, dtype=dtype) if mask.any() else np.asarray(data, dtype)
    table.meta["comments"] = ["hbmodel batch summary: one row per job; <key>_lo/<key>_hi are "
                              "interval endpoints of <key>"]
    return table


def summary_figure(summary, max_panels: int = 12):
    """One panel per numeric result (interval bars where given) against the jobs; y labels with units."""
    import matplotlib
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from hbmodel.io.figures import _style
    from hbmodel.core.quantities import axis_label
    with matplotlib.rc_context(_style()):
        return _summary_figure(summary, max_panels, Figure, FigureCanvasAgg, axis_label)


def _summary_figure(summary, max_panels, Figure, FigureCanvasAgg, axis_label):
    cols = summary.colnames
    keys = [c for c in cols[3:]
            if summary[c].dtype.kind in "if"
            and not ((c.endswith("_lo") and c[:-3] in cols) or (c.endswith("_hi") and c[:-3] in cols))]
    keys = keys[:max_panels]
    n = len(summary)
    x = np.arange(n)
    npan = max(len(keys), 1)
    fig = Figure(figsize=(min(max(6.0, 0.35 * n + 3), 20.0), 1.9 * npan + 0.8), layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(npan, 1, sharex=True, squeeze=False)[:, 0]
    ok = np.array([s != "failed" for s in summary["status"]])
    for ax, key in zip(axes, keys):
        y = np.ma.filled(np.ma.asarray(summary[key], dtype=float), np.nan)
        if f"{key}_lo" in cols and f"{key}_hi" in cols:
            lo = np.ma.filled(np.ma.asarray(summary[f"{key}_lo"], dtype=float), np.nan)
            hi = np.ma.filled(np.ma.asarray(summary[f"{key}_hi"], dtype=float), np.nan)
            yerr = np.vstack([np.clip(y - lo, 0, None), np.clip(hi - y, 0, None)])
            ax.errorbar(x, y, yerr=yerr, fmt="o", ms=4, capsize=2)
        else:
            ax.plot(x, y, "o", ms=4)
        ax.set_ylabel(axis_label(key), fontsize=8)
        ax.grid(alpha=0.3)
    if not keys:
        axes[0].text(0.5, 0.5, "no numeric results", ha="center", va="center",
                     transform=axes[0].transAxes)
    for i in np.flatnonzero(~ok):
        for ax in axes:
            ax.axvline(i, color="0.8", lw=6, zorder=0)
    step = max(1, math.ceil(n / 50))  # label at most ~50 jobs; more would be unreadable
    axes[-1].set_xticks(x[::step])
    axes[-1].set_xticklabels(list(summary["name"])[::step], rotation=60, ha="right", fontsize=7)
    axes[-1].set_xlabel("job" if step == 1 else f"job (one in {step} labelled)", fontsize=8)
    axes[-1].set_xlim(-0.7, n - 0.3)
    n_fail = int((~ok).sum())
    fig.suptitle(f"hbmodel batch: {n} jobs, {n_fail} failed (grey)", fontsize=9)  # laid out clear of the panels
    return fig


# --------------------------------------------------------------------------- chunks
def _write_chunk(make_chunk: Callable, index: int, n: int, child, path: str, exact_rows: bool = True) -> str:
    """Worker side: build one chunk, check the free disk, write it as a Parquet partition, atomically."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    from hbmodel.core.limits import check_free_disk

    table = make_chunk(index, n, child)
    if not isinstance(table, pa.Table):
        raise ValueError(f"make_chunk must return a pyarrow.Table, got {type(table).__name__}")
    if exact_rows and table.num_rows != n:
        raise ValueError(f"make_chunk({index}) returned {table.num_rows} rows, expected {n}")
    path = pathlib.Path(path)
    # the uncompressed Arrow size bounds the Parquet file (measured: Parquet is 0.8-1.0 of it here)
    check_free_disk(path.parent, table.nbytes, f"partition {path.name}")
    from hbmodel.io.catalogues import parquet_write_options
    with _atomic_path(path) as tmp:
        pq.write_table(table, tmp, **parquet_write_options(table.schema))
    return str(path)


def _remove_partial_parts(out_dir: pathlib.Path) -> None:
    """Remove temporary partition files (``.part-NNNNN.*.parquet``) left by workers that were stopped."""
    for p in out_dir.glob(".part-*.parquet"):
        with contextlib.suppress(OSError):
            p.unlink()


def run_chunked(n_total: int, chunk_size: int, make_chunk: Callable, out_dir, *, n_jobs: int = 1,
                scheduler=None, force: bool = False, seed: int = 0, balanced: bool = False,
                exact_rows: bool = True, progress: bool | None = None) -> list[pathlib.Path]:
    """Generate a survey-size table in Parquet partitions, one chunk per worker at a time.

    ``make_chunk(index, n, seed_sequence_child) -> pyarrow.Table`` builds chunk
    ``index`` with exactly ``n`` rows; chunk ``i`` gets
    ``numpy.random.SeedSequence(seed).spawn(n_chunks)[i]`` so the output does not
    depend on ``n_jobs`` or the scheduler.  Writes ``out_dir/part-00000.parquet``,
    ... atomically; existing parts are skipped (resumable) unless ``force``.
    A re-run with different ``n_total``/``chunk_size``/``seed`` into the same
    directory is refused (use ``force=True`` or a new directory).

    The ``n_chunks = ceil(n_total / chunk_size)`` chunk sizes sum to ``n_total``: ``chunk_size`` each and
    the remainder last, or with ``balanced`` sizes that differ by at most one.  With ``exact_rows=False``,
    ``n`` counts units of the caller's choosing (e.g. HB stars of a mock) and the row count is not checked.
    Before each partition is written its worker checks the free disk; if it runs short (or the run is
    interrupted) the run stops with a one-line error, and no partial partition file is left (finished
    partitions stay; a re-run resumes).
    ``progress``: a bar over the partitions on standard error (None: only when it is a terminal).
    Returns the list of part paths in chunk order.
    """
    import joblib

    from hbmodel.core.limits import ResourceError

    for label, v in (("n_total", n_total), ("chunk_size", chunk_size)):
        if not isinstance(v, (int, np.integer)) or isinstance(v, bool) or v < 1:
            raise ValueError(f"{label} must be a positive integer, got {v!r}")
    if not isinstance(seed, (int, np.integer)) or isinstance(seed, bool) or seed < 0:
        raise ValueError(f"seed must be a non-negative integer, got {seed!r}")
    if not callable(make_chunk):
        raise ValueError("make_chunk must be callable")
    n_total, chunk_size, seed = int(n_total), int(chunk_size), int(seed)
    n_chunks = math.ceil(n_total / chunk_size)
    if n_chunks > 99999:
        raise ValueError(f"{n_chunks} chunks exceed the 5-digit part numbering; use a larger chunk_size")
    out_dir = pathlib.Path(out_dir)
    _prepare_out_dir(out_dir, _CHUNK_MANIFEST)
    manifest = {"n_total": n_total, "chunk_size": chunk_size, "seed": seed, "n_chunks": n_chunks}
    if balanced:
        manifest["balanced"] = True
    old = _read_json(out_dir / _CHUNK_MANIFEST)
    if not force and isinstance(old, dict) and old and old != manifest:
        raise ValueError(f"{out_dir} holds chunks made with {old}; asked for {manifest} "
                         "(use force=True or a new directory)")
    _atomic_write_json(out_dir / _CHUNK_MANIFEST, manifest)
    paths = [out_dir / f"part-{i:05d}.parquet" for i in range(n_chunks)]
    if force:  # remove stale parts beyond the new count (our own files, in our directory)
        for p in out_dir.glob("part-*.parquet"):
            if p not in paths:
                p.unlink()
    children = np.random.SeedSequence(seed).spawn(n_chunks)
    if balanced:
        base, extra = divmod(n_total, n_chunks)
        sizes = [base + (i < extra) for i in range(n_chunks)]
    else:
        sizes = [min(chunk_size, n_total - i * chunk_size) for i in range(n_chunks)]
    todo = [i for i in range(n_chunks) if force or not paths[i].exists()]
    if todo:
        try:
            with _executor(n_jobs, scheduler) as nj:
                parallel = joblib.Parallel(n_jobs=nj, batch_size=1, pre_dispatch="n_jobs",
                                           return_as="generator_unordered")
                calls = (joblib.delayed(_write_chunk)(make_chunk, i, sizes[i], children[i], str(paths[i]), exact_rows)
                         for i in todo)
                bar = progress_bar(len(todo), progress, "partitions", "part")
                try:
                    with _parallel_results(parallel, calls) as results:
                        for _ in results:
                            if bar is not None:
                                bar.update(1)
                finally:
                    if bar is not None:
                        bar.close()
        except BaseException as exc:
            _remove_partial_parts(out_dir)
            if isinstance(exc, ResourceError):
                done = sum(p.exists() for p in paths)
                raise ResourceError(f"{exc}; stopped with {done} of {n_chunks} partitions written in {out_dir} "
                                    "(free some space and re-run the same command to resume)") from None
            raise
    return paths
