"""The tabulated sampler (hbmodel.populations.sampler) against the stage-by-stage reference physics.

The mock catalogues draw stars from tables; these tests hold the tables to the physics they tabulate
(photometry to 2e-4 mag, RGB positions to 1e-3 mag) and the draws to the reference sampler
``Population.sample`` in distribution (two-sample Kolmogorov-Smirnov tests, scipy.stats.ks_2samp) and in
counts per phase (lifetime proportions: the fuel-consumption theorem, Renzini & Buzzoni 1986).
These are consistency checks of a fast path against the project's own reference; the physics itself is
checked against the literature in tests/test_validation.py.  The extinction ratios of the clump are also
compared with the usual A_V/E(B-V) ~ 3.1 and A_Ks/A_V ~ 0.11 (common practice).
"""
import numpy as np
import pytest
from scipy import stats

from hbmodel.photometry.extinction import extinction_ratio
from hbmodel.photometry.magnitudes import BAND_NAMES, FixedMetallicityPhotometry, absolute_magnitudes
from hbmodel.populations.population import MassLoss, Population
from hbmodel.populations.sampler import PHASE_CODES, StarSampler

GC = Population(-1.6, 12.5, alpha_fe=0.3, mass_loss=MassLoss.from_eta(0.45, 0.04))
RC = Population(0.0, 6.0, mass_loss=MassLoss.from_delta_m(0.08, 0.02))


@pytest.mark.parametrize("feh", [-2.3, -1.0, 0.0, 0.4])
def test_fixed_metallicity_photometry_matches_the_general_function(feh):
    rng = np.random.default_rng(3)
    n = 20000
    logt = rng.uniform(np.log10(3000.0), np.log10(50000.0), n)
    logg = rng.uniform(-0.5, 6.5, n)
    logl = rng.uniform(-1.0, 3.0, n)
    ref = absolute_magnitudes(10 ** logt, logg, feh, logl, BAND_NAMES)
    fast = FixedMetallicityPhotometry(feh, BAND_NAMES).absolute_magnitudes(logt, logg, logl)
    for b in BAND_NAMES:
        assert np.max(np.abs(fast[b] - ref[b])) < 2e-4, b


@pytest.mark.parametrize("pop", [GC, RC], ids=["metal-poor", "metal-rich"])
def test_rgb_table_reproduces_the_rgb_physics(pop):
    s = StarSampler(pop, ("V", "I"))
    tab = s._tables[0].rgb
    v = np.random.default_rng(1).random(5000)
    st = pop._rgb_nodes(0, pop.subpopulations[0], v)
    mags = st.absolute_magnitudes(("V", "I"))
    i, f = tab.locate(v)
    assert np.max(np.abs(tab.get("logl", i, f) - st.logl)) < 4e-4            # 1e-3 mag in M_bol
    assert np.max(np.abs(np.log10(tab.get("teff", i, f)) - st.logteff)) < 1e-4
    for b in ("V", "I"):
        assert np.max(np.abs(tab.get(f"M_{b}", i, f) - mags[b])) < 1e-3
        ratio = extinction_ratio(b, st.teff_k)
        assert np.max(np.abs(tab.get(f"R_{b}", i, f) - ratio)) < 1e-3


@pytest.mark.parametrize("pop", [GC, RC], ids=["metal-poor", "metal-rich"])
def test_draws_follow_the_reference_sampler(pop):
    n_hb = 6000
    fast = StarSampler(pop, ("V", "I")).draw(n_hb, np.random.default_rng(11))
    ref = pop.sample(n_hb, np.random.default_rng(12))
    ref_mag = ref.absolute_magnitudes(("V", "I"))
    for ph in ("rgb", "hb", "agb"):
        a = fast["phase"] == PHASE_CODES[ph]
        b = ref.phase == ph
        # counts in lifetime proportion: the same expectations, Poisson scatter
        assert abs(a.sum() - b.sum()) < 5 * np.sqrt(a.sum() + b.sum()) + 2, ph
        for key, x, y in (("mass", fast["mass"][a], ref.mass_msun[b]),
                          ("teff", fast["teff"][a], ref.teff_k[b]),
                          ("M_V", fast["M_V"][a], ref_mag["V"][b]),
                          ("V-I", (fast["M_V"] - fast["M_I"])[a], (ref_mag["V"] - ref_mag["I"])[b])):
            if np.ptp(y) < 1e-9:   # a single value (no spread): must agree exactly
                assert np.allclose(x, y[0], atol=1e-6), (ph, key)
                continue
            assert stats.ks_2samp(x, y).pvalue > 1e-3, (ph, key)


def test_rr_lyrae_fraction_and_periods_follow_the_reference():
    n_hb = 8000
    fast = StarSampler(GC, ("V",)).draw(n_hb, np.random.default_rng(5))
    ref = GC.sample(n_hb, np.random.default_rng(6))
    hb_f = fast["phase"] == PHASE_CODES["hb"]
    rr_f = fast["rr_mode"][hb_f] > 0
    rr_r = ref.is_rr[ref.phase == "hb"]
    assert rr_f.mean() > 0.05                      # this population has RR Lyrae at all
    assert abs(rr_f.mean() - rr_r.mean()) < 4 * np.sqrt(rr_r.mean() * (1 - rr_r.mean()) * 2 / n_hb)
    p_f = fast["period_days"][hb_f][rr_f]
    p_r = ref.period_days[ref.phase == "hb"][rr_r]
    assert stats.ks_2samp(p_f, p_r).pvalue > 1e-3
    assert np.all(np.isnan(fast["period_days"][~hb_f]))


def test_discrete_mass_loss_mixture_is_drawn_exactly():
    pop = Population(-1.5, 12.5, mass_loss=MassLoss("eta", ((0.7, 0.35, 0.0), (0.3, 0.6, 0.0))))
    d = StarSampler(pop, ("V",)).draw(3000, np.random.default_rng(2))
    m = np.unique(np.round(d["mass"][d["phase"] == PHASE_CODES["hb"]], 12))
    assert m.size == 2
    ref = pop.sample(200, np.random.default_rng(3))
    assert np.allclose(np.sort(m), np.unique(np.round(ref.mass_msun[ref.phase == "hb"], 12)))


def test_true_magnitudes_compose_distance_and_extinction():
    s = StarSampler(RC, ("V", "Ks"))
    a = s.draw(500, np.random.default_rng(9))
    b = s.draw(500, np.random.default_rng(9), distance_modulus=12.3, ebv=0.4)
    for band in ("V", "Ks"):
        expect = a[f"M_{band}"] + 12.3 + 0.4 * a[f"R_{band}"]
        assert np.max(np.abs(b[f"{band}_true"] - expect)) < 1e-9
    # the extinction ratio of the clump: A_V/E(B-V) near R_V, A_Ks/A_V near 0.1 (common practice)
    clump = a["phase"] == PHASE_CODES["hb"]
    assert np.median(a["R_V"][clump]) == pytest.approx(3.1, abs=0.25)
    assert np.median(a["R_Ks"][clump] / a["R_V"][clump]) == pytest.approx(0.11, abs=0.04)


def test_window_draws_only_the_requested_rgb_stretch():
    s = StarSampler(GC, ("V",))
    d = s.draw(2000, np.random.default_rng(4), rgb_logl_range=(1.4, 2.0))
    rgb = d["phase"] == PHASE_CODES["rgb"]
    # the bump margin (0.1 dex either side at most) bounds the drawn RGB luminosities
    assert d["logl"][rgb].min() > 1.2 and d["logl"][rgb].max() < 2.2
    full = s.draw(2000, np.random.default_rng(4))
    inside = (full["phase"] == PHASE_CODES["rgb"]) & (full["logl"] > 1.45) & (full["logl"] < 1.95)
    inside_w = rgb & (d["logl"] > 1.45) & (d["logl"] < 1.95)
    # same density of RGB stars per HB star inside the window
    assert abs(inside.sum() - inside_w.sum()) < 5 * np.sqrt(inside.sum() + inside_w.sum())


def test_same_generator_state_same_stars_and_rng_required():
    s = StarSampler(GC, ("V", "I"))
    a = s.draw(300, np.random.default_rng(7), distance_modulus=14.0, ebv=0.1)
    b = s.draw(300, np.random.default_rng(7), distance_modulus=14.0, ebv=0.1)
    for k in a:
        assert np.array_equal(a[k], b[k], equal_nan=True), k
    # an integer seed is the same stream as a Generator made from it (core.randomness convention) ...
    c = s.draw(300, 7, distance_modulus=14.0, ebv=0.1)
    for k in a:
        assert np.array_equal(a[k], c[k], equal_nan=True), k
    # ... and no hidden state: None is refused
    with pytest.raises(ValueError, match="Generator"):
        s.draw(300, None)
    with pytest.raises(ValueError, match="positive"):
        s.draw(0, np.random.default_rng(1))
