"""Extinction by band: checked against the dust_extinction laws themselves (reference library)."""
import numpy as np
import pytest

from hbmodel.photometry.extinction import (LAWS, apparent_magnitudes, extinction_mag, extinction_ratio,
                                law_curve, passband)
from hbmodel.photometry.magnitudes import BAND_NAMES, absolute_magnitudes, get_band


def test_laws_tuple():
    assert LAWS == ("F99", "CCM89", "G23")


@pytest.mark.parametrize("law", LAWS)
@pytest.mark.parametrize("rv", [2.5, 3.1, 5.0])
def test_av_over_ebv_is_rv_for_a0_star(law, rv):
    # definition R_V = A_V / E(B-V) (Cardelli et al. 1989; Fitzpatrick 1999), A_V monochromatic at
    # ~0.549 um.  The V band of a ~10,000 K star is centred at lambda_eff = 0.545 um (Bessell 2005,
    # from memory), where the laws themselves give k = A/A_V = 0.99-1.012 (reference library,
    # checked below); the blue-weighted band mean adds <= 1.5 % (spectrum slope x band width).
    # Hence A_V/E(B-V) = R_V within 3 %, and within 1.5 % of R_V k(lambda_eff).
    ratio = float(extinction_ratio("V", 10000.0, rv=rv, law=law)) / rv
    k_eff = float(law_curve(law, rv, get_band("V").lambda_eff_um))
    assert abs(k_eff - 1.0) < 0.015
    assert ratio == pytest.approx(k_eff, abs=0.015)
    assert ratio == pytest.approx(1.0, abs=0.03)


@pytest.mark.parametrize("law", LAWS)
@pytest.mark.parametrize("band", BAND_NAMES)
def test_band_ratio_matches_law_at_effective_wavelength(law, band):
    """Compare with dust_extinction evaluated at the band's effective wavelength.

    Tolerance (justified): a positively weighted mean of k(lambda) over the passband differs from
    k(lambda_eff) by at most the largest excursion of k over the passband; the mean must also lie
    inside [min k, max k] (mean-value property).  Both can fail if the integration is wrong.
    """
    b = get_band(band)
    rv = 3.1
    ratio = float(extinction_ratio(band, 9550.0, rv=rv, law=law)) / rv
    lam, _resp = passband(band)
    k = law_curve(law, rv, lam)
    k_eff = float(law_curve(law, rv, b.lambda_eff_um))
    assert k.min() <= ratio <= k.max()
    assert abs(ratio - k_eff) <= np.max(np.abs(k - k_eff))
    if band in ("V", "I", "J", "H", "Ks"):
        # narrow bands (FWHM/lambda < 0.2): within 3 % of the law at lambda_eff
        assert ratio == pytest.approx(k_eff, rel=0.03)


@pytest.mark.parametrize("law", LAWS)
def test_hot_stars_redden_more_in_g(law):
    # broad-band G: A_G/E(B-V) larger for hot than for cool stars (Casagrande & VandenBerg 2018,
    # MNRAS 479, L102; Gaia Collaboration, Babusiaux et al. 2018, A&A 616, A10 - from memory: the
    # ratio k_G = A_G/A_0 falls from ~0.95 to ~0.8 across BP-RP 0...2)
    hot = float(extinction_ratio("G", 10000.0, law=law))
    cool = float(extinction_ratio("G", 4000.0, law=law))
    assert hot > cool + 0.3
    assert 0.72 < cool / hot < 0.9
    # narrow near-IR band is nearly Teff independent (< 1 %)
    ks = extinction_ratio("Ks", np.array([4000.0, 10000.0]), law=law)
    assert abs(ks[1] / ks[0] - 1) < 0.01


def test_optical_ratios_increase_with_teff():
    # hotter stars weight the blue side of a passband where extinction is larger (F99 law rises to
    # the blue): A_band/E(B-V) increases monotonically with Teff
    teff = np.geomspace(3000.0, 50000.0, 500)
    for band in ("U", "B", "V", "R", "I", "G", "BP", "RP"):
        assert np.all(np.diff(extinction_ratio(band, teff)) >= 0), band


def test_extinction_mag_and_apparent_magnitudes():
    teff = np.array([4000.0, 6000.0, 20000.0])
    ebv = np.array([0.0, 0.3, 1.0])
    a_v = extinction_mag("V", ebv, teff)
    assert a_v[0] == 0.0
    assert a_v[2] == pytest.approx(float(extinction_ratio("V", 20000.0)))
    assert float(extinction_mag("V", 0.5, 5000.0)) == pytest.approx(
        0.5 * float(extinction_ratio("V", 5000.0)))
    absmag = absolute_magnitudes(teff, 4.0, 0.0, 0.5)
    app = apparent_magnitudes(absmag, 10.0, ebv, teff)
    assert set(app) == set(BAND_NAMES)
    for b in BAND_NAMES:
        np.testing.assert_allclose(app[b], absmag[b] + 10.0 + extinction_mag(b, ebv, teff))
    # reddening: B-V grows by ~E(B-V) (nominal colour excess) for an A0-like star
    e = float(extinction_mag("B", 0.4, 9550.0) - extinction_mag("V", 0.4, 9550.0))
    assert e == pytest.approx(0.4, rel=0.05)


def test_laws_agree_roughly():
    # F99, CCM89 and G23 are independent fits to Milky Way sightlines: at V and Ks they agree to
    # ~5 % and ~15 % in A/E(B-V) for R_V = 3.1 (reference-library comparison)
    v = [float(extinction_ratio("V", 6000.0, law=l)) for l in LAWS]
    ks = [float(extinction_ratio("Ks", 6000.0, law=l)) for l in LAWS]
    assert max(v) / min(v) < 1.05
    assert max(ks) / min(ks) < 1.15


@pytest.mark.parametrize("call,match", [
    (lambda: extinction_mag("V", -0.1, 5000.0), "negative"),
    (lambda: extinction_mag("V", np.array([0.1, -0.01]), 5000.0), "negative"),
    (lambda: extinction_ratio("V", 5000.0, law="XYZ"), "unknown extinction law"),
    (lambda: extinction_ratio("V", 5000.0, rv=7.0, law="F99"), "outside the valid range"),
    (lambda: extinction_ratio("V", 5000.0, rv=2.2, law="G23"), "outside the valid range"),
    (lambda: extinction_ratio("Y", 5000.0), "unknown band"),
    (lambda: extinction_ratio("V", 2000.0), "teff_k"),
    (lambda: apparent_magnitudes({}, 10.0, 0.1, 5000.0), "non-empty"),
])
def test_bad_input_raises(call, match):
    with pytest.raises(ValueError, match=match):
        call()
