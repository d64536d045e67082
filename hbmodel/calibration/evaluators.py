"""Model value of a calibration target row, one function per ``quantity``.

Every evaluator takes a target row (a mapping with the columns of ``tables/targets/README.md``)
and returns the model's value of that quantity under the row's conditions.  The same functions
serve the calibration (``fit`` rows) and the scorecard (``fit`` and ``check`` rows), so a
target is always compared in one way only.

Population conventions (stated here once; each is common practice unless a source is named):

* ``sfh=local`` — the solar-neighbourhood clump: constant star formation 1-10 Gyr and a
  metallicity distribution of mean ~-0.1 dex and dispersion ~0.2 dex (common practice; e.g.
  Casagrande et al. 2011, A&A 530, A138 find a mean [Fe/H] near -0.1 for the local disc),
  Reimers eta 0.3 with a spread of 0.03.
* ``sfh=bulge`` — 10 Gyr, equal metal-poor ([Fe/H] -0.4, [alpha/Fe] +0.3) and metal-rich
  (+0.3, [alpha/Fe] 0) components (common practice: the bimodal bulge metallicity distribution,
  e.g. Zoccali et al. 2017, A&A 599, A12; from memory).
* Old globular-cluster conditions — 12.5 Gyr, [alpha/Fe] +0.3 unless the row gives them; for
  Oosterhoff conditions the Reimers eta is solved so that the HB ratio (B-R)/(B+V+R) equals the
  row's ``hb_ratio`` (defaults: Oo I M3-like [Fe/H] -1.5, HB ratio 0.08; Oo II M15-like
  [Fe/H] -2.3, HB ratio 0.67; Harris 1996, AJ 112, 1487, 2010 edition).

Size (620+ lines): one short evaluator per calibration quantity (about sixty), grouped by physics in marked
sections -- a catalogue of small functions, not one long piece of logic.
"""
from __future__ import annotations

import functools

import numpy as np

from hbmodel.calibration.targets import parse_conditions

__all__ = ["EVALUATORS", "evaluate_row", "NotModelled", "eta_for_hb_ratio", "old_population"]

# Reimers-eta spread of old clusters where no B:V:R counts fix it: sigma_eta = 0.045 gives a HB-mass dispersion
# of ~0.02 Msun, the dispersion of synthetic-HB fits to Galactic globular clusters (Lee, Demarque & Zinn 1994,
# ApJ 423, 248; from memory).
ETA_SPREAD_OLD = 0.045
LOCAL_FEH = (-0.6, -0.4, -0.2, 0.0, 0.2, 0.4)
LOCAL_FEH_W = (0.5, 1.0, 1.5, 1.5, 1.0, 0.5)


class NotModelled(Exception):
    """The model has no counterpart of this target (yet); the reason is the message."""


def _f(row, key, default=np.nan):
    v = row[key]
    try:
        v = float(v)
    except (TypeError, ValueError):
        return default
    return default if not np.isfinite(v) else v


def _cond(row):
    return parse_conditions(row["conditions"])


def _range(text):
    a, b = (float(x) for x in text.replace(":", ",").split(","))
    return a, b


# ----------------------------------------------------------------------------- populations
def _mass_loss(eta, sd=0.0, law="reimers"):
    from hbmodel.populations.population import MassLoss
    return MassLoss.from_eta(eta, sd, law)


def local_population(feh=None, ages=(1.0, 10.0), eta=0.3, eta_sd=0.03):
    """Constant star formation over ``ages`` (Gyr) with the local metallicity distribution."""
    from hbmodel.populations.population import Population
    if feh is None:
        fehs, fw = LOCAL_FEH, LOCAL_FEH_W
    else:
        fehs, fw = np.atleast_1d(feh), None
    return Population.constant_star_formation(ages[0], ages[1], fehs, feh_weights=fw,
                                              mass_loss=_mass_loss(eta, eta_sd))


def bulge_population(eta=0.3, eta_sd=0.03):
    from hbmodel.populations.population import Component, Population
    comps = [Component(10.0, -0.4, 0.3, 1.0), Component(10.0, 0.3, 0.0, 1.0)]
    return Population(components=comps, mass_loss=_mass_loss(eta, eta_sd))


def old_population(feh, eta, eta_sd=ETA_SPREAD_OLD, age_gyr=12.5, alpha_fe=0.3, helium=None):
    from hbmodel.populations.population import Population
    return Population(feh, age_gyr, alpha_fe=alpha_fe, helium=helium, mass_loss=_mass_loss(eta, eta_sd))


@functools.lru_cache(maxsize=256)
def _hb_ratio_cached(feh, eta, eta_sd, age_gyr, alpha_fe, key):
    from hbmodel.populations.morphology import hb_type
    st = old_population(feh, eta, eta_sd, age_gyr, alpha_fe).model_stars(phases=("hb",))
    if not (st.phase == "hb").any():
        return 1.0          # every envelope lost: nothing on the red side (an extreme blue HB)
    r = float(hb_type(st)[0])
    return r if np.isfinite(r) else 1.0


def _hb_ratio(feh, eta, eta_sd, age_gyr, alpha_fe):
    from hbmodel.core.tables import _key
    return _hb_ratio_cached(round(feh, 4), round(eta, 6), round(eta_sd, 6), round(age_gyr, 4),
                            round(alpha_fe, 4), _key())


def eta_for_hb_ratio(target, feh, eta_sd=ETA_SPREAD_OLD, age_gyr=12.5, alpha_fe=0.3, lo=0.05, hi=0.95):
    """Reimers eta giving HB ratio ``target`` (bisection; the HB ratio rises with eta).

    Returns ``(eta, saturated)``; ``saturated`` is -1/+1 when the target lies beyond what eta in
    [lo, hi] reaches."""
    f_lo, f_hi = _hb_ratio(feh, lo, eta_sd, age_gyr, alpha_fe), _hb_ratio(feh, hi, eta_sd, age_gyr, alpha_fe)
    if target <= f_lo:
        return lo, -1
    if target >= f_hi:
        return hi, +1
    from scipy.optimize import brentq
    eta = brentq(lambda e: _hb_ratio(feh, e, eta_sd, age_gyr, alpha_fe) - target, lo, hi, xtol=2e-4)
    return float(eta), 0


_OO = {"I": (-1.5, 0.08), "II": (-2.3, 0.67)}


def _oosterhoff_population(row):
    c = _cond(row)
    if "cluster" in c:
        raise NotModelled(f"single-cluster target ({c['cluster']}): see the cluster benchmark")
    oo = c.get("oosterhoff", "")
    if oo not in _OO:
        raise NotModelled(f"Oosterhoff condition {oo!r} not modelled")
    feh_d, hbr_d = _OO[oo]
    feh = _f(row, "feh", feh_d)
    hbr = float(c.get("hb_ratio", hbr_d))
    eta, _ = eta_for_hb_ratio(hbr, feh)
    return _Cached(("old", feh, round(eta, 6), ETA_SPREAD_OLD, 12.5, 0.3))


def _rr_stars(pop):
    st = pop.model_stars()
    rr = (st.phase == "hb") & (st.rr_mode != 0)
    if st.weight[rr].sum() <= 0:
        raise NotModelled("no RR Lyrae stars in the model population")
    return st, rr


# ----------------------------------------------------------------------------- helpers
class _Cached:
    """A population built from a hashable recipe, with its predictions and model stars cached per
    recipe and per active trial table set (so calibration trials never reuse stale results)."""

    def __init__(self, recipe):
        self.recipe = recipe

    def __hash__(self):
        return hash(self.recipe)

    def __eq__(self, other):
        return isinstance(other, _Cached) and other.recipe == self.recipe

    def build(self):
        kind, args = self.recipe[0], self.recipe[1:]
        if kind == "local":
            feh, ages = args
            return local_population(feh=None if feh is None else list(feh), ages=ages)
        if kind == "bulge":
            return bulge_population()
        if kind == "simple":
            from hbmodel.populations.population import Population
            feh, age, alpha, eta, sd = args
            return Population(feh, age, alpha_fe=alpha, mass_loss=_mass_loss(eta, sd))
        if kind == "old":
            feh, eta, sd, age, alpha = args
            return old_population(feh, eta, sd, age, alpha)
        raise ValueError(kind)

    def predict(self, bands=None):
        from hbmodel.core.tables import _key
        return _predict_cached(self, _key())

    def model_stars(self):
        from hbmodel.core.tables import _key
        return _stars_cached(self, _key())

    def phase_times(self):
        return self.build().phase_times()

    @property
    def subpopulations(self):
        return self.build().subpopulations


#: bands of the published targets (predictions are computed for these once per population)
TARGET_BANDS = ("B", "V", "I", "J", "H", "Ks", "G")


@functools.lru_cache(maxsize=64)
def _predict_cached(cp, key):
    return cp.build().predict(bands=TARGET_BANDS)


@functools.lru_cache(maxsize=64)
def _predict_band_cached(cp, band, key):
    """Predictions in one band outside TARGET_BANDS (e.g. WISE_W1), cached per population recipe and trial."""
    return cp.build().predict(bands=(band,))


@functools.lru_cache(maxsize=16)
def _stars_cached(cp, key):
    return cp.build().model_stars()


def _clump_mag(pop, band):
    from hbmodel.photometry.magnitudes import resolve_band
    try:
        band = resolve_band(band)     # aliases too: a row's 'W1' is the registry's WISE_W1
    except ValueError:
        raise NotModelled(f"band {band} is not in hbmodel's band set") from None
    try:
        if isinstance(pop, _Cached) and band not in TARGET_BANDS:
            from hbmodel.core.tables import _key
            p = _predict_band_cached(pop, band, _key())
        else:
            p = pop.predict(bands=(band,))
    except ValueError as exc:         # a relation band refusing stars outside its published relation
        raise NotModelled(str(exc)) from None
    if p.get("clump_absmag") is None:
        raise NotModelled("no red-HB / clump stars in the model population")
    return float(p["clump_absmag"][band])


def _bands():
    from hbmodel.photometry.magnitudes import BAND_NAMES
    return tuple(BAND_NAMES)


def _colour_bands(text):
    a, _, b = text.partition("-")
    if not b:
        raise NotModelled(f"{text!r} is not a colour")
    return a, b


def _population_for(row):
    c = _cond(row)
    sfh = c.get("sfh", "")
    if sfh == "local":
        return _Cached(("local", None, (1.0, 10.0)))
    if sfh == "bulge":
        return _Cached(("bulge",))
    if sfh == "open_clusters":
        lo, hi = _range(c.get("log_age_yr_range", "8.5,9.9"))
        flo, fhi = _range(c.get("feh_range", "-0.5,0.2"))
        return _Cached(("local", tuple(np.round(np.linspace(flo, fhi, 4), 4)),
                        (max(round(10 ** (lo - 9), 3), 0.5), round(10 ** (hi - 9), 3))))
    if sfh == "lmc_clusters":
        lo, hi = _range(c.get("age_range", "1,3"))
        return _Cached(("local", (_f(row, "feh", -0.5),), (lo, hi)))
    if not np.isnan(_f(row, "feh")) and not np.isnan(_f(row, "age_gyr")):
        return _Cached(("simple", _f(row, "feh"), _f(row, "age_gyr"), _f(row, "alpha_fe", 0.0), 0.3, 0.03))
    raise NotModelled(f"population condition {sfh or row['conditions']!r} not modelled")


# ----------------------------------------------------------------------------- giant branch
def tip_mass_msun(row):
    from hbmodel.physics import giant_branch as gb
    from hbmodel.physics.composition import Composition
    mh = Composition(_f(row, "feh", 0.0), _f(row, "alpha_fe", 0.0)).mh
    if np.isnan(_f(row, "age_gyr")):
        raise NotModelled("no age given")
    return float(gb.tip_mass_msun(_f(row, "age_gyr"), mh))


def ms_lifetime_gyr(row):
    from hbmodel.physics import giant_branch as gb
    return float(gb.ms_lifetime_gyr(_f(row, "mass_msun", 1.0), _f(row, "feh", 0.0)))


def _rgb_locus(feh, alpha_fe=0.3, age_gyr=12.5, band_pair=("V", "I")):
    from hbmodel.physics import giant_branch as gb
    from hbmodel.physics.composition import Composition
    from hbmodel.photometry.magnitudes import absolute_magnitudes
    mh = Composition(feh, alpha_fe).mh
    m_tip = float(gb.tip_mass_msun(age_gyr, mh))
    logl_tip = float(gb.rgb_tip_logl(mh))
    logl = np.linspace(1.5, logl_tip, 200)
    logt = gb.rgb_logteff(logl, mh, m_tip)
    logg = gb.log_g(m_tip, logl, logt)
    mags = absolute_magnitudes(10 ** logt, logg, np.full_like(logl, feh), logl, band_pair)
    return logl, mags


def trgb_abs_mag(row):
    band = row["band"] or "I"
    if band not in _bands():
        raise NotModelled(f"band {band} is not in hbmodel's band set")
    _, mags = _rgb_locus(_f(row, "feh", -1.5), _f(row, "alpha_fe", 0.3), _f(row, "age_gyr", 12.5), (band,))
    return float(mags[band][-1])


def rgb_colour_at_mag(row):
    a, b = _colour_bands(row["band"] or "V-I")
    c = _cond(row)
    key = next((k for k in c if k.startswith("abs_mag_")), None)
    if key is None:
        raise NotModelled("no reference magnitude (abs_mag_<band>=...) in conditions")
    ref_band, ref_mag = key[len("abs_mag_"):], float(c[key])
    _, mags = _rgb_locus(_f(row, "feh", -1.5), _f(row, "alpha_fe", 0.3), _f(row, "age_gyr", 12.5),
                         tuple(dict.fromkeys((a, b, ref_band))))
    m = mags[ref_band]
    col = mags[a] - mags[b]
    order = np.argsort(m)
    return float(np.interp(ref_mag, m[order], col[order]))


# ----------------------------------------------------------------------------- ignition
def flash_core_mass_msun(row):
    from hbmodel.physics.composition import Composition
    from hbmodel.physics.ignition import ignition_core_mass_msun
    mh = Composition(_f(row, "feh", 0.0), _f(row, "alpha_fe", 0.0)).mh
    return float(ignition_core_mass_msun(_f(row, "mass_msun", 0.8), mh))


def _core_curve(row):
    from hbmodel.physics.ignition import ignition_core_mass_msun
    m = np.linspace(1.0, 3.0, 801)
    return m, ignition_core_mass_msun(m, _f(row, "feh", 0.0))


def min_ignition_core_mass_msun(row):
    return float(_core_curve(row)[1].min())


def mass_at_min_core_msun(row):
    m, mc = _core_curve(row)
    return float(m[np.argmin(mc)])


# ----------------------------------------------------------------------------- mass loss
def integrated_mass_loss_msun(row):
    from hbmodel.physics.mass_loss import LAWS  # noqa: F401  (validates the law names through MassLoss)
    from hbmodel.populations.population import Population
    c = _cond(row)
    law = c.get("law", "reimers")
    if "eta" not in c:
        raise NotModelled("no mass-loss efficiency given: a constraint on eta, see the cluster benchmark")
    eta = float(c["eta"])
    if eta < 1e-6:     # the law's coefficient was given (Msun/yr units): convert to its efficiency
        from hbmodel.physics.mass_loss import _law
        eta = eta / _law(law)["coef"]
    age = _f(row, "age_gyr", 12.5)
    pop = Population(_f(row, "feh", 0.0), age, alpha_fe=_f(row, "alpha_fe", 0.0), mass_loss=_mass_loss(eta, 0.0, law))
    return float(pop.mean_mass_loss())


# ----------------------------------------------------------------------------- ZAHB, RR Lyrae magnitudes
def _rr_population(feh, alpha_fe=0.3):
    """Old population whose HB crosses the strip (HB ratio 0), for mean RR Lyrae properties."""
    eta, _ = eta_for_hb_ratio(0.0, feh, alpha_fe=alpha_fe)
    return _Cached(("old", feh, round(eta, 6), ETA_SPREAD_OLD, 12.5, alpha_fe))


def _rr_mean_mag(feh, band, alpha_fe=0.3):
    if band not in _bands():
        raise NotModelled(f"band {band} is not in hbmodel's band set")
    st, rr = _rr_stars(_rr_population(feh, alpha_fe))
    m = st.select(rr).absolute_magnitudes((band,))[band]
    w = st.weight[rr]
    return float(np.sum(m * w) / w.sum())


def rr_abs_mag_mean(row):
    return _rr_mean_mag(_f(row, "feh", -1.5), row["band"] or "V", _f(row, "alpha_fe", 0.3))


def rr_mv_feh_slope(row):
    feh = _f(row, "feh", -1.5)
    band = row["band"] or "V"
    return (_rr_mean_mag(feh + 0.4, band) - _rr_mean_mag(feh - 0.4, band)) / 0.8


def zahb_hot_end_teff_k(row):
    from hbmodel.physics.composition import Composition
    from hbmodel.physics.ignition import ignition_core_mass_msun
    from hbmodel.physics.zahb import MENV_MIN_MSUN, zahb_state
    mh = Composition(_f(row, "feh", -1.5), _f(row, "alpha_fe", 0.3)).mh
    mc = float(ignition_core_mass_msun(0.82, mh))
    return float(zahb_state(mc + MENV_MIN_MSUN, mc, mh).teff_k)


# ----------------------------------------------------------------------------- HB evolution, counts
def _hb_lifetime_at(feh, logteff):
    from hbmodel.physics.composition import Composition
    from hbmodel.physics.hb_evolution import hb_lifetime_myr
    from hbmodel.physics.ignition import ignition_core_mass_msun
    mh = Composition(feh, 0.3).mh
    mc = float(ignition_core_mass_msun(0.82, mh))
    return float(hb_lifetime_myr(mc, np.asarray(logteff, float), 0.0))


def hb_lifetime_myr(row):
    from hbmodel.physics.composition import Composition
    from hbmodel.physics.ignition import ignition_core_mass_msun
    from hbmodel.physics.zahb import zahb_state
    feh = _f(row, "feh", -1.5)
    mh = Composition(feh, 0.3).mh
    mc = float(ignition_core_mass_msun(0.82, mh))
    m = _f(row, "mass_msun", 0.65)
    return _hb_lifetime_at(feh, float(zahb_state(m, mc, mh).logteff))


def hb_lifetime_ratio_hot_to_rr(row):
    feh = _f(row, "feh", -1.5)
    return _hb_lifetime_at(feh, 4.2) / _hb_lifetime_at(feh, 3.85)


def agb_to_hb_ratio(row):
    t = _rr_population(_f(row, "feh", -1.5)).phase_times()
    return float(t["agb"].sum() / t["hb"].sum())


def r_parameter(row):
    if not np.isnan(_f(row, "helium")):
        raise NotModelled("R-parameter at a given helium: use dlogr_dy")
    return float(_rr_population(_f(row, "feh", -1.5)).predict()["r_parameter"])


# ----------------------------------------------------------------------------- pulsation
def rrab_period_mean(row):
    st, rr = _rr_stars(_oosterhoff_population(row))
    ab = rr & (st.rr_mode == 1)
    return float(np.sum(st.period_days[ab] * st.weight[ab]) / st.weight[ab].sum())


def rrc_fraction(row):
    st, rr = _rr_stars(_oosterhoff_population(row))
    c = rr & (st.rr_mode == 2)
    return float(st.weight[c].sum() / st.weight[rr].sum())


def period_shift_hb_type(row):
    """Shift in <log P_ab> at fixed Teff between Oosterhoff II and I conditions (van Albada & Baker 1971:
    d log P = 0.84 d log L - 0.68 d log M at fixed Teff)."""
    from hbmodel.physics.pulsation import _c
    c = _c()
    out = []
    for oo in ("II", "I"):
        r = dict(row)
        r["conditions"] = f"oosterhoff={oo}"
        r["feh"] = np.nan
        st, rr = _rr_stars(_oosterhoff_population(r))
        ab = rr & (st.rr_mode == 1)
        w = st.weight[ab]
        out.append(c["vab_l"] * np.sum(st.logl[ab] * w) / w.sum()
                   + c["vab_m"] * np.sum(np.log10(st.mass_msun[ab]) * w) / w.sum())
    return float(out[0] - out[1])


def _edge_at_zahb(feh, edge):
    from hbmodel.populations.morphology import zahb_at_strip
    from hbmodel.physics.pulsation import _edge
    pop = _rr_population(feh)
    lz, tz, mz = zahb_at_strip(pop.subpopulations[0])
    return float(_edge(edge, lz, mz)), lz, mz


def strip_edge_logteff(row):
    edge = _cond(row).get("edge", "fbe")
    return _edge_at_zahb(_f(row, "feh", -1.5), edge)[0]


def strip_edge_logteff_feh_slope(row):
    edge = _cond(row).get("edge", "fbe")
    return (_edge_at_zahb(-1.0, edge)[0] - _edge_at_zahb(-2.0, edge)[0]) / 1.0


def pab_feh_slope(row):
    """d log P / d[Fe/H] of ZAHB stars at the fundamental blue edge (Sandage 1993's form)."""
    from hbmodel.physics.pulsation import fundamentalised_period_days
    edge = _cond(row).get("edge", "fbe")
    lp = []
    for feh in (-2.2, -1.2):
        t, lz, mz = _edge_at_zahb(feh, edge)
        lp.append(np.log10(fundamentalised_period_days(lz, mz, t)))
    return float((lp[1] - lp[0]) / 1.0)


# ----------------------------------------------------------------------------- red clump
def clump_abs_mag(row):
    """Clump absolute magnitude in the row's band.

    A calibration quoted at a reference colour, ``M = M_ref + slope (colour - colour_ref)`` (conditions
    ``g_ks=<colour_ref>;slope=<slope>``, e.g. Ruiz-Dern et al. 2018, A&A 609, A116, M_G against G - Ks),
    is compared at the reference colour: the model's clump is carried along the published slope from its
    own colour, ``M_model - slope (colour_model - colour_ref)``."""
    c = _cond(row)
    pop = _population_for(row)
    m = _clump_mag(pop, row["band"])
    if "g_ks" in c:
        if "slope" not in c:
            raise NotModelled("colour-dependent calibration without its colour slope")
        colour = _clump_mag(pop, "G") - _clump_mag(pop, "Ks")
        m -= float(c["slope"]) * (colour - float(c["g_ks"]))
    return m


def clump_colour(row):
    a, b = _colour_bands(row["band"])
    pop = _population_for(row)
    return _clump_mag(pop, a) - _clump_mag(pop, b)


def clump_abs_mag_feh_slope(row):
    c = _cond(row)
    if c.get("sfh") not in ("local", None):
        raise NotModelled(f"slope between unlike populations ({c.get('sfh')}) not modelled")
    lo, hi = _range(c.get("feh_range", "-0.6,0.2"))
    band = row["band"] or "I"
    return (_clump_mag(_Cached(("local", (hi,), (1.0, 10.0))), band)
            - _clump_mag(_Cached(("local", (lo,), (1.0, 10.0))), band)) / (hi - lo)


def clump_abs_mag_age_diff(row):
    c = _cond(row)
    band = row["band"] or "I"
    if "-" in c.get("age_ref", "") or "-" in c.get("age", ""):
        raise NotModelled("age-range comparison between unlike populations not modelled")
    feh = _f(row, "feh", 0.0)
    a_ref, a = float(c["age_ref"]), float(c["age"])
    m = [_clump_mag(_Cached(("simple", feh, x, 0.0, 0.3, 0.03)), band) for x in (a, a_ref)]
    return m[0] - m[1]


def secondary_clump_depth_mag(row):
    """Faintest clump of ages 0.7-1.6 Gyr (stars just above the helium-flash transition mass) minus
    the clump at 2.5 Gyr, solar metallicity, in I (Girardi 1999, MNRAS 308, 818 compare in V/I)."""
    band = row["band"] if row["band"] in _bands() else "I"
    feh = _f(row, "feh", 0.0)
    ages = np.round(np.arange(0.7, 1.61, 0.1), 2)
    faint = max(_clump_mag(_Cached(("simple", feh, float(a), 0.0, 0.3, 0.03)), band) for a in ages)
    return faint - _clump_mag(_Cached(("simple", feh, 2.5, 0.0, 0.3, 0.03)), band)


# ----------------------------------------------------------------------------- RGB bump
def _predict_key(pop, key, band):
    p = pop.predict(bands=(band,))
    if key not in p or p[key] is None:
        raise NotModelled(f"the model does not predict {key}")
    v = p[key]
    return float(v[band] if isinstance(v, dict) else v)


def _offset_from_clump(row, key):
    """Magnitude of a predicted feature (``key``: the RGB or AGB bump) minus the clump's, in the row's band."""
    band = row["band"] or "I"
    pop = _population_for(row)
    return _predict_key(pop, key, band) - _clump_mag(pop, band)


def bump_minus_clump_mag(row):
    return _offset_from_clump(row, "bump_absmag")


def agb_bump_minus_clump_mag(row):
    return _offset_from_clump(row, "agb_bump_absmag")


def bump_to_clump_ratio(row):
    return _predict_key(_population_for(row), "bump_to_clump_ratio", row["band"] or "I")


def agb_bump_to_clump_ratio(row):
    return _predict_key(_population_for(row), "agb_bump_to_clump_ratio", row["band"] or "I")


def bump_minus_hb_mag(row):
    """V(bump) - V(ZAHB at the RR Lyrae strip), the quantity of Ferraro et al. 1999 (AJ 118, 1738)."""
    if (row["band"] or "V") != "V":
        raise NotModelled("the bump - HB offset is modelled in V only (the ZAHB level is a V magnitude)")
    pop = _rr_population(_f(row, "feh", -1.5))
    return _predict_key(pop, "bump_absmag", "V") - _predict_key(pop, "zahb_mv_rr", "V")


def extinction_ratio_av(row):
    """A_band / A_V of the band in the row (low-extinction limit) for a blackbody of ``teff_k`` (conditions;
    default 7,000 K), law ``law`` (default F99) and ``rv`` (default 3.1).  A_V is the band-integrated V
    extinction at the same Teff, as published tables of A_band/E(B-V) normalise to their V (Landolt) row."""
    from hbmodel.photometry.extinction import extinction_ratio
    from hbmodel.photometry.magnitudes import resolve_band
    c = _cond(row)
    try:
        band = resolve_band(row["band"])
    except ValueError:
        raise NotModelled(f"band {row['band']} is not in hbmodel's band set") from None
    teff, law, rv = float(c.get("teff_k", 7000.0)), c.get("law", "F99"), float(c.get("rv", 3.1))
    return float(extinction_ratio(band, teff, rv, law) / extinction_ratio("V", teff, rv, law))


EVALUATORS = {f.__name__: f for f in (
    extinction_ratio_av,
    tip_mass_msun, ms_lifetime_gyr, trgb_abs_mag, rgb_colour_at_mag,
    flash_core_mass_msun, min_ignition_core_mass_msun, mass_at_min_core_msun,
    integrated_mass_loss_msun,
    rr_abs_mag_mean, rr_mv_feh_slope, zahb_hot_end_teff_k,
    hb_lifetime_myr, hb_lifetime_ratio_hot_to_rr, agb_to_hb_ratio, r_parameter,
    rrab_period_mean, rrc_fraction, period_shift_hb_type, strip_edge_logteff, strip_edge_logteff_feh_slope,
    pab_feh_slope,
    clump_abs_mag, clump_colour, clump_abs_mag_feh_slope, clump_abs_mag_age_diff, secondary_clump_depth_mag,
    bump_minus_clump_mag, bump_to_clump_ratio, bump_minus_hb_mag, agb_bump_minus_clump_mag,
    agb_bump_to_clump_ratio,
)}


def evaluate_row(row) -> float:
    """Model value of one target row; :class:`NotModelled` when the model has no counterpart."""
    q = row["quantity"]
    if q not in EVALUATORS:
        raise NotModelled(f"no evaluator for quantity {q!r}")
    try:
        return float(EVALUATORS[q](row))
    except NotModelled:
        raise
    except ValueError as exc:       # outside the model's calibrated domain
        raise NotModelled(f"outside the model's domain: {exc}") from None
