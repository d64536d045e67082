"""Photometry: band registry, bolometric corrections, colours (checked against published values)."""
import numpy as np
import pytest

from hbmodel.photometry import magnitudes as ph
from hbmodel.photometry.magnitudes import (BAND_NAMES, M_BOL_SUN, absolute_magnitudes,
                                bolometric_correction, colour, get_band)

SUN = (5772.0, 4.44, 0.0)          # IAU 2015 Resolution B3 nominal Teff (Prsa et al. 2016)
A0V = (9550.0, 3.95, 0.0)          # Vega-like A0 V (common practice)
CLUMP = (4750.0, 2.45, 0.0)        # solar-metallicity red clump (common practice)


def c(b1, b2, star):
    return float(colour(b1, b2, *star))


# ----------------------------------------------------------------------------- registry
def test_band_registry_names_and_fields():
    assert BAND_NAMES == ("U", "B", "V", "R", "I", "J", "H", "Ks", "G", "BP", "RP")
    for name in BAND_NAMES:
        b = get_band(name)
        assert b.zero_point == "Vega"
        assert b.lambda_lo_um < b.lambda_eff_um < b.lambda_hi_um
    # effective wavelengths: Bessell 2005 ARA&A 43, 293 (V 0.545 um), Cohen et al. 2003 (Ks 2.159 um),
    # from memory
    assert get_band("V").lambda_eff_um == pytest.approx(0.545, abs=0.01)
    assert get_band("Ks").lambda_eff_um == pytest.approx(2.16, abs=0.02)
    assert get_band("J").system == "2MASS" and get_band("G").system.startswith("Gaia")


def test_unknown_band_lists_known_names_and_the_nearest():
    # issue 16: an unknown band names the nearest known one; K / k are now aliases of Ks (tables/bands.csv)
    with pytest.raises(ValueError, match=r"unknown band 'Kss' \(nearest known band: Ks; known: U, B, V"):
        get_band("Kss")
    with pytest.raises(ValueError, match="nearest known band: ACS_F606W"):  # HST F625W = 625 nm: nearest ACS band
        get_band("ACS_F625W")
    with pytest.raises(ValueError, match="unknown band"):
        bolometric_correction("z", *SUN)
    with pytest.raises(ValueError, match="unknown band"):
        absolute_magnitudes(*SUN, 0.0, bands=("V", "Y"))
    assert colour("V", "k", *SUN) == colour("V", "Ks", *SUN)


def test_solar_bolometric_reference():
    # IAU 2015 Resolution B2 (Prsa et al. 2016, AJ 152, 41)
    assert M_BOL_SUN == 4.74


# ----------------------------------------------------------------------------- the Sun
def test_sun_absolute_magnitudes():
    m = absolute_magnitudes(*SUN, 0.0)
    # M_V,sun = 4.81 (Willmer 2018, ApJS 236, 47; Casagrande & VandenBerg 2018) - from memory
    assert float(m["V"]) == pytest.approx(4.81, abs=0.03)
    # M_G,sun = 4.67 (Casagrande & VandenBerg 2018, MNRAS 479, L102) - from memory
    assert float(m["G"]) == pytest.approx(4.67, abs=0.03)
    # BC_V,sun = -0.07...-0.08 on the M_bol,sun = 4.74 scale (Torres 2010, AJ 140, 1158) - from memory
    assert float(bolometric_correction("V", *SUN)) == pytest.approx(-0.075, abs=0.02)


def test_sun_colours():
    # Ramirez et al. 2012, ApJ 752, 5 and Casagrande & VandenBerg 2018 solar colours - from memory:
    # B-V = 0.653 +- 0.003, V-I_C = 0.702 +- 0.010, V-Ks = 1.560 +- 0.008, BP-RP = 0.82
    assert c("B", "V", SUN) == pytest.approx(0.65, abs=0.02)
    assert 0.695 <= c("V", "I", SUN) <= 0.725
    assert c("V", "Ks", SUN) == pytest.approx(1.56, abs=0.03)
    assert c("BP", "RP", SUN) == pytest.approx(0.82, abs=0.03)
    # 2MASS J-Ks,sun = 0.36 (Casagrande et al. 2012, ApJ 761, 16) - from memory
    assert c("J", "Ks", SUN) == pytest.approx(0.36, abs=0.03)


# ----------------------------------------------------------------------------- Vega system
def test_a0v_has_zero_colours():
    # definition of the Vega system: an A0 V star has all colours ~ 0 (within 0.05 mag)
    v = ph.colours_v(*A0V)
    for band in BAND_NAMES:
        assert abs(float(v[band])) <= 0.05, band
    assert abs(c("BP", "RP", A0V)) <= 0.05


# ----------------------------------------------------------------------------- red clump
def test_red_clump_colours():
    # solar-metallicity giant at 4750 K, log g 2.45: B-V is the Alonso, Arribas & Martinez-Roger 1999
    # (A&AS 140, 261) giant relation tabulated in colour_teff_giant.csv (common-practice range for a clump
    # giant).  V-I, J-Ks and BP-RP of the clump are judged on whole populations against the Gaia-era
    # calibrations in tables/targets/photometry.ecsv (tests/test_calibration.py), not at an assumed Teff.
    assert 1.00 <= c("B", "V", CLUMP) <= 1.05
    # a clump giant is redder in V-I than in V-R
    assert c("V", "I", CLUMP) > c("V", "R", CLUMP) > 0


def _ghb09_giant_colour(coeffs, teff_k, feh=0.0):
    """Colour X solving theta = b0 + b1 X + b2 X^2 + b3 X [Fe/H] + b4 [Fe/H] + b5 [Fe/H]^2."""
    b0, b1, b2, b3, b4, b5 = coeffs
    a, b, cc = b2, b1 + b3 * feh, b0 + b4 * feh + b5 * feh ** 2 - 5040.0 / teff_k
    return (-b + np.sqrt(b * b - 4 * a * cc)) / (2 * a)


@pytest.mark.parametrize("teff_k", [4500.0, 4750.0, 5000.0, 5500.0])
def test_giant_near_ir_colours_follow_the_2mass_irfm_relation(teff_k):
    # Gonzalez Hernandez & Bonifacio 2009, A&A 497, 497, Table 5 (giant stars, 2MASS system; coefficients
    # read at aanda.edpsciences.org .../aa10904-08/table5.tex), at [Fe/H] = 0 and log g 2.45: V-Ks (sigma_Teff
    # 23 K, i.e. ~0.03 mag at 4750 K) and V-J; their J-Ks relation (sigma 94 K) fixes J-Ks to ~0.03 mag.
    star = (teff_k, 2.45, 0.0)
    v_ks = _ghb09_giant_colour((0.5293, 0.2489, -0.0119, -0.0042, 0.0135, 0.0010), teff_k)
    v_j = _ghb09_giant_colour((0.4629, 0.4124, -0.0417, -0.0012, 0.0094, 0.0013), teff_k)
    j_ks = _ghb09_giant_colour((0.6517, 0.6312, 0.0168, -0.0381, 0.0256, 0.0013), teff_k)
    assert c("V", "Ks", star) == pytest.approx(v_ks, abs=0.03)
    assert c("V", "J", star) == pytest.approx(v_j, abs=0.03)
    assert c("J", "Ks", star) == pytest.approx(j_ks, abs=0.04)


def test_red_clump_absolute_magnitude_differences():
    # a star with the clump's M_V = +0.81 has M_V - M_Ks = V - Ks (the bolometric scale cancels);
    # clump luminosity ~ 30-80 Lsun (Girardi 2016, ARA&A 54, 95) - from memory
    logl = (M_BOL_SUN - 0.81 - float(bolometric_correction("V", *CLUMP))) / 2.5
    m = absolute_magnitudes(*CLUMP, logl)
    assert float(m["V"]) == pytest.approx(0.81, abs=1e-9)
    assert float(m["V"] - m["Ks"]) == pytest.approx(c("V", "Ks", CLUMP), abs=1e-9)
    assert 1.4 < logl < 1.9


# ----------------------------------------------------------------------------- metallicity
@pytest.mark.parametrize("teff,logg", [(4500.0, 2.5), (4750.0, 2.45), (5200.0, 2.8), (5500.0, 4.5),
                                       (6000.0, 4.3)])
def test_bv_redder_at_higher_metallicity(teff, logg):
    # Alonso et al. 1999 (giants) / Casagrande et al. 2010 (dwarfs): at fixed Teff B-V grows with [Fe/H]
    bv = [float(colour("B", "V", teff, logg, f)) for f in (-2.0, -1.0, 0.0, 0.3)]
    assert np.all(np.diff(bv) > 0)
    # size of the effect: 0.05-0.2 mag per dex near solar (Alonso et al. 1999 eqs., from memory)
    assert 0.03 < bv[2] - bv[1] < 0.2


def test_uv_excess_of_metal_poor_dwarfs():
    # Carney 1979, ApJ 233, 211: [Fe/H] = -1 dwarfs have delta(U-B)_0.6 ~ 0.15-0.2 (from memory);
    # U-B reacts more strongly to metallicity than B-V (line blanketing, common practice)
    d_ub = c("U", "B", (6000.0, 4.4, 0.0)) - c("U", "B", (6000.0, 4.4, -1.0))
    d_bv = c("B", "V", (6000.0, 4.4, 0.0)) - c("B", "V", (6000.0, 4.4, -1.0))
    assert 0.10 < d_ub < 0.25
    assert d_ub > d_bv > 0


# ----------------------------------------------------------------------------- hot stars
def test_hot_star_colours():
    # Bessell, Castelli & Plez 1998, A&A 333, 231 (from memory): B-V ~ -0.27, U-B ~ -1.05 at 30,000 K;
    # B-V ~ -0.10 at 12,000 K
    assert c("B", "V", (30000.0, 5.5, 0.0)) == pytest.approx(-0.27, abs=0.04)
    assert c("U", "B", (30000.0, 5.5, 0.0)) == pytest.approx(-1.05, abs=0.08)
    assert c("B", "V", (12000.0, 4.0, -1.5)) == pytest.approx(-0.10, abs=0.04)
    # bolometric correction of a 30,000 K star: BC_V ~ -2.9 (Flower 1996, ApJ 469, 355) - from memory
    assert float(bolometric_correction("V", 30000.0, 5.5, 0.0)) == pytest.approx(-2.9, abs=0.2)


# ----------------------------------------------------------------------------- monotonicity
CMD_COLOURS = [("U", "V"), ("B", "V"), ("V", "R"), ("V", "I"), ("V", "J"), ("V", "H"),
               ("V", "Ks"), ("BP", "RP"), ("G", "RP"), ("BP", "G"), ("G", "Ks"), ("V", "RP")]


@pytest.mark.parametrize("logg", [-0.5, 1.0, 2.45, 3.5, 4.44, 5.5, 6.5])
@pytest.mark.parametrize("feh", [-2.5, -1.0, 0.0, 0.5])
def test_colours_monotonic_in_teff(logg, feh):
    # bluer-minus-redder colours must fall monotonically with Teff (no step or fold in a CMD)
    teff = np.geomspace(3000.0, 50000.0, 20001)
    v = ph.colours_v(teff, logg, feh)
    for b1, b2 in CMD_COLOURS:
        col = v[b2] - v[b1]
        assert np.all(np.diff(col) <= 0.0), (b1, b2)
        assert col[0] - col[-1] > 0.3, (b1, b2)


def test_u_minus_b_shows_the_balmer_jump():
    # U-B of dwarfs is not monotonic: it peaks in the late A stars (Balmer jump), e.g.
    # Schmidt-Kaler 1982 (Landolt-Boernstein VI/2b) A5 V U-B ~ +0.10 vs F5 V ~ -0.02 - from memory
    ub = [c("U", "B", (t, 4.3, 0.0)) for t in (6500.0, 8200.0, 9550.0)]
    assert ub[1] > ub[0] and ub[1] > ub[2]


def test_no_steps_at_relation_joins():
    # Flower/Torres BC_V segments join at log Teff = 3.70, 3.90; colour relations join at 4500,
    # 5000-5500, 7500-8000 K: adjacent values 1e-5 dex apart must differ by < 1 mmag
    joins = np.array([10 ** 3.70, 10 ** 3.90, 4500.0, 5000.0, 5400.0, 7500.0, 8000.0])
    for g in (2.45, 4.44):
        for f in (-2.0, 0.0):
            lo = ph.colours_v(joins * (1 - 1e-5), g, f)
            hi = ph.colours_v(joins * (1 + 1e-5), g, f)
            for k in lo:
                assert np.all(np.abs(hi[k] - lo[k]) < 1e-3), k


# ----------------------------------------------------------------------------- API behaviour
def test_vectorised_and_broadcast():
    teff = np.array([[4000.0, 5000.0, 6000.0]])
    m = absolute_magnitudes(teff, np.array([[2.0], [4.0]]), 0.0, 1.0)
    assert set(m) == set(BAND_NAMES)
    assert m["V"].shape == (2, 3)
    scalar = absolute_magnitudes(5000.0, 2.0, 0.0, 1.0, bands="V")
    assert set(scalar) == {"V"} and np.ndim(scalar["V"]) == 0
    assert float(scalar["V"]) == pytest.approx(float(m["V"][0, 1]))
    # M_band = M_bol,sun - 2.5 log L - BC_band
    bc = bolometric_correction("Ks", 5000.0, 2.0, 0.0)
    assert float(absolute_magnitudes(5000.0, 2.0, 0.0, 1.0)["Ks"]) == pytest.approx(
        M_BOL_SUN - 2.5 - float(bc))


@pytest.mark.parametrize("args,match", [
    ((2999.0, 4.0, 0.0), "teff_k"), ((50001.0, 4.0, 0.0), "teff_k"),
    ((5000.0, -0.6, 0.0), "logg"), ((5000.0, 6.6, 0.0), "logg"),
    ((5000.0, 4.0, -3.0), r"\[Fe/H\]"), ((5000.0, 4.0, 0.8), r"\[Fe/H\]"),
    ((np.nan, 4.0, 0.0), "finite")])
def test_out_of_range_inputs_raise(args, match):
    with pytest.raises(ValueError, match=match):
        bolometric_correction("V", *args)
    with pytest.raises(ValueError, match=match):
        absolute_magnitudes(*args, 0.0)
