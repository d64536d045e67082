"""Populations, morphology and mock catalogues (issue "Populations")."""
import subprocess
import sys

import numpy as np
import pytest
from scipy import stats

from hbmodel.observation.mock import ObservationSpec, make_mock
from hbmodel.populations.population import MassLoss, Population


def pop(feh=-1.5, age=12.5, eta=0.45, sd=0.05, **kw):
    return Population(feh, age, alpha_fe=0.3, mass_loss=MassLoss.from_eta(eta, sd), **kw)


def test_counts_follow_lifetimes():
    # common practice (fuel-consumption theorem, Renzini & Buzzoni 1986): star counts in each phase are
    # proportional to the time spent in it, so N_RGB/N_HB from random draws equals t_RGB/t_HB.
    p = pop()
    t = p.phase_times()
    s = p.sample(4000, np.random.default_rng(11))
    n_rgb, n_hb = np.sum(s.phase == "rgb"), np.sum(s.phase == "hb")
    expect = t["rgb"].sum() / t["hb"].sum()
    assert n_hb == pytest.approx(4000, abs=2)
    assert n_rgb / n_hb == pytest.approx(expect, rel=4 * np.sqrt(1 / n_rgb + 1 / n_hb))


def test_hb_type_first_and_second_parameter():
    # Lee, Demarque & Zinn 1994, ApJ 423, 248: HB type falls with [Fe/H] (first parameter) and younger
    # clusters have redder HBs at fixed [Fe/H] (age as a second parameter).
    ht = [pop(feh, sd=0.03).predict(bands=("V",))["hb_type"] for feh in (-2.2, -1.8, -1.4, -1.0, -0.6)]
    assert all(a >= b - 1e-9 for a, b in zip(ht, ht[1:])) and ht[0] > 0.5 and ht[-1] < -0.9
    assert pop(age=10.5).predict(bands=("V",))["hb_type"] < pop(age=13.0).predict(bands=("V",))["hb_type"]


def test_helium_enriched_fraction_makes_bluer_brighter_hb():
    # D'Antona et al. 2002, A&A 395, 69 (from memory): He-enriched second generations populate the blue HB
    a = pop(feh=-1.3).predict(bands=("V",))
    b = pop(feh=-1.3, helium_enriched_fraction=0.4, helium_delta_y=0.08).predict(bands=("V",))
    assert b["fraction_blue"] > a["fraction_blue"] + 0.1
    assert b["r_parameter"] > a["r_parameter"]


def test_bimodal_mass_loss_gives_bimodal_hb():
    ml = MassLoss("eta", ((0.5, 0.30, 0.02), (0.5, 0.60, 0.02)))
    d = Population(-1.5, 12.5, alpha_fe=0.3, mass_loss=ml).predict(bands=("V",))
    assert d["fraction_blue"] > 0.2 and d["fraction_red"] > 0.2  # both ends of the HB populated


def test_envelope_loss_counted_not_dropped():
    d = pop(feh=-2.0, eta=1.2, sd=0.2).predict(bands=("V",))
    assert 0.0 < d["fraction_envelope_lost"] < 1.0


def test_predict_is_deterministic():
    assert pop().predict() == pop().predict()


def test_mock_reproducible_and_error_statistics():
    p = pop(sd=0.05)
    obs = ObservationSpec(distance_modulus=15.0, ebv=0.1, depth={"V": 21.0, "I": 20.5})
    a = make_mock(p, bands=("V", "I"), rng=np.random.default_rng(5), n_hb=800, obs=obs)
    b = make_mock(p, bands=("V", "I"), rng=np.random.default_rng(5), n_hb=800, obs=obs)
    assert np.array_equal(np.asarray(a["V"]), np.asarray(b["V"]))
    for col in ("phase", "mass_msun", "teff_k", "logg", "logl", "is_rr", "period_days", "V", "V_err", "V_true"):
        assert col in a.colnames
    # errors drawn into the magnitudes are Gaussian with the stated sigma (KS test, common practice)
    z = (np.asarray(a["V"]) - np.asarray(a["V_true"])) / np.asarray(a["V_err"])
    assert stats.kstest(z, "norm").pvalue > 0.01
    # RR Lyrae flagged with periods in the RRab/RRc range (~0.2-1.2 d; common practice)
    per = np.asarray(a["period_days"])[np.asarray(a["is_rr"], bool)]
    assert per.size > 0 and np.all((per > 0.2) & (per < 1.2))


def test_mock_reddening_shift_matches_extinction_library():
    # reference library: dust_extinction F99 at the bands' effective wavelengths (hot-star limit ~ A0)
    from hbmodel.photometry.extinction import extinction_ratio
    p = pop(sd=0.05)
    kw = dict(bands=("V", "I"), n_hb=400)
    a = make_mock(p, rng=np.random.default_rng(9), obs=ObservationSpec(distance_modulus=15.0), **kw)
    b = make_mock(p, rng=np.random.default_rng(9), obs=ObservationSpec(distance_modulus=15.0, ebv=0.3), **kw)
    dc = (np.asarray(b["V_true"]) - np.asarray(b["I_true"])) - (np.asarray(a["V_true"]) - np.asarray(a["I_true"]))
    t = np.asarray(a["teff_k"])
    expect = 0.3 * (extinction_ratio("V", t) - extinction_ratio("I", t))
    # four float32 magnitudes (stored to half an ulp: 1e-6 mag near 16 mag) make up each difference
    np.testing.assert_allclose(dc, expect, rtol=0, atol=4 * 0.5 * float(np.spacing(np.float32(16.0))))
    assert 0.3 * 1.1 < np.median(dc) < 0.3 * 1.5  # E(V-I)/E(B-V) ~ 1.2-1.4 (Cardelli et al. 1989; common practice)


def test_completeness_fraction():
    p = pop(sd=0.05)
    obs = ObservationSpec(distance_modulus=15.0, completeness_m50=16.0, completeness_width=0.1)
    t = make_mock(p, bands=("V", "I"), rng=np.random.default_rng(2), n_hb=600, obs=obs)
    v = np.asarray(t["V_true"])
    assert np.mean(v > 16.4) < 0.05  # almost nothing kept 4 widths fainter than m50


def test_window_sampling_keeps_only_window():
    p = Population(0.0, 4.0, mass_loss=MassLoss.from_eta(0.3, 0.03))
    obs = ObservationSpec(distance_modulus=10.0, window=("I", 9.0, 10.5))
    t = make_mock(p, bands=("I", "Ks"), rng=np.random.default_rng(4), n_hb=500, obs=obs)
    i = np.asarray(t["I"])
    assert np.all((i >= 9.0) & (i <= 10.5)) and np.sum(t["phase"] == "hb") > 400


@pytest.mark.parametrize("extra,msg", [
    (["--bands", "V,Q"], "band"),
    (["--bands", "V,I", "--n-hb", "0"], "positive"),
    (["--bands", "V,I", "--n-hb", "10", "--mass-loss", "0.2"], "not allowed with"),
])
def test_mock_bad_input(tmp_path, extra, msg):
    out = tmp_path / "m.ecsv"
    args = ["mock", "--feh", "-1.5", "--age", "12", "--eta", "0.4", "--out", str(out)] + extra
    if "--n-hb" not in extra:
        args += ["--n-hb", "10"]
    proc = subprocess.run([sys.executable, "-m", "hbmodel", *args], capture_output=True, text=True)
    assert proc.returncode == 2 and msg in proc.stderr and "Traceback" not in proc.stderr
    assert not out.exists()


def test_mock_never_overwrites(tmp_path):
    out = tmp_path / "m.ecsv"
    out.write_text("precious")
    args = ["mock", "--feh", "-1.5", "--age", "12", "--eta", "0.4", "--n-hb", "10", "--bands", "V,I",
            "--out", str(out)]
    proc = subprocess.run([sys.executable, "-m", "hbmodel", *args], capture_output=True, text=True)
    assert proc.returncode == 2 and out.read_text() == "precious"
    bad = tmp_path / "nodir" / "m.ecsv"
    proc = subprocess.run([sys.executable, "-m", "hbmodel", *args[:-1], str(bad)], capture_output=True, text=True)
    assert proc.returncode == 2 and len(proc.stderr.strip().splitlines()) == 1


def test_helium_rich_old_metal_poor_population_is_supported():
    # multiple populations of old metal-poor globular clusters reach dY ~ +0.15 (e.g. Piotto et al. 2007,
    # ApJ 661, L53; from memory): the surrogate must cover their low turn-off masses (~0.1-0.15 Msun lower)
    p = pop(feh=-2.2, helium_enriched_fraction=0.3, helium_delta_y=0.15)
    m_std, m_he = (s.tip_mass_msun for s in p.subpopulations)
    assert 0.08 < m_std - m_he < 0.2
    assert p.predict(bands=("V",))["fraction_blue"] > 0.5


@pytest.mark.parametrize("ext", ["csv", "ecsv", "fits", "vot", "xml", "parquet"])
def test_mock_writes_every_format_reproducibly(tmp_path, ext):
    # open standards the issue names (CSV, ECSV, FITS, VOTable, Parquet): same seed -> identical bytes
    args = ["mock", "--feh", "-1.5", "--age", "12", "--eta", "0.45", "--eta-sd", "0.05", "--n-hb", "40",
            "--bands", "V,I", "--field-n", "5", "--field-box", "0,2,14,20", "--seed", "2"]
    a, b = tmp_path / f"a.{ext}", tmp_path / f"b.{ext}"
    for out in (a, b):
        proc = subprocess.run([sys.executable, "-m", "hbmodel", *args, "--out", str(out)], capture_output=True,
                              text=True)
        assert proc.returncode == 0, proc.stderr
    assert a.read_bytes() == b.read_bytes()
    from hbmodel.io.catalogues import read_catalog
    t = read_catalog(a, required=("V", "V_err", "I", "rr_mode"))
    assert np.sum(np.asarray(t["phase"]).astype(str) == "field") == 5


def test_constant_star_formation_population():
    # case: one constructor for "constant star formation A1-A2 Gyr" (issue 14: it was built in four places);
    # its 8 log-spaced ages are converged: the local clump's M_Ks moves < 0.01 mag with 16 (numerical check)
    import numpy as np
    import pytest

    from hbmodel.populations.population import MassLoss, Population

    ml = MassLoss.from_eta(0.3, 0.03)
    pop = Population.constant_star_formation(1.0, 10.0, 0.0, mass_loss=ml)
    ages = np.geomspace(1.0, 10.0, 8)
    assert pop.components == Population.from_history(ages, np.gradient(ages), 0.0, mass_loss=ml).components
    fine = Population.constant_star_formation(1.0, 10.0, 0.0, n_ages=16, mass_loss=ml)
    ks8, ks16 = (p.predict(bands=("Ks",))["clump_absmag"]["Ks"] for p in (pop, fine))
    assert abs(ks8 - ks16) < 0.01
    with pytest.raises(ValueError, match="age_min < age_max"):
        Population.constant_star_formation(10.0, 1.0, 0.0)
