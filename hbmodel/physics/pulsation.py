"""RR Lyrae pulsation: instability strip, mode assignment and periods.

* Strip edges linear in log L and log M (slopes from memory of the pulsation models
  of Marconi et al. 2015, ApJ 808, 50; the zero points of all four edges fitted by the
  calibration to Oosterhoff I / II mean periods and RRc fractions and to the 'fit'
  clusters of the benchmark, see ``tables/pulsation.csv``): first-overtone blue edge (hot limit) and fundamental
  red edge (cool limit); inside the "either-or" zone the mode follows the star's
  track history (hysteresis, :func:`pulsation_mode`; Bono et al. 1997, A&AS 121,
  327; Castellani, Caputo & Castellani 2003, arXiv:astro-ph/0308435).
* Periods: van Albada & Baker 1971, ApJ 169, 311:
  ``log P_F = 11.497 + 0.84 log L - 0.68 log M - 3.48 log Teff`` (days);
  first-overtone periods ``log P_1 = log P_F - 0.127``; fundamentalised
  periods add 0.127 back (common practice).
Valid for HB luminosities (log L 1.3-2.3) and masses 0.45-0.9 Msun.
"""
from __future__ import annotations


import numpy as np

from hbmodel.core.tables import read_table, table_cache

__all__ = ["strip_edges", "pulsation_mode", "period_days", "fundamentalised_period_days",
           "MODE_NONE", "MODE_RRAB", "MODE_RRC"]

MODE_NONE, MODE_RRAB, MODE_RRC = 0, 1, 2


@table_cache
def _c() -> dict:
    return {k: float(v[0]) for k, v in read_table("pulsation.csv").items()}


def _edge(name, logl, mass=None, logm=None):
    c = _c()
    logm = np.log10(np.asarray(mass, float)) if logm is None else logm
    return c[f"{name}_a"] + c[f"{name}_b"] * np.asarray(logl, float) + c[f"{name}_c"] * logm


def strip_edges(logl, mass_msun):
    """(log Teff of the first-overtone blue edge, log Teff of the fundamental red edge)."""
    return _edge("fobe", logl, mass_msun), _edge("fre", logl, mass_msun)


#: Domain of RR Lyrae stars for the strip edges and the period relation (log L, mass in Msun).
LOGL_RANGE = (1.3, 2.3)
MASS_RANGE_MSUN = (0.45, 0.9)


@table_cache
def _edge_bounds():
    """Hottest and coolest log Teff any strip edge reaches inside the RR Lyrae domain (edges are
    linear in log L and log M, so the extremes lie at the domain's corners)."""
    ll = np.array([LOGL_RANGE[0], LOGL_RANGE[0], LOGL_RANGE[1], LOGL_RANGE[1]])
    lm = np.log10(np.array([MASS_RANGE_MSUN[0], MASS_RANGE_MSUN[1]] * 2))
    e = np.concatenate([_edge(n, ll, logm=lm) for n in ("fobe", "fre", "fbe", "fore")])
    return float(e.min()) - 1e-9, float(e.max()) + 1e-9


def pulsation_mode(logteff, logl, mass_msun, track=None, n_history=16):
    """0 outside the strip, 1 for fundamental (RRab), 2 for first overtone (RRc).

    Between the first-overtone blue edge and the fundamental blue edge (FBE) stars are RRc; between
    the first-overtone red edge (FORE) and the fundamental red edge RRab.  In the either-or zone
    between the FBE and the FORE both modes are stable and a star keeps the mode it brought in
    (hysteresis; van Albada & Baker 1973, ApJ 185, 477; Bono, Caputo & Stellingwerf 1994, ApJ 423,
    294: the RRab/RRc transition lies near the FBE in Oosterhoff I and near the FORE in Oosterhoff II
    clusters; Szabo, Kollath & Buchler 2004, A&A 425, 627: the mode in this region depends on the
    direction of the evolutionary track).  With ``track = (zahb_logl, zahb_logteff, tau)`` the HB
    track (:func:`hbmodel.physics.hb_evolution.hb_track`) is followed back from the ZAHB (``n_history``
    steps): a star in the zone is RRc if it was hotter than the FBE earlier on its track (it entered
    from the blue, e.g. a blue-HB star evolving redward, or a red-HB star whose blueward loop took it
    past the FBE and which is now returning), and RRab otherwise (it arrived on the ZAHB from the red,
    after the helium flash, and never left the zone blueward).  Tracks are monotonic in log Teff
    or single-looped, so "hotter than the FBE at some earlier point" equals "last outside the zone
    on its blue side".  Without ``track`` the zone is split at a fixed line (weight ``split_w`` of the
    FBE; legacy, no hysteresis).

    Only stars in the RR Lyrae domain (log L 1.3-2.3, 0.45-0.9 Msun) are flagged: more massive
    core-helium burners crossing the strip are not RR Lyrae (anomalous/classical Cepheids), and are
    returned as 0."""
    logteff, logl_a, mass_a = np.broadcast_arrays(np.asarray(logteff, float), np.asarray(logl, float),
                                                  np.asarray(mass_msun, float))
    mode = np.zeros(logteff.shape, np.int8)
    t_lo, t_hi = _edge_bounds()
    # edges are evaluated only for stars that can be in the strip at all
    cand = np.flatnonzero((logteff >= t_lo) & (logteff <= t_hi) & (logl_a >= LOGL_RANGE[0])
                          & (logl_a <= LOGL_RANGE[1]) & (mass_a >= MASS_RANGE_MSUN[0])
                          & (mass_a <= MASS_RANGE_MSUN[1]))
    if cand.size == 0:
        return mode
    lt, ll = logteff.ravel()[cand], logl_a.ravel()[cand]
    logm = np.log10(mass_a.ravel()[cand])
    inside = (lt <= _edge("fobe", ll, logm=logm)) & (lt >= _edge("fre", ll, logm=logm))
    c = _c()
    fbe, fore = _edge("fbe", ll, logm=logm), _edge("fore", ll, logm=logm)
    if track is None:
        is_c = lt > c["split_w"] * fbe + (1 - c["split_w"]) * fore
    else:
        is_c = lt > fbe
        zone = np.flatnonzero(inside & ~is_c & (lt >= fore))
        if zone.size:
            l0, t0, tau = (np.broadcast_to(np.asarray(x, float), logteff.shape).ravel()[cand][zone] for x in track)
            is_c[zone] = _entered_from_blue(l0, t0, tau, logm[zone], n_history)
    flat = mode.reshape(-1)
    flat[cand] = np.where(inside, np.where(is_c, MODE_RRC, MODE_RRAB), MODE_NONE)
    return mode


def _entered_from_blue(zahb_logl, zahb_logteff, tau, logm, n_steps):
    """True where the HB track was hotter than the fundamental blue edge at some tau' < tau.

    Stars with unknown track (NaN ZAHB or tau) are treated as arriving from the red (False)."""
    from hbmodel.physics.hb_evolution import hb_track, hb_track_bounds
    ok = np.isfinite(zahb_logl) & np.isfinite(zahb_logteff) & np.isfinite(tau)
    out = np.zeros(tau.shape, bool)
    if not ok.any():
        return out
    l0, t0 = np.clip(zahb_logl[ok], 0.5, 2.6), np.clip(zahb_logteff[ok], 3.55, 4.70)
    tau, logm = tau[ok], logm[ok]
    # Stars whose track, at its hottest, stays cooler than the FBE at its lowest over the luminosities it
    # has had (the edge is linear in log L, so its lowest is at an end) were never hotter than the FBE:
    # False without the history.  The margin (1e-9 dex) is far above rounding and far below any physics.
    need = np.ones(tau.shape, bool)
    bounds = hb_track_bounds(l0, t0, tau)
    if bounds is not None:
        l_tau, t_max = bounds
        need = t_max >= np.minimum(_edge("fbe", l0, logm=logm), _edge("fbe", l_tau, logm=logm)) - 1e-9
    idx = np.flatnonzero(need)
    if idx.size:
        frac = np.arange(n_steps) / n_steps
        tt = tau[idx, None] * frac[None, :]
        l, t = hb_track(l0[idx, None], t0[idx, None], tt)
        hot = np.zeros(tau.shape, bool)
        hot[idx] = np.any(t > _edge("fbe", l, logm=logm[idx, None]), axis=1)
        out[ok] = hot
    return out


def fundamentalised_period_days(logl, mass_msun, logteff):
    """Fundamental-mode period from van Albada & Baker (1971); ValueError outside the RR Lyrae domain."""
    from hbmodel.core.validation import check_range
    check_range(logl, "RR Lyrae log L", *LOGL_RANGE)
    check_range(mass_msun, "RR Lyrae mass (Msun)", *MASS_RANGE_MSUN)
    c = _c()
    logp = (c["vab_a"] + c["vab_l"] * np.asarray(logl, float) + c["vab_m"] * np.log10(np.asarray(mass_msun, float))
            + c["vab_t"] * np.asarray(logteff, float))
    return 10.0 ** logp


def period_days(logl, mass_msun, logteff, mode):
    """Observed period for the assigned mode (NaN outside the strip)."""
    mode = np.asarray(mode)
    out = np.full(mode.shape, np.nan)
    ok = np.flatnonzero(mode != MODE_NONE)
    if ok.size == 0:
        return out
    logl, mass_msun, logteff = (np.broadcast_to(np.asarray(x, float), mode.shape).ravel()[ok]
                                for x in (logl, mass_msun, logteff))
    pf = fundamentalised_period_days(logl, mass_msun, logteff)
    out.reshape(-1)[ok] = np.where(mode.ravel()[ok] == MODE_RRC, pf * 10.0 ** _c()["log_p1_p0"], pf)
    return out
