"""Stage-by-stage weighted least-squares calibration of the free coefficients.

Each :class:`Stage` names the coefficient cells it may move (:class:`Free`), the target rows it is
fitted to (``role = fit`` rows of the listed stages and quantities; ``check`` rows are never
read here) and the coefficients of its tables that no target constrains.  :func:`fit_stage`
minimises ``sum(((model - value) / sigma)**2)`` with ``scipy.optimize.least_squares``, where
``sigma`` combines the target's uncertainty with the surrogate's stated accuracy
(:func:`hbmodel.calibration.scorecard.sigma_model`).  Stages run in the data-flow order of
:data:`STAGES`; each sees the coefficients fitted by the stages before it.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import least_squares

from hbmodel.core.tables import _shipped_text, trial_tables
from hbmodel.calibration.coefficients import CoefficientTable
from hbmodel.calibration.evaluators import NotModelled, evaluate_row
from hbmodel.calibration.scorecard import sigma_model
from hbmodel.calibration.targets import read_targets

__all__ = ["Free", "Stage", "StageResult", "fit_stage", "STAGES", "run_all"]


@dataclass(frozen=True)
class Free:
    """Free coefficient cells of one table column.

    ``mode``: ``"each"`` — one parameter per listed row; ``"shift"`` — one parameter, the value of
    the first listed row, the other rows keeping their offsets from it; ``"scale"`` — likewise with
    ratios.  ``bounds`` are absolute for ``"each"``; for ``"shift"`` they are offsets from, and for
    ``"scale"`` factors of, the starting value."""

    table: str
    column: str
    rows: tuple[int, ...] = (0,)       # () = every row of the table (shift / scale modes only)
    mode: str = "each"
    bounds: tuple[float, float] = (-np.inf, np.inf)

    def _rows(self, tab):
        return self.rows if self.rows else tuple(range(tab.n_rows()))

    def names(self):
        if self.mode == "each":
            return [f"{self.table}:{self.column}[{i}]" for i in self.rows]
        which = ",".join(map(str, self.rows)) if self.rows else "all rows"
        return [f"{self.table}:{self.column}[{which}] ({self.mode})"]

    def start(self, tab: CoefficientTable):
        if self.mode == "each":
            return [tab.value(self.column, i) for i in self.rows]
        return [tab.value(self.column, self._rows(tab)[0])]

    def cells(self, tab: CoefficientTable, p):
        if self.mode == "each":
            return {(self.column, i): v for i, v in zip(self.rows, p)}
        rows = self._rows(tab)
        ref = tab.value(self.column, rows[0])
        out = {}
        for i in rows:
            v = tab.value(self.column, i)
            out[(self.column, i)] = v + (p[0] - ref) if self.mode == "shift" else v * p[0] / ref
        return out

    def size(self):
        return len(self.rows) if self.mode == "each" else 1


@dataclass(frozen=True)
class Stage:
    name: str
    free: tuple[Free, ...]
    target_stages: tuple[str, ...]
    quantities: tuple[str, ...] = ()           # empty = every quantity of those stages
    unconstrained: tuple[str, ...] = ()         # "table:column" not constrained by any target
    description: str = ""
    cluster_quantities: tuple[str, ...] = ()    # cluster-benchmark quantities of the 'fit' clusters

    def fit_rows(self):
        t = read_targets(role="fit")
        keep = [(r["stage"] in self.target_stages and (not self.quantities or r["quantity"] in self.quantities))
                for r in t]
        rows = list(t[np.array(keep, bool)]) if len(t) else []
        if self.cluster_quantities:
            from hbmodel.calibration.benchmark import cluster_rows
            rows += cluster_rows("fit", self.cluster_quantities)
        return rows

    def tables(self):
        return tuple(dict.fromkeys(f.table for f in self.free))


@dataclass(frozen=True)
class StageResult:
    stage: Stage
    names: tuple[str, ...]
    start: np.ndarray
    values: np.ndarray
    sigma: np.ndarray
    rows: tuple = ()          # (id, model, value, sigma, pull)
    skipped: tuple = ()       # (id, reason)
    texts: dict = field(default_factory=dict)
    chi2: float = np.nan
    success: bool = True


def _is_cluster_row(r) -> bool:
    return isinstance(r, dict) and "cluster" in r


def _model_quantity(r) -> str:
    return r["model_quantity"] if _is_cluster_row(r) else r["quantity"]


def _evaluate(r) -> float:
    """Model value of a target row or of a cluster-benchmark row."""
    if _is_cluster_row(r):
        from hbmodel.calibration.benchmark import cluster_value
        return cluster_value(r)
    return evaluate_row(r)


def _tables(names, texts):
    return {n: CoefficientTable.from_text(texts.get(n) or _shipped_text(n)) for n in names}


def _apply(stage, tabs, p):
    k = 0
    cells = {n: {} for n in tabs}
    for f in stage.free:
        cells[f.table].update(f.cells(tabs[f.table], p[k:k + f.size()]))
        k += f.size()
    return {n: tabs[n].with_values(c) for n, c in cells.items()}


def _block(stage, rows_used, skipped):
    ids = ", ".join(rows_used) or "none"
    lines = [f": stage '{stage.name}' of scripts/calibrate.py (do not edit the fitted cells by hand).",
             ": fitted cells: " + "; ".join(n for f in stage.free for n in f.names()),
             f": fitted to the 'fit' rows of tables/targets/: {ids}"]
    if skipped:
        lines.append(": fit rows the model cannot evaluate (left out): " + ", ".join(i for i, _ in skipped))
    if stage.unconstrained:
        lines.append(": not constrained by any target (kept as given above): " + ", ".join(stage.unconstrained))
    # wrap long lines at ~110 characters
    out = []
    for ln in lines:
        while len(ln) > 110:
            cut = ln.rfind(" ", 0, 110)
            out.append(ln[:cut])
            ln = ":   " + ln[cut + 1:]
        out.append(ln)
    return tuple(out)


def fit_stage(stage: Stage, texts: dict | None = None, *, max_nfev: int = 40, rows=None) -> StageResult:
    """Fit one stage, with the table texts ``texts`` (earlier stages' results) in force.

    ``rows`` replaces the stage's target rows (tests use it to recover known coefficients)."""
    texts = dict(texts or {})
    tabs = _tables(stage.tables(), texts)
    x0 = np.concatenate([np.asarray(f.start(tabs[f.table]), float) for f in stage.free])
    lo, hi = [], []
    for f in stage.free:
        s0 = np.asarray(f.start(tabs[f.table]), float)
        if f.mode == "shift":
            lo.append(s0 + f.bounds[0]), hi.append(s0 + f.bounds[1])
        elif f.mode == "scale":
            lo.append(s0 * f.bounds[0]), hi.append(s0 * f.bounds[1])
        else:
            lo.append(np.full(f.size(), f.bounds[0])), hi.append(np.full(f.size(), f.bounds[1]))
    lo, hi = np.concatenate(lo), np.concatenate(hi)
    names = tuple(n for f in stage.free for n in f.names())
    rows = list(stage.fit_rows() if rows is None else rows)
    sig = np.array([np.hypot(float(r["uncertainty"]) if np.isfinite(float(r["uncertainty"])) else 0.0,
                             sigma_model(_model_quantity(r))) for r in rows])
    skipped = []
    with trial_tables(texts):
        usable = []
        for r, s in zip(rows, sig):
            try:
                if not np.isfinite(_evaluate(r)):
                    raise NotModelled("the model gives no value (see the cluster benchmark)")
            except NotModelled as exc:
                skipped.append((r["id"], str(exc)))
                continue
            if s > 0:
                usable.append((r, s))
    if not usable:
        return StageResult(stage, names, x0, x0, np.full_like(x0, np.nan), (), tuple(skipped), texts, np.nan, False)

    def model(p):
        new = _apply(stage, tabs, p)
        with trial_tables({**texts, **{n: t.text() for n, t in new.items()}}):
            out = []
            for r, _ in usable:
                try:
                    out.append(_evaluate(r))
                except NotModelled:
                    out.append(np.nan)
            return np.array(out)

    vals = np.array([float(r["value"]) for r, _ in usable])
    sigs = np.array([s for _, s in usable])

    def resid(p):
        m = model(p)
        return np.where(np.isfinite(m), (m - vals) / sigs, 1e3)

    step = np.where(x0 != 0, 1e-3, 1e-3)
    res = least_squares(resid, np.clip(x0, lo, hi), bounds=(lo, hi), diff_step=step, x_scale="jac",
                        xtol=1e-6, ftol=1e-8, max_nfev=max_nfev)
    try:
        cov = np.linalg.pinv(res.jac.T @ res.jac)
        sigma = np.sqrt(np.clip(np.diag(cov), 0, None))
    except np.linalg.LinAlgError:
        sigma = np.full_like(res.x, np.nan)
    m = model(res.x)
    out_rows = tuple((r["id"], float(mv), float(v), float(s), float((mv - v) / s))
                     for (r, s), mv, v in zip(usable, m, vals))
    new = _apply(stage, tabs, res.x)
    block = _block(stage, [r["id"] for r, _ in usable], skipped)
    new_texts = {n: t.text(block) for n, t in new.items()}
    return StageResult(stage, names, x0, res.x, sigma, out_rows, tuple(skipped), {**texts, **new_texts},
                       float(np.sum(res.fun ** 2)), bool(res.success))


def run_all(stages=None, *, progress=None):
    """Fit every stage in order; returns the list of :class:`StageResult`."""
    texts, results = {}, []
    for st in (stages or STAGES):
        if progress:
            progress(st)
        r = fit_stage(st, texts)
        texts = r.texts
        results.append(r)
    return results


# ----------------------------------------------------------------------------- the stages
def _scalars(table: str, bounds: dict) -> tuple[Free, ...]:
    """Free cells of a one-row table of scalar coefficients: ``{column: (lower, upper)}``."""
    return tuple(Free(table, col, (0,), "each", b) for col, b in bounds.items())


# Data-flow order: giant branch -> ZAHB and clump -> RGB bump (its targets are offsets from the
# clump and the ZAHB, so it follows them) together with the HB and early-AGB lifetimes (star counts).
STAGES = (
    Stage("tip ages", (Free("tip_age.csv", "age_tip_gyr", (), "scale", (0.7, 1.4)),),
          ("giant_branch",), ("tip_mass_msun",),
          unconstrained=("tip_age.csv: the shape of age(mass, [M/H]) (only its overall scale is fitted)",),
          description="overall age scale of the RGB-tip ages"),
    Stage("RGB temperature", _scalars("giant_branch_constants.csv", {"t0": (3.55, 3.70)}),
          ("giant_branch",), ("rgb_colour_at_mag",),
          unconstrained=("giant_branch_constants.csv: t1, t2, tm0, tm1, tlogm, ty (the locus shape)",),
          description="RGB temperature level from the RGB colour at fixed M_I"),
    Stage("tip luminosity", (Free("giant_branch.csv", "logl_tip", (), "shift", (-0.3, 0.3)),),
          ("giant_branch",), ("trgb_abs_mag",),
          unconstrained=("giant_branch.csv: logl_tip trend with [M/H] (only its level is fitted); m_hef_msun",),
          description="TRGB luminosity level"),
    Stage("ZAHB and clump luminosity",
          _scalars("zahb_shell.csv", {"h_logl0_c0": (1.0, 1.8), "h_logl0_c1": (-0.5, 0.5), "h_logl0_c2": (-0.3, 0.3),
                                      "tilt_amp": (0.0, 4.0), "tilt_big_ratio": (0.0, 1.5)}),
          ("zahb", "photometry", "clump"),
          ("rr_abs_mag_mean", "rr_mv_feh_slope", "clump_abs_mag", "clump_abs_mag_feh_slope", "clump_abs_mag_age_diff"),
          unconstrained=("zahb_shell.csv: tilt_mh0, tilt_width_dex, tilt_menv0_msun",
                         "giant_branch.csv: mc_tip_msun (flash core masses; no published value could be read)",
                         "zahb_luminosity.csv: all (helium core, shell shape, intermediate-mass term)",
                         "zahb_teff.csv: all (ZAHB temperature-envelope relation)"),
          description="hydrogen-shell normalisation (quadratic in [M/H]) and metal-rich tilt"),
    Stage("RR Lyrae strip",
          _scalars("pulsation.csv", {"fobe_a": (3.93, 4.00), "fbe_a": (3.92, 3.99), "fore_a": (3.90, 3.98),
                                     "fre_a": (3.92, 3.99)}),
          ("pulsation",), ("rrab_period_mean", "rrc_fraction", "pab_feh_slope", "strip_edge_logteff_feh_slope"),
          cluster_quantities=("pab_mean", "pc_mean", "f_rrc"),
          unconstrained=("pulsation.csv: the edges' luminosity and mass slopes (*_b, *_c)",
                         "pulsation.csv: the period relation (van Albada & Baker 1971) and P1/P0 (published)"),
          description="zero points of the four instability-strip edges, from Oosterhoff mean periods and RRc "
                      "fractions, and each 'fit' cluster's mean RRab / RRc periods and RRc fraction with its eta "
                      "fitted to its HB ratio"),
    Stage("RGB bump and lifetimes",
          _scalars("giant_branch_constants.csv", {"bump_l0": (0.8, 2.0), "bump_l1": (-1.0, 0.0),
                                                  "bump_l2": (-0.3, 0.3), "bump_ew_dex": (0.0, 0.3)})
          + _scalars("hb_evolution.csv", {"t0_myr": (50.0, 150.0), "hot_boost": (0.0, 1.0), "f_agb": (0.05, 0.3)}),
          ("bump", "hb_evolution", "counts"),
          ("bump_minus_hb_mag", "bump_minus_clump_mag", "bump_to_clump_ratio", "r_parameter", "agb_to_hb_ratio",
           "hb_lifetime_ratio_hot_to_rr"),
          unconstrained=("giant_branch_constants.csv: bump_dlogl, bump_dlogl_dlogage, bump_drop_frac",
                         "hb_evolution.csv: mc_exp, dy_exp, ehb_boost, hot_logt, track shapes (red_*, blue_*, ehb_*), "
                         "agb_bump_*"),
          description="bump luminosity and pause, HB lifetime scale, hot-HB excess, early-AGB duration "
                      "(fitted together: every star-count ratio depends on both the bump pause and t_HB)"),
)
