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

from hbmodel.core.tables import read_table, table_cache
from hbmodel.core.validation import check_range
from hbmodel.physics.giant_branch import agb_logteff

__all__ = ["hb_lifetime_myr", "class_weights", "hb_track", "hb_track_bounds", "hb_track_dlogteff_dtau", "agb_track", "agb_lifetime_myr", "reaches_agb"]


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


def agb_bump_fraction() -> float:
    """Fraction of the early-AGB time spent at the AGB bump (``agb_bump_frac``; Gallart 1998, ApJ 495, L43)."""
    return _c()["agb_bump_frac"]


def hb_lifetime_myr(core_mass_msun, zahb_logteff, helium_excess=0.0):
    """Core-helium-burning lifetime (Myr): ``t0 (Mc/0.49)^mc_exp 10^(dy_exp dY) (1 + hot_boost w_hot) (1 + ehb_boost w_EHB)``.

    ~100 Myr for Mc = 0.49 Msun (Sweigart 1987; Dorman 1992; common practice); longer for the smaller
    cores of intermediate-mass stars (Girardi 1999).  Hot (blue) HB stars burn helium longer than RR
    Lyrae and red-HB stars — on average by ~20 % (Zoccali et al. 2000, ApJ 538, 289, abstract) — through
    ``w_hot``, a smooth step in ZAHB log Teff centred on ``hot_logt`` (0.05 dex wide).  ``t0_myr``,
    ``hot_boost`` and the early-AGB fraction are fitted by the calibration (R, t_hot/t_RR, R2).
    Valid for Mc 0.30-0.55 Msun.
    """
    c = _c()
    mc = check_range(core_mass_msun, "HB core mass (Msun)", 0.30, 0.55)
    lt = np.asarray(zahb_logteff, float)
    w_ehb, _, _ = class_weights(lt)
    w_hot = _sigmoid((lt - c["hot_logt"]) / 0.05)
    return (c["t0_myr"] * (mc / 0.49) ** c["mc_exp"] * 10.0 ** (c["dy_exp"] * np.asarray(helium_excess, float))
            * (1.0 + c["hot_boost"] * w_hot) * (1.0 + c["ehb_boost"] * w_ehb))


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


def _red_loop_amplitude(c, t0):
    """Peak blueward excursion (dex) of a red-HB track vs its ZAHB log Teff (piecewise linear, csv nodes)."""
    return np.interp(t0, [c["red_loop_t0"], c["red_loop_t1"], c["red_loop_t2"]],
                     [c["red_loop_a0"], c["red_loop"], c["red_loop_a2"]])


def _blue_drift(c, t0):
    """Total redward drift (dex) of a blue-HB track over the HB life vs its ZAHB log Teff."""
    return c["blue_drift"] * np.clip(t0 - c["blue_tref"], 0.0, c["blue_dmax"])


def _softplus(x):
    return np.logaddexp(0.0, x)


def _blue_shape(c, tau, derivative=True):
    """Fraction of the total blue-HB drift reached at ``tau`` and its derivative (None unless ``derivative``).

    ``g = (1-q) tau + q S(tau)``: a slow drift over most of the HB, then a fast, steady redward run after
    ``blue_tc`` (smoothed over ``blue_w``) towards the AGB, ``S = softplus((tau-tc)/w) / softplus((1-tc)/w)``
    (S(0) ~ 0, S(1) = 1).  The run is at a nearly constant rate in log Teff, so a crossing star spends
    equal times per unit log Teff in the strip."""
    q, tc, w = c["blue_q"], c["blue_tc"], c["blue_w"]
    norm = _softplus((1.0 - tc) / w)
    x = (tau - tc) / w
    g = (1.0 - q) * tau + q * _softplus(x) / norm
    dg = (1.0 - q) + q * _sigmoid(x) / (w * norm) if derivative else None
    return g, dg


def hb_track(zahb_logl, zahb_logteff, tau):
    """log L and log Teff at fractional HB age ``tau`` (0...1) for stars with the given ZAHB position.

    Families (weights from the ZAHB log Teff, :func:`class_weights`), coefficients in
    ``tables/hb_evolution.csv``:

    * red HB / stars starting inside the RR Lyrae strip: ``dlogTeff = A(T0) sin(pi tau^p) - red_late tau^8``,
      a blueward loop of a few hundredths of a dex peaking at tau ~0.6, largest for ZAHB stars just red
      of the strip at intermediate [Fe/H] and small in the clump (Sweigart 1987, ApJS 65, 95; Dorman 1992,
      ApJS 81, 221; Lee & Demarque 1990, ApJS 73, 709), then redward at core-He exhaustion;
      ``dlogL = red_a tau + red_b tau^red_n`` (mean evolved level ~0.09 mag above the ZAHB, Sandage 2010
      quoting Sandage 1990/1993 and Dorman 1992 tracks for M3).
    * blue HB: a slow redward drift over most of the HB, then a steady run at nearly constant
      d log Teff / d tau from tau ~ ``blue_tc`` through the strip towards the AGB
      (``-D(T0) [(1-q) tau + q S(tau)]``, :func:`_blue_shape`), so every star entering the strip crosses it
      with equal time per unit log Teff; gradual brightening ``blue_a tau + blue_b tau^blue_n`` puts the
      crossers ~0.04-0.06 dex above the ZAHB (Lee, Demarque & Zinn 1990, ApJ 350, 155: evolved Oosterhoff II
      RRab ~0.18 mag brighter; Sandage, Katem & Sandage 1981, ApJS 46, 41: M15 HB brighter than M3's by
      Delta log L = 0.09; Silbermann 1993: M15 RR Lyrae evolve redward).
    * extreme HB: brightens and heats (AGB-manque; Dorman, Rood & O'Connell 1993, ApJ 419, 596).

    The log Teff part does not depend on the ZAHB luminosity (see :func:`hb_track_dlogteff_dtau`).
    Valid for ZAHB log L 0.5-2.6 and log Teff 3.55-4.70 (ValueError outside)."""
    c = _c()
    tau = check_range(tau, "fractional HB age tau", 0.0, 1.0)
    l0 = check_range(zahb_logl, "ZAHB log L", 0.5, 2.6)
    t0 = check_range(zahb_logteff, "ZAHB log Teff", 3.55, 4.70)
    shape = np.broadcast_shapes(np.shape(l0), np.shape(t0), np.shape(tau))
    tau = np.broadcast_to(tau, shape)
    # the factors of each star (functions of its ZAHB log Teff) are computed once per star, at the shape
    # of t0, and broadcast in the products below: a track evaluated at many tau costs that many times the
    # tau-dependent terms only (pulsation.pulsation_mode follows each strip star back over 16 steps)
    w_ehb, w_blue, w_red = class_weights(t0)
    # dlog L = sum over families of w (a tau + b tau^n)
    dl = (w_red * c["red_a"] + w_blue * c["blue_a"] + w_ehb * c["ehb_a"]) * tau
    dl += w_red * c["red_b"] * _power(tau, c["red_n"])
    dl += w_blue * c["blue_b"] * _power(tau, c["blue_n"])
    dl += w_ehb * c["ehb_b"] * _power(tau, c["ehb_n"])
    dl += l0
    # dlog Teff: red loop and late redward turn, blue-HB redward drift, extreme-HB heating
    dt = np.sin(np.pi * tau ** c["red_loop_p"])
    dt *= _red_loop_amplitude(c, t0)
    dt -= c["red_late"] * _power(tau, 8)
    dt *= w_red
    dt -= (w_blue * _blue_drift(c, t0)) * _blue_shape(c, tau, derivative=False)[0]
    dt += (c["ehb_heat"] * w_ehb) * (tau * tau)
    dt += t0
    return dl, dt


def hb_track_bounds(zahb_logl, zahb_logteff, tau):
    """Bounds of :func:`hb_track` over the fractional ages ``[0, tau]``: ``(logl_tau, logteff_max)``, the
    log L at ``tau`` (log L rises along every track, so it lies in ``[zahb_logl, logl_tau]`` before) and an
    upper bound of log Teff, each term of the track at its largest (the red loop at its crest, the blue-HB
    drift at none, the extreme-HB heating at ``tau``).  None when the table's coefficients would let log L
    fall or a term change sign (then no bound is claimed).  Used to skip stars that cannot have been hotter
    than a strip edge earlier (:func:`hbmodel.physics.pulsation.pulsation_mode`)."""
    c = _c()
    rising = all(c[k] >= 0 for k in ("red_a", "red_b", "blue_a", "blue_b", "ehb_a", "ehb_b"))
    if not (rising and c["red_loop_p"] > 0 and 0.0 <= c["blue_q"] <= 1.0):
        return None
    logl_tau, _ = hb_track(zahb_logl, zahb_logteff, tau)
    t0 = np.asarray(zahb_logteff, float)
    tau = np.asarray(tau, float)
    w_ehb, w_blue, w_red = class_weights(t0)
    # red loop A sin(pi tau^p) <= max(A, 0) (0 <= sin <= 1); -red_late tau^8 <= max(-red_late, 0);
    # blue drift -D g with 0 <= g <= 1; extreme-HB heating h tau'^2 <= max(h, 0) tau^2
    t_max = (t0 + w_red * (np.maximum(_red_loop_amplitude(c, t0), 0.0) + max(-c["red_late"], 0.0))
             + np.maximum(-w_blue * _blue_drift(c, t0), 0.0) + max(c["ehb_heat"], 0.0) * w_ehb * (tau * tau))
    return logl_tau, t_max


def hb_track_dlogteff_dtau(zahb_logteff, tau):
    """d log Teff / d tau of :func:`hb_track` (analytic): > 0 blueward, < 0 redward evolution.

    Sets the pulsation mode in the RR Lyrae either-or zone (:func:`hbmodel.physics.pulsation.pulsation_mode`)."""
    c = _c()
    t0, tau = np.broadcast_arrays(np.asarray(zahb_logteff, float), np.clip(np.asarray(tau, float), 0.0, 1.0))
    w_ehb, w_blue, w_red = class_weights(t0)
    p = c["red_loop_p"]
    tp = np.maximum(tau, 1e-12)
    d_red = (_red_loop_amplitude(c, t0) * np.pi * p) * np.cos(np.pi * tp ** p) * tp ** (p - 1.0)
    d_red -= 8.0 * c["red_late"] * _power(tau, 7)
    d_blue = -_blue_drift(c, t0) * _blue_shape(c, tau)[1]
    return w_red * d_red + w_blue * d_blue + w_ehb * (2.0 * c["ehb_heat"]) * tau


def reaches_agb(zahb_logteff):
    """Weight (0...1) with which a star reaches the AGB (extreme-HB stars do not: AGB-manqué)."""
    w_ehb, _, _ = class_weights(zahb_logteff)
    return 1.0 - w_ehb


def agb_lifetime_myr(core_mass_msun, zahb_logteff, helium_excess=0.0):
    """Duration of the early-AGB stretch modelled (Myr): ``f_agb t_HB`` for stars that reach it."""
    return _c()["f_agb"] * hb_lifetime_myr(core_mass_msun, zahb_logteff, helium_excess) * reaches_agb(zahb_logteff)


def agb_track(zahb_logl, zahb_logteff, s, mass_msun, mh, helium_excess=0.0, rgb_mass_msun=None):
    """log L and log Teff at fractional early-AGB age ``s`` (0...1).

    Piecewise in time: from the end of the HB to just below the AGB bump, a pile-up at the bump
    (``agb_bump_frac`` of the time; AGB bump ~1 mag above the HB, Gallart 1998, ApJ 495, L43; duration
    from N_AGB/N_HB, Buzzoni et al. 1983, A&A 128, 94 -- both from memory), then upward.

    Teff: the AGB lies on the blue side of the RGB at the same luminosity, always (e.g. the AGB clump
    "on the blue side of the RGB" of old populations; common practice).  Stars leave the end of the HB
    and approach the AGB locus (:func:`hbmodel.physics.giant_branch.agb_logteff`: the RGB of the same
    population at the same L, hotter by ``agb_dlogt``) from the blue within the first 10% of the
    stretch; a star whose HB ended redder than that locus (a red clump trailing redward) starts on it,
    and no star is ever cooler than it.  ``rgb_mass_msun`` is the mass of the population's RGB stars
    at these luminosities (the RGB-tip mass; default ``mass_msun``).
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
    m_rgb = mass_msun if rgb_mass_msun is None else rgb_mass_msun
    t_agb = agb_logteff(np.clip(logl, 0.3, 3.7), mh, m_rgb, helium_excess)
    blend = np.clip(s / 0.1, 0.0, 1.0)
    logt = np.maximum(t_end * (1 - blend) + t_agb * blend, t_agb)
    return logl, logt
