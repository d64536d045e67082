"""HB evolution: from the ZAHB to core-helium exhaustion, then the early AGB.

Stars are placed by their fractional age ``tau`` on the HB (0 = ZAHB,
1 = core-helium exhaustion); sampling ``tau`` uniformly in time means track
speed sets the density of stars along the HB.  Shapes and lifetimes follow
published HB tracks (Sweigart 1987, ApJS 65, 95; Dorman 1992, ApJS 81, 221;
Dorman, Rood & O'Connell 1993, ApJ 419, 596); coefficients in
``tables/hb_evolution.csv``:

* red HB / clump: a small blueward loop then redward at the end;
* blue HB: brightens and evolves redward late, toward the AGB;
* extreme HB (ZAHB Teff >~ 20 kK): brightens and heats and never reaches the
  AGB (AGB-manqué).

The early AGB (``agb_track``) runs from the end of the HB to the AGB bump,
where the stars linger, and somewhat beyond.
"""
from __future__ import annotations


import numpy as np

from ._tables import read_table, table_cache
from ._validate import check_range
from .giant_branch import agb_logteff

__all__ = ["hb_lifetime_myr", "class_weights", "hb_track", "agb_track", "agb_lifetime_myr", "reaches_agb"]


@table_cache
def _c() -> dict:
    return {k: float(v[0]) for k, v in read_table("hb_evolution.csv").items()}


def _sigmoid(x):
    return 0.5 * (1.0 + np.tanh(0.5 * x))


def class_weights(zahb_logteff):
    """Weights (extreme, blue, red) of the three HB track families from the ZAHB log Teff."""
    c = _c()
    lt = np.asarray(zahb_logteff, float)
    w_ehb = _sigmoid((lt - c["logt_ehb"]) / 0.03)
    w_red = _sigmoid((c["logt_red"] - lt) / 0.02)
    w_blue = np.clip(1.0 - w_ehb - w_red, 0.0, 1.0)
    return w_ehb, w_blue, w_red


def hb_lifetime_myr(core_mass_msun, zahb_logteff, helium_excess=0.0):
    """Core-helium-burning lifetime (Myr): ``t0 (Mc/0.49)^-3 10^(0.6 dY) (1 + 0.25 w_EHB)``.

    ~88 Myr for Mc = 0.49 Msun (Sweigart 1987; Dorman 1992; common practice ~100 Myr); longer for the
    smaller cores of intermediate-mass stars (Girardi 1999).  Valid for Mc 0.30-0.55 Msun.
    """
    c = _c()
    mc = check_range(core_mass_msun, "HB core mass (Msun)", 0.30, 0.55)
    w_ehb, _, _ = class_weights(zahb_logteff)
    return (c["t0_myr"] * (mc / 0.49) ** c["mc_exp"] * 10.0 ** (c["dy_exp"] * np.asarray(helium_excess, float))
            * (1.0 + c["ehb_boost"] * w_ehb))


def _power(x, n):
    """``x ** n``; integer exponents by repeated multiplication (several times faster than ``pow``)."""
    k = int(n)
    if k != n or not 1 <= k <= 16:
        return x ** n
    out, base = None, x
    while k:
        if k & 1:
            out = base.copy() if out is None else out * base
        k >>= 1
        if k:
            base = base * base
    return out


def hb_track(zahb_logl, zahb_logteff, tau):
    """log L and log Teff at fractional HB age ``tau`` (0...1) for stars with the given ZAHB position.

    Track shapes from memory of published HB tracks (Dorman 1992, ApJS 81, 221; Dorman, Rood & O'Connell
    1993, ApJ 419, 596).  Valid for ZAHB log L 0.5-2.6 and log Teff 3.55-4.70 (ValueError outside)."""
    c = _c()
    tau = check_range(tau, "fractional HB age tau", 0.0, 1.0)
    l0 = check_range(zahb_logl, "ZAHB log L", 0.5, 2.6)
    t0 = check_range(zahb_logteff, "ZAHB log Teff", 3.55, 4.70)
    l0, t0, tau = np.broadcast_arrays(l0, t0, tau)
    w_ehb, w_blue, w_red = class_weights(t0)
    p_blue = _power(tau, c["blue_n"])
    # dlog L = sum over families of w (a tau + b tau^n)
    dl = (w_red * c["red_a"] + w_blue * c["blue_a"] + w_ehb * c["ehb_a"]) * tau
    dl += w_red * c["red_b"] * _power(tau, c["red_n"])
    dl += w_blue * c["blue_b"] * p_blue
    dl += w_ehb * c["ehb_b"] * _power(tau, c["ehb_n"])
    dl += l0
    # dlog Teff: red loop and late redward turn, blue-HB redward drift, extreme-HB heating
    dt = np.sin(np.pi * tau)
    dt *= c["red_loop"]
    dt -= c["red_late"] * _power(tau, 8)
    dt *= w_red
    dt -= (c["blue_shift"] * w_blue) * np.clip(t0 - 3.75, 0.0, None) * p_blue
    dt += (c["ehb_heat"] * w_ehb) * (tau * tau)
    dt += t0
    return dl, dt


def reaches_agb(zahb_logteff):
    """Weight (0...1) with which a star reaches the AGB (extreme-HB stars do not: AGB-manqué)."""
    w_ehb, _, _ = class_weights(zahb_logteff)
    return 1.0 - w_ehb


def agb_lifetime_myr(core_mass_msun, zahb_logteff, helium_excess=0.0):
    """Duration of the early-AGB stretch modelled (Myr): ``f_agb t_HB`` for stars that reach it."""
    return _c()["f_agb"] * hb_lifetime_myr(core_mass_msun, zahb_logteff, helium_excess) * reaches_agb(zahb_logteff)


def agb_track(zahb_logl, zahb_logteff, s, mass_msun, mh, helium_excess=0.0):
    """log L and log Teff at fractional early-AGB age ``s`` (0...1).

    Piecewise in time: from the end of the HB to just below the AGB bump, a pile-up at the bump
    (``agb_bump_frac`` of the time; AGB bump ~1 mag above the HB, Gallart 1998, ApJ 495, L43; duration
    from N_AGB/N_HB, Buzzoni et al. 1983, A&A 128, 94 -- both from memory), then upward; Teff joins the AGB locus
    (:func:`hbmodel.giant_branch.agb_logteff`) within the first 10% of the stretch.
    """
    c = _c()
    s = check_range(s, "fractional AGB age", 0.0, 1.0)
    l_end, t_end = hb_track(zahb_logl, zahb_logteff, np.ones_like(np.asarray(s, float)))
    l0 = np.asarray(zahb_logl, float)
    bump = l0 + c["agb_bump_dlogl"]
    l_end = np.minimum(l_end, bump - 0.03)
    s1 = (1.0 - c["agb_bump_frac"]) * 0.6
    s2 = s1 + c["agb_bump_frac"]
    logl = np.where(s < s1, l_end + (bump - 0.02 - l_end) * s / s1,
                    np.where(s < s2, bump - 0.02 + 0.04 * (s - s1) / (s2 - s1),
                             bump + 0.02 + (l0 + c["agb_top_dlogl"] - bump - 0.02) * (s - s2) / (1.0 - s2)))
    t_agb = agb_logteff(np.clip(logl, 0.3, 3.7), mh, mass_msun, helium_excess)
    blend = np.clip(s / 0.1, 0.0, 1.0)
    logt = t_end * (1 - blend) + np.minimum(t_agb, t_end) * blend
    return logl, logt
