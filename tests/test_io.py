"""Tests for hbmodel.io.catalogues: catalogue reading, validation, atomic and reproducible writing."""
from __future__ import annotations

import datetime
import gzip
import json
import os
import struct
import tempfile
import time
from pathlib import Path

import numpy as np
import pytest
from astropy.table import Table
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from hbmodel.core.files import umask
from hbmodel.io import catalogues as hio
TABLE_EXTS = ["csv", "ecsv", "fits", "fits.gz", "vot", "xml", "parquet", "csv.gz"]


def _sample_table():
    t = Table()
    t["V"] = np.array([15.2, 16.0, np.nan, 17.25])
    t["V_err"] = np.array([0.01, 0.02, 0.5, 0.03])
    t["n"] = np.array([1, 2, 3, 4])
    t["name"] = np.array(["s1", "s2", "s3", "s4"])
    t["V"].unit = "mag"
    return t


# --------------------------------------------------------------------------- #
# round trips
# --------------------------------------------------------------------------- #
@pytest.mark.parametrize("ext", TABLE_EXTS)
def test_round_trip_every_format(tmp_path, ext):
    t = _sample_table()
    p = hio.write_table(t, tmp_path / f"cat.{ext}", meta={"origin": "unit test"})
    r = hio.read_catalog(p, columns={"vmag": "V", "vmag_err": "V_err"}, required=["vmag", "vmag_err"])
    assert r.colnames == ["vmag", "vmag_err", "n", "name"]
    assert len(r) == 4  # no row dropped, not even the NaN one
    np.testing.assert_array_equal(np.asarray(r["vmag"]), np.asarray(t["V"]))  # NaN == NaN here
    np.testing.assert_array_equal(np.asarray(r["n"]), [1, 2, 3, 4])
    assert [str(s) for s in r["name"]] == ["s1", "s2", "s3", "s4"]
    assert isinstance(r["name"][0], str)  # FITS bytes are decoded
    if ext in ("ecsv", "parquet"):
        assert r.meta["origin"] == "unit test"
        assert str(r["vmag"].unit) == "mag"


def test_write_does_not_alter_callers_table(tmp_path):
    t = _sample_table()
    hio.write_table(t, tmp_path / "a.ecsv", meta={"k": 1})
    assert "k" not in t.meta


def test_write_dict_of_columns(tmp_path):
    p = hio.write_table({"a": [1.0, 2.0], "b": [3, 4]}, tmp_path / "d.csv")
    assert p.read_text() == "a,b\n1.0,3\n2.0,4\n"


# --------------------------------------------------------------------------- #
# determinism (common practice: reproducible builds require byte-identical outputs)
# --------------------------------------------------------------------------- #
def test_byte_identical_output_every_format(tmp_path):
    t = _sample_table()
    first = {ext: hio.write_table(t, tmp_path / f"a.{ext}", meta={"run": 1}) for ext in TABLE_EXTS}
    time.sleep(1.1)  # an embedded timestamp (1 s resolution) would now differ
    second = {ext: hio.write_table(t, tmp_path / f"b.{ext}", meta={"run": 1}) for ext in TABLE_EXTS}
    today = datetime.date.today().isoformat().encode()
    for ext in TABLE_EXTS:
        a, b = first[ext].read_bytes(), second[ext].read_bytes()
        assert a == b, f"{ext} output is not reproducible"
        raw = gzip.decompress(a) if ext.endswith(".gz") else a
        assert today not in raw, f"{ext} output embeds today's date"
    for ext in ("fits.gz", "csv.gz"):
        # RFC 1952: bytes 4-7 of a gzip member are MTIME; 0 means "no time stamp"
        assert struct.unpack("<I", first[ext].read_bytes()[4:8])[0] == 0


def test_file_mode_follows_umask(tmp_path):
    p = hio.write_table(_sample_table(), tmp_path / "m.csv")
    assert (p.stat().st_mode & 0o777) == (0o666 & ~umask())


# --------------------------------------------------------------------------- #
# overwrite protection and atomicity
# --------------------------------------------------------------------------- #
def test_refuses_to_overwrite_without_force(tmp_path):
    p = tmp_path / "keep.csv"
    p.write_text("precious\n")
    with pytest.raises(ValueError, match="exists; use --force to overwrite"):
        hio.write_table(_sample_table(), p)
    assert p.read_text() == "precious\n"
    hio.write_table(_sample_table(), p, force=True)
    assert p.read_text().startswith("V,V_err,n,name")
    assert sorted(os.listdir(tmp_path)) == ["keep.csv"]


@pytest.mark.parametrize("ext", ["csv", "fits", "fits.gz", "parquet", "vot"])
def test_failure_mid_write_leaves_nothing_behind(tmp_path, monkeypatch, ext):
    p = tmp_path / f"keep.{ext}"
    p.write_bytes(b"original")

    def broken_write(self, target, *args, **kwargs):
        with open(target, "wb") as fh:
            fh.write(b"half a fi")
        raise RuntimeError("disk on fire")

    monkeypatch.setattr(Table, "write", broken_write)
    # Parquet tables of plain columns are written with pyarrow directly
    monkeypatch.setattr(hio, "_write_parquet_arrow", lambda pat, target: broken_write(None, target))
    with pytest.raises(ValueError, match="disk on fire"):
        hio.write_table(_sample_table(), p, force=True)
    assert p.read_bytes() == b"original"
    assert sorted(os.listdir(tmp_path)) == [f"keep.{ext}"]


def test_failure_of_new_file_leaves_no_file(tmp_path):
    t = Table({"a": np.zeros((3, 2))})  # 2-D column: plain CSV cannot hold it
    with pytest.raises(ValueError):
        hio.write_table(t, tmp_path / "new.csv")
    assert os.listdir(tmp_path) == []


def test_unwritable_targets(tmp_path):
    with pytest.raises(ValueError, match="does not exist"):
        hio.write_table(_sample_table(), tmp_path / "nodir" / "x.csv")
    f = tmp_path / "afile"
    f.write_text("x")
    with pytest.raises(ValueError, match="not a directory"):
        hio.atomic_write_text(f / "x.txt", "hi")
    with pytest.raises(ValueError, match="existing directory"):
        hio.atomic_write_text(tmp_path, "hi", force=True)
    with pytest.raises(ValueError, match="unknown file extension"):
        hio.write_table(_sample_table(), tmp_path / "x.xlsx")


def test_unwritable_directory_simulated(tmp_path, monkeypatch):
    # (root ignores permission bits, so simulate the OS refusing the temporary file)
    def refuse(*args, **kwargs):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(hio.tempfile, "mkstemp", refuse)
    with pytest.raises(ValueError, match="cannot write .*Permission denied"):
        hio.write_table(_sample_table(), tmp_path / "x.fits")
    assert os.listdir(tmp_path) == []


@pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0, reason="root ignores permissions")
def test_read_only_directory(tmp_path):
    d = tmp_path / "ro"
    d.mkdir()
    d.chmod(0o500)
    try:
        with pytest.raises(ValueError, match="not writable"):
            hio.write_table(_sample_table(), d / "x.csv")
    finally:
        d.chmod(0o700)


def test_atomic_write_text_and_json(tmp_path):
    p = hio.atomic_write_text(tmp_path / "a.txt", "héllo\n")
    assert p.read_bytes() == "héllo\n".encode("utf-8")
    with pytest.raises(ValueError, match="exists; use --force"):
        hio.atomic_write_text(p, "other")
    assert p.read_text() == "héllo\n"

    obj = {"b": np.float64(np.nan), "a": [1, np.int64(2), np.inf], "c": {"z": np.array([0.5, -np.inf])},
           "d": np.bool_(True)}
    j = hio.atomic_write_json(tmp_path / "a.json", obj)
    text = j.read_text()
    # RFC 8259 JSON has no NaN/Infinity literals: they must be null
    assert "NaN" not in text and "Infinity" not in text
    assert json.loads(text) == {"a": [1, 2, None], "b": None, "c": {"z": [0.5, None]}, "d": True}
    assert text.index('"a"') < text.index('"b"') < text.index('"c"')  # sorted keys
    with pytest.raises(ValueError, match="cannot write an object"):
        hio.atomic_write_json(tmp_path / "b.json", {"x": object()})
    assert not (tmp_path / "b.json").exists()


# --------------------------------------------------------------------------- #
# figures
# --------------------------------------------------------------------------- #
def _png_chunks(data: bytes):
    # PNG spec (W3C/ISO 15948): 8-byte signature, then length/type/data/CRC chunks
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    pos, chunks = 8, []
    while pos < len(data):
        (length,) = struct.unpack(">I", data[pos:pos + 4])
        ctype = data[pos + 4:pos + 8].decode("ascii")
        chunks.append((ctype, data[pos + 8:pos + 8 + length]))
        pos += 12 + length
    return chunks


def test_savefig_reproducible(tmp_path):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(2, 2))
    ax.plot([0, 1], [1, 0])
    try:
        first = {e: hio.atomic_savefig(fig, tmp_path / f"a.{e}", dpi=50) for e in ("png", "pdf", "svg")}
        time.sleep(1.1)
        second = {e: hio.atomic_savefig(fig, tmp_path / f"b.{e}", dpi=50) for e in ("png", "pdf", "svg")}
        with pytest.raises(ValueError, match="exists; use --force"):
            hio.atomic_savefig(fig, first["png"])
        with pytest.raises(ValueError, match="unknown extension"):
            hio.atomic_savefig(fig, tmp_path / "a.bmpx")
    finally:
        plt.close(fig)
    for e in first:
        assert first[e].read_bytes() == second[e].read_bytes(), f"{e} figure not reproducible"
    chunks = _png_chunks(first["png"].read_bytes())
    kinds = [c for c, _ in chunks]
    assert "tIME" not in kinds
    assert not any(b"Creation Time" in d for c, d in chunks if c in ("tEXt", "iTXt", "zTXt"))
    assert b"CreationDate" not in first["pdf"].read_bytes()


# --------------------------------------------------------------------------- #
# output directory
# --------------------------------------------------------------------------- #
def test_prepare_out_dir(tmp_path):
    d = hio.prepare_out_dir(tmp_path / "a" / "b")
    assert d.is_dir()
    assert hio.prepare_out_dir(d) == d  # empty: fine
    (d / "result.json").write_text("{}")
    with pytest.raises(ValueError, match="not empty; use --force"):
        hio.prepare_out_dir(d)
    hio.prepare_out_dir(d, force=True)
    assert (d / "result.json").read_text() == "{}"  # force never deletes
    with pytest.raises(ValueError, match="not a directory"):
        hio.prepare_out_dir(d / "result.json")


def test_staged_out_dir_is_all_or_nothing(tmp_path):
    # a multi-file result appears whole or not at all; an existing user's file is never lost
    d = tmp_path / "a" / "res"
    with hio.staged_out_dir(d) as stage:
        hio.atomic_write_json(stage / "result.json", {"x": 1})
        hio.atomic_write_text(stage / "report.md", "# r\n")
        assert not d.exists()  # nothing at the target before the block ends
    assert sorted(p.name for p in d.iterdir()) == ["report.md", "result.json"]
    assert oct(d.stat().st_mode & 0o777) == oct(0o777 & ~umask())
    with pytest.raises(ValueError, match="not empty; use --force"):
        with hio.staged_out_dir(d):
            pass
    (d / "mine.txt").write_text("keep")
    with pytest.raises(RuntimeError):
        with hio.staged_out_dir(d, force=True) as stage:
            hio.atomic_write_json(stage / "result.json", {"x": 2})
            raise RuntimeError("plot failed")
    assert json.loads((d / "result.json").read_text()) == {"x": 1}       # untouched by the failed run
    with hio.staged_out_dir(d, force=True) as stage:
        hio.atomic_write_json(stage / "result.json", {"x": 3})
    assert json.loads((d / "result.json").read_text()) == {"x": 3} and (d / "mine.txt").read_text() == "keep"
    new = tmp_path / "new"
    with pytest.raises(RuntimeError):
        with hio.staged_out_dir(new) as stage:
            hio.atomic_write_text(stage / "half.md", "x")
            raise RuntimeError("boom")
    assert not new.exists() and not any(".partial" in p.name for p in tmp_path.iterdir())


# --------------------------------------------------------------------------- #
# reading errors
# --------------------------------------------------------------------------- #
def test_read_errors(tmp_path):
    with pytest.raises(FileNotFoundError, match="not found"):
        hio.read_catalog(tmp_path / "nope.csv")
    (tmp_path / "x.xlsx").write_text("a")
    with pytest.raises(ValueError, match="unknown file extension"):
        hio.read_catalog(tmp_path / "x.xlsx")
    (tmp_path / "empty.csv").write_text("")
    with pytest.raises(ValueError, match="is empty"):
        hio.read_catalog(tmp_path / "empty.csv")
    (tmp_path / "hdr.csv").write_text("V,I\n")
    with pytest.raises(ValueError, match="no rows"):
        hio.read_catalog(tmp_path / "hdr.csv")
    (tmp_path / "bad.fits").write_bytes(b"SIMPLE  = garbage" + bytes(range(256)) * 3)
    with pytest.raises(ValueError, match="could not read .* as FITS"):
        hio.read_catalog(tmp_path / "bad.fits")
    (tmp_path / "bad.parquet").write_bytes(b"PAR1 not really")
    with pytest.raises(ValueError, match="as Parquet"):
        hio.read_catalog(tmp_path / "bad.parquet")
    (tmp_path / "ragged.csv").write_text("V,I\n1,2\n3,4,5\n")
    with pytest.raises(ValueError, match="could not read"):
        hio.read_catalog(tmp_path / "ragged.csv")
    (tmp_path / "short.csv").write_text("V,I\n1,2\n3\n")  # short row: trailing value missing
    np.testing.assert_array_equal(hio.read_catalog(tmp_path / "short.csv")["I"], [2.0, np.nan])
    d = tmp_path / "dir.csv"
    d.mkdir()
    with pytest.raises(ValueError, match="is a directory"):
        hio.read_catalog(d)


def test_required_and_mapping_errors(tmp_path):
    p = tmp_path / "c.csv"
    p.write_text("# field stars, invented demo data\nvmag,imag,id\n15.0,14.1,a\n16.0,15.2,b\n")
    t = hio.read_catalog(p, columns={"V": "vmag"}, required=["V"])
    assert t.colnames == ["V", "imag", "id"]
    with pytest.raises(ValueError, match="lacks required column.*B, R") as exc:
        hio.read_catalog(p, required=["B", "vmag", "R"])
    assert "\n" not in str(exc.value)
    with pytest.raises(ValueError, match="not numeric: id"):
        hio.read_catalog(p, required=["vmag", "id"])
    with pytest.raises(ValueError, match="no column 'gmag'"):
        hio.read_catalog(p, columns={"G": "gmag"})
    with pytest.raises(ValueError, match="clash"):
        hio.read_catalog(p, columns={"imag": "vmag"})
    swapped = hio.read_catalog(p, columns={"imag": "vmag", "vmag": "imag"})
    np.testing.assert_array_equal(swapped["imag"], [15.0, 16.0])


def test_missing_values_become_nan_not_dropped(tmp_path):
    p = tmp_path / "gaps.csv"
    p.write_text("V,V_err,n\n15.0,0.01,1\n,0.02,\n17.0,,3\n")
    t = hio.read_catalog(p, required=["V", "V_err", "n"])
    assert len(t) == 3
    np.testing.assert_array_equal(t["V"], [15.0, np.nan, 17.0])
    np.testing.assert_array_equal(t["n"], [1.0, np.nan, 3.0])
    np.testing.assert_array_equal(hio.finite_rows(t, ["V", "V_err"]), [True, False, False])
    np.testing.assert_array_equal(hio.finite_rows(t, "V"), [True, False, True])
    with pytest.raises(ValueError, match="V_err.*1 NaN"):
        hio.check_errors(t, ["V"])


def test_check_errors():
    good = Table({"V": [1.0, 2.0], "V_err": [0.01, 0.2], "I": [1.0, 2.0], "I_err": [0.0, -1.0]})
    hio.check_errors(good, ["V"])
    with pytest.raises(ValueError, match="2 non-positive"):
        hio.check_errors(good, ["V", "I"])
    with pytest.raises(ValueError, match="no uncertainty column 'B_err'"):
        hio.check_errors(good, "B")
    with pytest.raises(ValueError, match="no column"):
        hio.finite_rows(good, ["B"])


# --------------------------------------------------------------------------- #
# fuzzing: read_catalog returns a Table or raises ValueError/FileNotFoundError, nothing else
# --------------------------------------------------------------------------- #
_EXTS = [".csv", ".ecsv", ".fits", ".fit", ".fits.gz", ".vot", ".xml", ".parquet", ".csv.gz", ".txt", ""]
_PREFIXES = [b"", b"SIMPLE  =                    T", b"PAR1", b"<?xml version=\"1.0\"?><VOTABLE>",
             b"# %ECSV 1.0\n# ---\n", b"\x1f\x8b\x08\x00", b"V,I\n"]


def _check_read(path, **kwargs):
    try:
        out = hio.read_catalog(path, **kwargs)
    except (ValueError, FileNotFoundError) as exc:
        msg = str(exc)
        assert msg and "\n" not in msg.strip(), f"multi-line message: {msg!r}"
        return None
    assert isinstance(out, Table) and len(out) > 0
    return out


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(prefix=st.sampled_from(_PREFIXES), body=st.binary(max_size=3000), ext=st.sampled_from(_EXTS))
def test_fuzz_random_bytes(prefix, body, ext):
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / f"f{ext}"
        p.write_bytes(prefix + body)
        _check_read(p, required=["V"])


_cell = st.one_of(st.floats(allow_nan=True, allow_infinity=True).map(repr), st.integers().map(str),
                  st.text(alphabet="abcV,\"' \t#;.-+eE0123456789", max_size=6), st.just(""))


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(rows=st.lists(st.lists(_cell, min_size=0, max_size=5), min_size=0, max_size=8),
       junk=st.text(max_size=40), required=st.lists(st.sampled_from(["V", "I", "a", "b"]), max_size=2))
def test_fuzz_random_csv_text(rows, junk, required):
    text = "\n".join(",".join(r) for r in rows) + "\n" + junk
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "f.csv"
        p.write_text(text, encoding="utf-8")
        out = _check_read(p, required=required)
        if out is not None:
            assert all(r in out.colnames for r in required)


_names = st.text(alphabet="abcdefgVIJK_", min_size=1, max_size=6)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(cols=st.dictionaries(_names, st.sampled_from(["float", "int", "str"]), min_size=1, max_size=4),
       nrow=st.integers(0, 5), ext=st.sampled_from(["csv", "ecsv", "fits", "vot", "parquet"]),
       required=st.lists(_names, max_size=3), seed=st.integers(0, 2**32 - 1))
def test_fuzz_random_column_sets(cols, nrow, ext, required, seed):
    rng = np.random.default_rng(seed)
    data = {}
    for name, kind in cols.items():
        if kind == "float":
            v = rng.normal(size=nrow)
            v[rng.random(nrow) < 0.3] = np.nan
        elif kind == "int":
            v = rng.integers(-5, 5, nrow)
        else:
            v = np.array([f"s{i}" for i in range(nrow)], dtype="U4")
        data[name] = v
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / f"t.{ext}"
        try:
            hio.write_table(Table(data), p)
        except ValueError:
            assert not p.exists()
            return
        out = _check_read(p, required=required)
        if out is not None:
            assert len(out) == nrow
            assert all(out[r].dtype.kind in "iuf" for r in required)
        elif nrow > 0 and all(r in cols and cols[r] != "str" for r in required):
            pytest.fail(f"valid {ext} table with columns {cols} was rejected")


def test_declared_flux_over_error_becomes_a_magnitude_error(tmp_path):
    # sigma_mag = 2.5 / ln 10 * sigma_F / F (first-order error propagation, common practice): a Gaia-style
    # signal-to-noise of 100 is a 0.010857 mag error; a non-positive or missing ratio is a missing error.
    snr = np.array([100.0, 1085.7, 0.0, np.nan, 20.0])
    t = Table({"phot_g_mean_mag": [15.0, 12.0, 18.0, 17.0, 19.0], "phot_g_mean_flux_over_error": snr})
    p = tmp_path / "gaia.ecsv"
    t.write(p)
    cols = {"G": "phot_g_mean_mag", "G_flux_over_error": "phot_g_mean_flux_over_error"}
    out = hio.read_catalog(p, columns=cols, required=["G", "G_err"])
    err = np.asarray(out["G_err"])
    assert err[0] == pytest.approx(0.0108574, rel=1e-5) and err[1] == pytest.approx(0.001, rel=1e-4)
    assert np.isnan(err[2]) and np.isnan(err[3]) and err[4] == pytest.approx(0.0542868, rel=1e-5)
    # undeclared, the ratio is not an error column (the fit's unit check refuses it if mapped as one)
    with pytest.raises(ValueError, match="G_err"):
        hio.read_catalog(p, columns={"G": "phot_g_mean_mag"}, required=["G", "G_err"])
    # declared next to a real error column: ambiguous, refused in one line
    t["G_err"] = 0.01
    t.write(p, overwrite=True)
    with pytest.raises(ValueError, match="given twice"):
        hio.read_catalog(p, columns=cols, required=["G", "G_err"])
