"""Catalogue input and safe, reproducible output -- the edges of hbmodel.

Reading
-------
:func:`read_catalog` reads a photometric catalogue by its file extension:

========================  ==========================================
extension                 format
========================  ==========================================
``.csv`` (``.csv.gz``)    comma-separated text, ``#`` comment lines
``.ecsv`` (``.ecsv.gz``)  Enhanced Character-Separated Values
``.fits`` ``.fit`` ``.fts`` (and ``.gz``)  FITS binary/ASCII table
``.vot`` ``.xml``         IVOA VOTable
``.parquet``              Apache Parquet (through pyarrow)
========================  ==========================================

Every failure a user can cause -- missing file, unknown extension, unreadable
or corrupt file, empty table, missing or non-numeric required columns -- is a
:class:`ValueError` (or :class:`FileNotFoundError`) with a one-line message.
Rows are never dropped: missing values in numeric columns become NaN, and the
helpers :func:`finite_rows` and :func:`check_errors` let the caller decide.

A signal-to-noise column (Gaia's ``phot_g_mean_flux_over_error``) is accepted as the error of a band only
when declared as ``<band>_flux_over_error`` in ``columns``: it becomes ``<band>_err`` =
2.5 / ln 10 / (flux / sigma_flux) mag (first-order propagation of a flux error to a magnitude, common
practice); a non-positive or missing ratio becomes a missing error.

Writing
-------
Every writer here is *atomic* (the data go to a temporary file in the target
directory, which is then renamed over the target with :func:`os.replace`), so
a failure never leaves a partial file and never damages an existing one. An
existing file is only replaced when ``force=True``. Output is deterministic:
the same input gives a byte-identical file (no embedded timestamps; gzip
headers carry mtime 0; figures carry no creation date).

Size (780+ lines): every file format in and out in one place: each reader and writer is short, and they share the
format detection, the missing-value rules and the overwrite rules.
"""
from __future__ import annotations

import contextlib
import gzip
import json
import math
import os
import shutil
import tempfile
import warnings
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np

from hbmodel.core.files import atomic_path, json_text, umask
from hbmodel.core.messages import describe_exception

__all__ = [
    "READ_FORMATS",
    "WRITE_FORMATS",
    "read_catalog",
    "pick_column",
    "COLUMN_ALTERNATIVES",
    "check_errors",
    "finite_rows",
    "drop_missing",
    "write_table",
    "write_parquet_columns",
    "parquet_write_options",
    "atomic_write_text",
    "atomic_write_bytes",
    "atomic_write_json",
    "atomic_savefig",
    "prepare_out_dir",
    "staged_out_dir",
]

#: extension -> (astropy format name, human label) for reading.
READ_FORMATS: dict[str, tuple[str, str]] = {
    ".csv": ("ascii.csv", "CSV"),
    ".ecsv": ("ascii.ecsv", "ECSV"),
    ".fits": ("fits", "FITS"),
    ".fit": ("fits", "FITS"),
    ".fts": ("fits", "FITS"),
    ".vot": ("votable", "VOTable"),
    ".xml": ("votable", "VOTable"),
    ".parquet": ("parquet", "Parquet"),
}
_GZ_OK = {".csv", ".ecsv", ".fits", ".fit", ".fts"}

#: extension -> (astropy format name, human label) for writing.
WRITE_FORMATS: dict[str, tuple[str, str]] = dict(READ_FORMATS)

_FIG_FORMATS = {".png": "png", ".pdf": "pdf", ".svg": "svg"}


# --------------------------------------------------------------------------- #
# small helpers
# --------------------------------------------------------------------------- #
def _split_ext(path: Path) -> tuple[str, bool]:
    """Return (base extension, gzipped?) in lower case, e.g. ('.fits', True)."""
    suffixes = [s.lower() for s in path.suffixes]
    if not suffixes:
        return "", False
    if suffixes[-1] == ".gz":
        return (suffixes[-2] if len(suffixes) >= 2 else ""), True
    return suffixes[-1], False


def _format_for(path: Path, table: Mapping, what: str) -> tuple[str, str, bool]:
    ext, gz = _split_ext(path)
    if ext not in table or (gz and ext not in _GZ_OK):
        shown = ext + (".gz" if gz else "") or "(none)"
        known = ", ".join(sorted(table)) + ", " + ", ".join(sorted(e + ".gz" for e in _GZ_OK))
        raise ValueError(f"cannot {what} {path.name!r}: unknown file extension {shown!r} "
                         f"(known: {known})")
    fmt, label = table[ext]
    return fmt, label + (" (gzip)" if gz else ""), gz


def _show(name) -> str:
    """A column name fit for a one-line message (repr if it has odd characters)."""
    name = str(name)
    return name if name.isprintable() and name.strip() == name and name else repr(name)


def _list_names(names: Sequence[str], limit: int = 20) -> str:
    names = [_show(n) for n in names]
    shown = ", ".join(names[:limit])
    return shown + (f", ... ({len(names)} in all)" if len(names) > limit else "")


# --------------------------------------------------------------------------- #
# reading
# --------------------------------------------------------------------------- #
def read_catalog(path, columns: Mapping[str, str] | None = None,
                 required: Sequence[str] = ()):
    """Read a catalogue table, rename columns to canonical names and validate it.

    Parameters
    ----------
    path : str or path-like
        The file; its format follows from the extension (see the module notes).
    columns : dict, optional
        Canonical name -> name in the file, e.g. ``{"V": "vmag", "V_err": "e_vmag"}``;
        the file's columns are renamed accordingly.
    required : sequence of str
        Canonical column names that must be present and numeric.

    Returns
    -------
    astropy.table.Table
        All rows of the file. Missing values in numeric columns are NaN
        (integer columns with missing values become float). No row is dropped.

    Raises
    ------
    FileNotFoundError
        The file does not exist.
    ValueError
        Any other problem, with a one-line message.
    """
    try:
        return _read_catalog(path, columns, required)
    except (ValueError, FileNotFoundError) as exc:
        msg = str(exc)
        if "\n" in msg.strip() or "\r" in msg:
            raise type(exc)(" ".join(msg.split())) from None
        raise
    except Exception as exc:  # the contract: only ValueError / FileNotFoundError escape
        raise ValueError(" ".join(f"could not read catalogue {path}: {describe_exception(exc)}".split())) from None


#: Input columns that may also come under the unit-suffixed names hbmodel's own mocks write.
COLUMN_ALTERNATIVES = {"teff": ("teff", "teff_k"), "mass": ("mass", "mass_msun"),
                       "mass_err": ("mass_err", "mass_msun_err")}


def pick_column(table, name: str, what: str) -> str:
    """The column standing for ``name`` in ``table``: ``name`` itself or one of its
    :data:`COLUMN_ALTERNATIVES` (a user's ``teff`` or a mock's ``teff_k``), the first present; it must be
    numeric.  ValueError naming the accepted names otherwise."""
    names = COLUMN_ALTERNATIVES.get(name, (name,))
    for n in names:
        if n in table.colnames:
            if table[n].dtype.kind not in "iuf" or table[n].ndim != 1:
                raise ValueError(f"{what}: column {n!r} is not numeric ({table[n].dtype})")
            return n
    raise ValueError(f"{what} lacks column {' or '.join(repr(n) for n in names)} "
                     f"(available: {_list_names(table.colnames)})")


def _read_catalog(path, columns, required):
    from astropy.table import MaskedColumn, Table

    try:
        path = Path(os.fspath(path))
    except TypeError:
        raise ValueError(f"catalogue path must be a string or path, got {path!r}") from None
    fmt, label, _ = _format_for(path, READ_FORMATS, "read catalogue")
    if not path.exists():
        raise FileNotFoundError(f"catalogue file not found: {path}")
    if path.is_dir():
        raise ValueError(f"catalogue path {path} is a directory, not a file")
    if not os.access(path, os.R_OK):
        raise ValueError(f"catalogue file {path} is not readable (permission denied)")
    if path.stat().st_size == 0:
        raise ValueError(f"catalogue file {path} is empty")

    kwargs = {"comment": "#"} if fmt == "ascii.csv" else {}
    try:
        with warnings.catch_warnings():
            # Unit strings the reader does not recognise etc. are not errors here.
            warnings.simplefilter("ignore")
            if fmt == "parquet":
                table = _read_parquet(path)
            else:
                table = Table.read(path, format=fmt, **kwargs)
    except MemoryError:
        raise ValueError(f"catalogue file {path} is too large to read into memory") from None
    except Exception as exc:  # any reader failure is a bad file, for the user
        raise ValueError(f"could not read {path} as {label}: {describe_exception(exc)}") from None
    if not isinstance(table, Table):
        raise ValueError(f"could not read {path} as {label}: no table found")
    if len(table.colnames) == 0 or len(table) == 0:
        raise ValueError(f"catalogue {path} contains no rows")

    try:
        table.convert_bytestring_to_unicode()  # FITS text columns arrive as bytes
    except Exception:  # undecodable bytes: keep them as they are
        pass
    if columns:
        table = _rename(table, columns, path)
        _flux_over_error_columns(table, columns, path)

    # Missing values in numeric columns -> NaN (keeps every row).
    for name in table.colnames:
        col = table[name]
        if isinstance(col, MaskedColumn) and col.dtype.kind in "iuf":
            data = np.asarray(col.data.data)
            mask = np.ma.getmaskarray(col)
            if mask.any():
                data = data.astype(float, copy=True)
                data[mask] = np.nan
            table.replace_column(name, data, copy=False)
            table[name].unit = col.unit
            table[name].description = col.description

    required = [str(r) for r in required]
    _band_alias_columns(table, required)
    missing = [r for r in required if r not in table.colnames]
    if missing:
        raise ValueError(f"catalogue {path.name} lacks required column(s): {_list_names(missing)} "
                         f"(available: {_list_names(table.colnames)})")
    bad = [f"{_show(r)} ({table[r].dtype})" for r in required
           if table[r].dtype.kind not in "iuf" or table[r].ndim != 1]
    if bad:
        raise ValueError(f"catalogue {path.name}: required column(s) not numeric: {', '.join(bad)}")
    return table


#: Suffix of a declared signal-to-noise column (flux over its error) that stands for a band's error.
FLUX_OVER_ERROR_SUFFIX = "_flux_over_error"
_MAG_PER_RELATIVE_FLUX = 2.5 / math.log(10.0)   # d(mag) / d(ln flux)


def _flux_over_error_columns(table, columns: Mapping[str, str], path: Path) -> None:
    """``<band>_err`` from each declared ``<band>_flux_over_error`` column (see the module notes)."""
    from astropy.table import MaskedColumn
    for canon in columns:
        canon = str(canon)
        if not canon.endswith(FLUX_OVER_ERROR_SUFFIX) or canon == FLUX_OVER_ERROR_SUFFIX:
            continue
        err = canon[: -len(FLUX_OVER_ERROR_SUFFIX)] + "_err"
        if err in table.colnames:
            raise ValueError(f"catalogue {path.name}: {err} is given twice (a column {err!r} and the declared "
                             f"{canon}); map only one of them")
        col = table[canon]
        if col.dtype.kind not in "iuf" or col.ndim != 1:
            raise ValueError(f"catalogue {path.name}: the declared {canon} column is not numeric ({col.dtype})")
        snr = np.asarray(col.filled(np.nan) if isinstance(col, MaskedColumn) else col, float)
        with np.errstate(divide="ignore", invalid="ignore"):
            sigma = np.where(np.isfinite(snr) & (snr > 0), _MAG_PER_RELATIVE_FLUX / snr, np.nan)
        table[err] = sigma
        table[err].unit = "mag"
        table[err].description = f"1-sigma magnitude error from the flux over error column {columns[canon]!r}"


def _band_alias_columns(table, required) -> None:
    """A required band column (``Ks``, ``Ks_err``) absent from the file is taken from the one column named
    by an alias of that band, in any letter case (``K``, ``ks``, ``K_err``); renamed in place."""
    from hbmodel.photometry.magnitudes import BAND_NAMES, get_band
    folded = {}
    for c in table.colnames:
        folded.setdefault(c.casefold(), []).append(c)
    for req in required:
        if req in table.colnames:
            continue
        base, suffix = (req[:-4], "_err") if req.endswith("_err") else (req, "")
        if base not in BAND_NAMES:
            continue
        band = get_band(base)
        hits = sorted({c for name in (band.name, *band.aliases) for c in folded.get((name + suffix).casefold(), [])})
        if len(hits) == 1:
            table.rename_column(hits[0], req)


#: key of the units and descriptions of the columns in the ``hbmodel_meta`` of a Parquet file
COLUMN_INFO_KEY = "column_info"


def _read_parquet(path: Path):
    """Read a Parquet file with pyarrow alone (astropy's reader would need pandas).

    Units and table metadata written by astropy (``table_meta_yaml``) are restored
    when present; null values become NaN (numbers) or masked entries (others).
    """
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.parquet as pq
    from astropy.table import MaskedColumn, Table

    pat = pq.read_table(path)
    cols = {}
    for name in pat.column_names:
        ch = pat.column(name)
        typ = ch.type
        if pa.types.is_dictionary(typ):  # categories (e.g. a mock's phase): decode through the codes
            ch = ch.combine_chunks()
            names = np.asarray(ch.dictionary.to_numpy(zero_copy_only=False)).astype(str)
            codes = np.asarray(ch.indices.fill_null(0).to_numpy(zero_copy_only=False))
            nulls = np.asarray(ch.is_null().to_numpy(zero_copy_only=False), dtype=bool)
            arr = names[codes] if names.size else np.full(codes.size, "")
            cols[name] = MaskedColumn(arr, mask=nulls) if nulls.any() else arr
            continue
        nulls = np.asarray(pc.is_null(ch).to_numpy(zero_copy_only=False), dtype=bool)
        if pa.types.is_string(typ) or pa.types.is_large_string(typ):
            arr = np.asarray(pc.fill_null(ch, "").to_numpy(zero_copy_only=False)).astype(str)
            cols[name] = MaskedColumn(arr, mask=nulls) if nulls.any() else arr
        elif pa.types.is_integer(typ) or pa.types.is_floating(typ):
            cols[name] = np.asarray(ch.to_numpy())  # nulls -> NaN (ints become float)
        elif pa.types.is_boolean(typ):
            arr = np.asarray(pc.fill_null(ch, False).to_numpy(zero_copy_only=False), dtype=bool)
            cols[name] = MaskedColumn(arr, mask=nulls) if nulls.any() else arr
        else:
            cols[name] = np.array(ch.to_pylist())
    table = Table(cols) if cols else Table()
    md = pat.schema.metadata or {}
    if b"hbmodel_meta" in md:  # written by write_parquet_columns
        try:
            extra = json.loads(md[b"hbmodel_meta"].decode("utf-8"))
            info = extra.pop(COLUMN_INFO_KEY, {}) if isinstance(extra, dict) else {}
            table.meta.update(extra)
            for name, (unit, description) in info.items():
                if name in table.colnames:
                    if unit:
                        table[name].unit = unit
                    table[name].description = description
        except (ValueError, TypeError):
            pass
    if b"table_meta_yaml" in md:
        try:
            from astropy.table import meta as _meta

            hdr = _meta.get_header_from_yaml(md[b"table_meta_yaml"].decode("utf-8").split("\n"))
            for entry in hdr.get("datatype", []):
                if entry.get("name") in table.colnames:
                    if entry.get("unit"):
                        table[entry["name"]].unit = entry["unit"]
                    if entry.get("description"):
                        table[entry["name"]].description = entry["description"]
            table.meta.update(hdr.get("meta", {}) or {})
        except Exception:  # metadata is a courtesy; the data are what matter
            pass
    return table


def _rename(table, columns: Mapping[str, str], path: Path):
    if not isinstance(columns, Mapping):
        raise ValueError("columns must be a dict mapping canonical names to names in the file")
    old, new = [], []
    for canon, infile in columns.items():
        canon, infile = str(canon), str(infile)
        if infile == canon:
            continue
        if infile not in table.colnames:
            raise ValueError(f"catalogue {path.name} has no column {infile!r} (asked for as {canon!r}); "
                             f"available: {_list_names(table.colnames)}")
        old.append(infile)
        new.append(canon)
    if len(set(old)) != len(old) or len(set(new)) != len(new):
        raise ValueError("columns mapping uses a file column or a canonical name twice")
    staying = set(table.colnames) - set(old)
    clash = [n for n in new if n in staying]
    if clash:
        raise ValueError(f"renaming would clash with existing column(s) in {path.name}: {_list_names(clash)}")
    if old:
        # two-step rename so that swaps (a->b, b->a) work too
        tmp = [f"\0tmp{i}" for i in range(len(old))]
        table.rename_columns(old, tmp)
        table.rename_columns(tmp, new)
    return table


def _column_as_float(table, name: str) -> np.ndarray:
    names = table.colnames if hasattr(table, "colnames") else list(table)
    if name not in names:
        raise ValueError(f"table has no column {name!r}")
    col = table[name]
    if np.asarray(col).dtype.kind not in "iufb":
        raise ValueError(f"column {name!r} is not numeric ({np.asarray(col).dtype})")
    data = np.array(np.ma.getdata(col), dtype=float)
    mask = np.ma.getmaskarray(col) if np.ma.isMaskedArray(col) else None
    if mask is not None and mask.any():
        data[mask] = np.nan
    return data


def finite_rows(table, cols: Sequence[str]) -> np.ndarray:
    """Boolean mask of rows whose values in all ``cols`` are finite (not NaN/inf/masked)."""
    if isinstance(cols, str):
        cols = [cols]
    n = len(table)
    mask = np.ones(n, dtype=bool)
    for c in cols:
        mask &= np.isfinite(_column_as_float(table, c))
    return mask


#: A catalogue losing more than this fraction of its rows to missing values is refused (common practice:
#: such a cut changes the sample, not just its noise).
MAX_MISSING_FRACTION = 0.5


def drop_missing(table, cols: Sequence[str], what: str = "catalogue"):
    """The one missing-value policy of every command: rows with a NaN, infinite or masked value in any of
    ``cols`` are dropped and counted; returns ``(kept_table, n_dropped)``.  ``ValueError`` when more than
    :data:`MAX_MISSING_FRACTION` of the rows would go."""
    ok = finite_rows(table, cols)
    n_drop = int((~ok).sum())
    if n_drop > MAX_MISSING_FRACTION * len(table):
        raise ValueError(f"{what}: {n_drop} of {len(table)} rows have a missing value in "
                         f"{', '.join(cols)}; refusing to fit a catalogue that loses more than half its rows")
    return (table[ok] if n_drop else table), n_drop


def check_errors(table, cols: Sequence[str]) -> None:
    """Raise ``ValueError`` unless every ``<band>_err`` column for ``cols`` is finite and > 0.

    ``cols`` are band (magnitude-column) names; their uncertainties are expected
    in columns named ``<band>_err``.
    """
    if isinstance(cols, str):
        cols = [cols]
    for band in cols:
        name = f"{band}_err"
        names = table.colnames if hasattr(table, "colnames") else list(table)
        if name not in names:
            raise ValueError(f"no uncertainty column {name!r} for band {band!r}")
        err = _column_as_float(table, name)
        nonfinite = ~np.isfinite(err)
        nonpos = np.isfinite(err) & (err <= 0)
        if nonfinite.any() or nonpos.any():
            first = int(np.flatnonzero(nonfinite | nonpos)[0])
            raise ValueError(f"column {name!r} has {int(nonfinite.sum())} NaN/missing/infinite and "
                             f"{int(nonpos.sum())} non-positive value(s) (first at row {first}); "
                             f"uncertainties must be finite and > 0")


# --------------------------------------------------------------------------- #
# atomic writing
# --------------------------------------------------------------------------- #
def _check_target(path: Path, force: bool) -> None:
    parent = path.parent
    if path.name in ("", ".", ".."):
        raise ValueError(f"output path {str(path)!r} does not name a file")
    if not parent.exists():
        raise ValueError(f"cannot write {path}: directory {parent} does not exist")
    if not parent.is_dir():
        raise ValueError(f"cannot write {path}: {parent} is not a directory")
    if path.is_dir():
        raise ValueError(f"cannot write {path}: it is an existing directory")
    if (path.exists() or path.is_symlink()) and not force:
        raise ValueError(f"{path} exists; use --force to overwrite")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise ValueError(f"cannot write {path}: directory {parent} is not writable")


def check_output_file(path, *, force: bool = False) -> Path:
    """Raise ``ValueError`` now (before any work) if ``path`` could not be written later: missing or
    read-only directory, an existing directory, or an existing file without ``force``."""
    try:
        path = Path(os.fspath(path))
    except TypeError:
        raise ValueError(f"output path must be a string or path, got {path!r}") from None
    _check_target(path, force)
    return path


def check_output_dir(path, *, force: bool = False) -> Path:
    """Raise ``ValueError`` now if :func:`prepare_out_dir` would refuse ``path`` later (nothing is created)."""
    try:
        path = Path(os.fspath(path))
    except TypeError:
        raise ValueError(f"output directory must be a string or path, got {path!r}") from None
    if path.exists() and not path.is_dir():
        raise ValueError(f"output directory {path} exists and is not a directory")
    if path.is_dir():
        if any(path.iterdir()) and not force:
            raise ValueError(f"output directory {path} exists and is not empty; use --force to overwrite")
        if not os.access(path, os.W_OK | os.X_OK):
            raise ValueError(f"output directory {path} is not writable")
        return path
    base = path.parent
    while not base.exists() and base != base.parent:
        base = base.parent
    if not base.is_dir() or not os.access(base, os.W_OK | os.X_OK):
        raise ValueError(f"cannot create output directory {path}: {base} is not a writable directory")
    return path


def _atomic(path, writer, *, force: bool) -> Path:
    """Run ``writer(tmp_path)`` on a temporary file beside ``path``, then move it into place
    (:func:`hbmodel.core.files.atomic_path`); refuses an existing ``path`` unless ``force``."""
    try:
        path = Path(os.fspath(path))
    except TypeError:
        raise ValueError(f"output path must be a string or path, got {path!r}") from None
    _check_target(path, force)
    started = False
    try:
        with atomic_path(path, force=force) as tmp:
            started = True
            writer(str(tmp))
    except FileExistsError:  # the target appeared meanwhile (no-clobber)
        raise ValueError(f"{path} exists; use --force to overwrite") from None
    except OSError as exc:
        if not started:  # no temporary file could be made beside the target
            raise ValueError(f"cannot write {path}: {describe_exception(exc)}") from None
        raise
    except BaseException as exc:
        if isinstance(exc, (ValueError, OSError, KeyboardInterrupt, SystemExit)):
            raise
        raise ValueError(f"could not write {path}: {describe_exception(exc)}") from exc
    return path


def _silent_unlink(p) -> None:
    try:
        os.unlink(p)
    except FileNotFoundError:
        pass


def atomic_write_bytes(path, data: bytes, *, force: bool = False) -> Path:
    """Atomically write ``data`` to ``path`` (refuses to overwrite unless ``force``)."""
    data = bytes(data)

    def _w(tmp):
        with open(tmp, "wb") as fh:
            fh.write(data)

    return _atomic(path, _w, force=force)


def atomic_write_text(path, text: str, *, force: bool = False) -> Path:
    """Atomically write UTF-8 ``text`` (``\\n`` line ends) to ``path``."""
    if not isinstance(text, str):
        raise ValueError(f"text must be a str, got {type(text).__name__}")
    return atomic_write_bytes(path, text.encode("utf-8"), force=force)


def atomic_write_json(path, obj, *, force: bool = False) -> Path:
    """Atomically write ``obj`` as JSON: sorted keys, indent 2, NaN/inf written as ``null``."""
    text = json_text(obj) + "\n"
    return atomic_write_text(path, text, force=force)


def write_table(table, path, *, force: bool = False, meta: Mapping | None = None) -> Path:
    """Write ``table`` (astropy Table or dict of columns) atomically, format by extension.

    Formats: ``.csv``, ``.ecsv``, ``.fits``/``.fit``/``.fts`` (optionally ``.gz``),
    ``.vot``/``.xml`` (VOTable), ``.parquet``. ``meta`` entries are added to the
    table's metadata (in a copy; the caller's table is not changed); plain CSV
    carries no metadata. The output is byte-identical for identical input.
    """
    from astropy.table import Table

    try:
        path = Path(os.fspath(path))
    except TypeError:
        raise ValueError(f"output path must be a string or path, got {path!r}") from None
    fmt, label, gz = _format_for(path, WRITE_FORMATS, "write table")
    if isinstance(table, Table):
        out = table.copy(copy_data=False)
    elif isinstance(table, Mapping):
        try:
            out = Table(dict(table))
        except Exception as exc:
            raise ValueError(f"cannot make a table from the given columns: {describe_exception(exc)}") from None
    else:
        raise ValueError(f"write_table needs an astropy Table or a dict of columns, "
                         f"got {type(table).__name__}")
    if len(out.colnames) == 0:
        raise ValueError(f"refusing to write {path.name}: the table has no columns")
    if meta:
        if not isinstance(meta, Mapping):
            raise ValueError("meta must be a dict")
        out.meta.update({str(k): meta[k] for k in meta})

    if fmt.startswith("fits"):
        # a FITS header holds scalars only: nested metadata (e.g. a mock's population) goes in as JSON text
        for k in list(out.meta):
            if isinstance(out.meta[k], (Mapping, list, tuple)):
                out.meta[k] = json_text(out.meta[k], indent=None, ensure_ascii=True)
    if fmt == "parquet" and _plain_columns(out):
        return _atomic(path, lambda tmp: _write_parquet_table(out, tmp, label=label, name=path.name), force=force)

    def _w(tmp):
        target = tmp + ".inner" if gz else tmp
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # e.g. HIERARCH cards for long FITS keys
                out.write(target, format=fmt, overwrite=True)
            if gz:
                with open(target, "rb") as fh:
                    raw = fh.read()
                with open(tmp, "wb") as fh:  # mtime=0: no timestamp in the gzip header
                    fh.write(gzip.compress(raw, compresslevel=6, mtime=0))
        except (ValueError, OSError):
            raise
        except Exception as exc:
            raise ValueError(f"could not write {path.name} as {label}: {describe_exception(exc)}") from None
        finally:
            if gz:
                _silent_unlink(target)

    return _atomic(path, _w, force=force)


#: Parquet column options of every file hbmodel writes: Zstandard compression (level 1, nearly the
#: ratio of level 3 at the speed of Snappy here), floating-point columns stored byte-stream-split (the
#: bytes of each value split into streams, so the slowly varying sign/exponent bytes compress well) and
#: dictionary encoding for the rest (integers, booleans, categories), whose min/max statistics are
#: kept (those of the floats cost 15% of the writing time).  Measured on a 2-band mock of 5x10^6
#: float32 rows: 28 bytes per star (Snappy, no split: 40; float64 columns: 83).
_PARQUET_COMPRESSION = ("zstd", 1)
#: Rows per Parquet row group (pyarrow's default largest group: 1024 x 1024 rows).
PARQUET_ROW_GROUP = 1 << 20


def parquet_write_options(schema) -> dict:
    """Keyword arguments of ``pyarrow.parquet.write_table`` for a table of this Arrow ``schema``."""
    import pyarrow as pa
    floats = [f.name for f in schema if pa.types.is_floating(f.type)]
    others = [f.name for f in schema if not pa.types.is_floating(f.type)]
    return {"compression": _PARQUET_COMPRESSION[0], "compression_level": _PARQUET_COMPRESSION[1],
            "use_byte_stream_split": floats or False, "use_dictionary": others or False,
            "write_statistics": others or False}


def _plain_columns(table) -> bool:
    """True when every column of the astropy ``table`` is a plain 1-D number, boolean or text column
    (no mixins, masks or array cells): the case :func:`_write_parquet_table` writes itself."""
    from astropy.table import Column, MaskedColumn
    return all(type(c) is Column and not isinstance(c, MaskedColumn) and c.ndim == 1
               and c.dtype.kind in "biufU" for c in table.itercols())


def _arrow_column(values, categories=None):
    """An Arrow array of a numpy column: ``categories`` given, ``values`` are integer codes into them (a
    dictionary column); text columns with few distinct values also become dictionary columns."""
    import pyarrow as pa
    if categories is not None:
        return pa.DictionaryArray.from_arrays(pa.array(np.asarray(values, np.int8)),
                                              pa.array([str(c) for c in categories]))
    values = np.asarray(values)
    if values.dtype.kind == "U":
        arr = pa.array(values)
        enc = arr.dictionary_encode()
        return enc if len(enc.dictionary) <= 256 else arr
    return pa.array(values)


def _write_parquet_arrow(pat, tmp) -> None:
    import pyarrow.parquet as pq
    pq.write_table(pat, tmp, **parquet_write_options(pat.schema))


def _write_parquet_table(table, tmp, *, label, name) -> None:
    """Write a table of plain columns (:func:`_plain_columns`) with :func:`parquet_write_options`; the
    units, descriptions and metadata go where astropy's own Parquet writer puts them
    (``table_meta_yaml``), so either reader restores them."""
    import pyarrow as pa
    from astropy.table import meta as _meta
    try:
        yaml = "\n".join(_meta.get_yaml_from_table(table))
        arrays = [_arrow_column(table[c].data) for c in table.colnames]
        schema_md = {b"table_meta_yaml": yaml.encode("utf-8")}
        pat = pa.table(dict(zip(table.colnames, arrays))).replace_schema_metadata(schema_md)
        _write_parquet_arrow(pat, tmp)
    except (ValueError, OSError):
        raise
    except Exception as exc:
        raise ValueError(f"could not write {name} as {label}: {describe_exception(exc)}") from None


def write_parquet_columns(columns: Mapping, path, *, force: bool = False, meta: Mapping | None = None,
                          categories: Mapping | None = None, column_info: Mapping | None = None) -> Path:
    """Write numpy ``columns`` (name -> 1-D array, all of one length) to a Parquet file, atomically,
    with pyarrow alone (no astropy: the fast path of survey-size mocks).

    ``categories`` maps a column of small integer codes to the names they index (written as an Arrow
    dictionary column, e.g. a mock's ``phase``); ``meta`` (JSON-serialisable) is stored in the schema
    metadata (key ``hbmodel_meta``) and restored by :func:`read_catalog`, as is ``column_info``
    (``{column: (unit, description)}``), which :func:`read_catalog` puts back on the columns.  Compression
    and encodings: :func:`parquet_write_options`.  Refuses to overwrite unless ``force``."""
    path = _parquet_path(path, "write_parquet_columns")
    if not columns:
        raise ValueError(f"refusing to write {path.name}: the table has no columns")
    pat = _arrow_table(columns, meta, categories, "write_parquet_columns", column_info)
    return _atomic(path, lambda tmp: _write_parquet_arrow(pat, tmp), force=force)


def _parquet_path(path, who: str) -> Path:
    """``path`` as a Path of a ``.parquet`` file (ValueError with a one-line reason otherwise)."""
    try:
        path = Path(os.fspath(path))
    except TypeError:
        raise ValueError(f"output path must be a string or path, got {path!r}") from None
    fmt, _label, _gz = _format_for(path, WRITE_FORMATS, "write table")
    if fmt != "parquet":
        raise ValueError(f"{who} writes .parquet files, not {path.name!r}")
    return path


def _arrow_table(columns: Mapping, meta, categories, who: str, column_info=None):
    """The Arrow table of numpy ``columns`` with ``categories``, ``meta`` and ``column_info`` as
    :func:`write_parquet_columns` stores them."""
    import pyarrow as pa
    categories = dict(categories or {})
    arrays = {str(k): _arrow_column(v, categories.get(k)) for k, v in columns.items()}
    if len({len(a) for a in arrays.values()}) != 1:
        raise ValueError(f"{who}: columns of unequal length")
    pat = pa.table(arrays)
    if column_info:
        meta = {**(meta or {}), COLUMN_INFO_KEY: {str(k): [str(u), str(d)] for k, (u, d) in column_info.items()
                                                  if k in arrays}}
    if meta:
        text = json_text(meta, indent=None, ensure_ascii=True)
        pat = pat.replace_schema_metadata({b"hbmodel_meta": text.encode("utf-8")})
    return pat


def _datasync(fd) -> None:
    """Flush the file's data written so far to disk (durability comes from the final fsync in any case)."""
    try:
        os.fdatasync(fd)
    except (OSError, AttributeError):  # not every platform or file system offers it
        pass


def write_parquet_groups(produce, path, *, force: bool = False, meta: Mapping | None = None,
                         categories: Mapping | None = None, column_info: Mapping | None = None) -> Path:
    """Write a Parquet file row group by row group, atomically, while the rows are being computed.

    ``produce(emit)`` computes the table and calls ``emit(columns)`` once per row group, in order
    (``columns`` as in :func:`write_parquet_columns`, the same names every time; the arrays must not change
    afterwards).  Each group is encoded and written in a background thread while ``produce`` goes on (at
    most one group waits, so memory stays bounded); the file is the one :func:`write_parquet_columns`
    writes of the concatenated columns when the groups hold ``PARQUET_ROW_GROUP`` rows each (but the
    last).  An exception in ``produce`` or in the writing leaves no file.  Refuses to overwrite unless
    ``force``."""
    path = _parquet_path(path, "write_parquet_groups")

    def _w(tmp):
        import pyarrow.parquet as pq
        from concurrent.futures import ThreadPoolExecutor
        state = {"writer": None, "pending": None, "schema": None, "fd": None, "synced": []}

        def write(pat):
            if state["writer"] is None:
                state["writer"] = pq.ParquetWriter(tmp, pat.schema, **parquet_write_options(pat.schema))
                try:
                    state["fd"] = os.open(tmp, os.O_RDONLY)
                except OSError:
                    pass
            state["writer"].write_table(pat, row_group_size=PARQUET_ROW_GROUP)
            if state["fd"] is not None:  # the group's bytes go to disk while the next is encoded, so
                state["synced"].append(syncer.submit(_datasync, state["fd"]))  # the final fsync finds little

        def emit(columns):
            pat = _arrow_table(columns, meta, categories, "write_parquet_groups", column_info)
            if state["schema"] is None:
                state["schema"] = pat.schema
            elif not pat.schema.equals(state["schema"], check_metadata=False):
                raise ValueError("write_parquet_groups: a row group's columns differ from the first group's")
            if state["pending"] is not None:
                state["pending"].result()  # one group in the writer at a time, one waiting
            state["pending"] = pool.submit(write, pat)

        try:
            with ThreadPoolExecutor(1) as syncer, ThreadPoolExecutor(1) as pool:
                try:
                    produce(emit)
                    if state["pending"] is not None:
                        state["pending"].result()
                finally:  # on an error: the group in the writer finishes (or fails) before the file goes
                    if state["pending"] is not None and not state["pending"].cancel():
                        state["pending"].exception()
            if state["writer"] is None:
                raise ValueError(f"refusing to write {path.name}: the table has no rows")
        finally:
            if state["writer"] is not None:
                state["writer"].close()
            if state["fd"] is not None:
                os.close(state["fd"])

    return _atomic(path, _w, force=force)


def atomic_savefig(fig, path, *, force: bool = False, dpi: float | None = None, **kwargs) -> Path:
    """Save a matplotlib figure atomically and reproducibly (PNG, PDF or SVG).

    No creation date is embedded (PNG ``Creation Time``, PDF ``CreationDate``,
    SVG ``dc:date``), and SVG element ids use a fixed hash salt, so the same
    figure gives the same bytes.
    """
    import matplotlib

    try:
        path = Path(os.fspath(path))
    except TypeError:
        raise ValueError(f"output path must be a string or path, got {path!r}") from None
    ext = path.suffix.lower()
    if ext not in _FIG_FORMATS:
        raise ValueError(f"cannot save figure {path.name!r}: unknown extension {ext or '(none)'!r} "
                         f"(known: {', '.join(sorted(_FIG_FORMATS))})")
    fmt = _FIG_FORMATS[ext]
    metadata = dict(kwargs.pop("metadata", None) or {})
    if fmt == "png":
        metadata.setdefault("Creation Time", None)
    elif fmt == "pdf":
        metadata.setdefault("CreationDate", None)
        metadata.setdefault("ModDate", None)
    elif fmt == "svg":
        metadata.setdefault("Date", None)

    def _w(tmp):
        with matplotlib.rc_context({"svg.hashsalt": "hbmodel"}):
            fig.savefig(tmp, format=fmt, dpi=dpi, metadata=metadata, **kwargs)

    return _atomic(path, _w, force=force)


def prepare_out_dir(path, *, force: bool = False) -> Path:
    """Create a result directory (with parents) and return it.

    An existing empty directory is fine. An existing non-empty directory is
    refused unless ``force=True`` -- and even then nothing in it is deleted;
    files are replaced only as they are rewritten.
    """
    path = check_output_dir(path, force=force)
    if path.is_dir():
        return path
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ValueError(f"cannot create output directory {path}: {describe_exception(exc)}") from None
    return path


@contextlib.contextmanager
def staged_out_dir(path, *, force: bool = False):
    """All-or-nothing result directory: yield a new temporary directory beside ``path`` to write every
    file into; when the block succeeds, the directory becomes ``path`` (one rename when ``path`` is new
    or empty; with ``force`` into an existing non-empty directory, file by file with :func:`os.replace`,
    nothing else in it touched); when the block fails, it is removed and ``path`` is left as it was.
    ``path`` is checked first like :func:`prepare_out_dir`."""
    path = check_output_dir(path, force=force)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = Path(tempfile.mkdtemp(prefix=f".{path.name}.", suffix=".partial", dir=path.parent))
        os.chmod(tmp, 0o777 & ~umask())
    except OSError as exc:
        raise ValueError(f"cannot create output directory {path}: {describe_exception(exc)}") from None
    try:
        yield tmp
        if path.is_dir() and not any(path.iterdir()):
            path.rmdir()
        if not path.exists():
            os.rename(tmp, path)
        else:
            for entry in sorted(tmp.iterdir()):
                target = path / entry.name
                if target.is_dir() and not entry.is_dir():
                    raise ValueError(f"cannot write {target}: it is an existing directory")
                os.replace(entry, target)
            tmp.rmdir()
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return path
