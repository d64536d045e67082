"""HB morphology and clump statistics from a population's deterministic star nodes.

* HB type: Lee (1990, ApJ 363, 159; Lee, Demarque & Zinn 1994, ApJ 423, 248)
  index ``(B - R) / (B + V + R)`` with B, V, R the HB stars bluer than, inside
  and redder than the RR Lyrae instability strip.
* R-parameter: ``N_HB / N_RGB`` with the RGB stars brighter than the ZAHB level
  at the instability strip (Iben 1968, Nature 220, 143; Buzzoni et al. 1983,
  A&A 128, 94), here in the V band.
* Clump statistics: time-weighted median and 16-84% half-range of the absolute
  magnitudes of red-HB / clump stars.
All numbers come from deterministic quadrature nodes: no Monte Carlo noise.
"""
from __future__ import annotations

import numpy as np

from hbmodel.photometry.magnitudes import get_band
from hbmodel.physics.pulsation import MODE_NONE, fundamentalised_period_days, strip_edges
from hbmodel.physics.zahb import envelope_for_logteff, zahb_logl, zahb_logteff

__all__ = ["weighted_quantile", "hb_classes", "hb_type", "predict_summary", "zahb_at_strip", "ALL_BANDS"]

ALL_BANDS = ("U", "B", "V", "R", "I", "J", "H", "Ks", "G", "BP", "RP")


def weighted_quantile(x, w, q):
    x = np.asarray(x, float)
    w = np.asarray(w, float)
    if x.size == 0 or w.sum() <= 0:
        return np.nan
    o = np.argsort(x)
    cw = np.cumsum(w[o])
    cw = (cw - 0.5 * w[o]) / cw[-1]
    return float(np.interp(q, cw, x[o]))


def hb_classes(stars):
    """For HB stars: -1 bluer than the strip, 0 inside, +1 redder (by the strip edges at each star's L)."""
    blue, red = strip_edges(stars.logl, stars.mass_msun)
    cls = np.zeros(len(stars), np.int8)
    cls[stars.logteff > blue] = -1
    cls[stars.logteff < red] = 1
    return cls


def hb_type(stars):
    """Lee (1990) HB type (B-R)/(B+V+R) and the fractions (B, V, R) of the HB stars in ``stars``."""
    hb = stars.phase == "hb"
    cls = hb_classes(stars.select(hb))
    w = stars.weight[hb]
    tot = w.sum()
    if tot <= 0:
        return np.nan, (np.nan, np.nan, np.nan)
    b, v, r = (w[cls == -1].sum() / tot, w[cls == 0].sum() / tot, w[cls == 1].sum() / tot)
    return b - r, (b, v, r)


def zahb_at_strip(sub):
    """(log L, log Teff, mass) of the ZAHB at the centre of the instability strip for a sub-population."""
    mc = sub.core_mass_msun
    logl = 1.65
    mass = mc + 0.1
    for _ in range(4):  # edges depend weakly on L and M: iterate
        blue, red = strip_edges(logl, mass)
        centre = 0.5 * (blue + red)
        menv = float(envelope_for_logteff(centre, mc, sub.mh, sub.helium_excess))
        mass = mc + menv
        logl = float(zahb_logl(mc, menv, sub.mh, sub.helium_excess))
    return logl, float(zahb_logteff(mc, menv, sub.mh, sub.helium_excess)), mass


def predict_summary(pop, bands=None) -> dict:
    """All deterministic predictions of ``hbmodel predict`` for a population."""
    if bands:
        bands = tuple(get_band(b).name for b in bands)  # canonical names (aliases such as K -> Ks)
    st = pop.model_stars()
    hb = st.phase == "hb"
    rgb = st.phase == "rgb"
    sub0 = pop.subpopulations[0]
    wsub = np.array([s.weight for s in pop.subpopulations])
    out = {
        "tip_mass": float(np.sum(wsub * [s.tip_mass_msun for s in pop.subpopulations])),
        "core_mass": float(np.sum(wsub * [s.core_mass_msun for s in pop.subpopulations])),
        "mass_loss": float(np.sum(wsub * [pop.mean_mass_loss(s) for s in pop.subpopulations])),
        "mass_loss_law": pop.mass_loss.law,
    }
    # HB mass distribution (per star, not time weighted)
    n = 512
    u = (np.arange(n) + 0.5) / n
    masses, wts, lost_frac = [], [], 0.0
    t_hb = []
    from hbmodel.physics.zahb import zahb_state
    from hbmodel.physics.hb_evolution import hb_lifetime_myr
    for s in pop.subpopulations:
        m, lost = pop.hb_masses(s, u)
        lost_frac += s.weight * lost.mean()
        if (~lost).any():
            masses.append(m[~lost])
            wts.append(np.full((~lost).sum(), s.weight / n))
            z = zahb_state(m[~lost], np.full((~lost).sum(), s.core_mass_msun), s.mh, s.helium_excess)
            t_hb.append(hb_lifetime_myr(s.core_mass_msun, z.logteff, s.helium_excess))
    if masses:
        mm, ww, tt = np.concatenate(masses), np.concatenate(wts), np.concatenate(t_hb)
        mean = float(np.sum(mm * ww) / ww.sum())
        out["hb_mass_mean"] = mean
        out["hb_mass_sd"] = float(np.sqrt(np.sum(ww * (mm - mean) ** 2) / ww.sum()))
        out["hb_lifetime_myr"] = float(np.sum(tt * ww) / ww.sum())
    else:
        out.update(hb_mass_mean=None, hb_mass_sd=None, hb_lifetime_myr=None)
    out["fraction_envelope_lost"] = float(lost_frac)
    try:
        out["eta"] = pop.mean_eta() if pop.mass_loss.kind != "eta" else float(
            np.sum([w * m for w, m, _ in pop.mass_loss.components]) / np.sum([w for w, _, _ in pop.mass_loss.components]))
    except ValueError:
        out["eta"] = None
    if not hb.any():
        out.update(hb_teff_median=None, hb_logg_median=None, hb_type=None, fraction_blue=None,
                   fraction_rr=None, fraction_red=None, rr_period_mean=None, r_parameter=None)
        return out
    w_hb = st.weight[hb]
    out["hb_teff_median"] = weighted_quantile(st.teff_k[hb], w_hb, 0.5)
    out["hb_logg_median"] = weighted_quantile(st.logg[hb], w_hb, 0.5)
    ht, (b, v, r) = hb_type(st)
    out.update(hb_type=ht, fraction_blue=b, fraction_rr=v, fraction_red=r)
    rr = hb & (st.rr_mode != MODE_NONE)
    if st.weight[rr].sum() > 0:
        pf = fundamentalised_period_days(st.logl[rr], st.mass_msun[rr], st.logteff[rr])
        out["rr_period_mean"] = float(np.sum(pf * st.weight[rr]) / st.weight[rr].sum())
        ab = rr & (st.rr_mode == 1)
        out["rrab_period_mean"] = (float(np.sum(st.period_days[ab] * st.weight[ab]) / st.weight[ab].sum())
                                   if st.weight[ab].sum() > 0 else None)
    else:
        out["rr_period_mean"] = None
        out["rrab_period_mean"] = None
    lz, tz, mz = zahb_at_strip(sub0)
    out["zahb_logl_rr"] = lz
    from hbmodel.photometry.magnitudes import absolute_magnitudes
    from hbmodel.physics.giant_branch import log_g
    mv_zahb = float(absolute_magnitudes(np.array([10 ** tz]), np.array([log_g(mz, lz, tz)]),
                                        np.array([sub0.composition.feh]), np.array([lz]), ("V",))["V"][0])
    out["zahb_mv_rr"] = mv_zahb
    mv_rgb = st.select(rgb).absolute_magnitudes(("V",))["V"]
    n_rgb = st.weight[rgb][mv_rgb < mv_zahb].sum()
    out["r_parameter"] = float(w_hb.sum() / n_rgb) if n_rgb > 0 else None
    # RGB bump: magnitude of the pause luminosity and its star count (the pause time of
    # giant_branch.bump_pause_myr is the luminosity-function excess over the smooth RGB)
    bump = _bump_summary(pop, tuple(bands or ALL_BANDS))
    pause_weight = bump.pop("bump_pause_weight")
    out.update(bump)
    # clump / red HB statistics
    cls = hb_classes(st.select(hb))
    red = np.zeros(len(st), bool)
    red[np.flatnonzero(hb)[cls == 1]] = True
    if st.weight[red].sum() > 0:
        out["clump_teff"] = weighted_quantile(st.teff_k[red], st.weight[red], 0.5)
        out["clump_logl"] = weighted_quantile(st.logl[red], st.weight[red], 0.5)
        bands = tuple(bands or ALL_BANDS)
        mags = st.select(red).absolute_magnitudes(bands)
        wr = st.weight[red]
        out["clump_absmag"] = {b: weighted_quantile(mags[b], wr, 0.5) for b in bands}
        out["clump_absmag_spread"] = {b: 0.5 * (weighted_quantile(mags[b], wr, 0.84)
                                                - weighted_quantile(mags[b], wr, 0.16)) for b in bands}
        out["bump_to_clump_ratio"] = float(pause_weight / st.weight[red].sum()) if pause_weight else None
        out.update(_agb_bump_summary(st, red, bands))
    else:
        out["clump_teff"] = None
        out["clump_logl"] = None
        out["clump_absmag"] = None
    return out


def _bump_summary(pop, bands):
    """RGB-bump luminosity, magnitudes (pause-time weighted over sub-populations) and pause weight."""
    from hbmodel.physics.giant_branch import bump_logl, bump_pause_myr, log_g, rgb_logteff
    w, ll, lt, mm, fe = [], [], [], [], []
    for s in pop.subpopulations:
        try:
            lb = float(bump_logl(s.mh, s.age_gyr))
            tp = float(bump_pause_myr(s.mh, s.age_gyr, s.composition.x))
        except ValueError:
            continue
        if not (np.isfinite(lb) and tp > 0 and s.mc_rgb_lo_msun < s.core_mass_msun):
            continue
        w.append(s.weight * tp)
        ll.append(lb)
        lt.append(float(rgb_logteff(lb, s.mh, s.tip_mass_msun, s.helium_excess)))
        mm.append(s.tip_mass_msun)
        fe.append(s.composition.feh)
    if not w:
        return {"bump_logl": None, "bump_absmag": None, "bump_pause_weight": 0.0}
    w, ll, lt, mm, fe = (np.asarray(a, float) for a in (w, ll, lt, mm, fe))
    out = {"bump_logl": float(np.sum(w * ll) / w.sum()), "bump_pause_weight": float(w.sum())}
    if bands:
        from hbmodel.photometry.magnitudes import absolute_magnitudes
        mags = absolute_magnitudes(10 ** lt, log_g(mm, ll, lt), fe, ll, tuple(bands))
        out["bump_absmag"] = {b: weighted_quantile(mags[b], w, 0.5) for b in bands}
    else:
        out["bump_absmag"] = None
    return out


def _agb_bump_summary(st, red, bands):
    """AGB bump of a population with a red HB / clump: the peak of the early-AGB luminosity function
    (where the early AGB lingers, hb_evolution.agb_track) and its star count relative to the clump
    (the lingering fraction ``agb_bump_frac`` of the early-AGB time).  Compared with the bulge values of
    Nataf et al. 2011 (ApJ 730, 118, abstract) as held-out targets."""
    from hbmodel.physics.hb_evolution import agb_bump_fraction
    agb = st.phase == "agb"
    w_red = st.weight[red].sum()
    if not agb.any() or w_red <= 0 or not bands:
        return {"agb_bump_absmag": None, "agb_bump_to_clump_ratio": None}
    wa = st.weight[agb]
    mags = st.select(agb).absolute_magnitudes(tuple(bands))
    out = {}
    for b in bands:
        edges = np.arange(np.floor(mags[b].min() * 20) / 20, mags[b].max() + 0.05, 0.05)
        h, _ = np.histogram(mags[b], edges, weights=wa)
        k = int(np.argmax(h))
        out[b] = float(0.5 * (edges[k] + edges[k + 1]))
    return {"agb_bump_absmag": out, "agb_bump_to_clump_ratio": float(agb_bump_fraction() * wa.sum() / w_red)}
