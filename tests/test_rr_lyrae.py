"""RR Lyrae and HB-evolution physics: track shapes, either-or-zone hysteresis, Oosterhoff I/II clusters.

Cluster checks fit eta (Reimers, fixed spread) to each cluster's HB ratio (B-R)/(B+V+R) and then compare the
mean RRab period and the RRc fraction with observations -- the periods are never tuned directly.
"""
import numpy as np
import pytest

from hbmodel.physics import hb_evolution as hbe
from hbmodel.physics import pulsation as pu
from hbmodel.populations.population import MassLoss, Population

ETA_SD = 0.06  # Reimers-eta spread; ~0.03 Msun in HB mass at [Fe/H] -1.5 (model's hb_mass_sd)


def _pop(feh, eta, eta_sd=ETA_SD, age_gyr=12.5, alpha_fe=0.3):
    return Population(feh, age_gyr, alpha_fe=alpha_fe, mass_loss=MassLoss.from_eta(eta, eta_sd))


def eta_for_hb_ratio(feh, hb_ratio, eta_sd=ETA_SD, lo=0.15, hi=0.85, n_iter=16, **kw):
    """Bisect the mean Reimers eta so that ``predict()['hb_type']`` equals ``hb_ratio`` (HB type rises with eta)."""
    for _ in range(n_iter):
        mid = 0.5 * (lo + hi)
        if _pop(feh, mid, eta_sd, **kw).predict(bands=("V",))["hb_type"] < hb_ratio:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def rr_statistics(pop):
    """(mean RRab period [d], N_RRc / N_RR, HB type) of a population (time-weighted nodes)."""
    pr = pop.predict(bands=("V",))
    st = pop.model_stars(phases=("hb",))
    m, w = st.rr_mode, st.weight
    return pr["rrab_period_mean"], w[m == pu.MODE_RRC].sum() / w[m != pu.MODE_NONE].sum(), pr["hb_type"]


# ----------------------------------------------------------------------------- track shapes
def test_red_hb_blueward_loop_is_a_few_hundredths_of_a_dex():
    # red-HB stars just red of the strip at intermediate [Fe/H] loop blueward by a few 0.01 dex, then turn
    # redward at core-He exhaustion (Sweigart 1987, ApJS 65, 95; Dorman 1992, ApJS 81, 221; memory)
    tau = np.linspace(0.0, 1.0, 201)
    _, t = hbe.hb_track(1.65, 3.76, tau)
    loop = t.max() - 3.76
    assert 0.02 <= loop <= 0.06
    assert t[-1] < 3.76
    # stars near the strip spend most of their time near the ZAHB Teff (within 0.04 dex for >80% of t_HB)
    assert np.mean(np.abs(t - 3.76) < 0.04) > 0.8


def test_blue_hb_crosses_strip_late_steadily_slightly_above_zahb():
    # Lee, Demarque & Zinn 1990, ApJ 350, 155: evolved blue-HB stars cross the strip ~0.18 mag (0.07 dex)
    # brighter than the ZAHB; Li et al. 2024, arXiv:2404.00911 (abstract): Oosterhoff II stars are highly evolved,
    # entering the strip late in their HB phase from the blue side; Silbermann 1993: M15 RR Lyrae evolve redward.
    # (Replaces an assertion on the former model's own entry time, 0.3 < tau < 0.8.)
    tau = np.linspace(0.0, 1.0, 2001)
    l, t = hbe.hb_track(1.70, 3.90, tau)
    blue_edge, red_edge = pu.strip_edges(l, 0.68)
    enter = np.argmax(t < blue_edge)
    assert 0 < enter and tau[enter] > 0.5
    assert 0.02 < l[enter] - 1.70 < 0.10
    assert np.all(np.diff(t) < 0)
    # the star crosses the whole strip (it does not stop inside it) at a nearly steady rate: the blue and red
    # halves of the strip take similar times
    assert t[-1] < red_edge[-1]
    inside = (t <= blue_edge) & (t >= red_edge)
    mid = 0.5 * (blue_edge + red_edge)
    n_blue, n_red = np.sum(inside & (t > mid)), np.sum(inside & (t <= mid))
    assert 0.7 < n_blue / n_red < 1.4


def test_every_non_extreme_blue_hb_track_crosses_the_strip_by_core_helium_exhaustion():
    # only extreme-HB stars are AGB-manque (Dorman, Rood & O'Connell 1993, ApJ 419, 596); the other blue-HB stars
    # evolve redward through the strip toward the AGB late in core-He burning (Lee 1991, ApJ 367, 524, abstract:
    # most HB stars of Oosterhoff II clusters cross the strip from blue to red toward the end of core-He burning).
    # The former tracks of ZAHB stars hotter than ~11,000 K (log Teff > 4.04) ended inside the strip, on its
    # first-overtone side, which inflated the Oo II RRc fractions to 0.55-0.6.
    t0 = np.linspace(3.90, 4.15, 11)       # ZAHB Teff ~7,900-14,000 K, well cooler than the extreme HB
    l, t = hbe.hb_track(1.60, t0, 1.0)
    _, red_edge = pu.strip_edges(l, 0.60)
    assert np.all(t < red_edge)


def test_track_derivative_matches_track():
    tau = np.linspace(0.05, 0.95, 19)
    for t0 in (3.70, 3.80, 3.86, 3.95, 4.2, 4.4):
        d = hbe.hb_track_dlogteff_dtau(t0, tau)
        num = (hbe.hb_track(1.6, t0, tau + 1e-5)[1] - hbe.hb_track(1.6, t0, tau - 1e-5)[1]) / 2e-5
        assert np.allclose(d, num, atol=1e-4)


def test_hb_lifetime_not_longer_for_higher_helium():
    # published HB models: flat or shorter t_HB for higher Y (Sweigart 1987; Cassisi et al. 2003; memory)
    assert hbe.hb_lifetime_myr(0.49, 3.8, 0.1) <= hbe.hb_lifetime_myr(0.49, 3.8, 0.0) * 1.05


# ----------------------------------------------------------------------------- hysteresis
def test_either_or_zone_mode_follows_track_history():
    # van Albada & Baker 1973, ApJ 185, 477; Bono, Caputo & Stellingwerf 1994, ApJ 423, 294
    logl, mass = 1.65, 0.68
    fbe, fore = pu._edge("fbe", logl, mass), pu._edge("fore", logl, mass)
    lt = 0.5 * (fbe + fore)
    # a blue-HB star that came from the blue keeps the first overtone in the zone
    l0 = logl - (hbe.hb_track(1.65, 3.95, 0.7)[0] - 1.65)
    assert pu.pulsation_mode(lt, logl, mass, (l0, 3.95, 0.7)) == pu.MODE_RRC
    # a star born in the zone (arrived on the ZAHB from the red) pulsates in the fundamental mode
    assert pu.pulsation_mode(lt, logl, mass, (logl, float(lt), 0.0)) == pu.MODE_RRAB
    # outside the zone the mode is unique whatever the history
    assert pu.pulsation_mode(fbe + 0.01, logl, mass, (logl, 3.70, 0.5)) == pu.MODE_RRC
    assert pu.pulsation_mode(fore - 0.01, logl, mass, (l0, 3.95, 0.7)) == pu.MODE_RRAB


# ----------------------------------------------------------------------------- clusters
def _fit_cluster(name):
    """Cluster-benchmark prediction for a 'fit' cluster of tables/targets/clusters.ecsv: eta bisected to its HB
    ratio (spread ETA_SPREAD_OLD), then <Pab>, <Pc>, f_c predicted (hbmodel.calibration.benchmark)."""
    from hbmodel.calibration.benchmark import _clusters, _gc_predictions
    from hbmodel.calibration.evaluators import eta_for_hb_ratio as eta_fit
    d = _clusters()[name]
    assert d["role"] == "fit"  # held-out 'check' clusters are asserted elsewhere
    q = d["q"]
    age = q.get("age_gyr", (12.5,))[0]
    eta, _ = eta_fit(q["hb_ratio"][0], q["feh"][0], age_gyr=age)
    return q, _gc_predictions(q["feh"][0], eta, age, 0.3)[0]


# issue 13 criterion: <Pab> within 0.03 d and f_c within 0.15 of the observed values
@pytest.mark.parametrize("name", [
    # Oosterhoff II, [Fe/H] -2.10, HB ratio 0.81: 29 RRab, 35 RRc, <Pab> 0.649 d (clusters.ecsv, 'fit' rows)
    "M53 (NGC 5024)",
    # Oosterhoff I, [Fe/H] -1.29, HB ratio 0.31: 49 RRab, 15 RRc, <Pab> 0.554 d (Kaluzny et al. 2000, A&AS 143, 215)
    "M5 (NGC 5904)",
])
def test_oosterhoff_fit_cluster_mean_rrab_period(name):
    q, p = _fit_cluster(name)
    assert abs(p["pab_mean"] - q["pab_mean"][0]) <= 0.03


@pytest.mark.parametrize("name", ["M53 (NGC 5024)", "M5 (NGC 5904)"])
def test_oosterhoff_fit_cluster_rrc_fraction(name):
    q, p = _fit_cluster(name)
    assert abs(p["f_rrc"] - q["f_rrc"][0]) <= 0.15


def test_redder_hb_not_longer_periods_at_fixed_feh():
    # Lee, Demarque & Zinn 1990, ApJ 350, 155 (abstract): bluer HBs (evolved RR Lyrae) give longer <Pab> at
    # fixed [Fe/H]; the old model had the opposite sign (<Pab> rose as the HB got redder)
    p_red = rr_statistics(_pop(-1.5, 0.36))[0]
    p_mid = rr_statistics(_pop(-1.5, 0.44))[0]
    assert p_red <= p_mid + 0.03


def test_oosterhoff_ii_to_i_period_ratio_m53_m5():
    # <Pab>(M53) / <Pab>(M5) observed 0.649 / 0.554 = 1.171 (clusters.ecsv 'fit' rows: M53 from arXiv:2601.03758,
    # M5 from Kaluzny et al. 2000, A&AS 143, 215).  A common shift of the ZAHB luminosity scales both periods alike
    # (P ~ L^0.84), so the ratio tests the ZAHB Teff--mass shape and the track of the Oo II crossers; the former
    # shape gave 1.29-1.30
    q53, p53 = _fit_cluster("M53 (NGC 5024)")
    q5, p5 = _fit_cluster("M5 (NGC 5904)")
    obs = q53["pab_mean"][0] / q5["pab_mean"][0]
    assert abs(p53["pab_mean"] / p5["pab_mean"] - obs) <= 0.06


def test_zahb_mass_at_strip_falls_with_metallicity():
    # RR Lyrae (ZAHB at the strip) are heavier at lower metallicity: Bono, Caputo, Cassisi, Castellani & Marconi,
    # arXiv:astro-ph/9609153 (abstract: Z = 0.01 pulsators more massive than Z = 0.02 ones); pulsation grids of
    # metal-poor RR Lyrae span ~0.58-0.75 Msun (Bono et al. 1997, A&AS 121, 327, CDS ReadMe)
    from hbmodel.populations.morphology import zahb_at_strip
    feh = np.array([-2.3, -1.8, -1.3, -0.8, -0.5])
    mass = np.array([zahb_at_strip(Population(f, 12.5, alpha_fe=0.3).subpopulations[0])[2] for f in feh])
    assert np.all(np.diff(mass) < 0)
    assert 0.58 <= mass.min() + 0.03 and mass.max() <= 0.78


def test_oosterhoff_i_mean_rrab_period_is_longer_in_more_metal_poor_clusters():
    # Clement et al. 2001, AJ 122, 2587 (abstract, https://ar5iv.labs.arxiv.org/html/astro-ph/0108024): "The mean
    # period of the RR Lyrae variables in the Oosterhoff type I clusters seems to be correlated with metal abundance in
    # the sense that the periods are longer in the more metal poor clusters."  Oosterhoff I HB types (-0.3...+0.3,
    # common practice), eta fitted to each HB ratio as in the cluster benchmark
    from hbmodel.calibration.benchmark import _gc_predictions
    from hbmodel.calibration.evaluators import eta_for_hb_ratio as eta_fit
    for hbr in (-0.3, 0.3):
        pab = []
        for feh in (-1.8, -1.4, -1.0):
            eta, sat = eta_fit(hbr, feh)
            assert sat == 0
            pab.append(_gc_predictions(feh, eta, 12.5, 0.3)[0]["pab_mean"])
        assert pab[0] > pab[1] > pab[2], (hbr, pab)


@pytest.mark.xfail(reason="known defect (issue 13): at [Fe/H] -1.5 <Pab> is U-shaped in HB type (0.585 d at HB "
                          "ratio -0.3, 0.565 d at +0.7 with the calibrated strip): the red-HB RRab sit at the red "
                          "edge of the strip", strict=False)
def test_mean_rrab_period_rises_with_hb_type_at_fixed_feh():
    # Lee, Demarque & Zinn 1990, ApJ 350, 155 (abstract, https://synapsesocial.com/de/papers/6a20f6381e73f094422aab7e):
    # at fixed [Fe/H] bluer HBs have longer mean RRab periods (their RR Lyrae are evolved, brighter stars);
    # eta fitted to each HB ratio as in the cluster benchmark
    from hbmodel.calibration.benchmark import _gc_predictions
    from hbmodel.calibration.evaluators import eta_for_hb_ratio as eta_fit
    pab = {}
    for hbr in (-0.3, 0.7):
        eta, sat = eta_fit(hbr, -1.5)
        assert sat == 0
        pab[hbr] = _gc_predictions(-1.5, eta, 12.5, 0.3)[0]["pab_mean"]
    assert pab[0.7] > pab[-0.3]


def _oo2_statistics(feh, hb_ratio=0.93):
    """(<Pab>, <Pc>) of a very blue (Oosterhoff II) HB at ``feh``, eta fitted to ``hb_ratio`` as in the benchmark."""
    from hbmodel.calibration.benchmark import _gc_predictions
    from hbmodel.calibration.evaluators import eta_for_hb_ratio as eta_fit
    eta, sat = eta_fit(hb_ratio, feh)
    assert sat == 0
    p = _gc_predictions(feh, eta, 12.5, 0.3)[0]
    return p["pab_mean"], p["pc_mean"]


@pytest.mark.xfail(reason="known defect (issue 13): the model's Oosterhoff II <Pab> falls with [Fe/H] (0.682 d at "
                          "-2.31, 0.627 d at -1.65 for the held-out M92 and M2) because the ZAHB is fainter at higher Z "
                          "and the blue-HB crossing tracks have one shape at every Z", strict=False)
def test_oosterhoff_ii_mean_rrab_period_does_not_fall_with_metallicity():
    # Observed very blue HBs: M92 ([Fe/H] -2.31, HB ratio 0.91) <Pab> 0.630 d (Kopacki 2001, A&A 369, 862); M22
    # (-1.76, 0.97) 0.66 d (Kunder et al. 2013, AJ 146, 119); M2 (-1.65, 0.96) 0.685 d (Lee & Carney 1999, AJ 117,
    # 2868): the evolved RR Lyrae of intermediate-metallicity blue HBs are brighter (Lee, Demarque & Zinn 1990,
    # ApJ 350, 155); Clement et al. 2001, AJ 122, 2587 (abstract): no correlation of the mean period with [Fe/H] among
    # the Oosterhoff II clusters.  A model with the same track shape at every Z gave 0.682 d at -2.31 and 0.626 d at -1.65
    # (falling with [Fe/H], because the ZAHB is fainter at higher Z)
    p_poor, _ = _oo2_statistics(-2.3)
    p_int, _ = _oo2_statistics(-1.65)
    assert p_int >= p_poor


@pytest.mark.xfail(reason="known defect (issue 13): the model's <Pc>/<Pab> of a very blue HB is ~0.55 at every [Fe/H] "
                          "(the crossing tracks do not climb towards the AGB more steeply at higher Z)", strict=False)
def test_oosterhoff_ii_rrc_to_rrab_period_ratio_falls_with_metallicity():
    # <Pc>/<Pab> observed: M92 0.36/0.630 = 0.571 (Kopacki 2001); M22 0.33/0.66 = 0.50 (Kunder et al. 2013);
    # M2 0.333/0.685 = 0.486 (Lee & Carney 1999): at intermediate [Fe/H] the RRab of a blue HB are brighter
    # relative to its RRc (the tracks climb towards the AGB as they cross the strip).  The model with a
    # Z-independent crossing gave 0.55 at both metallicities
    pab_poor, pc_poor = _oo2_statistics(-2.3)
    pab_int, pc_int = _oo2_statistics(-1.65)
    assert pc_poor / pab_poor - pc_int / pab_int >= 0.02


# ----------------------------------------------------------------------------- held-out clusters
def _check_cluster(name):
    from hbmodel.calibration.benchmark import _clusters, _globular
    d = _clusters()[name]
    assert d["role"] == "check"   # never used by the strip fit (hbmodel.calibration.stages)
    return d["q"], _globular(name)[2]


# held-out Oosterhoff II clusters (values in tables/targets/clusters.ecsv): M92 Kopacki 2001, A&A 369, 862 (abstract:
# <Pc> 0.36 d, 11 RRab + 6 RRc); M2 Lee & Carney 1999, AJ 117, 2868 (abstract: <Pc> 0.333 d, n(c)/n(ab+c) = 0.40);
# M22 Kunder et al. 2013, AJ 146, 119 (abstract: <Pc> 0.33 d, N1/NRR = 0.61); M9 Clement & Shelton 1996, AJ 112, 618
# (abstract: 8 RRab + 9 RRc, <Pc> 0.342 d)
@pytest.mark.parametrize("name", ["M92 (NGC 6341)", "M2 (NGC 7089)", "M22 (NGC 6656)", "M9 (NGC 6333)"])
@pytest.mark.parametrize("quantity, tol", [
    # before the strip calibration the model's RRc periods were 0.03-0.05 d short in every cluster
    ("pc_mean", 0.03),
    # issue 13 tolerance; before every blue-HB track crossed the whole strip, tracks ending inside it piled stars on
    # its first-overtone side: M92 0.54 and M2 0.60 against 0.35 and 0.40
    ("f_rrc", 0.15),
])
def test_held_out_oosterhoff_ii_cluster(name, quantity, tol):
    q, p = _check_cluster(name)
    assert abs(p[quantity] - q[quantity][0]) <= tol


def test_held_out_ngc5286_rrc_fraction():
    # Zorotovic et al. 2010, AJ 139, 357 (arXiv:0911.1686, abstract): 30 RRab + 22 RRc, N(c)/N(RR) = 0.42 at
    # [Fe/H] -1.67 and HB ratio 0.80 (Harris 1996 via the gclusters database); issue 13 tolerance
    q, p = _check_cluster("NGC 5286")
    assert abs(p["f_rrc"] - q["f_rrc"][0]) <= 0.15


@pytest.mark.parametrize("quantity", ["mass_rr_msun", "mass_rhb_msun"])
def test_m4_seismic_rr_lyrae_and_red_hb_masses(quantity):
    # Molnar, Netzel, Howell, Kalup & Joyce 2025, A&A 702, A116 (abstract, CDS ReadMe J/A+A/702/A116): mean seismic
    # masses in M4 of 0.648 +- 0.028 Msun for five RRc stars and 0.657 +- 0.034 Msun for the red-HB stars; held-out
    # rows of tables/targets/clusters.ecsv.  eta is fitted to M4's HB ratio (-0.06) only; the masses are predicted.
    # Pass: within 2 sigma of the target combined with the surrogate's stated mass accuracy (0.03 Msun).
    from hbmodel.calibration.benchmark import _clusters, _globular
    from hbmodel.calibration.scorecard import sigma_model
    d = _clusters()["M4 (NGC 6121)"]
    assert d["roles"][quantity] == "check"
    v, u = d["q"][quantity]
    m = _globular("M4 (NGC 6121)")[2][quantity]
    assert abs(m - v) <= 2.0 * np.hypot(u, sigma_model("tip_mass_msun"))
    assert 0.55 < m < 0.75   # an RR Lyrae / red-HB mass at all, not a stray value


def test_m4_red_hb_not_lighter_than_rr_lyrae():
    # along a ZAHB the red HB is the heavier end: the red-HB stars of M4 are at least as massive as its RR Lyrae
    # (Molnar et al. 2025, abstract: 0.657 against 0.648 Msun, equal within errors; common practice for the sign)
    from hbmodel.calibration.benchmark import _globular
    p = _globular("M4 (NGC 6121)")[2]
    assert p["mass_rhb_msun"] >= p["mass_rr_msun"] - 0.005


@pytest.mark.xfail(reason="known defect (issue 13): 4 of 8 benchmark clusters with >= 10 RRab pass (M53, M5, M22, "
                          "NGC 2419); M92 (<Pab> 0.682 vs 0.630 d), M2 (0.627 vs 0.685 d), NGC 5286 (0.602 vs 0.656 d) "
                          "and NGC 4833 (0.646 vs 0.696 d) fail on the period only (their RRc fractions are within "
                          "0.15): the model's Oosterhoff II <Pab> falls with [Fe/H] while the observed one does not",
                   strict=False)
def test_oosterhoff_criterion_80_percent_of_rr_rich_clusters():
    # issue 13 criterion: <Pab> within 0.03 d and f_c within 0.15 for >= 80% of the clusters with >= 10 RRab
    # (tables/targets/clusters.ecsv: M92 Kopacki 2001; M53 arXiv:2601.03758; M22 Kunder et al. 2013; M2 Lee &
    # Carney 1999; M5 Kaluzny et al. 2000; NGC 5286 Zorotovic et al. 2010; NGC 4833 Darragh & Murphy 2012; NGC 2419
    # Di Criscienzo et al. 2011 / Ripepi et al. 2007), eta fitted to each HB ratio
    from hbmodel.calibration.benchmark import oosterhoff_criterion, run_benchmark
    n_ok, n, _ = oosterhoff_criterion([r for r in run_benchmark() if r.kind == "GC"])
    assert n >= 5 and n_ok >= 0.8 * n
