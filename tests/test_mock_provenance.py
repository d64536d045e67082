"""A mock file says what it is: unit-suffixed column names, units and descriptions on every column, and
the population, seed and version that made it in its metadata (ECSV, FITS, Parquet; VOTable as written by
astropy keeps the units and descriptions only).

Units are the FITS standard's / astropy's names (Pence et al. 2010, A&A 524, A42, Table 3-4: ``K``,
``d``, ``mag``, ``solMass``); the rest is the project's own naming rule (quantities carry their unit in
their name: ``teff_k``, ``mass_msun``).
"""
import json
import subprocess
import sys

import numpy as np
import pytest
from astropy.table import Table

from hbmodel.io.catalogues import read_catalog

ARGS = ["mock", "--feh", "-1.2", "--age", "11", "--eta", "0.4", "--eta-sd", "0.02", "--n-hb", "60",
        "--bands", "V,I", "--seed", "17"]


def _run(args, cwd):
    r = subprocess.run([sys.executable, "-m", "hbmodel", *args], cwd=cwd, capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    return r


def _meta(t):
    m = t.meta["hbmodel_mock"]
    return json.loads(m) if isinstance(m, str) else m  # FITS: one JSON text card


@pytest.mark.parametrize("out, extra", [
    ("m.ecsv", []), ("m.fits", []), ("m.vot", []),
    ("m.parquet", []),                                  # written from the arrays
    ("s.parquet", ["--depth", "V=22,I=21"]),            # streamed row group by row group
], ids=["ecsv", "fits", "votable", "parquet", "parquet-streamed"])
def test_mock_columns_carry_units_descriptions_and_provenance(tmp_path, out, extra):
    _run(ARGS + extra + ["--out", out], tmp_path)
    reader = (lambda p: Table.read(p)) if not out.endswith(".parquet") else read_catalog
    t = reader(tmp_path / out)
    assert {"mass_msun", "teff_k"} <= set(t.colnames) and not {"mass", "teff"} & set(t.colnames)
    assert str(t["mass_msun"].unit) == "solMass" and str(t["teff_k"].unit) == "K"
    assert str(t["period_days"].unit) == "d" and str(t["V"].unit) == "mag" and str(t["I_err"].unit) == "mag"
    if not out.endswith(".fits"):  # FITS keeps units (TUNITn) but no column descriptions
        assert "effective temperature" in t["teff_k"].description
        assert "error" in t["V_err"].description
    if out.endswith(".vot"):  # astropy's VOTable writer keeps no table metadata (units and descriptions only)
        return
    meta = _meta(t)
    assert meta["seed"] == 17 and meta["hbmodel_version"]
    comp = meta["population"]["components"][0]
    assert comp["feh"] == -1.2 and comp["age_gyr"] == 11.0
    assert meta["population"]["mass_loss"]["components"][0][1] == pytest.approx(0.4)
    # the values are physical: HB stars lighter than the RGB stars that made them (mass loss)
    ph = np.asarray(t["phase"]).astype(str)
    assert np.median(np.asarray(t["mass_msun"])[ph == "hb"]) < np.median(np.asarray(t["mass_msun"])[ph == "rgb"])


def test_classify_reads_a_mock_with_unit_suffixed_columns(tmp_path):
    _run(ARGS[:-6] + ["--n-hb", "200", "--bands", "V,Ks", "--seed", "3", "--out", "g.ecsv"], tmp_path)
    _run(["classify", "g.ecsv", "--feh", "-1.2", "--age", "11", "--eta", "0.4", "--out", "p.ecsv"], tmp_path)
    t = Table.read(tmp_path / "p.ecsv")
    ph = np.asarray(t["phase"]).astype(str)
    p = np.asarray(t["p_cheb"], float)
    # a noiseless mock: the core-helium-burning stars are far more probable CHeB than the RGB stars
    assert np.nanmean(p[ph == "hb"]) > 0.5 > np.nanmean(p[ph == "rgb"])


def test_input_columns_accept_the_unit_suffixed_names_and_name_both_when_missing():
    from hbmodel.io.catalogues import pick_column
    t = Table({"teff_k": [4800.0], "mass": [1.1], "mass_msun_err": [0.05], "label": ["x"]})
    assert pick_column(t, "teff", "cat") == "teff_k"
    assert pick_column(t, "mass", "cat") == "mass"          # the plain name first
    assert pick_column(t, "mass_err", "cat") == "mass_msun_err"
    with pytest.raises(ValueError, match="'logg'"):
        pick_column(t, "logg", "cat")
    t2 = Table({"teff": ["hot"]})
    with pytest.raises(ValueError, match="not numeric"):
        pick_column(t2, "teff", "cat")
    with pytest.raises(ValueError, match="'mass' or 'mass_msun'"):
        pick_column(Table({"phase": ["rgb"]}), "mass", "masses table")
