"""The cluster benchmark: each cluster's Reimers eta fitted to its HB ratio, everything else predicted.

For every globular cluster of ``tables/targets/clusters.ecsv`` with an HB ratio (B-R)/(B+V+R), eta
is solved (bisection, star-to-star spread fixed at :data:`~.evaluators.ETA_SPREAD_OLD`) so that the
model's HB ratio equals the observed one, at the cluster's [Fe/H], [alpha/Fe] = +0.3 and age
(12.5 Gyr where none is published; common practice for old-halo clusters).  The model then predicts
the mean RRab and RRc periods, the RRc fraction, the RGB-bump offset from the HB, the R-parameter
and, where measured, the RGB, HB, RR Lyrae and red-HB masses, each compared with the published value (a pull with
the target's uncertainty and the surrogate's stated accuracy).  For open clusters the RGB mass is
predicted from the age and [Fe/H], and the eta implied by the measured RGB - red clump mass
difference is reported.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from hbmodel.calibration.evaluators import ETA_SPREAD_OLD, NotModelled, _Cached, eta_for_hb_ratio
from hbmodel.calibration.scorecard import sigma_model
from hbmodel.core.tables import table_cache
from hbmodel.physics.pulsation import strip_edges
from hbmodel.calibration.targets import read_clusters

__all__ = ["ClusterResult", "run_benchmark", "cluster_rows", "cluster_value", "oosterhoff_criterion", "PREDICTED_QUANTITIES"]

_MODEL_QUANTITY = {"pab_mean": "rrab_period_mean", "pc_mean": "rrab_period_mean", "f_rrc": "rrc_fraction",
                   "dv_bump_hb": "bump_minus_hb_mag", "r_parameter": "r_parameter",
                   "mass_rgb_msun": "tip_mass_msun", "mass_rc_msun": "tip_mass_msun",
                   "mass_rr_msun": "tip_mass_msun", "mass_rhb_msun": "tip_mass_msun"}
#: benchmark quantities the model predicts (everything but the inputs [Fe/H], age and HB ratio)
PREDICTED_QUANTITIES = tuple(_MODEL_QUANTITY)


@dataclass(frozen=True)
class ClusterResult:
    name: str
    kind: str
    role: str
    feh: float
    age_gyr: float
    eta: float
    saturated: int
    observed: dict      # quantity -> (value, uncertainty)
    predicted: dict     # quantity -> value (NaN when not modelled)
    notes: dict         # quantity -> reason it is not modelled

    def pull(self, q):
        v, u = self.observed[q]
        s = np.hypot(u if np.isfinite(u) else 0.0, sigma_model(_MODEL_QUANTITY.get(q, q)))
        m = self.predicted.get(q, np.nan)
        return (m - v) / s if (np.isfinite(m) and s > 0) else np.nan


def _clusters():
    t = read_clusters()
    out = {}
    for r in t:
        d = out.setdefault(r["name"], {"kind": r["kind"], "role": r["role"], "q": {}, "roles": {}})
        d["q"][r["quantity"]] = (float(r["value"]), float(r["uncertainty"]))
        d["roles"][r["quantity"]] = r["role"]
    return out


def _gc_predictions(feh, eta, age, alpha):
    pop = _Cached(("old", feh, round(eta, 6), ETA_SPREAD_OLD, age, alpha))
    p = pop.predict()
    st = pop.model_stars()
    rr = (st.phase == "hb") & (st.rr_mode != 0)
    out, why = {}, {}
    w_rr = st.weight[rr].sum()
    if w_rr > 0:
        ab, c = rr & (st.rr_mode == 1), rr & (st.rr_mode == 2)
        out["pab_mean"] = (float(np.sum(st.period_days[ab] * st.weight[ab]) / st.weight[ab].sum())
                           if st.weight[ab].sum() > 0 else np.nan)
        out["pc_mean"] = (float(np.sum(st.period_days[c] * st.weight[c]) / st.weight[c].sum())
                          if st.weight[c].sum() > 0 else np.nan)
        out["f_rrc"] = float(st.weight[c].sum() / w_rr)
    else:
        for q in ("pab_mean", "pc_mean", "f_rrc"):
            why[q] = "no RR Lyrae stars in the model at the fitted eta"
    out["r_parameter"] = float(p["r_parameter"]) if p.get("r_parameter") is not None else np.nan
    if p.get("bump_absmag") is not None and p.get("zahb_mv_rr") is not None:
        out["dv_bump_hb"] = float(p["bump_absmag"]["V"]) - float(p["zahb_mv_rr"])
    else:
        why["dv_bump_hb"] = "the model does not predict the RGB-bump magnitude"
    out["mass_rgb_msun"] = float(p["tip_mass"])
    out["mass_rc_msun"] = float(p["hb_mass_mean"]) if p.get("hb_mass_mean") is not None else np.nan
    # mean masses of the RR Lyrae and of the red HB (core-He-burning stars cooler than the fundamental red edge
    # at their own luminosity and mass), for seismic masses of the two groups (e.g. M4, Molnar et al. 2025)
    out["mass_rr_msun"] = (float(np.sum(st.mass_msun[rr] * st.weight[rr]) / w_rr) if w_rr > 0 else np.nan)
    hb = st.phase == "hb"
    _, red_edge = strip_edges(st.logl[hb], st.mass_msun[hb])
    red = (st.rr_mode[hb] == 0) & (st.logteff[hb] < red_edge)
    w_red = st.weight[hb][red].sum()
    if w_red > 0:
        out["mass_rhb_msun"] = float(np.sum(st.mass_msun[hb][red] * st.weight[hb][red]) / w_red)
    else:
        why["mass_rhb_msun"] = "no red-HB stars in the model at the fitted eta"
    return out, why


def _eta_for_delta_m(delta_m, feh, age, alpha=0.0):
    """Reimers eta whose integrated RGB loss equals ``delta_m`` (bisection)."""
    from hbmodel.populations.population import MassLoss, Population
    lo, hi = 0.0, 1.0
    for _ in range(30):
        mid = 0.5 * (lo + hi)
        dm = Population(feh, age, alpha_fe=alpha, mass_loss=MassLoss.from_eta(mid)).mean_mass_loss()
        lo, hi = (mid, hi) if dm < delta_m else (lo, mid)
    return 0.5 * (lo + hi)


@table_cache
def _globular(name: str):
    """(eta, saturated, predicted, why) of globular cluster ``name`` under the active tables; raises
    ValueError / NotModelled when it cannot be fitted (cached per trial table set)."""
    q = _clusters()[name]["q"]
    feh = q["feh"][0]
    age = float(np.clip(q.get("age_gyr", (12.5,))[0], 0.5, 14.0))
    eta, sat = eta_for_hb_ratio(q["hb_ratio"][0], feh, age_gyr=age)
    pred, why = _gc_predictions(feh, eta, age, 0.3)
    return eta, sat, pred, why


def cluster_rows(role: str = "fit", quantities=("pab_mean", "pc_mean", "f_rrc")) -> list[dict]:
    """Target rows of ``role`` globular clusters for ``quantities`` (with [Fe/H] and an HB ratio), as
    dicts with ``id``, ``cluster``, ``quantity``, ``model_quantity``, ``value`` and ``uncertainty``.
    Used by the calibration stage that fits the instability strip; ``check`` rows are never fitted: a row is
    returned only when its own role is ``role`` (a held-out row of a 'fit' cluster stays held out)."""
    out = []
    for name, d in _clusters().items():
        q = d["q"]
        if d["kind"] != "GC" or "feh" not in q or "hb_ratio" not in q:
            continue
        for k in quantities:
            if k in q and d["roles"][k] == role:
                out.append({"id": f"{name}: {k}", "cluster": name, "quantity": k, "role": role,
                            "model_quantity": _MODEL_QUANTITY.get(k, k),
                            "value": q[k][0], "uncertainty": q[k][1]})
    return out


def cluster_value(row: dict) -> float:
    """Model value of one :func:`cluster_rows` row under the active tables (NaN when not modelled)."""
    try:
        return float(_globular(row["cluster"])[2].get(row["quantity"], np.nan))
    except (ValueError, NotModelled):
        return np.nan


def run_benchmark(progress=None, role=None) -> list[ClusterResult]:
    """Fit and predict every cluster (or only those of ``role``, 'fit' or 'check')."""
    results = []
    for name, d in _clusters().items():
        if role is not None and d["role"] != role:
            continue
        if progress:
            progress(name)
        q = d["q"]
        feh = q.get("feh", (np.nan,))[0]
        if not np.isfinite(feh):
            results.append(ClusterResult(name, d["kind"], d["role"], feh, np.nan, np.nan, 0, q, {},
                                         {"*": "no [Fe/H]"}))
            continue
        if d["kind"] == "GC":
            age = float(np.clip(q.get("age_gyr", (12.5,))[0], 0.5, 14.0))
            if "hb_ratio" not in q:
                results.append(ClusterResult(name, d["kind"], d["role"], feh, age, np.nan, 0, q, {},
                                             {"*": "no HB ratio to fit eta to"}))
                continue
            try:
                eta, sat, pred, why = _globular(name)
            except (ValueError, NotModelled) as exc:
                results.append(ClusterResult(name, d["kind"], d["role"], feh, age, np.nan, 0, q, {},
                                             {"*": str(exc)}))
                continue
            results.append(ClusterResult(name, d["kind"], d["role"], feh, age, eta, sat, q, dict(pred), dict(why)))
        else:
            from hbmodel.physics import giant_branch as gb
            age = q.get("age_gyr", (np.nan,))[0]
            pred, why, eta = {}, {}, np.nan
            try:
                pred["mass_rgb_msun"] = float(gb.tip_mass_msun(age, feh))
                if "mass_rgb_msun" in q and "mass_rc_msun" in q:
                    dm = q["mass_rgb_msun"][0] - q["mass_rc_msun"][0]
                    eta = _eta_for_delta_m(dm, feh, age) if dm > 0 else 0.0
                    why["mass_rc_msun"] = f"used to derive eta = {eta:.2f} (RGB - clump mass {dm:+.2f} Msun)"
            except ValueError as exc:
                why["*"] = str(exc)
            results.append(ClusterResult(name, d["kind"], d["role"], feh, age, eta, 0, q, pred, why))
    return results


def oosterhoff_criterion(results, min_rrab=10, dp_days=0.03, dfc=0.15):
    """Issue criterion: clusters with >= ``min_rrab`` RRab whose mean RRab period lies within ``dp_days``
    and RRc fraction within ``dfc`` of the observed values.  Returns (n_ok, n_clusters, names)."""
    sel = [r for r in results if r.observed.get("n_rrab", (0,))[0] >= min_rrab and "pab_mean" in r.observed]
    ok = []
    for r in sel:
        p = r.predicted.get("pab_mean", np.nan)
        f = r.predicted.get("f_rrc", np.nan)
        good = np.isfinite(p) and abs(p - r.observed["pab_mean"][0]) <= dp_days
        if "f_rrc" in r.observed:
            good = good and np.isfinite(f) and abs(f - r.observed["f_rrc"][0]) <= dfc
        if good:
            ok.append(r.name)
    return len(ok), len(sel), ok

