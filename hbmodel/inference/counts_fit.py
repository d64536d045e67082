"""Mass loss from catalogue numbers: eta, its spread and helium from HB counts and RR Lyrae periods.

Most clusters are known through summary numbers: the HB counts B:V:R (or the HB ratio
(B-R)/(B+V+R), Lee 1990, ApJ 363, 159), the RR Lyrae counts by mode and their mean periods, the
R-parameter N_HB/N_RGB (Iben 1968, Nature 220, 143).  This module turns them into a posterior on
the Reimers efficiency eta, its star-to-star spread, optionally a helium-enriched fraction and its
dY, with the age as a nuisance parameter.

Emulator.  The observables are ratios of times spent by HB stars in classes (bluer than / inside /
redder than the instability strip, RRab / RRc, period sums, a log Teff histogram).  These times are
*additive* over a population's stars, so a population whose eta is spread over a distribution is the
eta-weighted sum of single-eta populations.  :class:`CountsEmulator` tabulates the times once per
(age node, dY node) on a fine eta grid -- with one public :meth:`Population.model_stars` call whose
mass loss is a mixture of single-eta components, so the physics is always the current one, never a
frozen table -- and a (eta, sigma_eta, f_He, dY, age) point is a weighted sum: the eta weights are a
Gaussian (truncated at zero, as :class:`~hbmodel.populations.population.MassLoss`) convolved with the linear
interpolation kernel of the grid (smooth even for sigma_eta -> 0), ages and dY are interpolated
linearly between nodes, and the helium-enriched stars enter with weight f_He as in
:class:`~hbmodel.populations.population.Population`.  ``tests/test_counts_fit.py`` holds it to ``predict``.

Likelihood.  Multinomial for (n_blue, n_var, n_red); for an HB ratio with its HB count the exact
probability of B - R under the multinomial (a sum over R); binomial for the RRc among the RR Lyrae and
for N_HB among N_HB + N_RGB; Gaussian for the mean periods (with the surrogate's stated accuracy,
``tables/targets/model_accuracy.csv``, added in quadrature) and for log Teff of the hottest HB star.
Sampling with emcee (Foreman-Mackey et al. 2013, PASP 125, 306), convergence at 50 autocorrelation
times; goodness of fit by a posterior-predictive check (Gelman, Meng & Stern 1996, Stat. Sin. 6, 733;
reference recalled from memory) of the deviance.

Hierarchical summary (:func:`hierarchical_eta`): the population mean and scatter of eta across
clusters, from the per-cluster posterior samples (drawn under a flat eta prior) by importance
reweighting (e.g. Hogg, Myers & Bovy 2010, ApJ 725, 2166, eq. 9; reference recalled from memory).

Size (920+ lines): one estimator pipeline (counts input, emulator of ``predict``, likelihood, emcee fit, hierarchical
summary, batch task, simulation-based calibration) in marked sections sharing the emulator's private helpers.
"""
from __future__ import annotations

import difflib
import math
from dataclasses import dataclass, field

import numpy as np
from scipy.special import gammaln, logsumexp, ndtr, xlogy

__all__ = ["COUNT_COLUMNS", "ClusterCounts", "CountsEmulator", "CountsFit", "read_counts", "counts_from_rows",
           "fit_counts", "hierarchical_eta", "benchmark_counts", "simulate_counts", "sbc_counts", "PRIOR_ETA", "PRIOR_ETA_SD", "PRIOR_DELTA_Y"]

#: Columns of a counts table: name -> (required, help).  ``hb_ratio_err``, ``pc_mean`` and ``pc_err`` are
#: hbmodel additions for catalogues that give an HB ratio with an error but no HB count, and RRc periods.
COUNT_COLUMNS = {
    "name": (True, "cluster name"),
    "feh": (True, "[Fe/H] (dex)"),
    "alpha_fe": (False, "[alpha/Fe] (dex), default 0.3 (common practice for old clusters)"),
    "age": (False, "age (Gyr), default 12.5 (common practice for old-halo clusters)"),
    "age_sd": (False, "prior width of the age (Gyr); default: age fixed"),
    "n_blue": (False, "HB stars bluer than the RR Lyrae strip"),
    "n_var": (False, "RR Lyrae (HB stars inside the strip)"),
    "n_red": (False, "HB stars redder than the strip"),
    "hb_ratio": (False, "HB ratio (B-R)/(B+V+R)"),
    "n_hb": (False, "number of HB stars the HB ratio was counted from"),
    "hb_ratio_err": (False, "1-sigma error of hb_ratio when no n_hb is known"),
    "pab_mean": (False, "mean RRab period (d)"),
    "pab_err": (False, "error of pab_mean (d), default 0.02"),
    "pc_mean": (False, "mean RRc period (d)"),
    "pc_err": (False, "error of pc_mean (d), default 0.02"),
    "n_rrab": (False, "number of RRab"),
    "n_rrc": (False, "number of RRc"),
    "n_rgb": (False, "RGB stars brighter than the ZAHB level at the strip (R-parameter N_HB/N_RGB)"),
    "hb_blue_tail_teff": (False, "Teff of the hottest HB star (K)"),
    "seed": (False, "random seed (default: crc32 of the name)"),
}

#: Uniform priors (own choice: wide enough for every Galactic globular cluster, Reimers law).
PRIOR_ETA = (0.0, 1.5)
PRIOR_ETA_SD = (0.0, 0.25)
PRIOR_HELIUM_FRACTION = (0.0, 1.0)
PRIOR_DELTA_Y = (0.0, 0.12)
#: Default period error (d) when none is given (common practice: spread of mean periods at fixed HB type).
DEFAULT_PERIOD_ERR_D = 0.02
#: Error of log Teff of the hottest HB star (dex; own choice, ~7 % in Teff: colour-Teff of hot stars).
BLUE_TAIL_LOGTEFF_SD = 0.03
#: eta grid of the emulator (step 0.005, to 2.5: the whole prior plus three spreads).
ETA_GRID = np.linspace(0.0, 2.5, 501)
_DY_NODES = np.linspace(0.0, PRIOR_DELTA_Y[1], 7)
_LOGT_EDGES = np.linspace(3.55, 4.65, 111)
_NF = 9  # t_blue, t_var, t_red, t_ab, t_c, tP_ab, tP_c, dm (per star, not time), alive (per star)
MODELS = {"spread": ("eta", "eta_sd"), "helium": ("eta", "helium_fraction", "delta_y"),
          "both": ("eta", "eta_sd", "helium_fraction", "delta_y")}


# --------------------------------------------------------------------------- input
@dataclass(frozen=True)
class ClusterCounts:
    """One cluster's catalogue numbers (NaN = not given)."""

    name: str
    feh: float
    alpha_fe: float = 0.3
    age_gyr: float = 12.5
    age_sd_gyr: float = math.nan
    n_blue: float = math.nan
    n_var: float = math.nan
    n_red: float = math.nan
    hb_ratio: float = math.nan
    n_hb: float = math.nan
    hb_ratio_err: float = math.nan
    pab_mean: float = math.nan
    pab_err: float = math.nan
    pc_mean: float = math.nan
    pc_err: float = math.nan
    n_rrab: float = math.nan
    n_rrc: float = math.nan
    n_rgb: float = math.nan
    hb_blue_tail_teff: float = math.nan
    seed: int = 0

    def __post_init__(self):
        where = f"cluster {self.name!r}"
        if not (math.isfinite(self.feh) and -2.5 <= self.feh <= 0.5):
            raise ValueError(f"{where}: feh must lie in [-2.5, +0.5] (got {self.feh})")
        if not -0.2 <= self.alpha_fe <= 0.6:
            raise ValueError(f"{where}: alpha_fe must lie in [-0.2, +0.6] (got {self.alpha_fe})")
        if not 0.5 <= self.age_gyr <= 14.0:
            raise ValueError(f"{where}: age must lie in 0.5-14 Gyr (got {self.age_gyr})")
        if math.isfinite(self.age_sd_gyr) and not self.age_sd_gyr > 0:
            raise ValueError(f"{where}: age_sd must be positive (got {self.age_sd_gyr})")
        bvr = [math.isfinite(v) for v in (self.n_blue, self.n_var, self.n_red)]
        for k in ("n_blue", "n_var", "n_red", "n_hb", "n_rrab", "n_rrc", "n_rgb"):
            v = getattr(self, k)
            if math.isfinite(v) and (v < 0 or v != int(v)):
                raise ValueError(f"{where}: {k} must be a non-negative integer (got {v})")
        if any(bvr) and not all(bvr):
            raise ValueError(f"{where}: give all three of n_blue, n_var, n_red (or hb_ratio with n_hb)")
        if all(bvr) and math.isfinite(self.hb_ratio):
            raise ValueError(f"{where}: give n_blue, n_var, n_red or hb_ratio, not both")
        if math.isfinite(self.hb_ratio):
            if not -1.0 <= self.hb_ratio <= 1.0:
                raise ValueError(f"{where}: hb_ratio must lie in [-1, +1] (got {self.hb_ratio})")
            if math.isfinite(self.n_hb) == math.isfinite(self.hb_ratio_err):
                raise ValueError(f"{where}: hb_ratio needs exactly one of n_hb (its HB count) or hb_ratio_err")
            if math.isfinite(self.n_hb) and self.n_hb < 1:
                raise ValueError(f"{where}: n_hb must be at least 1")
            if math.isfinite(self.hb_ratio_err) and not self.hb_ratio_err > 0:
                raise ValueError(f"{where}: hb_ratio_err must be positive")
        elif math.isfinite(self.n_hb) and not all(bvr):
            raise ValueError(f"{where}: n_hb without hb_ratio")
        if all(bvr) and self.n_blue + self.n_var + self.n_red < 1:
            raise ValueError(f"{where}: no HB stars counted (n_blue + n_var + n_red = 0)")
        if not (all(bvr) or math.isfinite(self.hb_ratio)):
            raise ValueError(f"{where}: HB counts missing: give n_blue, n_var, n_red or hb_ratio with n_hb")
        for k in ("pab_mean", "pc_mean"):
            v = getattr(self, k)
            if math.isfinite(v) and not 0.15 <= v <= 1.2:
                raise ValueError(f"{where}: {k} must lie in 0.15-1.2 d (got {v})")
        for k in ("pab_err", "pc_err"):
            v = getattr(self, k)
            if math.isfinite(v) and not v > 0:
                raise ValueError(f"{where}: {k} must be positive (got {v})")
        if math.isfinite(self.n_rrab) != math.isfinite(self.n_rrc):
            raise ValueError(f"{where}: give both n_rrab and n_rrc")
        if math.isfinite(self.hb_blue_tail_teff) and not 5000 <= self.hb_blue_tail_teff <= 40000:
            raise ValueError(f"{where}: hb_blue_tail_teff must lie in 5,000-40,000 K")

    @property
    def n_hb_total(self) -> float:
        if math.isfinite(self.n_blue):
            return self.n_blue + self.n_var + self.n_red
        return self.n_hb

    def age_nodes(self) -> np.ndarray:
        if not math.isfinite(self.age_sd_gyr):
            return np.array([self.age_gyr])
        a = self.age_gyr + self.age_sd_gyr * np.linspace(-3.0, 3.0, 7)
        return np.unique(np.clip(a, 0.5, 14.0))

    def describe(self) -> str:
        if math.isfinite(self.n_blue):
            hb = f"B:V:R = {self.n_blue:.0f}:{self.n_var:.0f}:{self.n_red:.0f}"
        elif math.isfinite(self.n_hb):
            hb = f"HB ratio {self.hb_ratio:+.2f} of {self.n_hb:.0f} HB stars"
        else:
            hb = f"HB ratio {self.hb_ratio:+.2f} ± {self.hb_ratio_err:.2f}"
        extra = [k for k in ("pab_mean", "pc_mean", "n_rrab", "n_rgb", "hb_blue_tail_teff")
                 if math.isfinite(getattr(self, k))]
        return hb + (f"; {', '.join(extra)}" if extra else "")


def _as_float(v):
    from hbmodel.io.jobs import as_float
    return as_float(v)


def _as_int(v):
    from hbmodel.io.jobs import as_int
    return as_int(v)


def counts_from_rows(rows, where="counts table") -> list[ClusterCounts]:
    """:class:`ClusterCounts` from dicts (one per cluster); unknown keys are an error naming the nearest."""
    from hbmodel.io.jobs import job_seed
    out = []
    for i, row in enumerate(rows):
        for k in row:
            if k not in COUNT_COLUMNS:
                near = difflib.get_close_matches(k, list(COUNT_COLUMNS), n=1, cutoff=0.5)
                hint = f"did you mean {near[0]!r}? " if near else ""
                raise ValueError(f"{where}: unknown column {k!r} ({hint}valid columns: {', '.join(COUNT_COLUMNS)})")
        name = str(row.get("name", "")).strip()
        if not name:
            raise ValueError(f"{where}, row {i + 1}: empty name")
        kw = {"name": name}
        for k, v in row.items():
            if k == "name" or v is None or (isinstance(v, str) and not v.strip()):
                continue
            if isinstance(v, float) and math.isnan(v):
                continue
            try:
                val = _as_int(v) if k == "seed" else _as_float(v)
            except ValueError as exc:
                raise ValueError(f"{where}, row {i + 1} ({name!r}), column {k!r}: {exc}") from None
            key = {"age": "age_gyr", "age_sd": "age_sd_gyr"}.get(k, k)
            kw[key] = val
        if "feh" not in kw:
            raise ValueError(f"{where}, row {i + 1} ({name!r}): feh is missing")
        kw.setdefault("seed", job_seed(name))
        out.append(ClusterCounts(**kw))
    names = [c.name for c in out]
    if len(set(names)) != len(names):
        dup = sorted({n for n in names if names.count(n) > 1})
        raise ValueError(f"{where}: duplicate cluster name(s): {', '.join(dup)}")
    return out


def read_counts(path) -> list[ClusterCounts]:
    """Read a counts table (any format :func:`hbmodel.read_catalog` reads), one row per cluster."""
    from hbmodel.io.catalogues import read_catalog
    t = read_catalog(path)
    for k in t.colnames:  # check names before the values, naming the nearest valid column
        if k not in COUNT_COLUMNS:
            counts_from_rows([{k: None}], where=str(path))
    if "name" not in t.colnames or "feh" not in t.colnames:
        raise ValueError(f"{path}: the counts table needs the columns name and feh")
    if len(t) == 0:
        raise ValueError(f"{path}: the counts table has no rows")
    rows = []
    for r in t:
        d = {}
        for k in t.colnames:
            v = r[k]
            d[k] = None if np.ma.is_masked(v) else (v.item() if hasattr(v, "item") else v)
        rows.append(d)
    return counts_from_rows(rows, where=str(path))


# --------------------------------------------------------------------------- emulator
def _hat_gauss_weights(mu, sd, grid):
    """E[hat_k(x)] for x ~ N(mu, sd): weights of the (uniform) grid nodes -- the linear-interpolation kernel
    convolved with the Gaussian; rows sum to the Gaussian mass inside the grid.  mu, sd: shape (W,).
    With G the second antiderivative of the normal density, w_k = (s/d) (G(t_k+1) - 2 G(t_k) + G(t_k-1))."""
    d = grid[1] - grid[0]
    mu = np.asarray(mu, float)
    s = np.maximum(np.asarray(sd, float), 1e-4 * d)[:, None]
    # only the nodes within 9 sigma (+ one node) of some row carry weight: compute that window alone
    i0 = int(np.clip(np.searchsorted(grid, np.min(mu - 9 * s[:, 0])) - 2, 0, grid.size))
    i1 = int(np.clip(np.searchsorted(grid, np.max(mu + 9 * s[:, 0])) + 2, i0, grid.size))
    out = np.zeros((mu.size, grid.size))
    if i1 > i0:
        ext = np.concatenate([[grid[i0] - d], grid[i0:i1], [grid[i1 - 1] + d]])
        t = (ext[None, :] - mu[:, None]) / s
        g = t * ndtr(t) + np.exp(-0.5 * t * t) / math.sqrt(2 * math.pi)
        out[:, i0:i1] = np.clip((s / d) * (g[:, 2:] - 2.0 * g[:, 1:-1] + g[:, :-2]), 0.0, None)
    return out


class CountsEmulator:
    """Tabulated HB class times of a cluster's population (see the module docstring).

    ``F[a, y, k, :]`` holds, for age node ``a``, helium node ``y`` (dY of :data:`_DY_NODES`, or only 0)
    and eta node ``k`` of :data:`ETA_GRID`, the times (Myr per unit birth rate at the RGB tip) spent
    bluer than / inside / redder than the strip, as RRab / RRc, the period-weighted RRab / RRc times,
    then the integrated RGB loss (Msun) and whether the star reaches the HB.  ``H[a, y, k, :]`` the
    HB-time histogram in log Teff (only when ``teff_hist``); ``n_rgb[a, y]`` the RGB stars brighter than
    the ZAHB at the strip per unit birth rate (only when ``rgb``: one ``predict`` per node).
    """

    def __init__(self, feh, alpha_fe, ages_gyr, *, helium=False, teff_hist=False, rgb=False, n_tau=96):
        from hbmodel.populations.morphology import hb_classes
        from hbmodel.populations.population import MassLoss, Population
        self.feh, self.alpha_fe = float(feh), float(alpha_fe)
        self.ages = np.atleast_1d(np.asarray(ages_gyr, float))
        self.dys = _DY_NODES if helium else np.array([0.0])
        K = ETA_GRID.size
        ml = MassLoss("eta", tuple((1.0, float(e), 0.0) for e in ETA_GRID))
        self.F = np.zeros((self.ages.size, self.dys.size, K, _NF))
        self.H = np.zeros((self.ages.size, self.dys.size, K, _LOGT_EDGES.size - 1)) if teff_hist else None
        self.n_rgb = np.full((self.ages.size, self.dys.size), np.nan)
        for a, age in enumerate(self.ages):
            for y, dy in enumerate(self.dys):
                pop = Population(self.feh, age, alpha_fe=self.alpha_fe, mass_loss=ml,
                                 helium_enriched_fraction=1.0 if dy > 0 else 0.0, helium_delta_y=float(dy))
                sub = pop.subpopulations[0]
                st = pop.model_stars(n_mass=K, n_tau=n_tau, phases=("hb",))
                n_alive = len(st) // n_tau
                # nodes come in eta order; envelopes lost on the RGB (the highest eta) are left out
                node = np.repeat(np.arange(n_alive), n_tau)
                w = st.weight * K  # Myr per unit birth rate of one eta node
                cls = hb_classes(st)
                mode = st.rr_mode
                per = np.nan_to_num(st.period_days)
                F = self.F[a, y]
                for j, sel in enumerate((cls == -1, cls == 0, cls == 1, mode == 1, mode == 2)):
                    F[:n_alive, j] = np.bincount(node, w * sel, n_alive)
                F[:n_alive, 5] = np.bincount(node, w * per * (mode == 1), n_alive)
                F[:n_alive, 6] = np.bincount(node, w * per * (mode == 2), n_alive)
                m_hb = st.mass_msun[::n_tau]
                F[:, 7] = sub.tip_mass_msun - sub.core_mass_msun  # lost envelopes: all of it
                F[:n_alive, 7] = sub.tip_mass_msun - m_hb
                F[:n_alive, 8] = 1.0
                if teff_hist:
                    ib = np.clip(np.searchsorted(_LOGT_EDGES, st.logteff) - 1, 0, _LOGT_EDGES.size - 2)
                    self.H[a, y, :n_alive] = np.bincount(node * (_LOGT_EDGES.size - 1) + ib, w,
                                                         n_alive * (_LOGT_EDGES.size - 1)).reshape(n_alive, -1)
                if rgb:
                    ref = Population(self.feh, age, alpha_fe=self.alpha_fe, mass_loss=MassLoss.from_eta(0.2),
                                     helium_enriched_fraction=1.0 if dy > 0 else 0.0, helium_delta_y=float(dy))
                    r = ref.predict(bands=("V",)).get("r_parameter")
                    t_hb = float(np.sum(ref.phase_times()["hb"]))
                    self.n_rgb[a, y] = t_hb / r if r else np.nan

    # -- weights -------------------------------------------------------------------------
    @staticmethod
    def _lin(nodes, x):
        """(i0, i1, w1) linear-interpolation indices/weights of x (W,) on nodes (clipped)."""
        if nodes.size == 1:
            z = np.zeros(np.shape(x), int)
            return z, z, np.zeros(np.shape(x))
        x = np.clip(x, nodes[0], nodes[-1])
        i1 = np.clip(np.searchsorted(nodes, x), 1, nodes.size - 1)
        i0 = i1 - 1
        return i0, i1, (x - nodes[i0]) / (nodes[i1] - nodes[i0])

    def evaluate(self, eta, eta_sd, helium_fraction, delta_y, age_gyr, hist=False):
        """Summed features (W, _NF) (and the log Teff histogram (W, nbins) if ``hist``) at W points."""
        eta = np.atleast_1d(np.asarray(eta, float))
        W = eta.size
        wk = _hat_gauss_weights(eta, np.broadcast_to(eta_sd, (W,)), ETA_GRID)
        wk /= np.maximum(wk.sum(axis=1, keepdims=True), 1e-300)
        a0, a1, fa = self._lin(self.ages, np.broadcast_to(age_gyr, (W,)))
        fhe = np.broadcast_to(np.asarray(helium_fraction, float), (W,))
        y0, y1, fy = self._lin(self.dys, np.broadcast_to(delta_y, (W,)))
        parts = [(a0, 0, (1 - fa) * (1 - fhe)), (a1, 0, fa * (1 - fhe)),
                 (a0, y0, (1 - fa) * fhe * (1 - fy)), (a0, y1, (1 - fa) * fhe * fy),
                 (a1, y0, fa * fhe * (1 - fy)), (a1, y1, fa * fhe * fy)]
        A, Y = self.ages.size, self.dys.size
        # one matrix product over the eta nodes for every (age, dY) node, then the corners picked per row
        G = (wk @ self.F.transpose(2, 0, 1, 3).reshape(wk.shape[1], -1)).reshape(W, A, Y, _NF)
        GH = ((wk @ self.H.transpose(2, 0, 1, 3).reshape(wk.shape[1], -1)).reshape(W, A, Y, -1)
              if hist else None)
        rows = np.arange(W)
        out = np.zeros((W, _NF))
        h = np.zeros((W, _LOGT_EDGES.size - 1)) if hist else None
        nrgb = np.zeros(W)
        for ia, iy, c in parts:
            if not np.any(c):
                continue
            iy = np.broadcast_to(iy, (W,))
            out += c[:, None] * G[rows, ia, iy]
            if hist:
                h += c[:, None] * GH[rows, ia, iy]
            nrgb += c * self.n_rgb[ia, iy]
        return out, h, nrgb

    def observables(self, eta, eta_sd=0.0, helium_fraction=0.0, delta_y=0.0, age_gyr=None, hist=False):
        """Model HB fractions, RRc fraction, mean periods, R-parameter, mean loss at W points (dict)."""
        age = self.ages[self.ages.size // 2] if age_gyr is None else age_gyr
        eta = np.atleast_1d(np.asarray(eta, float))
        args = [np.broadcast_to(np.asarray(v, float), eta.shape) for v in (eta, eta_sd, helium_fraction, delta_y, age)]
        step = 1024  # bounded memory: the eta weights are (rows, eta nodes)
        parts = [self.evaluate(*(a[i:i + step] for a in args), hist) for i in range(0, eta.size, step)]
        f = np.concatenate([p[0] for p in parts])
        h = np.concatenate([p[1] for p in parts]) if hist else None
        nrgb = np.concatenate([p[2] for p in parts])
        with np.errstate(invalid="ignore", divide="ignore"):
            t_hb = f[:, 0] + f[:, 1] + f[:, 2]
            t_rr = f[:, 3] + f[:, 4]
            alive = f[:, 8]
            out = {"fraction_blue": f[:, 0] / t_hb, "fraction_var": f[:, 1] / t_hb, "fraction_red": f[:, 2] / t_hb,
                   "f_rrc": f[:, 4] / t_rr, "pab_mean": f[:, 5] / f[:, 3], "pc_mean": f[:, 6] / f[:, 4],
                   "r_parameter": t_hb / nrgb, "mass_loss": f[:, 7], "fraction_reaching_hb": alive}
        out["hb_ratio"] = out["fraction_blue"] - out["fraction_red"]
        if hist:
            out["logteff_hist"] = h
        return out


# --------------------------------------------------------------------------- likelihood
def _blue_tail_logteff(hist, q):
    """log Teff below which a fraction q of the HB time lies (per row of ``hist``)."""
    c = np.cumsum(hist, axis=1)
    tot = c[:, -1:]
    c = c / np.where(tot > 0, tot, 1.0)
    idx = np.clip((c < q[:, None] if np.ndim(q) else c < q).sum(axis=1), 0, hist.shape[1] - 1)
    lo = np.take_along_axis(np.concatenate([np.zeros((c.shape[0], 1)), c], axis=1), idx[:, None], 1)[:, 0]
    hi = c[np.arange(c.shape[0]), idx]
    frac = np.clip((q - lo) / np.where(hi > lo, hi - lo, 1.0), 0, 1)
    return np.where(tot[:, 0] > 0, _LOGT_EDGES[idx] + frac * (_LOGT_EDGES[1] - _LOGT_EDGES[0]), np.nan)


def _log_multinomial(n, p):
    """log pmf of counts n (W, k) under probabilities p (W, k)."""
    n = np.asarray(n, float)
    return gammaln(n.sum(axis=-1) + 1) - gammaln(n + 1).sum(axis=-1) + xlogy(n, p).sum(axis=-1)


def _log_p_diff(d, n, b, v, r):
    """Exact log P(B - R = d) for (B, V, R) ~ Multinomial(n, (b, v, r)); d, n scalars or (W,)."""
    n = int(np.max(n))
    rr = np.arange(n + 1)[None, :]
    d = np.asarray(d, float).reshape(-1, 1)
    bb = d + rr
    vv = n - d - 2 * rr
    ok = (bb >= 0) & (vv >= 0)
    bb, vv = np.where(ok, bb, 0), np.where(ok, vv, 0)
    t = (gammaln(n + 1) - gammaln(bb + 1) - gammaln(vv + 1) - gammaln(rr + 1)
         + xlogy(bb, b[:, None]) + xlogy(vv, v[:, None]) + xlogy(rr, r[:, None]))
    return logsumexp(np.where(ok, t, -np.inf), axis=1)


def _data_arrays(c: ClusterCounts) -> dict:
    """The cluster's data as a dict of floats (what :func:`_loglike` and the replicates use)."""
    from hbmodel.calibration.scorecard import sigma_model
    d = {}
    if math.isfinite(c.n_blue):
        d["bvr"] = np.array([c.n_blue, c.n_var, c.n_red], float)
    elif math.isfinite(c.n_hb):
        d["hb_diff"] = float(round(c.hb_ratio * c.n_hb))
        d["n_hb"] = int(c.n_hb)
    else:
        d["hb_ratio"] = c.hb_ratio
        d["hb_ratio_sd"] = c.hb_ratio_err
    s_per = sigma_model("rrab_period_mean")
    if math.isfinite(c.pab_mean):
        d["pab"] = c.pab_mean
        d["pab_sd"] = math.hypot(c.pab_err if math.isfinite(c.pab_err) else DEFAULT_PERIOD_ERR_D, s_per)
    if math.isfinite(c.pc_mean):
        d["pc"] = c.pc_mean
        d["pc_sd"] = math.hypot(c.pc_err if math.isfinite(c.pc_err) else DEFAULT_PERIOD_ERR_D, s_per)
    if math.isfinite(c.n_rrab) and c.n_rrab + c.n_rrc > 0:
        d["rr"] = np.array([c.n_rrab, c.n_rrc], float)
    if math.isfinite(c.n_rgb):
        d["hb_rgb"] = np.array([c.n_hb_total, c.n_rgb], float)
    if math.isfinite(c.hb_blue_tail_teff):
        d["tail"] = math.log10(c.hb_blue_tail_teff)
        d["tail_q"] = 1.0 - 1.0 / (c.n_hb_total + 1.0)
    return d


def _loglike(obs: dict, data: dict) -> np.ndarray:
    """Log-likelihood (W,) of ``data`` (values scalar or (W,)/(W, k) replicates) under model ``obs``."""
    W = obs["fraction_blue"].size
    ll = np.zeros(W)
    p = np.stack([obs["fraction_blue"], obs["fraction_var"], obs["fraction_red"]], axis=1)
    bad = ~np.all(np.isfinite(p), axis=1)
    p = np.nan_to_num(p)
    if "bvr" in data:
        ll += _log_multinomial(np.broadcast_to(data["bvr"], (W, 3)), p)
    elif "hb_diff" in data:
        ll += _log_p_diff(np.broadcast_to(data["hb_diff"], (W,)), data["n_hb"], p[:, 0], p[:, 1], p[:, 2])
    else:
        ll += -0.5 * ((data["hb_ratio"] - (p[:, 0] - p[:, 2])) / data["hb_ratio_sd"]) ** 2
    if "rr" in data:
        fc = obs["f_rrc"]
        bad |= ~np.isfinite(fc)
        ll += _log_multinomial(np.broadcast_to(data["rr"], (W, 2)), np.nan_to_num(np.stack([1 - fc, fc], 1)))
    for k in ("pab", "pc"):
        if k in data:
            m = obs[f"{k}_mean"]
            bad |= ~np.isfinite(m)
            ll += -0.5 * ((data[k] - np.nan_to_num(m)) / data[f"{k}_sd"]) ** 2
    if "hb_rgb" in data:
        rp = obs["r_parameter"]
        bad |= ~(np.isfinite(rp) & (rp > 0))
        q = np.nan_to_num(rp / (1 + rp))
        ll += _log_multinomial(np.broadcast_to(data["hb_rgb"], (W, 2)), np.stack([q, 1 - q], 1))
    if "tail" in data:
        lt = _blue_tail_logteff(obs["logteff_hist"], data["tail_q"])
        bad |= ~np.isfinite(lt)
        ll += -0.5 * ((data["tail"] - np.nan_to_num(lt)) / BLUE_TAIL_LOGTEFF_SD) ** 2
    return np.where(bad | ~np.isfinite(ll), -np.inf, ll)


def _replicate(obs: dict, data: dict, rng: np.random.Generator) -> dict:
    """Posterior-predictive replicate data sets, one per row of ``obs``."""
    W = obs["fraction_blue"].size
    rep = {}
    p = np.clip(np.nan_to_num(np.stack([obs["fraction_blue"], obs["fraction_var"], obs["fraction_red"]], 1)), 0, 1)
    p /= np.maximum(p.sum(axis=1, keepdims=True), 1e-300)
    if "bvr" in data:
        rep["bvr"] = rng.multinomial(int(data["bvr"].sum()), p)
    elif "hb_diff" in data:
        x = rng.multinomial(data["n_hb"], p)
        rep["hb_diff"], rep["n_hb"] = (x[:, 0] - x[:, 2]).astype(float), data["n_hb"]
    else:
        rep["hb_ratio"] = (p[:, 0] - p[:, 2]) + data["hb_ratio_sd"] * rng.standard_normal(W)
        rep["hb_ratio_sd"] = data["hb_ratio_sd"]
    if "rr" in data:
        fc = np.clip(np.nan_to_num(obs["f_rrc"]), 0, 1)
        nc = rng.binomial(int(data["rr"].sum()), fc)
        rep["rr"] = np.stack([data["rr"].sum() - nc, nc], 1)
    for k in ("pab", "pc"):
        if k in data:
            rep[k] = np.nan_to_num(obs[f"{k}_mean"]) + data[f"{k}_sd"] * rng.standard_normal(W)
            rep[f"{k}_sd"] = data[f"{k}_sd"]
    if "hb_rgb" in data:
        rp = np.nan_to_num(obs["r_parameter"])
        n = int(data["hb_rgb"].sum())
        k_hb = rng.binomial(n, np.clip(rp / (1 + rp), 0, 1))
        rep["hb_rgb"] = np.stack([k_hb, n - k_hb], 1)
    if "tail" in data:
        lt = _blue_tail_logteff(obs["logteff_hist"], data["tail_q"])
        rep["tail"] = np.nan_to_num(lt) + BLUE_TAIL_LOGTEFF_SD * rng.standard_normal(W)
        rep["tail_q"] = data["tail_q"]
    return rep


# --------------------------------------------------------------------------- the fit
@dataclass
class CountsFit:
    """Result of :func:`fit_counts` for one cluster."""

    cluster: ClusterCounts
    model: str
    names: tuple
    samples: np.ndarray            # (n, n_par) posterior draws
    derived: dict                  # name -> (n,) draws of derived quantities
    converged: bool
    n_steps: int
    tau: np.ndarray
    n_eff: float
    acceptance: float
    p_value: float
    warnings: list = field(default_factory=list)
    eta_sd_fixed: float | None = None

    def interval(self, key):
        x = self.samples[:, self.names.index(key)] if key in self.names else self.derived[key]
        x = x[np.isfinite(x)]
        if x.size == 0:
            return None
        lo, med, hi = np.percentile(x, [16, 50, 84])
        return {"median": float(med), "lo": float(lo), "hi": float(hi)}

    def summary(self) -> dict:
        """Flat dict (intervals as {median, lo, hi}): the per-cluster row of the results table."""
        c = self.cluster
        out = {"feh": c.feh, "alpha_fe": c.alpha_fe, "model": self.model}
        for k in self.names + tuple(self.derived):
            iv = self.interval(k)
            if iv is not None:
                out[k] = iv
        if "age" not in self.names:
            out["age"] = c.age_gyr
        if self.eta_sd_fixed is not None:
            out["eta_sd"] = float(self.eta_sd_fixed)
        out.update(converged=bool(self.converged), n_steps=int(self.n_steps), n_eff=float(self.n_eff),
                   tau_max=float(np.max(self.tau)), acceptance=float(self.acceptance), p_value=float(self.p_value),
                   warnings="; ".join(self.warnings))
        return out


def _bounds(model, cluster, emu, eta_sd_fixed=None, priors=None):
    b = {"eta": PRIOR_ETA, "eta_sd": PRIOR_ETA_SD, "helium_fraction": PRIOR_HELIUM_FRACTION,
         "delta_y": PRIOR_DELTA_Y}
    for k, v in (priors or {}).items():
        lo, hi = (float(x) for x in v)
        if k not in b or not b[k][0] <= lo < hi <= b[k][1]:
            raise ValueError(f"prior {k!r} = ({lo:g}, {hi:g}) must be an interval inside {b.get(k, 'a known parameter')}")
        b[k] = (lo, hi)
    names = [n for n in MODELS[model] if not (n == "eta_sd" and eta_sd_fixed is not None)]
    if emu.ages.size > 1:
        names.append("age")
        b["age"] = (float(emu.ages[0]), float(emu.ages[-1]))
    return tuple(names), np.array([b[n] for n in names], float)


def fit_counts(cluster: ClusterCounts, model="spread", *, n_walkers=32, max_steps=6000, chunk=500, seed=None,
               n_ppc=400, emulator=None, eta_sd_fixed=None, priors=None) -> CountsFit:
    """Sample the posterior of one cluster's mass-loss parameters from its catalogue numbers.

    ``model``: ``"spread"`` (eta and its star-to-star spread), ``"helium"`` (eta, a helium-enriched
    fraction and its dY), ``"both"``.  ``eta_sd_fixed``: fix the spread of eta at this value instead of
    fitting it (for an HB ratio alone, which cannot separate eta from its spread).  ``priors``: narrower
    uniform priors, e.g. ``{"eta_sd": (0.0, 0.1)}`` (default: :data:`PRIOR_ETA`, :data:`PRIOR_ETA_SD`, ...)."""
    import emcee
    if model not in MODELS:
        raise ValueError(f"unknown model {model!r}; choose one of {', '.join(MODELS)}")
    if max_steps < 100:
        raise ValueError("max_steps must be at least 100")
    c = cluster
    rng = np.random.default_rng(c.seed if seed is None else seed)
    emu = emulator or CountsEmulator(c.feh, c.alpha_fe, c.age_nodes(), helium=model != "spread",
                                     teff_hist=math.isfinite(c.hb_blue_tail_teff), rgb=math.isfinite(c.n_rgb))
    data = _data_arrays(c)
    if eta_sd_fixed is not None and not (0.0 <= eta_sd_fixed <= PRIOR_ETA_SD[1]):
        raise ValueError(f"the fixed spread of eta must lie in [0, {PRIOR_ETA_SD[1]}] (got {eta_sd_fixed})")
    names, bnd = _bounds(model, c, emu, eta_sd_fixed, priors)
    hist = "tail" in data
    ia = names.index("age") if "age" in names else None

    def unpack(x):
        g = dict(zip(names, x.T))
        return (g["eta"], g.get("eta_sd", eta_sd_fixed or 0.0), g.get("helium_fraction", 0.0), g.get("delta_y", 0.0),
                g.get("age", emu.ages[0]))

    def log_post(x):
        x = np.atleast_2d(x)
        inside = np.all((x >= bnd[:, 0]) & (x <= bnd[:, 1]), axis=1)
        lp = np.full(x.shape[0], -np.inf)
        if not inside.any():
            return lp
        xi = x[inside]
        obs = emu.observables(*unpack(xi), hist=hist)
        v = _loglike(obs, data)
        if ia is not None:  # Gaussian age prior
            v = v - 0.5 * ((xi[:, ia] - c.age_gyr) / c.age_sd_gyr) ** 2
        lp[inside] = v
        return lp

    # start: the best of a random prior sample, walkers in a small ball around it (inside the prior)
    trial = bnd[:, 0] + (bnd[:, 1] - bnd[:, 0]) * rng.random((4000, len(names)))
    if ia is not None:
        trial[:, ia] = np.clip(c.age_gyr + c.age_sd_gyr * rng.standard_normal(4000), *bnd[ia])
    lp = log_post(trial)
    if not np.isfinite(lp).any():
        raise ValueError(f"cluster {c.name!r}: no model in the prior range reproduces the data "
                         "(e.g. RR Lyrae periods without RR Lyrae in any model)")
    best = np.argsort(-np.where(np.isfinite(lp), lp, -np.inf))[: n_walkers]
    p0 = trial[best]
    sampler = emcee.EnsembleSampler(n_walkers, len(names), log_post, vectorize=True,
                                    moves=[(emcee.moves.DEMove(), 0.8), (emcee.moves.DESnookerMove(), 0.2)])
    sampler.random_state = np.random.RandomState(int(rng.integers(2 ** 31))).get_state()  # emcee's own stream
    state = p0
    n_done, converged, tau = 0, False, np.full(len(names), np.inf)
    while n_done < max_steps:
        state = sampler.run_mcmc(state, min(chunk, max_steps - n_done), progress=False)
        n_done = sampler.iteration
        tau = sampler.get_autocorr_time(tol=0, discard=n_done // 4)
        if np.all(np.isfinite(tau)) and n_done >= 50 * np.max(tau) and n_done >= 1000:
            converged = True
            break
    burn = int(min(n_done // 2, max(n_done // 4, 3 * np.nanmax(tau))))
    thin = max(1, int(np.nanmax(tau) / 2)) if np.all(np.isfinite(tau)) else 1
    chain = sampler.get_chain(discard=burn, thin=thin, flat=True)
    n_eff = float(n_walkers * (n_done - burn) / np.nanmax(tau)) if np.all(np.isfinite(tau)) else float("nan")
    # derived quantities and the posterior-predictive check
    obs = emu.observables(*unpack(chain), hist=hist)
    derived = {"mass_loss": obs["mass_loss"], "hb_ratio_model": obs["hb_ratio"]}
    if "rr" in data or "pab" in data:
        derived["pab_mean_model"] = obs["pab_mean"]
    pick = rng.choice(chain.shape[0], size=min(n_ppc, chain.shape[0]), replace=False)
    o = {k: v[pick] for k, v in obs.items()}
    rep = _replicate(o, data, rng)
    l_obs = _loglike(o, data)
    l_rep = _loglike(o, rep)
    ok = np.isfinite(l_obs)
    p_value = float(np.mean(l_rep[ok] <= l_obs[ok])) if ok.any() else float("nan")
    fit = CountsFit(c, model, names, chain, derived, converged, n_done, tau, n_eff,
                    float(np.mean(sampler.acceptance_fraction)), p_value, eta_sd_fixed=eta_sd_fixed)
    fit.warnings.extend(_warnings(fit, data, bnd))
    return fit


def _warnings(fit: CountsFit, data, bnd) -> list[str]:
    c, w = fit.cluster, []
    # saturated: no star on one side of the strip (counts), or the ratio within its error of +-1
    if math.isfinite(c.n_blue):
        top, bottom = c.n_var + c.n_red == 0, c.n_var + c.n_blue == 0
    else:
        tol = 1.0 / c.n_hb if math.isfinite(c.n_hb) else c.hb_ratio_err
        top, bottom = c.hb_ratio >= 1.0 - tol, c.hb_ratio <= -1.0 + tol
    i = fit.names.index("eta")
    eta = fit.samples[:, i]
    lo, hi = bnd[i]
    # ... and the posterior open towards the prior bound (RR Lyrae data may still close it)
    top = top and np.percentile(eta, 97.5) > hi - 0.1 * (hi - lo)
    bottom = bottom and np.percentile(eta, 2.5) < lo + 0.1 * (hi - lo)
    if top:
        w.append(f"HB ratio saturated at +1: only a lower limit on eta (eta > {np.percentile(eta, 5):.2f} at 95 %)")
    elif bottom:
        w.append(f"HB ratio saturated at -1: only an upper limit on eta (eta < {np.percentile(eta, 95):.2f} at 95 %)")
    for i, name in enumerate(fit.names):
        x = fit.samples[:, i]
        span = bnd[i, 1] - bnd[i, 0]
        if name == "eta" and np.percentile(x, 84) > bnd[i, 1] - 0.02 * span:
            w.append(f"eta posterior reaches the prior bound {bnd[i, 1]:g}")
        if name in ("eta_sd", "helium_fraction", "delta_y") and np.percentile(x, 50) > bnd[i, 1] - 0.2 * span:
            w.append(f"{name} posterior piles up near its prior bound {bnd[i, 1]:g}")
    if not fit.converged:
        w.append(f"chain not converged after {fit.n_steps} steps (tau = {np.nanmax(fit.tau):.0f}); "
                 "raise max_steps")
    if math.isfinite(fit.p_value) and fit.p_value < 0.01:
        w.append(f"poor fit: posterior-predictive p = {fit.p_value:.3f}")
    return w


# --------------------------------------------------------------------------- many clusters
def hierarchical_eta(samples, *, mu_range=(0.0, 1.5), tau_range=(0.005, 0.5), n_grid=(301, 200), max_draws=1000,
                     rng=None) -> dict:
    """Population mean and scatter of eta across clusters by importance reweighting.

    ``samples``: list of 1-D arrays of per-cluster eta draws under a flat prior (:data:`PRIOR_ETA`).  The
    population is eta_c ~ N(mu, tau); the likelihood of (mu, tau) is prod_c mean_s N(eta_cs; mu, tau) /
    p_flat (Hogg, Myers & Bovy 2010, ApJ 725, 2166, eq. 9), evaluated on a grid with flat priors on mu and
    tau.  Returns {"mu": interval, "tau": interval, "n_clusters": n} with 16/50/84 % points of the marginals.
    """
    rng = rng or np.random.default_rng(0)
    draws = []
    for s in samples:
        s = np.asarray(s, float)
        s = s[np.isfinite(s)]
        if s.size == 0:
            continue
        if s.size > max_draws:
            s = rng.choice(s, max_draws, replace=False)
        draws.append(s)
    if len(draws) < 2:
        raise ValueError("the hierarchical summary needs at least two clusters with posterior samples")
    mu = np.linspace(*mu_range, n_grid[0])
    tau = np.geomspace(*tau_range, n_grid[1])
    logL = np.zeros((mu.size, tau.size))
    for s in draws:
        z = (s[None, None, :] - mu[:, None, None]) / tau[None, :, None]
        dens = np.exp(-0.5 * z * z) / (tau[None, :, None] * math.sqrt(2 * math.pi))
        logL += np.log(np.maximum(dens.mean(axis=2), 1e-300))
    # flat prior on tau: the grid is geometric, so weight each cell by its width d(tau)
    logw = logL + np.log(np.gradient(tau))[None, :] + np.log(np.gradient(mu))[:, None]
    w = np.exp(logw - logw.max())
    w /= w.sum()

    def iv(x, p):
        cdf = np.cumsum(p) / p.sum()
        lo, med, hi = np.interp([0.16, 0.5, 0.84], cdf - 0.5 * p / p.sum(), x)
        return {"median": float(med), "lo": float(lo), "hi": float(hi)}

    return {"mu": iv(mu, w.sum(axis=1)), "tau": iv(tau, w.sum(axis=0)), "n_clusters": len(draws)}


def benchmark_counts(role=None, age_sd_default=1.0) -> list[ClusterCounts]:
    """The globular clusters of the cluster benchmark (``tables/targets/clusters.ecsv``) as counts rows:
    HB ratio with its error, [Fe/H], age (12.5 +- 1 Gyr where none is published: common practice for
    old-halo clusters), [alpha/Fe] = +0.3 (common practice), RR Lyrae counts and mean periods where given.
    Clusters without an HB ratio (metal-rich clusters, open clusters) are left out."""
    from hbmodel.calibration.targets import read_clusters
    t = read_clusters()
    per: dict = {}
    for r in t:
        if r["kind"] != "GC" or (role is not None and r["role"] != role):
            continue
        per.setdefault(r["name"], {})[r["quantity"]] = (float(r["value"]), float(r["uncertainty"]))
    rows = []
    for name, q in per.items():
        if "hb_ratio" not in q or "feh" not in q:
            continue
        row = {"name": name, "feh": q["feh"][0], "alpha_fe": 0.3, "hb_ratio": q["hb_ratio"][0],
               "hb_ratio_err": q["hb_ratio"][1]}
        age = q.get("age_gyr", (12.5, age_sd_default))
        row["age"], row["age_sd"] = float(np.clip(age[0], 0.5, 14.0)), age[1]
        if "pab_mean" in q:
            row["pab_mean"], row["pab_err"] = q["pab_mean"]
        if "pc_mean" in q:
            row["pc_mean"], row["pc_err"] = q["pc_mean"]
        if "n_rrab" in q and "n_rrc" in q:
            row["n_rrab"], row["n_rrc"] = q["n_rrab"][0], q["n_rrc"][0]
        rows.append(row)
    return counts_from_rows(rows, where="cluster benchmark")


# --------------------------------------------------------------------------- a table of clusters
_SAMPLES = "eta_samples.npy"
#: keys of a job that are run options, not cluster columns
_RUN_KEYS = ("model", "max_steps", "eta_sd_fixed")


def _cluster_of_job(job: dict) -> ClusterCounts:
    row = {k: v for k, v in job.items() if k not in _RUN_KEYS}
    return counts_from_rows([row], where=f"cluster {job.get('name')!r}")[0]


def counts_task(job: dict, job_dir) -> dict:
    """Batch task (:func:`hbmodel.io.jobs.run_batch`): fit one cluster, store its eta draws, return its row."""
    import io as _io
    import pathlib

    from hbmodel.io.catalogues import atomic_write_bytes
    c = _cluster_of_job(job)
    fit = fit_counts(c, job.get("model", "spread"), max_steps=int(job.get("max_steps", 6000)),
                     eta_sd_fixed=job.get("eta_sd_fixed"))
    buf = _io.BytesIO()
    eta = fit.samples[:, fit.names.index("eta")]
    np.save(buf, eta[:: max(1, eta.size // 4000)])
    atomic_write_bytes(pathlib.Path(job_dir) / _SAMPLES, buf.getvalue(), force=True)
    return fit.summary()


def run_counts_table(clusters, out_dir, *, model="spread", max_steps=6000, n_jobs=1, scheduler=None, force=False,
                     seed_offset=0, progress=None, eta_sd_fixed=None):
    """Fit every cluster (in parallel, resumable: :func:`hbmodel.io.jobs.run_batch`) and return
    ``(summary, hierarchical)``: the batch summary table and :func:`hierarchical_eta` of the finished
    clusters (None with fewer than two)."""
    import pathlib

    from hbmodel.io.jobs import run_batch
    jobs = []
    for c in clusters:
        job = {k: getattr(c, k) for k in COUNT_COLUMNS if k not in ("age", "age_sd") and hasattr(c, k)}
        job.update(age=c.age_gyr, age_sd=c.age_sd_gyr, seed=int(c.seed) ^ int(seed_offset), model=model,
                   max_steps=int(max_steps), eta_sd_fixed=eta_sd_fixed)
        jobs.append({k: (None if isinstance(v, float) and math.isnan(v) else v) for k, v in job.items()})
    summary = run_batch([{k: v for k, v in j.items() if v is not None} for j in jobs], counts_task, out_dir,
                        n_jobs=n_jobs, scheduler=scheduler, progress=progress, force=force, input_keys=())
    samples = []
    for row in summary:
        f = pathlib.Path(out_dir) / str(row["name"]) / _SAMPLES
        if str(row["status"]) != "failed" and f.is_file():
            samples.append(np.load(f))
    hier = hierarchical_eta(samples) if len(samples) >= 2 else None
    return summary, hier


def eta_figure(summary, hierarchical=None):
    """Two panels: eta (median, 16-84 % bars) against [Fe/H] and against age; the hierarchical mean and
    scatter as a band.  Object-oriented matplotlib (no pyplot)."""
    import matplotlib
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from hbmodel.io.figures import FEH_LABEL, OKABE_ITO, PAGE_WIDTH_IN, _style
    ok = np.asarray(summary["status"]).astype(str) != "failed"
    t = summary[ok]
    with matplotlib.rc_context(_style()):
        fig = Figure(figsize=(PAGE_WIDTH_IN, 2.8), layout="constrained")
        FigureCanvasAgg(fig)
        axes = fig.subplots(1, 2, sharey=True)
        eta = np.asarray(t["eta"], float)
        err = np.vstack([eta - np.asarray(t["eta_lo"], float), np.asarray(t["eta_hi"], float) - eta])
        age = np.asarray(t["age"], float)
        age_err = (np.vstack([age - np.asarray(t["age_lo"], float), np.asarray(t["age_hi"], float) - age])
                   if "age_lo" in t.colnames else None)
        if age_err is not None:
            age_err = np.nan_to_num(age_err)
        warn = np.array(["saturated" in str(w) for w in t["warnings"]]) if "warnings" in t.colnames else \
            np.zeros(len(t), bool)
        for ax, x, xerr, label in ((axes[0], np.asarray(t["feh"], float), None, FEH_LABEL),
                                   (axes[1], age, age_err, "age [Gyr]")):
            if hierarchical is not None:
                mu, tau = hierarchical["mu"]["median"], hierarchical["tau"]["median"]
                ax.axhspan(mu - tau, mu + tau, color=OKABE_ITO["sky_blue"], alpha=0.25, lw=0,
                           label=f"population: mean {mu:.2f}, scatter {tau:.2f}")
                ax.axhline(mu, color=OKABE_ITO["blue"], lw=0.8)
            for sel, colour, lab in ((~warn, OKABE_ITO["black"], "cluster (16-84 %)"),
                                     (warn, OKABE_ITO["vermillion"], "HB ratio saturated (limit)")):
                if sel.any():
                    ax.errorbar(x[sel], eta[sel], yerr=err[:, sel], xerr=None if xerr is None else xerr[:, sel],
                                fmt="o", ms=3, color=colour, elinewidth=0.8, capsize=0, label=lab)
            ax.set_xlabel(label)
        axes[0].set_ylabel(r"Reimers $\eta$ (mean)")
        axes[0].legend(loc="best", fontsize=6)
    return fig


def results_table(summary, hierarchical=None):
    """The results table: the finished clusters' rows of the batch summary, with the hierarchical
    summary in the metadata."""
    ok = np.asarray(summary["status"]).astype(str) != "failed"
    t = summary[ok].copy()
    t.remove_columns([c for c in ("status", "reason") if c in t.colnames])
    t.meta["comments"] = ["hbmodel fit --counts: one row per cluster; <key>, <key>_lo, <key>_hi are the posterior "
                          "median and 16/84 % points; eta is the Reimers efficiency"]
    if hierarchical is not None:
        t.meta["population_eta_mean"] = hierarchical["mu"]
        t.meta["population_eta_scatter"] = hierarchical["tau"]
    return t


# --------------------------------------------------------------------------- simulation-based calibration
def simulate_counts(name, feh, eta, eta_sd, rng, *, n_hb=150, age_gyr=12.5, alpha_fe=0.3, pab_err=0.01):
    """Mock catalogue numbers of a cluster from ``Population.predict`` (not the emulator): the HB count is
    Poisson(n_hb), B:V:R multinomial with the predicted fractions, the mean RRab period Gaussian with the
    likelihood's error.  Returns a :class:`ClusterCounts`, or None when no star reaches the HB."""
    from hbmodel.calibration.scorecard import sigma_model
    from hbmodel.populations.population import MassLoss, Population
    p = Population(feh, age_gyr, alpha_fe=alpha_fe, mass_loss=MassLoss.from_eta(eta, eta_sd)).predict(bands=("V",))
    if p.get("fraction_blue") is None:
        return None
    f = np.clip([p["fraction_blue"], p["fraction_rr"], p["fraction_red"]], 0, 1)
    n = max(int(rng.poisson(n_hb)), 1)
    b, v, r = rng.multinomial(n, f / f.sum())
    kw = dict(n_blue=b, n_var=v, n_red=r)
    if v >= 5 and p.get("rrab_period_mean") is not None:
        sd = math.hypot(pab_err, sigma_model("rrab_period_mean"))
        kw.update(pab_mean=float(np.clip(p["rrab_period_mean"] + sd * rng.standard_normal(), 0.15, 1.2)),
                  pab_err=pab_err)
    return ClusterCounts(name, feh, alpha_fe=alpha_fe, age_gyr=age_gyr, seed=int(rng.integers(2 ** 31)), **kw)


def _sbc_one(i, seed, n_hb, eta_range, sd_range, feh_range, max_steps):
    rng = np.random.default_rng([seed, i])
    for _ in range(20):  # a draw whose HB is empty (all envelopes lost) is redrawn
        eta, sd, feh = rng.uniform(*eta_range), rng.uniform(*sd_range), rng.uniform(*feh_range)
        c = simulate_counts(f"sbc-{i}", feh, eta, sd, rng, n_hb=n_hb)
        if c is not None:
            break
    fit = fit_counts(c, "spread", max_steps=max_steps, priors={"eta": eta_range, "eta_sd": sd_range})
    out = {"eta_true": eta, "eta_sd_true": sd, "feh": feh, "converged": fit.converged}
    for k, truth in (("eta", eta), ("eta_sd", sd)):
        x = fit.samples[:, fit.names.index(k)]
        out[f"{k}_rank"] = float(np.mean(x < truth))  # posterior quantile of the truth (Talts et al. 2018)
    return out


def sbc_counts(n_draws, *, seed=0, n_hb=150, eta_range=(0.25, 0.75), sd_range=(0.0, 0.12),
               feh_range=(-2.2, -1.0), max_steps=4000, n_jobs=1) -> list[dict]:
    """Simulation-based calibration (Talts et al. 2018, arXiv:1804.06788): inject (eta, sigma_eta, [Fe/H])
    drawn uniformly from ``eta_range`` x ``sd_range`` (the priors of the fits, as SBC requires), mock the counts with :func:`simulate_counts`, fit, and return
    each draw's posterior quantile of the truth (``<par>_rank``; the truth lies in the 68 % interval when
    0.16 <= rank <= 0.84)."""
    import joblib
    return joblib.Parallel(n_jobs=n_jobs)(
        joblib.delayed(_sbc_one)(i, seed, n_hb, eta_range, sd_range, feh_range, max_steps) for i in range(n_draws))
