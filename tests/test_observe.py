"""Tests for hbmodel.observation.effects: photometric errors, completeness, reddening, binaries, field stars.

The statistical checks are standard goodness-of-fit tests (common practice): Kolmogorov-Smirnov
(scipy.stats.kstest) for distribution shapes, chi-square with binomial variances for detection
fractions, and sample moments against scipy.stats reference distributions. Each positive check
is paired with a negative control showing the same test rejects a wrong model.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from astropy.table import Table
from scipy import stats

from hbmodel.observation import effects as ob
from hbmodel.io.catalogues import write_table

# 2.5 log10(2) = 0.7526 mag: two equal stars are twice as bright (Pogson 1856, MNRAS 17, 12)
EQUAL_PAIR_BRIGHTENING_MAG = 2.5 * math.log10(2.0)


# --------------------------------------------------------------------------- #
# error law
# --------------------------------------------------------------------------- #
def test_default_law_background_limited_scaling():
    law = ob.default_error_law("V", depth_mag=24.0)
    # sigma_mag = 1.0857/SNR (derivative of Pogson's law; common practice): 5 sigma -> 0.2171 mag
    assert law(24.0) == pytest.approx(0.01 + 1.0857362 / 5.0, rel=1e-6)
    # SNR proportional to flux (background-limited CCD regime, common practice): a star twice as
    # bright (0.7526 mag) has half the noise term
    noise = lambda m: law(m) - law.floor_mag  # noqa: E731
    assert noise(24.0 - EQUAL_PAIR_BRIGHTENING_MAG) == pytest.approx(noise(24.0) / 2, rel=1e-9)
    # brief's sanity figure: ~0.1 mag roughly one magnitude above the 5-sigma limit
    assert 0.09 < law(23.0) < 0.12
    assert law(15.0) == pytest.approx(0.01, abs=2e-4)  # floor at the bright end
    assert np.all(np.diff(law(np.linspace(10, 30, 50))) > 0)


def test_default_law_tabulated_2mass():
    # 2MASS Ks 10-sigma limit 14.3 mag (Skrutskie et al. 2006, AJ 131, 1163; from memory)
    law = ob.default_error_law("Ks")
    assert law(14.3) == pytest.approx(0.01 + 1.0857362 / 10.0, rel=1e-6)
    with pytest.raises(ValueError, match="no default depth for band 'V'"):
        ob.default_error_law("V")


def test_error_law_from_table(tmp_path):
    mag = [14.0, 18.0, 20.0, 22.0, 24.0]
    sig = [0.005, 0.01, 0.03, 0.1, 0.4]
    p = write_table(Table({"mag": mag, "sigma": sig}), tmp_path / "err.csv")
    law = ob.ErrorLaw.from_table(p)
    np.testing.assert_allclose(law(np.array(mag)), sig, rtol=1e-12)  # passes through the nodes
    fine = np.linspace(13, 25, 2001)
    s = law(fine)
    assert np.all(np.diff(s) >= 0)  # PCHIP keeps monotone data monotone (Fritsch & Carlson 1980)
    assert s[0] == pytest.approx(0.005) and s[-1] == pytest.approx(0.4)  # clipped outside
    with pytest.raises(ValueError, match="> 0"):
        ob.ErrorLaw.from_arrays([1, 2, 3], [0.1, -0.1, 0.2])
    with pytest.raises(ValueError, match="distinct"):
        ob.ErrorLaw.from_arrays([1, 1, 3], [0.1, 0.1, 0.2])
    with pytest.raises(ValueError, match="lacks required"):
        ob.ErrorLaw.from_table(p, sigma_col="err")


def test_error_law_bad_parameters():
    with pytest.raises(ValueError, match="floor_mag"):
        ob.ErrorLaw(floor_mag=-0.01, m0_mag=25.0)
    with pytest.raises(ValueError, match="scale_mag"):
        ob.ErrorLaw(0.01, 25.0, scale_mag=0.0)
    with pytest.raises(ValueError, match="finite"):
        ob.ErrorLaw(0.01, 25.0)(np.array([1.0, np.nan]))


# --------------------------------------------------------------------------- #
# observed magnitudes
# --------------------------------------------------------------------------- #
def _population(n=20000, seed=1):
    rng = np.random.default_rng(seed)
    v = rng.uniform(16.0, 24.5, n)
    return {"V": v, "I": v - rng.uniform(0.5, 1.5, n)}


def test_normalised_residuals_are_standard_normal():
    true = _population()
    laws = {"V": ob.default_error_law("V", 24.0),
            "I": ob.ErrorLaw.from_arrays([14, 18, 22, 24], [0.01, 0.02, 0.08, 0.3])}
    obs, err, det = ob.observe_magnitudes(true, np.random.default_rng(2024), error_laws=laws)
    assert det.all()
    for band in ("V", "I"):
        np.testing.assert_array_equal(err[band], laws[band](true[band]))
        z = (obs[band] - true[band]) / err[band]
        # Kolmogorov-Smirnov vs N(0,1) (scipy.stats.kstest; common practice), n = 20000
        assert stats.kstest(z, "norm").pvalue > 0.01
        assert abs(z.mean()) < 4 / math.sqrt(z.size)
        # negative control: a 10 per cent error in sigma is rejected decisively
        assert stats.kstest(z / 1.1, "norm").pvalue < 1e-6


def test_detected_fraction_matches_completeness_law():
    n = 200000
    rng = np.random.default_rng(7)
    v = rng.uniform(20.0, 26.0, n)
    comp = ob.Completeness(m50_mag=23.0, width_mag=0.3)
    _, _, det = ob.observe_magnitudes({"V": v, "I": v - 1}, rng, error_laws={
        "V": ob.default_error_law("V", 25.0), "I": ob.default_error_law("I", 24.0)},
        completeness=comp, completeness_band="V")
    edges = np.arange(20.0, 26.01, 0.25)
    idx = np.digitize(v, edges) - 1

    def chi2_against(law):
        chi2, dof = 0.0, 0
        for k in range(len(edges) - 1):
            sel = idx == k
            p = law(v[sel])
            expect, var = p.sum(), (p * (1 - p)).sum()  # Poisson-binomial mean and variance
            if var > 1.0:
                chi2 += (det[sel].sum() - expect) ** 2 / var
                dof += 1
        return stats.chi2.sf(chi2, dof)

    # binomial errors (chi-square with binomial variances; common practice)
    assert chi2_against(comp) > 0.01
    # negative control: a 0.05 mag shift of m50 is detected
    assert chi2_against(ob.Completeness(m50_mag=23.05, width_mag=0.3)) < 1e-6


def test_logistic_completeness_values_and_table(tmp_path):
    c = ob.Completeness(m50_mag=22.0, width_mag=0.4)
    # logistic: p(m50) = 1/2; p(m50 + w ln 3) = 1/4; p(m50 - w ln 3) = 3/4 (analytic)
    np.testing.assert_allclose(c([22.0, 22.0 + 0.4 * math.log(3), 22.0 - 0.4 * math.log(3)]),
                               [0.5, 0.25, 0.75], rtol=1e-12)
    assert c(1e6) == 0.0 and c(-1e6) == 1.0  # no overflow warnings or NaN
    p = write_table(Table({"mag": [20.0, 21, 22, 23], "completeness": [1.0, 0.9, 0.5, 0.05]}),
                    tmp_path / "comp.ecsv")
    ct = ob.Completeness.from_table(p)
    np.testing.assert_allclose(ct([20.0, 21, 22, 23]), [1.0, 0.9, 0.5, 0.05])
    m = np.linspace(19, 24, 1001)
    assert np.all(np.diff(ct(m)) <= 0) and ct(19.0) == 1.0 and ct(24.0) == pytest.approx(0.05)
    with pytest.raises(ValueError, match="<= 1"):
        ob.Completeness.from_arrays([20, 21], [1.2, 0.5])
    with pytest.raises(ValueError, match="width_mag"):
        ob.Completeness(22.0, -0.1)


def test_observe_bad_input():
    true = {"V": np.array([20.0, 21.0])}
    law = {"V": ob.ErrorLaw(0.01, 25.0)}
    with pytest.raises(ValueError, match="not in true_mag: B"):
        ob.observe_magnitudes(true, 1, error_laws={"V": ob.ErrorLaw(0.01, 25.0), "B": ob.ErrorLaw(0.01, 25.0)})
    with pytest.raises(ValueError, match="no error law for band"):
        ob.observe_magnitudes({"V": true["V"], "I": true["V"]}, 1, error_laws=law)
    with pytest.raises(ValueError, match="completeness_band 'I'"):
        ob.observe_magnitudes(true, 1, error_laws=law, completeness=ob.Completeness(23.0, 0.3), completeness_band="I")
    with pytest.raises(ValueError, match="shape"):
        ob.observe_magnitudes({"V": np.ones(2), "I": np.ones(3)}, 1,
                              error_laws={"V": ob.ErrorLaw(0.01, 25.0), "I": ob.ErrorLaw(0.01, 25.0)})
    with pytest.raises(ValueError, match="non-finite"):
        ob.observe_magnitudes({"V": np.array([np.nan])}, 1, error_laws=law)
    with pytest.raises(ValueError, match="Generator or an integer seed"):
        ob.observe_magnitudes(true, None, error_laws=law)
    with pytest.raises(ValueError, match="non-positive or NaN sigma"):
        ob.observe_magnitudes(true, 1, error_laws={"V": lambda m: -0.1 * np.ones_like(m)})


def test_same_seed_same_output():
    true = _population(2000)
    laws = {b: ob.default_error_law(b, 24.0) for b in true}
    kw = dict(error_laws=laws, completeness=ob.Completeness(23.0, 0.3), completeness_band="V")
    a = ob.observe_magnitudes(true, np.random.default_rng(5), **kw)
    b = ob.observe_magnitudes(true, 5, **kw)
    c = ob.observe_magnitudes(true, 6, **kw)
    for band in true:
        np.testing.assert_array_equal(a[0][band], b[0][band])
    np.testing.assert_array_equal(a[2], b[2])
    assert not np.array_equal(a[0]["V"], c[0]["V"])
    box = ob.CMDBox("V", ("B", "V"), (18, 22), (0.2, 1.0), offsets={"I": -1.0})
    for f in (lambda s: ob.differential_reddening(500, 0.1, s, sd=0.03),
              lambda s: ob.add_unresolved_binaries(true, true, 0.3, s)["V"],
              lambda s: ob.uniform_contaminants(300, s, box)["B"],
              lambda s: ob.resample_field(Table(true), 300, s)["I"]):
        np.testing.assert_array_equal(f(11), f(np.random.default_rng(11)))
        assert not np.array_equal(f(11), f(12))


# --------------------------------------------------------------------------- #
# differential reddening
# --------------------------------------------------------------------------- #
def test_reddening_moments_untruncated():
    e = ob.differential_reddening(100000, 0.30, np.random.default_rng(3), sd=0.02)
    # 15 sigma from zero: truncation is negligible, so mean and sd are the inputs
    assert abs(e.mean() - 0.30) < 4 * 0.02 / math.sqrt(e.size)
    assert abs(e.std(ddof=1) - 0.02) < 4 * 0.02 / math.sqrt(2 * e.size)


def test_reddening_truncated_at_zero_matches_scipy_truncnorm():
    n, mu, sd = 100000, 0.05, 0.05
    e = ob.differential_reddening(n, mu, np.random.default_rng(4), sd=sd)
    assert e.min() >= 0.0
    ref = stats.truncnorm(-mu / sd, np.inf, loc=mu, scale=sd)  # reference library
    assert abs(e.mean() - ref.mean()) < 4 * ref.std() / math.sqrt(n)
    assert abs(e.std() - ref.std()) < 0.01 * ref.std()
    assert stats.kstest(e, ref.cdf).pvalue > 0.01
    # mean at zero: a half-normal, mean sd*sqrt(2/pi), sd sd*sqrt(1-2/pi) (standard result; common practice)
    h = ob.differential_reddening(n, 0.0, np.random.default_rng(5), sd=sd)
    assert abs(h.mean() - sd * math.sqrt(2 / math.pi)) < 4 * sd * math.sqrt(1 - 2 / math.pi) / math.sqrt(n)
    assert abs(h.std() - sd * math.sqrt(1 - 2 / math.pi)) < 0.01 * sd
    # far tail (truncation 8 sd above the mean, via a map offset): all >= 0 and scipy's tail mean
    deep = ob.differential_reddening(20000, 0.0, 6, sd=0.01, ebv_map=(np.full((1, 1), -0.08), (0, 1, 0, 1)),
                                     positions=np.full((20000, 2), 0.5))
    tail_ref = stats.truncnorm(8.0, np.inf, loc=-0.08, scale=0.01)
    assert deep.min() >= 0 and abs(deep.mean() - tail_ref.mean()) < 4 * tail_ref.std() / math.sqrt(20000)
    # negative control: clipping negatives to zero instead of truncating is rejected
    clipped = np.clip(np.random.default_rng(4).normal(mu, sd, n), 0, None)
    assert stats.kstest(clipped, ref.cdf).pvalue < 1e-6


def test_reddening_map_lookup():
    # a linear gradient dE = 0.01 * x sampled at pixel centres is reproduced exactly by bilinear lookup
    x_c = np.arange(10) + 0.5
    values = np.tile(0.01 * x_c, (5, 1))  # rows along y
    emap = ob.ReddeningMap(values, (0.0, 10.0, 0.0, 5.0))
    pos = np.array([[0.5, 2.5], [3.0, 1.0], [7.25, 4.0], [9.5, 0.5], [10.0, 5.0], [0.0, 0.0]])
    e = ob.differential_reddening(len(pos), 0.1, 0, ebv_map=emap, positions=pos)
    np.testing.assert_allclose(e, 0.1 + 0.01 * np.clip(pos[:, 0], 0.5, 9.5), rtol=1e-12)
    # tuple form and scatter: mean over a uniform map equals mean + offset
    flat = (np.full((4, 4), 0.05), (0, 1, 0, 1))
    pos = np.random.default_rng(0).uniform(0, 1, (50000, 2))
    e = ob.differential_reddening(50000, 0.2, 1, sd=0.01, ebv_map=flat, positions=pos)
    assert abs(e.mean() - 0.25) < 4 * 0.01 / math.sqrt(e.size)
    with pytest.raises(ValueError, match="outside the reddening map"):
        ob.differential_reddening(1, 0.1, 0, ebv_map=emap, positions=[[11.0, 1.0]])
    with pytest.raises(ValueError, match="needs positions"):
        ob.differential_reddening(1, 0.1, 0, ebv_map=emap)
    with pytest.raises(ValueError, match="negative"):
        ob.differential_reddening(1, 0.0, 0, ebv_map=(np.full((2, 2), -0.1), (0, 1, 0, 1)),
                                  positions=[[0.5, 0.5]])


def test_reddening_bad_input():
    with pytest.raises(ValueError, match="positive integer"):
        ob.differential_reddening(0, 0.1, 1)
    with pytest.raises(ValueError, match="ebv"):
        ob.differential_reddening(10, -0.1, 1)
    with pytest.raises(ValueError, match="sd"):
        ob.differential_reddening(10, 0.1, 1, sd=-0.01)
    np.testing.assert_array_equal(ob.differential_reddening(3, 0.1, 1), [0.1, 0.1, 0.1])


# --------------------------------------------------------------------------- #
# unresolved binaries
# --------------------------------------------------------------------------- #
def test_binary_flux_addition():
    n = 40000
    m1 = {"V": np.full(n, 18.0), "I": np.full(n, 17.0)}
    out, is_bin = ob.add_unresolved_binaries(m1, m1, 0.3, np.random.default_rng(9), return_mask=True)
    # equal companion: 2.5 log10 2 = 0.7526 mag brighter (Pogson 1856, MNRAS 17, 12)
    for b in m1:
        np.testing.assert_allclose(m1[b][is_bin] - out[b][is_bin], 0.752575, atol=1e-6)
        np.testing.assert_array_equal(out[b][~is_bin], m1[b][~is_bin])
    # binomial: fraction 0.3 within 4 sigma
    assert abs(is_bin.mean() - 0.3) < 4 * math.sqrt(0.3 * 0.7 / n)
    # companion 2.5 mag fainter has 1/10 the flux: 2.5 log10 1.1 = 0.1035 mag brighter
    faint = {b: v + 2.5 for b, v in m1.items()}
    out = ob.add_unresolved_binaries(m1, faint, 1.0, 0)
    np.testing.assert_allclose(m1["V"] - out["V"], 2.5 * math.log10(1.1), rtol=1e-12)
    dark = {b: np.full(n, np.inf) for b in m1}
    np.testing.assert_array_equal(ob.add_unresolved_binaries(m1, dark, 1.0, 0)["V"], m1["V"])
    np.testing.assert_array_equal(ob.add_unresolved_binaries(m1, m1, 0.0, 0)["V"], m1["V"])


def test_binary_bad_input():
    m = {"V": np.ones(3)}
    for bad in (-0.1, 1.5, float("nan")):
        with pytest.raises(ValueError, match="binary fraction"):
            ob.add_unresolved_binaries(m, m, bad, 0)
    with pytest.raises(ValueError, match="unknown band.*I"):
        ob.add_unresolved_binaries(m, {"V": np.ones(3), "I": np.ones(3)}, 0.5, 0)
    with pytest.raises(ValueError, match="lacks band"):
        ob.add_unresolved_binaries({"V": np.ones(3), "I": np.ones(3)}, m, 0.5, 0)


# --------------------------------------------------------------------------- #
# contaminants
# --------------------------------------------------------------------------- #
def test_uniform_contaminants_cmd_box():
    box = ob.CMDBox("V", colour=("B", "V"), mag_range=(18.0, 22.0), colour_range=(0.2, 1.2),
                    offsets={"I": -1.0})
    out = ob.uniform_contaminants(20000, np.random.default_rng(8), box)
    assert set(out) == {"B", "V", "I"} == set(box.bands)
    colour = out["B"] - out["V"]
    assert stats.kstest(out["V"], stats.uniform(18.0, 4.0).cdf).pvalue > 0.01
    assert stats.kstest(colour, stats.uniform(0.2, 1.0).cdf).pvalue > 0.01
    assert abs(np.corrcoef(out["V"], colour)[0, 1]) < 4 / math.sqrt(20000)  # independent axes
    np.testing.assert_allclose(out["I"], out["V"] - 1.0)
    # magnitude taken in the second colour band
    out2 = ob.uniform_contaminants(1000, 1, ob.CMDBox("I", ("V", "I"), (15, 16), (1.0, 1.1)))
    assert np.all((out2["I"] >= 15) & (out2["I"] <= 16))
    assert np.all((out2["V"] - out2["I"] >= 1.0) & (out2["V"] - out2["I"] <= 1.1))


def test_uniform_contaminants_dict_box_and_errors():
    out = ob.uniform_contaminants(5000, 2, {"V": (18, 20), "K": (12, 13)})
    assert np.all((out["K"] >= 12) & (out["K"] <= 13))
    assert stats.kstest(out["V"], stats.uniform(18, 2).cdf).pvalue > 0.01
    with pytest.raises(ValueError, match="positive integer"):
        ob.uniform_contaminants(0, 1, {"V": (18, 20)})
    with pytest.raises(ValueError, match="hi > lo"):
        ob.uniform_contaminants(10, 1, {"V": (20, 18)})
    with pytest.raises(ValueError, match="must be one of the colour bands"):
        ob.CMDBox("R", ("B", "V"), (18, 20), (0, 1))
    with pytest.raises(ValueError, match="CMDBox or a non-empty dict"):
        ob.uniform_contaminants(10, 1, [1, 2])


def test_resample_field():
    field = Table({"V": [15.0, 16.0, 17.0, 18.0], "I": [14.0, 15.5, 16.1, 16.9], "id": ["a", "b", "c", "d"]})
    out = ob.resample_field(field, 40000, np.random.default_rng(1))
    assert set(out) == {"V", "I"}  # numeric columns only by default
    pairs = set(zip(field["V"], field["I"]))
    assert set(zip(out["V"], out["I"])) <= pairs  # whole rows are drawn, never mixed
    counts = np.array([(out["V"] == v).sum() for v in field["V"]])
    assert stats.chisquare(counts).pvalue > 0.01  # uniform over rows (chi-square, common practice)
    assert ob.resample_field({"V": np.array([1.0, 2.0])}, 3, 0, bands="V").keys() == {"V"}
    with pytest.raises(ValueError, match="lacks band column"):
        ob.resample_field(field, 10, 1, bands=["B"])
    with pytest.raises(ValueError, match="not numeric"):
        ob.resample_field(field, 10, 1, bands=["id"])
    with pytest.raises(ValueError, match="1 row"):
        ob.resample_field(Table({"V": [1.0, np.nan]}), 10, 1)
    with pytest.raises(ValueError, match="positive integer"):
        ob.resample_field(field, -1, 1)
