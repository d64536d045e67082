"""The RR Lyrae mode's track history (pulsation._entered_from_blue): the stars it skips with the bounds of
hb_evolution.hb_track_bounds could not have been hotter than the fundamental blue edge (FBE), so the
modes are those of following every track back over all its steps; and the hysteresis it implements is
the published one (van Albada & Baker 1973, ApJ 185, 477; Bono, Caputo & Stellingwerf 1994, ApJ 423, 294):
a star in the either-or zone pulsates in the mode it brought in, first overtone if it came from the blue."""
import numpy as np

from hbmodel.physics import hb_evolution as hbe
from hbmodel.physics import pulsation as pu


def _stars(n, seed=2):
    rng = np.random.default_rng(seed)
    l0 = rng.uniform(1.45, 1.85, n)
    t0 = rng.uniform(3.70, 4.05, n)  # red HB, the strip and the blue HB
    tau = rng.uniform(0.0, 1.0, n)
    logm = np.log10(rng.uniform(0.55, 0.80, n))
    return l0, t0, tau, logm


def _brute_force(l0, t0, tau, logm, n_steps=16):
    # the definition: hotter than the FBE at one of the n_steps earlier points tau k / n_steps of the track
    frac = np.arange(n_steps) / n_steps
    l, t = hbe.hb_track(l0[:, None], t0[:, None], tau[:, None] * frac[None, :])
    return np.any(t > pu._edge("fbe", l, logm=logm[:, None]), axis=1)


def test_bounds_hold_along_every_track():
    l0, t0, tau, _ = _stars(20000)
    l_tau, t_max = hbe.hb_track_bounds(l0, t0, tau)
    grid = tau[:, None] * np.linspace(0.0, 1.0, 201)[None, :]
    l, t = hbe.hb_track(l0[:, None], t0[:, None], grid)
    assert np.all(t.max(axis=1) <= t_max + 1e-12)
    assert np.all(l.max(axis=1) <= l_tau + 1e-12) and np.all(l.min(axis=1) >= l0 - 1e-12)
    # not a vacuous bound: within the red loop's amplitude (a few hundredths of a dex) of the hottest point
    assert np.median(t_max - t.max(axis=1)) < 0.03


def test_skipped_stars_give_the_modes_of_the_full_history():
    l0, t0, tau, logm = _stars(200000)
    ref = _brute_force(l0, t0, tau, logm)
    got = pu._entered_from_blue(l0, t0, tau, logm, 16)
    np.testing.assert_array_equal(got, ref)
    assert 0.05 < ref.mean() < 0.95  # both outcomes well represented
    # the bounds settle most red-HB and strip stars without the history
    l_tau, t_max = hbe.hb_track_bounds(l0, t0, tau)
    skipped = t_max < np.minimum(pu._edge("fbe", l0, logm=logm), pu._edge("fbe", l_tau, logm=logm)) - 1e-9
    assert skipped.mean() > 0.3 and not np.any(ref[skipped])


def test_zone_star_keeps_the_mode_it_brought_in():
    # van Albada & Baker 1973: in the either-or zone a star from the blue stays RRc, one arriving on the
    # ZAHB from the red (after the helium flash) pulsates as RRab
    logm = np.log10(np.array([0.65, 0.65]))
    l0 = np.array([1.65, 1.65])
    fbe0 = pu._edge("fbe", l0, logm=logm)
    t0 = np.array([fbe0[0] + 0.02, fbe0[1] - 0.03])  # blue of the FBE on the ZAHB / red of it
    tau = np.array([0.9, 0.05])
    assert list(pu._entered_from_blue(l0, t0, tau, logm, 16)) == [True, False]
    assert list(_brute_force(l0, t0, tau, logm)) == [True, False]
