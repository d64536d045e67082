"""Physics stages: trends and limits against published behaviour (sources named beside each check)."""
import numpy as np
import pytest
from scipy.integrate import solve_ivp

from hbmodel.physics import giant_branch as gb
from hbmodel.physics import hb_evolution as hbe
from hbmodel.physics.composition import Composition, metallicity_mh
from hbmodel.physics.ignition import ignition_core_mass_msun, transition_mass_msun
from hbmodel.physics.mass_loss import eta_from_mass_loss, integrate_rgb_mass_loss, mass_loss_from_eta
from hbmodel.physics.zahb import zahb_logl, zahb_logteff, zahb_state


def test_salaris_alpha_scaling():
    # Salaris, Chieffi & Straniero 1993, ApJ 414, 580: [M/H] = [Fe/H] + log10(0.638 f + 0.362)
    assert metallicity_mh(-1.5, 0.3) == pytest.approx(-1.5 + np.log10(0.638 * 10**0.3 + 0.362), abs=1e-12)
    assert metallicity_mh(-1.5, 0.4) - (-1.5) == pytest.approx(0.289, abs=0.005)  # paper's quoted offset for +0.4 (from memory)


def test_solar_composition():
    # Asplund et al. 2009, ARA&A 47, 481: present-day Z = 0.0134; initial Z of the Sun slightly higher,
    # initial Y ~0.26-0.28 in standard solar models (Serenelli et al. 2009, ApJ 705, L123; from memory).
    c = Composition(0.0)
    assert 0.0125 < c.z < 0.0150
    assert 0.255 < c.y < 0.280
    assert c.x + c.y + c.z == pytest.approx(1.0)


@pytest.mark.parametrize("bad", [dict(feh=5.0), dict(feh=-3.5), dict(feh=0.0, helium=0.6),
                                 dict(feh=0.0, alpha_fe=2.0)])
def test_composition_rejects_out_of_range(bad):
    with pytest.raises(ValueError, match="outside"):
        Composition(**bad)


def test_helium_rich_stars_evolve_faster():
    # Homology / published He-enhanced isochrones (D'Antona & Caloi 2004, ApJ 611, 871; from memory):
    # at fixed age the evolving mass drops by ~0.1-0.2 Msun for dY = +0.15.
    mh = -1.3
    m_std = gb.tip_mass_msun(12.0, mh)
    m_he = gb.tip_mass_msun(12.0, mh, Composition(-1.6, 0.3).y + 0.15)
    assert 0.08 < m_std - m_he < 0.22


def test_tip_mass_decreases_with_age_and_increases_with_metallicity():
    # common practice: older populations have lower-mass giants; metal-rich stars live longer at fixed mass
    ages = np.array([1.0, 2.0, 5.0, 10.0, 13.0])
    m = np.array([gb.tip_mass_msun(a, 0.0) for a in ages])
    assert np.all(np.diff(m) < 0)
    assert gb.tip_mass_msun(12.0, 0.0) > gb.tip_mass_msun(12.0, -2.0)


def test_age_outside_range_rejected():
    with pytest.raises(ValueError, match="age"):
        gb.tip_mass_msun(-1.0, 0.0)
    with pytest.raises(ValueError, match="age"):
        gb.tip_mass_msun(20.0, 0.0)


def test_flash_core_mass_trends():
    # Sweigart & Gross 1978, ApJS 36, 405: Mc at the flash decreases with Z and with Y (from memory)
    assert ignition_core_mass_msun(0.9, -2.0) > ignition_core_mass_msun(0.9, 0.0)
    assert ignition_core_mass_msun(0.9, -1.5, 0.35) < ignition_core_mass_msun(0.9, -1.5, 0.25)
    # Transition mass increases with Z (Sweigart, Greggio & Renzini 1990, ApJ 364, 527; from memory)
    assert transition_mass_msun(0.3) > transition_mass_msun(-1.5)
    # Non-degenerate ignition: the core mass rises again with mass above M_HeF (Girardi 1999)
    m = np.array([2.2, 2.6, 3.0])
    assert np.all(np.diff(ignition_core_mass_msun(m, 0.0)) > 0)


def test_rgb_luminosity_function_slope():
    # With L ~ Mc^6 and dMc/dt ~ L the RGB LF is dN/dlogL ~ L^(-5/6) (Refsdal & Weigert 1970; textbook
    # result, Salaris & Cassisi 2005, ch. 5): check the analytic core-growth time against that law.
    mh, x = -1.5, 0.75
    mc = gb.rgb_core_from_logl(np.array([1.5, 2.0, 2.5]), mh)
    t1 = gb.core_growth_time_myr(mc[0], mc[1], mh, x)
    t2 = gb.core_growth_time_myr(mc[1], mc[2], mh, x)
    assert t1 / t2 == pytest.approx(10 ** (5 / 6 * 0.5), rel=1e-6)


def test_metal_poor_giants_are_hotter():
    # common practice: RGB colour is the classic metallicity indicator; metal-poor giants are bluer/hotter
    assert gb.rgb_logteff(2.0, -2.0) > gb.rgb_logteff(2.0, -0.7) > gb.rgb_logteff(2.0, 0.0)
    assert gb.rgb_logteff(3.0, 0.0) < gb.rgb_logteff(1.0, 0.0)


def test_mass_loss_ode_matches_reference_integrator():
    # Reference library: scipy.integrate.solve_ivp (adaptive RK45) on the same Reimers ODE.
    mh, m0, mc_ign, eta = -1.5, 0.84, 0.493, 0.45
    m_rk4, lost = integrate_rgb_mass_loss(eta, m0, mc_ign, mh, x_env=0.75)
    c = gb.constants()
    k = gb.L_SUN_ERG_S * gb.YEAR_S / (c["e_h_erg_g"] * gb.M_SUN_G)

    def rhs(lnmc, y):
        mc = np.exp(lnmc)
        logl = gb.rgb_logl_from_core(mc, mh)
        r = gb.radius_rsun(logl, gb.rgb_logteff(logl, mh, y[0]))
        return [-4e-13 * eta * r / y[0] * 0.75 / k * mc]

    mc0 = gb.rgb_core_from_logl(c["logl_rgb_base"], mh)
    sol = solve_ivp(rhs, (np.log(mc0), np.log(mc_ign)), [m0], rtol=1e-9, atol=1e-12)
    assert not lost
    assert float(m_rk4) == pytest.approx(sol.y[0, -1], abs=1e-5)


def test_eta_delta_m_round_trip_and_monotone():
    etas = np.linspace(0.05, 0.6, 12)
    dm, lost = mass_loss_from_eta(etas, 0.84, 0.493, -1.3)
    assert np.all(np.diff(dm) > 0) and not lost.any()
    back = eta_from_mass_loss(dm, 0.84, 0.493, -1.3)
    np.testing.assert_allclose(back, etas, atol=2e-3)


def test_whole_envelope_lost_is_flagged_not_negative():
    m, lost = integrate_rgb_mass_loss(np.array([0.4, 2.5]), 0.82, 0.50, -2.0)
    assert not lost[0] and lost[1]
    assert np.all(m >= 0.50 - 1e-12)
    with pytest.raises(ValueError, match="eta"):
        integrate_rgb_mass_loss(-0.1, 0.82, 0.5, -2.0)


def test_zahb_metal_poor_spreads_metal_rich_piles_up():
    # Catelan 2009, Ap&SS 320, 261 (metallicity as the first parameter): the same envelope-mass spread gives
    # a wide Teff range at low Z and a compact clump at high Z.
    menv = np.array([0.15, 0.25])
    span_poor = np.ptp(zahb_logteff(0.495, menv, -1.8))
    span_rich = np.ptp(zahb_logteff(0.47, menv + 0.5, 0.0))
    assert span_poor > 5 * span_rich


def test_zahb_teff_monotone_in_envelope_mass():
    menv = np.geomspace(0.002, 3.0, 400)
    for mh in (-2.5, -1.3, -0.5, 0.0, 0.5):
        assert np.all(np.diff(zahb_logteff(0.48, menv, mh)) <= 1e-12)


def test_helium_rich_zahb_brighter_and_bluer():
    # Sweigart 1987, ApJS 65, 95: helium-rich envelopes give brighter ZAHBs and, at fixed total mass, bluer HBs
    mc_std, mc_he = 0.495, 0.475
    assert zahb_logl(mc_he, 0.2, -1.5, 0.1) > zahb_logl(mc_std, 0.2, -1.5, 0.0)
    assert zahb_state(0.68, mc_he, -1.5, 0.1).logteff > zahb_state(0.68, mc_std, -1.5, 0.0).logteff


def test_ehb_stars_do_not_reach_agb_and_red_hb_loops():
    # Dorman, Rood & O'Connell 1993, ApJ 419, 596: extreme-HB stars are AGB-manque
    assert hbe.reaches_agb(np.log10(30000.0)) < 0.05
    assert hbe.reaches_agb(np.log10(5000.0)) > 0.99
    # red HB: blueward loop mid-life, then redward at exhaustion (Sweigart 1987; common practice)
    l, t = hbe.hb_track(1.65, np.log10(5000.0), np.array([0.0, 0.5, 1.0]))
    assert t[1] > t[0] > t[2]
    assert l[2] > l[1] > l[0]


def test_zahb_rejects_out_of_range():
    with pytest.raises(ValueError, match="core mass"):
        zahb_logl(0.7, 0.1, -1.0)
    with pytest.raises(ValueError, match="negative envelope"):
        zahb_state(0.4, 0.49, -1.0)
