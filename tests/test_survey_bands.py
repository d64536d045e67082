"""HST and survey bands: registry, real passbands, extinction with curvature, published colour relations,
their validity ranges, survey depths, and the commands end to end (issue 19)."""
import json
import math

import numpy as np
import pytest

from hbmodel.photometry.extinction import AV_MAX, extinction_mag, extinction_ratio, law_curve, passband
from hbmodel.observation.effects import default_error_law, survey_depth_5sigma
from hbmodel.photometry.magnitudes import (ALL_BAND_NAMES, BAND_NAMES, FixedMetallicityPhotometry, absolute_magnitudes,
                                band_relations, colours_v, get_band, resolve_band)

NEW_BANDS = ("ACS_F435W", "ACS_F606W", "ACS_F814W", "UVIS_F336W", "UVIS_F438W", "UVIS_F606W", "UVIS_F814W",
             "IR_F110W", "IR_F160W", "SDSS_u", "SDSS_g", "SDSS_r", "SDSS_i", "SDSS_z",
             "PS1_g", "PS1_r", "PS1_i", "PS1_z", "PS1_y", "DECam_g", "DECam_r", "DECam_i", "DECam_z", "DECam_Y",
             "LSST_u", "LSST_g", "LSST_r", "LSST_i", "LSST_z", "LSST_y", "WISE_W1", "WISE_W2")
GIANT = (np.array([4500.0, 4800.0, 5200.0]), 2.5, -0.5)   # K giants and the clump (Teff, log g, [Fe/H])


# --------------------------------------------------------------------------- registry
def test_registry_has_every_new_band_with_a_real_passband_and_keeps_the_core_set():
    assert BAND_NAMES == ("U", "B", "V", "R", "I", "J", "H", "Ks", "G", "BP", "RP")   # default set unchanged
    assert set(NEW_BANDS) <= set(ALL_BAND_NAMES)
    for name in NEW_BANDS:
        b = get_band(name)
        assert b.colour_source == "relation" and b.passband != "approx", name
        lam, resp = passband(b)
        # the curve's photon-weighted mean wavelength lies inside its half-maximum edges (registry columns)
        lam_mean = float((lam * resp).sum() / resp.sum())
        assert b.lambda_lo_um < lam_mean < b.lambda_hi_um, name
    # published pivot wavelengths (STScI ACS instrument handbook, from memory): F606W 5918 A, F814W 8045-8060 A
    assert get_band("ACS_F606W").lambda_eff_um == pytest.approx(0.5918, abs=0.002)
    assert get_band("ACS_F814W").lambda_eff_um == pytest.approx(0.805, abs=0.003)
    assert resolve_band("w1") == "WISE_W1" and resolve_band("F160W") == "IR_F160W" and resolve_band("g_P1") == "PS1_g"


# --------------------------------------------------------------------------- extinction
@pytest.mark.parametrize("band,published", [
    # Schlafly & Finkbeiner 2011, ApJ 737, 103, Table 6 (R_V = 3.1, F99): A_b/E(B-V)_SFD of ACS F606W 2.471,
    # ACS F814W 1.526, Landolt V 2.742 (read as reproduced in public code: BASTAcode/BASTA src/basta/constants.py and two
    # further copies, see tests/test_extinction_targets.py); the ratio A_band/A_V is free of the SFD scale.
    ("ACS_F606W", 2.471 / 2.742),
    ("ACS_F814W", 1.526 / 2.742),
])
def test_acs_extinction_ratios_match_schlafly_finkbeiner_2011_for_a_k_giant(band, published):
    for teff in (4500.0, 7000.0):    # a K giant, and the 7,000 K source spectrum of the published table
        ratio = float(extinction_ratio(band, teff) / extinction_ratio("V", teff))
        assert ratio == pytest.approx(published, abs=0.03), (band, teff, ratio)


def test_curvature_in_av_falls_a_broad_band_ratio_by_about_one_percent_per_magnitude():
    # common practice (e.g. the "~1-2 % per magnitude of A_V" for broad optical bands): the blue side of a
    # broad passband is extinguished first, so A_band/A_V falls with A_V; a narrow-in-log-lambda IR band barely.
    teff = 4700.0
    r0 = float(extinction_ratio("ACS_F606W", teff))
    r5 = float(extinction_ratio("ACS_F606W", teff, ebv=5.0 / 3.1))
    per_mag = (1.0 - r5 / r0) / 5.0
    assert 0.003 < per_mag < 0.03
    ir0, ir5 = float(extinction_ratio("IR_F160W", teff)), float(extinction_ratio("IR_F160W", teff, ebv=5.0 / 3.1))
    assert (1.0 - ir5 / ir0) / 5.0 < per_mag / 3.0
    # exact band integral of the attenuated blackbody (photon counting), computed here independently
    lam, resp = passband("ACS_F606W")
    k = law_curve("F99", 3.1, lam)
    w = resp * lam ** -4 / np.expm1(14387.7688 / (lam * teff))
    a_band = -2.5 * math.log10(float((w * 10 ** (-0.4 * 5.0 * k)).sum() / w.sum()))
    assert float(extinction_mag("ACS_F606W", 5.0 / 3.1, teff)) == pytest.approx(a_band, abs=0.01)
    # the eleven core bands keep the linear limit (their numbers unchanged)
    assert float(extinction_ratio("V", teff, ebv=2.0)) == float(extinction_ratio("V", teff))
    with pytest.raises(ValueError, match="beyond"):
        extinction_ratio("ACS_F606W", teff, ebv=(AV_MAX + 1) / 3.1)


def test_wise_bands_need_a_law_that_reaches_their_wavelengths():
    with pytest.raises(ValueError, match="G23"):
        extinction_ratio("WISE_W1", 4500.0, law="F99")
    # G23 at 3.4 micron: A_W1/A_V ~ 0.05 (Gordon et al. 2023 curve; order of magnitude, common practice)
    assert 0.02 < float(extinction_ratio("WISE_W1", 4500.0, law="G23")) / 3.1 < 0.09


def test_rv_outside_the_law_range_is_named_not_blamed_on_the_passband():
    # F99 is defined for R_V 2-6 (Fitzpatrick 1999, PASP 111, 63; the dust_extinction range): an optical
    # survey band with R_V = 10 is refused for its R_V, without the "use G23" passband hint
    with pytest.raises(ValueError, match="rv = 10") as err:
        extinction_ratio("SDSS_g", 5000.0, rv=10.0)
    assert "G23" not in str(err.value)


# --------------------------------------------------------------------------- colour relations
def test_sdss_magnitudes_follow_jester_2005_table_1():
    # Jester et al. 2005, AJ 130, 873, Table 1 (all stars with Rc-Ic < 1.15):
    # g = V + 0.60(B-V) - 0.12; r = V - 0.42(B-V) + 0.11; r-i = 0.91(Rc-Ic) - 0.20; u-g = 1.28(U-B) + 1.13
    teff, logg, feh = GIANT
    m = absolute_magnitudes(teff, logg, feh, 1.7, ("U", "B", "V", "R", "I", "SDSS_u", "SDSS_g", "SDSS_r", "SDSS_i"))
    bv, ub, ri = m["B"] - m["V"], m["U"] - m["B"], m["R"] - m["I"]
    np.testing.assert_allclose(m["SDSS_g"], m["V"] + 0.60 * bv - 0.12, atol=1e-9)
    np.testing.assert_allclose(m["SDSS_r"], m["V"] - 0.42 * bv + 0.11, atol=1e-9)
    np.testing.assert_allclose(m["SDSS_r"] - m["SDSS_i"], 0.91 * ri - 0.20, atol=1e-9)
    np.testing.assert_allclose(m["SDSS_u"] - m["SDSS_g"], 1.28 * ub + 1.13, atol=1e-9)


def test_decam_follows_des_dr2_and_ps1_solves_its_own_colour():
    teff, logg, feh = GIANT
    m = absolute_magnitudes(teff, logg, feh, 1.7, ("SDSS_g", "SDSS_r", "SDSS_i", "DECam_g", "DECam_r", "PS1_g",
                                                   "PS1_r", "PS1_i"))
    # DES DR2 transformations (Abbott et al. 2021): g_DES = g - 0.061 (g-i) + 0.008; r_DES = r - 0.155 (r-i) - 0.007
    np.testing.assert_allclose(m["DECam_g"], m["SDSS_g"] - 0.061 * (m["SDSS_g"] - m["SDSS_i"]) + 0.008, atol=1e-9)
    np.testing.assert_allclose(m["DECam_r"], m["SDSS_r"] - 0.155 * (m["SDSS_r"] - m["SDSS_i"]) - 0.007, atol=1e-9)
    # Tonry et al. 2012 Table 6 is in terms of the PS1 colour itself: the fixed point must satisfy it
    x = m["PS1_g"] - m["PS1_r"]
    np.testing.assert_allclose(m["SDSS_g"] - m["PS1_g"], 0.013 + 0.145 * x + 0.019 * x * x, atol=1e-8)
    np.testing.assert_allclose(m["SDSS_i"] - m["PS1_i"], -0.005 + 0.011 * x + 0.010 * x * x, atol=1e-8)


def test_ps1_y_and_decam_y_follow_their_published_relations():
    # Tonry et al. 2012, ApJ 750, 99, Table 6, row x = (g-r)_P1: z_SDSS - y_P1 = -0.031 + 0.111 x + 0.004 x^2 (read as
    # reproduced in public code); DES DR2 transformations (Abbott et al. 2021): y_PS1 = Y_DES + 0.031 (r-i)_DES - 0.034
    teff, logg, feh = GIANT
    m = absolute_magnitudes(teff, logg, feh, 1.7, ("SDSS_z", "PS1_g", "PS1_r", "PS1_y", "DECam_r", "DECam_i", "DECam_Y"))
    x = m["PS1_g"] - m["PS1_r"]
    np.testing.assert_allclose(m["SDSS_z"] - m["PS1_y"], -0.031 + 0.111 * x + 0.004 * x * x, atol=1e-8)
    np.testing.assert_allclose(m["PS1_y"], m["DECam_Y"] + 0.031 * (m["DECam_r"] - m["DECam_i"]) - 0.034, atol=1e-9)


def test_ps1_y_of_giants_agrees_with_the_independent_finkbeiner_2016_relation():
    # Finkbeiner et al. 2016, ApJ 822, 66: y_P1 - z_SDSS = 0.08924 - 0.20878 x + 0.10360 x^2 - 0.02441 x^3,
    # x = (g-i)_P1, valid 0.4 < x < 2.7 (main-sequence stars; the paper calls its y row less reliable than griz).
    # Read as reproduced in public code (the constant and cubic terms in two copies).  A different paper, a different
    # colour and a cubic form: the Tonry et al. 2012 y of the model's K giants must agree with it to 0.03 mag, about
    # the quadrature sum of the two relations' scatters (common practice)
    teff = np.array([4300.0, 4700.0, 5000.0, 5500.0])
    m = absolute_magnitudes(teff, np.array([2.0, 2.5, 2.5, 3.0]), -0.5, 1.7, ("SDSS_z", "PS1_g", "PS1_i", "PS1_y"))
    x = m["PS1_g"] - m["PS1_i"]
    assert np.all((x > 0.4) & (x < 2.7))
    f16 = 0.08924 - 0.20878 * x + 0.10360 * x ** 2 - 0.02441 * x ** 3
    np.testing.assert_allclose(m["PS1_y"] - m["SDSS_z"], f16, atol=0.03)
    # and z - y reddens towards cooler giants in both
    assert np.all(np.diff(m["PS1_y"] - m["SDSS_z"]) > 0) and np.all(np.diff(f16) > 0)


def test_lsst_griz_follow_rtn_099_table_1_inside_its_colour_ranges():
    # Rubin technical note RTN-099, Table 1 (DES -> LSST, synthetic LSSTCam, v_2025_08_22):
    # g = g_DES + 0.016 (g-i) - 0.003 (g-i)^2 + 0.006; r = r_DES + 0.185 (r-i) - 0.015 (r-i)^2 + 0.010;
    # i = i_DES + 0.150 (r-i) - 0.003 (r-i)^2 - 0.009; z = z_DES + 0.270 (i-z) + 0.036 (i-z)^2 - 0.003
    teff, logg, feh = GIANT
    bands = ("DECam_g", "DECam_r", "DECam_i", "DECam_z", "LSST_g", "LSST_r", "LSST_i", "LSST_z")
    m = absolute_magnitudes(np.append(teff, 8000.0), 2.5, feh, 1.7, bands)
    gi, ri, iz = (m["DECam_g"] - m["DECam_i"], m["DECam_r"] - m["DECam_i"], m["DECam_i"] - m["DECam_z"])
    np.testing.assert_allclose(m["LSST_g"], m["DECam_g"] + 0.016 * gi - 0.003 * gi ** 2 + 0.006, atol=1e-9)
    np.testing.assert_allclose(m["LSST_r"], m["DECam_r"] + 0.185 * ri - 0.015 * ri ** 2 + 0.010, atol=1e-9)
    np.testing.assert_allclose(m["LSST_i"], m["DECam_i"] + 0.150 * ri - 0.003 * ri ** 2 - 0.009, atol=1e-9)
    np.testing.assert_allclose(m["LSST_z"], m["DECam_z"] + 0.270 * iz + 0.036 * iz ** 2 - 0.003, atol=1e-9)
    # LSST r and i are bluer than DES r and i (pivots 0.621/0.755 vs 0.642/0.781 micron): a red giant is fainter
    assert np.all((m["LSST_r"] - m["DECam_r"])[:3] > 0.03) and np.all((m["LSST_i"] - m["DECam_i"])[:3] > 0.0)


def test_wise_w1_follows_the_pecaut_mamajek_sequence():
    # Pecaut & Mamajek 2013 (online table 2019.3.22): K3.5V has V-Ks = 2.582 and Ks-W1 = 0.036
    t = np.array([4000.0, 4500.0, 5000.0, 5500.0])
    m = absolute_magnitudes(t, 4.5, 0.0, 0.0, ("V", "Ks", "WISE_W1"))
    rel = band_relations()["WISE_W1"]
    np.testing.assert_allclose(m["WISE_W1"] - m["Ks"], np.interp(m["V"] - m["Ks"], *rel.sequence), atol=1e-9)
    assert float(np.interp(2.582, *rel.sequence)) == pytest.approx(-0.036, abs=1e-9)


# Sirianni et al. 2005, PASP 117, 1049: synthetic WFC -> UBVRI transformations TMAG = SMAG + c0 + c1 TCOL + c2 TCOL^2
# (SMAG = WFC VEGAMAG - zero point of their Table 10), as tabulated in band_relations.csv:
# (band, Johnson target, TCOL, zero point, [(TCOL upper edge of the piece, c0, c1, c2), ...])
SIRIANNI05 = (
    ("ACS_F435W", "B", ("B", "V"), 25.779, [(0.4, 25.769, 0.029, -0.156), (9.9, 25.709, 0.108, -0.068)]),
    ("ACS_F606W", "V", ("V", "I"), 26.398, [(0.4, 26.394, 0.153, 0.096), (9.9, 26.331, 0.340, -0.038)]),
    ("ACS_F814W", "I", ("V", "I"), 25.501, [(0.1, 25.489, 0.041, -0.093), (9.9, 25.496, -0.014, 0.015)]),
)
ACS = ("ACS_F435W", "ACS_F606W", "ACS_F814W")


def test_acs_magnitudes_satisfy_the_sirianni_2005_transformations_on_both_sides_of_each_colour_break():
    # giants, dwarfs, RR Lyrae and hot HB stars: the ACS magnitudes are the exact inverse of the published
    # TMAG = SMAG + c0 + c1 TCOL + c2 TCOL^2, each star through the piece its Johnson colour falls in
    teff = np.array([4200.0, 4700.0, 5200.0, 6000.0, 6500.0, 7200.0, 8500.0, 12000.0, 20000.0])
    for logg, feh in ((2.5, -0.5), (4.5, 0.0), (3.0, -1.8)):
        m = absolute_magnitudes(teff, logg, feh, 1.6, ("B", "V", "I") + ACS)
        for band, target, (ca, cb), zp, pieces in SIRIANNI05:
            tcol = m[ca] - m[cb]
            expect = np.full_like(tcol, np.nan)
            for edge, c0, c1, c2 in reversed(pieces):
                sel = tcol < edge
                smag = m[band] - zp
                expect[sel] = (smag + c0 + c1 * tcol + c2 * tcol ** 2)[sel]
            np.testing.assert_allclose(expect, m[target], atol=1e-9, err_msg=band)
            edge = pieces[0][0]
            assert (tcol < edge).any() and (tcol > edge).any(), band     # both pieces exercised


def test_acs_vegamag_gives_a_zero_colour_star_zero_acs_minus_johnson():
    # VEGAMAG (Sirianni et al. 2005, Table 10 zero points) and Johnson-Cousins are both Vega systems: a star with
    # B-V = V-I = 0 has every ACS - Johnson difference ~0 (their synthetic fit leaves < 0.015 mag there)
    zero = {b: np.zeros(1) for b in ("B", "V", "I")}
    rels = band_relations()
    for band, target, *_ in SIRIANNI05:
        assert abs(float(rels[band].evaluate(zero)[0])) < 0.015, band


@pytest.mark.parametrize("band,johnson,colour,teffs", [
    ("ACS_F606W", "bessell-V", ("bessell-V", "bessell-I"), (4500.0, 5000.0, 6000.0, 7000.0, 9000.0)),
    ("ACS_F814W", "bessell-I", ("bessell-V", "bessell-I"), (4500.0, 5000.0, 6000.0, 7000.0, 9000.0)),
    ("ACS_F435W", "bessell-B", ("bessell-B", "bessell-V"), (6000.0, 7000.0, 9000.0)),
])
def test_acs_transformation_agrees_with_synthetic_photometry_on_the_real_passbands(band, johnson, colour, teffs):
    # independent check of the tabulated Sirianni et al. 2005 coefficients: photon-counting synthetic photometry of
    # Planck spectra through the ACS/WFC throughput (STScI, tables/passbands_hst.csv) and the Bessell 1990 (PASP 102,
    # 1181) curves shipped with speclite, both relative to a 9,600 K (Vega-like) Planck spectrum.  Planck spectra
    # have no line blanketing, so agreement to 0.03 mag is expected only where blanketing is mild (F435W: F-A stars).
    # (The observed WFC transformation of the same paper, V - F606W = -0.073 + 0.236 (V-I), misses by 0.05 at K.)
    speclite_filters = pytest.importorskip("speclite.filters")

    def mag(lam_um, resp, teff):
        f = lam_um ** -5 / np.expm1(14387.7688 / (lam_um * teff))
        return -2.5 * np.log10(np.trapezoid(f * lam_um * resp, lam_um))

    def mag_sl(name, teff):
        f = speclite_filters.load_filter(name)
        return mag(f.wavelength / 1e4, f.response, teff) - mag(f.wavelength / 1e4, f.response, 9600.0)

    lam, resp = (np.asarray(a, float) for a in passband(band))
    rel = band_relations()[band]
    for teff in teffs:
        syn = mag(lam, resp, teff) - mag(lam, resp, 9600.0) - mag_sl(johnson, teff)
        x = mag_sl(colour[0], teff) - mag_sl(colour[1], teff)
        m = {rel.base: np.zeros(1), rel.va: np.zeros(1), rel.vb: np.zeros(1)}
        m[rel.vb] = m[rel.vb] - x if rel.vb != rel.base else m[rel.vb]
        if rel.va != rel.base:
            m[rel.va] = m[rel.va] + x
        tab = float(rel.evaluate(m)[0])
        assert tab == pytest.approx(syn, abs=0.03), (band, teff, tab, syn)


def test_acs_refuses_stars_outside_the_colour_range_on_both_paths():
    with pytest.raises(ValueError, match="Sirianni et al. 2005.*not extrapolated"):
        absolute_magnitudes(np.array([4500.0, 3000.0]), 0.5, 0.0, 3.0, ("ACS_F606W",))   # V-I > 3 (cool M giant)
    ph = FixedMetallicityPhotometry(0.0, ("ACS_F606W", "ACS_F814W"))
    with pytest.raises(ValueError, match="ACS_F606W: 1 star"):
        ph.absolute_magnitudes(np.log10([4500.0, 3000.0]), np.array([0.5, 0.5]), np.array([3.0, 3.0]))
    # inside the range the grid path agrees with the direct path (< 1e-3 mag, as for the core bands), across the
    # colour breaks and on the hot HB
    t = np.array([4600.0, 5100.0, 6200.0, 7400.0, 9500.0, 18000.0])
    lg = np.array([2.4, 2.5, 3.0, 3.0, 3.5, 4.5])
    ph = FixedMetallicityPhotometry(-1.5, ACS)
    grid = ph.absolute_magnitudes(np.log10(t), lg, np.full(t.size, 1.6))
    ref = absolute_magnitudes(t, lg, -1.5, 1.6, ACS)
    for b in ACS:
        np.testing.assert_allclose(grid[b], ref[b], atol=1e-3)


def test_hot_hb_stars_are_refused_in_the_u_band_and_bands_without_a_relation_are_refused():
    with pytest.raises(ValueError, match="hot HB stars have no published relation"):
        absolute_magnitudes(np.array([6000.0, 15000.0]), 3.5, -1.5, 1.5, ("SDSS_u",))
    # the grid path of the mock refuses the same star
    ph = FixedMetallicityPhotometry(-1.5, ("SDSS_u",))
    with pytest.raises(ValueError, match="SDSS_u: 1 star"):
        ph.absolute_magnitudes(np.log10([6000.0, 15000.0]), np.array([3.5, 3.5]), np.array([1.5, 1.5]))
    # a cool M giant beyond Rc-Ic = 1.15 (the range of Jester et al. 2005) is not extrapolated
    with pytest.raises(ValueError, match="Rc-Ic < 1.15"):
        absolute_magnitudes(np.array([3300.0]), 0.5, 0.0, 3.0, ("SDSS_g",))
    for band in ("UVIS_F606W", "UVIS_F336W", "IR_F160W", "LSST_u", "LSST_y"):
        with pytest.raises(ValueError, match="no published colour relation is tabulated"):
            absolute_magnitudes(np.array([4700.0]), 2.5, 0.0, 1.7, (band,))
    # inside the range the grid path agrees with the direct path (< 1e-3 mag, as for the core bands)
    t = np.array([4600.0, 5100.0, 6200.0])
    ph = FixedMetallicityPhotometry(-0.5, ("SDSS_g", "PS1_i", "WISE_W1"))
    grid = ph.absolute_magnitudes(np.log10(t), np.array([2.4, 2.5, 3.0]), np.full(3, 1.7))
    ref = absolute_magnitudes(t, np.array([2.4, 2.5, 3.0]), -0.5, 1.7, ("SDSS_g", "PS1_i", "WISE_W1"))
    for b in grid:
        np.testing.assert_allclose(grid[b], ref[b], atol=1e-3)
    assert "SDSS_g" not in colours_v(t, 2.5, 0.0)        # relation bands only on request


# --------------------------------------------------------------------------- clump, depths
def test_clump_w1_matches_the_solar_neighbourhood_calibrations():
    from hbmodel.calibration.evaluators import evaluate_row
    from hbmodel.calibration.targets import read_targets
    rows = {r["id"]: r for r in read_targets()}
    # Yaz Gokce et al. 2013 (New Astronomy; Hipparcos RC stars): M_W1 = -1.635 +- 0.026 (mode)
    r = rows["photometry.yaz13_mw1"]
    assert evaluate_row(r) == pytest.approx(r["value"], abs=2 * r["uncertainty"] + 0.02)


def test_survey_depths_give_the_published_limits():
    # Chambers et al. 2016 (abstract): PS1 3pi stack 5-sigma i = 23.1; the error law gives 1.0857/5 + 0.01 there
    assert survey_depth_5sigma("PS1_i") == pytest.approx(23.1)
    assert float(default_error_law("PS1_i")(np.array([23.1]))[0]) == pytest.approx(1.0857 / 5 + 0.01, abs=2e-3)
    # Abbott et al. 2021 (DES DR2 abstract): i = 23.8 at S/N = 10 -> 5 sigma 0.75 mag fainter (background limited)
    assert survey_depth_5sigma("DECam_i") == pytest.approx(23.8 + 2.5 * math.log10(2.0))
    with pytest.raises(ValueError, match="no survey depth"):
        survey_depth_5sigma("ACS_F606W")


# --------------------------------------------------------------------------- commands
def test_predict_gives_clump_magnitudes_in_survey_bands(capsys):
    from hbmodel.cli.main import main
    rc = main(["predict", "--feh", "-0.1", "--age", "4", "--eta", "0.3", "--bands",
               "SDSS_g,PS1_i,WISE_W1,Ks", "--json"])
    assert rc in (0, None)
    d = json.loads(capsys.readouterr().out)
    clump = d["clump_absmag"]
    assert set(clump) == {"SDSS_g", "PS1_i", "WISE_W1", "Ks"}
    # K-giant colours: g - i ~ 1.0-1.3 (Jester relation at B-V ~ 1, R-I ~ 0.5) and Ks - W1 ~ 0.03 (Pecaut & Mamajek)
    assert 0.7 < clump["SDSS_g"] - clump["PS1_i"] < 1.4
    assert 0.0 < clump["Ks"] - clump["WISE_W1"] < 0.08


def test_predict_gives_clump_magnitudes_in_acs_and_survey_bands(capsys):
    # the acceptance command; the ACS clump colour must follow from its Johnson V-I through the
    # Sirianni et al. 2005 transformation (F606W-F814W = V-I - 0.067 + ... at K-giant colours, i.e. ~0.25 bluer)
    from hbmodel.cli import main
    rc = main(["predict", "--feh", "-0.1", "--age", "4", "--eta", "0.3", "--bands",
               "ACS_F606W,ACS_F814W,SDSS_g,PS1_i,WISE_W1,V,I", "--json"])
    assert rc in (0, None)
    clump = json.loads(capsys.readouterr().out)["clump_absmag"]
    assert {"ACS_F606W", "ACS_F814W", "SDSS_g", "PS1_i", "WISE_W1"} <= set(clump)
    vi = clump["V"] - clump["I"]
    assert 0.9 < vi < 1.15                      # K-giant clump (Paczynski & Stanek 1998: V-I = 1.01 locally)
    f6, f8 = clump["ACS_F606W"], clump["ACS_F814W"]
    assert f6 - clump["V"] == pytest.approx(0.067 - 0.340 * vi + 0.038 * vi ** 2, abs=0.01)
    assert f8 - clump["I"] == pytest.approx(0.005 + 0.014 * vi - 0.015 * vi ** 2, abs=0.01)
    assert 0.65 < f6 - f8 < 0.85


def test_distance_from_an_acs_f814w_clump_recovers_the_injected_modulus(tmp_path, capsys):
    # mock in ACS F606W/F814W at (m-M)_0 = 14.5, E(B-V) = 0.1 (extinction on the real ACS passbands), then the
    # clump-LF distance in F814W: the injected modulus within 2 sigma of the quoted budget (0.05 calibration)
    from hbmodel.cli import main
    cat = tmp_path / "c.ecsv"
    assert main(["mock", "--feh", "-0.3", "--age", "5", "--eta", "0.3", "--n-hb", "800", "--bands",
                 "ACS_F606W,ACS_F814W", "--distance-modulus", "14.5", "--ebv", "0.1", "--seed", "5",
                 "--out", str(cat)]) in (0, None)
    capsys.readouterr()
    assert main(["distance", str(cat), "--band", "ACS_F814W", "--feh", "-0.3", "--age", "5", "--ebv", "0.1",
                 "--json"]) in (0, None)
    d = json.loads(capsys.readouterr().out)
    assert d["distance_modulus"]["median"] == pytest.approx(14.5, abs=0.1)


def test_predict_in_a_wfc3_band_is_a_one_line_refusal(capsys):
    from hbmodel.cli import main
    rc = main(["predict", "--feh", "-0.1", "--age", "4", "--eta", "0.3", "--bands", "UVIS_F606W,UVIS_F814W"])
    err = capsys.readouterr().err
    assert rc not in (0, None) and "no published colour relation" in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1


@pytest.mark.slow
def test_mass_loss_is_recovered_from_a_survey_band_mock(tmp_path):
    # injected Reimers eta 0.35 (spread 0.03) in SDSS g, i with the tabulated survey depths; Laplace fit
    from hbmodel.cli.main import main
    cat = tmp_path / "m.ecsv"
    assert main(["mock", "--feh", "-1.0", "--alpha-fe", "0.3", "--age", "11", "--eta", "0.35", "--eta-sd", "0.03",
                 "--n-hb", "300", "--bands", "SDSS_g,SDSS_i", "--distance-modulus", "15", "--ebv", "0.05",
                 "--depth", "survey", "--seed", "3", "--out", str(cat)]) in (0, None)
    out = tmp_path / "fit"
    assert main(["fit", str(cat), "--bands", "SDSS_g,SDSS_i", "--feh", "-1.0", "--alpha-fe", "0.3", "--age", "11",
                 "--distance-modulus", "15", "--ebv", "0.05", "--sampler", "laplace", "--no-compare",
                 "--out", str(out)]) in (0, None)
    res = json.loads(next(out.glob("*.json")).read_text())
    eta = res["eta"]["median"]
    assert eta == pytest.approx(0.35, abs=0.03)


@pytest.mark.slow
def test_mass_loss_is_recovered_from_an_acs_mock(tmp_path):
    # injected Reimers eta 0.40 (spread 0.03) in ACS/WFC F606W, F814W (the ACS globular-cluster survey bands) with
    # the default photometric error law; Laplace fit (~40 s on 2 cores)
    from hbmodel.cli import main
    cat = tmp_path / "m.ecsv"
    assert main(["mock", "--feh", "-1.3", "--alpha-fe", "0.3", "--age", "12", "--eta", "0.4", "--eta-sd", "0.03",
                 "--n-hb", "300", "--bands", "ACS_F606W,ACS_F814W", "--distance-modulus", "15", "--ebv", "0.05",
                 "--seed", "3", "--out", str(cat)]) in (0, None)
    out = tmp_path / "fit"
    assert main(["fit", str(cat), "--bands", "ACS_F606W,ACS_F814W", "--feh", "-1.3", "--alpha-fe", "0.3",
                 "--age", "12", "--distance-modulus", "15", "--ebv", "0.05", "--sampler", "laplace", "--no-compare",
                 "--out", str(out)]) in (0, None)
    res = json.loads(next(out.glob("*.json")).read_text())
    assert res["eta"]["median"] == pytest.approx(0.40, abs=0.03)
