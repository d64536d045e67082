"""Unbinned maximum-likelihood fit of the red-clump luminosity function.

The stars of a catalogue that fall in a magnitude window ``[m_lo, m_hi]`` around the clump are described
by a mixture density, each component normalised on the truncated window::

    f(m) = f_c N_w(m; m_c, s) + f_b N_w(m; m_c + d_b, s) + f_a N_w(m; m_c + d_a, s)
           + (1 - f_c - f_b - f_a) g_w(m)

* clump: a Gaussian of mean ``m_c`` and dispersion ``s`` (Paczynski & Stanek 1998, ApJ 494, L219;
  Stanek & Garnavich 1998, ApJ 503, L131);
* RGB background ``g``: exponential ``exp(B (m - m_c))`` (Nataf et al. 2013, ApJ 769, 88) or the quadratic
  polynomial ``1 + a1 x + a2 x^2`` of Stanek & Garnavich 1998 (``x`` = magnitude from the window centre);
* RGB bump ("bump"): a Gaussian ``d_b`` = 0.5-1.0 mag fainter than the clump, holding ``f_b = r_b f_c``;
* AGB bump ("agb"): a Gaussian ``d_a`` ~ 1 mag brighter, ``f_a = r_a f_c``.  Following Nataf et al. 2013
  (from memory) both bumps share the clump's dispersion.

Validity: one photometric band, a single clump in the window (a double clump / strong depth structure is
not modelled), photometric errors absorbed in ``s`` (no per-star error deconvolution), no completeness
correction.  The bounds on every parameter (flat priors) are read from ``tables/clump_lf_priors.csv``;
a window narrower or wider than the calibrated range raises ``ValueError``.

Uncertainties: inverse of a central finite-difference Hessian of ``-ln L`` at the optimum (parameters
sitting on a bound are held fixed and get NaN errors) and, optionally, a nonparametric bootstrap of the
stars in the window (Efron 1979, Ann. Stat. 7, 1).

Size (580+ lines): one estimator (mixture density with its analytic gradient, optimisation, result object); the
analytic gradient is most of it.
"""
from __future__ import annotations

import dataclasses
import math
from typing import Any

import numpy as np
from scipy import ndimage, optimize, special
from threadpoolctl import threadpool_limits

from hbmodel.core.validation import check_interval
from hbmodel.core.files import to_jsonable
from hbmodel.core.hessian import hessian
from hbmodel.core.tables import read_table

__all__ = ["ClumpLFResult", "fit_clump_lf"]  # its figure: hbmodel.outputs.plots.plot_clump_lf

_TABLE = "clump_lf_priors.csv"
_KNOWN_COMPONENTS = ("clump", "rgb", "bump", "agb")
_BACKGROUNDS = ("exponential", "quadratic")
_SQRT2PI = math.sqrt(2.0 * math.pi)


def _priors() -> dict[str, float]:
    return {k: float(v[0]) for k, v in read_table(_TABLE).items()}


# --------------------------------------------------------------------------------------------------
# model
# --------------------------------------------------------------------------------------------------
@dataclasses.dataclass(frozen=True)
class _Model:
    """Parameter layout of one mixture model on one window (immutable)."""

    names: tuple[str, ...]
    lower: np.ndarray
    upper: np.ndarray
    lo: float
    hi: float
    has_bg: bool
    background: str
    has_bump: bool
    has_agb: bool

    def unpack(self, theta: np.ndarray) -> dict[str, float]:
        p = dict(zip(self.names, (float(t) for t in theta)))
        p.setdefault("bump_ratio", 0.0)
        p.setdefault("agb_ratio", 0.0)
        if not self.has_bg:
            p["fraction_clump"] = 1.0 / (1.0 + p["bump_ratio"] + p["agb_ratio"])
        return p

    # each component density normalised on the window (vectorised over m)
    def _gauss(self, m: np.ndarray, mu: float, s: float) -> np.ndarray:
        z_norm = special.ndtr((self.hi - mu) / s) - special.ndtr((self.lo - mu) / s)
        z_norm = max(z_norm, 1e-300)
        u = (m - mu) / s
        return np.exp(-0.5 * u * u) / (s * _SQRT2PI * z_norm)

    def _bg(self, m: np.ndarray, p: dict[str, float]) -> np.ndarray:
        width = self.hi - self.lo
        if self.background == "exponential":
            b = p["background_slope"]
            if abs(b) * width < 1e-8:
                return np.full(np.shape(m), 1.0 / width)
            return b * np.exp(b * (m - self.hi)) / (-math.expm1(-b * width))
        x = m - 0.5 * (self.lo + self.hi)
        a1, a2 = p["quad_a1"], p["quad_a2"]
        norm = width + a2 * width ** 3 / 12.0
        return (1.0 + a1 * x + a2 * x * x) / norm

    def quad_min(self, p: dict[str, float]) -> float:
        """Smallest value of the quadratic background polynomial on the window."""
        h = 0.5 * (self.hi - self.lo)
        a1, a2 = p["quad_a1"], p["quad_a2"]
        cands = [1.0 - a1 * h + a2 * h * h, 1.0 + a1 * h + a2 * h * h]
        if a2 > 0 and abs(a1 / (2 * a2)) < h:
            cands.append(1.0 - a1 * a1 / (4 * a2))
        return min(cands)

    def components(self, m: np.ndarray, p: dict[str, float]) -> dict[str, np.ndarray]:
        m = np.asarray(m, dtype=float)
        fc, s, mc = p["fraction_clump"], p["sigma_mag"], p["peak_mag"]
        out = {"clump": fc * self._gauss(m, mc, s)}
        f_bg = 1.0 - fc
        if self.has_bump:
            fb = fc * p["bump_ratio"]
            out["bump"] = fb * self._gauss(m, mc + p["bump_offset"], s)
            f_bg -= fb
        if self.has_agb:
            fa = fc * p["agb_ratio"]
            out["agb"] = fa * self._gauss(m, mc + p["agb_offset"], s)
            f_bg -= fa
        if self.has_bg:
            out["rgb"] = f_bg * self._bg(m, p)
        inside = (m >= self.lo) & (m <= self.hi)
        return {k: np.where(inside, v, 0.0) for k, v in out.items()}

    def bg_weight(self, p: dict[str, float]) -> float:
        return 1.0 - p["fraction_clump"] * (1.0 + p["bump_ratio"] + p["agb_ratio"])

    def nll(self, theta: np.ndarray, m: np.ndarray) -> float:
        """Negative log-likelihood; a smooth penalty keeps the mixture a proper density."""
        p = self.unpack(theta)
        penalty = 0.0
        if self.has_bg:
            w = self.bg_weight(p)
            if w < 0.0:
                penalty += 1e6 * (w * w + 1e-3)
                p["fraction_clump"] /= (1.0 - w) * (1.0 + 1e-9)
            if self.background == "quadratic":
                q = self.quad_min(p)
                if q < 0.0:
                    penalty += 1e6 * (q * q + 1e-3)
        fc, s, mc = p["fraction_clump"], p["sigma_mag"], p["peak_mag"]
        dens = fc * self._gauss(m, mc, s)
        f_bg = 1.0 - fc
        if self.has_bump:
            fb = fc * p["bump_ratio"]
            dens = dens + fb * self._gauss(m, mc + p["bump_offset"], s)
            f_bg -= fb
        if self.has_agb:
            fa = fc * p["agb_ratio"]
            dens = dens + fa * self._gauss(m, mc + p["agb_offset"], s)
            f_bg -= fa
        if self.has_bg:
            dens = dens + max(f_bg, 0.0) * self._bg(m, p)
        dens = np.maximum(dens, 1e-300)
        return float(-np.sum(np.log(dens)) + penalty)


    def _gauss_and_derivs(self, m: np.ndarray, mu: float, s: float):
        """Window-normalised Gaussian and its derivatives with respect to mean and dispersion."""
        a, b = (self.lo - mu) / s, (self.hi - mu) / s
        z_norm = max(special.ndtr(b) - special.ndtr(a), 1e-300)
        pa, pb = math.exp(-0.5 * a * a) / _SQRT2PI, math.exp(-0.5 * b * b) / _SQRT2PI
        u = (m - mu) / s
        g = np.exp(-0.5 * u * u) / (s * _SQRT2PI * z_norm)
        d_mu = g * (u / s + (pb - pa) / (s * z_norm))
        d_s = g * ((u * u - 1.0) / s + (b * pb - a * pa) / (s * z_norm))
        return g, d_mu, d_s

    def nll_grad(self, theta: np.ndarray, m: np.ndarray) -> tuple[float, np.ndarray]:
        """Negative log-likelihood and its analytic gradient (finite differences inside the rarely
        visited penalty region and for the background-free model)."""
        p = self.unpack(theta)
        in_penalty = (not self.has_bg) or self.bg_weight(p) < 0.0 or (
            self.background == "quadratic" and self.quad_min(p) < 0.0)
        if in_penalty:
            f0 = self.nll(theta, m)
            return f0, optimize.approx_fprime(theta, self.nll, 1e-7, m)
        fc, s, mc = p["fraction_clump"], p["sigma_mag"], p["peak_mag"]
        rb, ra = p["bump_ratio"], p["agb_ratio"]
        gc, gc_mu, gc_s = self._gauss_and_derivs(m, mc, s)
        dens = fc * gc
        d_mc = fc * gc_mu
        d_s = fc * gc_s
        grads: dict[str, np.ndarray] = {}
        g_bg = self._bg(m, p)
        f_bg = 1.0 - fc * (1.0 + rb + ra)
        d_fc = gc - (1.0 + rb + ra) * g_bg
        for on, name, ratio in ((self.has_bump, "bump", rb), (self.has_agb, "agb", ra)):
            if not on:
                continue
            g, g_mu, g_s = self._gauss_and_derivs(m, mc + p[f"{name}_offset"], s)
            dens = dens + fc * ratio * g
            d_mc = d_mc + fc * ratio * g_mu
            d_s = d_s + fc * ratio * g_s
            d_fc = d_fc + ratio * g
            grads[f"{name}_offset"] = fc * ratio * g_mu
            grads[f"{name}_ratio"] = fc * (g - g_bg)
        dens = dens + f_bg * g_bg
        width = self.hi - self.lo
        if self.background == "exponential":
            bsl = p["background_slope"]
            bw = bsl * width
            tail = width / 2.0 - bsl * width * width / 12.0 if abs(bw) < 1e-4 else 1.0 / bsl - width / math.expm1(bw)
            grads["background_slope"] = f_bg * g_bg * ((m - self.hi) + tail)
        else:
            x = m - 0.5 * (self.lo + self.hi)
            norm = width + p["quad_a2"] * width ** 3 / 12.0
            grads["quad_a1"] = f_bg * x / norm
            grads["quad_a2"] = f_bg * (x * x / norm - g_bg * width ** 3 / (12.0 * norm))
        grads.update(peak_mag=d_mc, sigma_mag=d_s, fraction_clump=d_fc)
        dens = np.maximum(dens, 1e-300)
        inv = 1.0 / dens
        grad = np.array([-float(np.dot(grads[n], inv)) for n in self.names])
        return float(-np.sum(np.log(dens))), grad


def _build_model(lo: float, hi: float, comps: tuple[str, ...], background: str, bump_range=None,
                 bounds=None) -> _Model:
    pr = _priors()
    if bump_range is not None:
        pr["bump_offset_min_mag"], pr["bump_offset_max_mag"] = (float(x) for x in bump_range)
    names, low, up = ["peak_mag", "sigma_mag"], [lo, pr["sigma_min_mag"]], [hi, pr["sigma_max_mag"]]
    has_bg = "rgb" in comps
    if has_bg:
        names.append("fraction_clump"); low.append(0.0); up.append(1.0)
        if background == "exponential":
            names.append("background_slope"); low.append(pr["slope_min"]); up.append(pr["slope_max"])
        else:
            q = pr["quad_coef_max"]
            names += ["quad_a1", "quad_a2"]; low += [-q, -q]; up += [q, q]
    has_bump, has_agb = "bump" in comps, "agb" in comps
    if has_bump:
        names += ["bump_offset", "bump_ratio"]
        low += [pr["bump_offset_min_mag"], 0.0]; up += [pr["bump_offset_max_mag"], pr["bump_ratio_max"]]
    if has_agb:
        names += ["agb_offset", "agb_ratio"]
        low += [pr["agb_offset_min_mag"], 0.0]; up += [pr["agb_offset_max_mag"], pr["agb_ratio_max"]]
    for name, (b_lo, b_hi) in (bounds or {}).items():  # a caller's own bounds of named parameters
        if name in names:
            low[names.index(name)], up[names.index(name)] = float(b_lo), float(b_hi)
    return _Model(tuple(names), np.array(low, float), np.array(up, float), float(lo), float(hi),
                  has_bg, background, has_bump, has_agb)


# --------------------------------------------------------------------------------------------------
# peak guess, optimisation, Hessian
# --------------------------------------------------------------------------------------------------
def _find_peak(mag: np.ndarray) -> float:
    """Magnitude of the most significant local excess over a smooth trend (smoothed histogram)."""
    pr = _priors()
    dm = pr["peak_bin_mag"]
    lo, hi = float(mag.min()), float(mag.max())
    nbins = int(min(max(math.ceil((hi - lo) / dm), 1), 20000))
    counts, edges = np.histogram(mag, bins=nbins, range=(lo, hi + 1e-9))
    centres = 0.5 * (edges[1:] + edges[:-1])
    step = (edges[1] - edges[0])
    fine = ndimage.gaussian_filter1d(counts.astype(float), pr["peak_smooth_mag"] / step, mode="constant")
    trend = ndimage.gaussian_filter1d(counts.astype(float), pr["peak_trend_mag"] / step, mode="nearest")
    signif = (fine - trend) / np.sqrt(trend + 1.0)
    ok = (centres > lo + pr["peak_edge_mag"]) & (centres < hi - pr["peak_edge_mag"])
    if not ok.any():
        ok[:] = True
    signif = np.where(ok, signif, -np.inf)
    return float(centres[int(np.argmax(signif))])


def _start_points(model: _Model, m: np.ndarray, peak: float, n_keep: int) -> list[np.ndarray]:
    """Coarse grid of starting vectors around the histogram peak; keep the ``n_keep`` best."""
    span = model.hi - model.lo
    base = {"bump_offset": 0.7, "bump_ratio": 0.15, "agb_offset": -1.0, "agb_ratio": 0.03, "quad_a2": 0.0}
    # exponential slope start from the window's mean magnitude (mean of a truncated exponential)
    base["background_slope"] = float(np.clip(12.0 * (np.mean(m) - 0.5 * (model.lo + model.hi)) / span ** 2,
                                             -2.0, 2.0))
    base["quad_a1"] = base["background_slope"]
    if model.has_bump:  # a bump range that excludes the usual start: begin in its middle
        k = model.names.index("bump_offset")
        if not model.lower[k] < base["bump_offset"] < model.upper[k]:
            base["bump_offset"] = float(0.5 * (model.lower[k] + model.upper[k]))
    cands = []
    for dmc in (-0.1, 0.0, 0.1):
        for s in (0.06, 0.12, 0.25):
            for fc in (0.15, 0.4):
                p = dict(base, peak_mag=peak + dmc, sigma_mag=s, fraction_clump=fc)
                th = np.array([p[n] for n in model.names], float)
                th = np.clip(th, model.lower + 1e-6 * (model.upper - model.lower),
                             model.upper - 1e-6 * (model.upper - model.lower))
                cands.append(th)
    vals = [model.nll(th, m) for th in cands]
    order = np.argsort(vals)
    return [cands[i] for i in order[:n_keep]]


def _minimise(model: _Model, m: np.ndarray, starts: list[np.ndarray]):
    bounds = list(zip(model.lower, model.upper))
    best = None
    for th0 in starts:
        res = optimize.minimize(model.nll_grad, th0, args=(m,), jac=True, method="L-BFGS-B", bounds=bounds,
                                options={"maxiter": 2000, "ftol": 1e-13, "gtol": 1e-7})
        if best is None or res.fun < best.fun:
            best = res
    if not best.success:  # polish once from the best point (line-search stalls near the optimum)
        res = optimize.minimize(model.nll_grad, best.x, args=(m,), jac=True, method="L-BFGS-B", bounds=bounds,
                                options={"maxiter": 2000, "ftol": 1e-13, "gtol": 1e-7})
        if res.fun <= best.fun + 1e-9:
            best = res
    return best


def _covariance(model: _Model, m: np.ndarray, theta: np.ndarray) -> tuple[np.ndarray, bool]:
    span = model.upper - model.lower
    dist = np.minimum(theta - model.lower, model.upper - theta)
    free = dist > 1e-5 * span
    # 1e-4 steps (mag, per mag, fraction), smaller when close to a bound
    steps = np.minimum(1e-4, 0.5 * dist)
    steps = np.where(free, np.maximum(steps, 1e-7), 0.0)
    ncov = theta.size
    cov = np.full((ncov, ncov), np.nan)
    if not free.any():
        return cov, False
    h = hessian(theta, steps, grad=lambda t: model.nll_grad(t, m)[1], free=free)
    try:
        c = np.linalg.inv(h)
    except np.linalg.LinAlgError:
        return cov, False
    ok = bool(np.all(np.isfinite(c)) and np.all(np.diag(c) > 0))
    if ok:
        try:
            np.linalg.cholesky(h)
        except np.linalg.LinAlgError:
            ok = False
    idx = np.flatnonzero(free)
    cov[np.ix_(idx, idx)] = c
    return cov, ok


# --------------------------------------------------------------------------------------------------
# result
# --------------------------------------------------------------------------------------------------
@dataclasses.dataclass(frozen=True)
class ClumpLFResult:
    """Outcome of :func:`fit_clump_lf` (magnitudes in the band of the input catalogue).

    ``peak_mag_err`` / ``sigma_mag_err`` come from the inverse Hessian; ``peak_mag_err_boot`` is the
    standard deviation of ``boot_peaks`` (``None`` without a bootstrap).  ``background_slope`` is the
    exponential slope B (per mag) or, for the quadratic background, d ln g / dm at the peak.
    """

    peak_mag: float
    peak_mag_err: float
    sigma_mag: float
    sigma_mag_err: float
    fraction_clump: float
    fraction_clump_err: float
    background_slope: float | None
    bump_offset: float | None
    n_stars: int
    mag_range: tuple[float, float]
    loglike: float
    loglike_background_only: float | None
    converged: bool
    params: dict[str, float]
    param_errors: dict[str, float]
    param_names: tuple[str, ...]
    covariance: np.ndarray
    components: tuple[str, ...]
    background: str
    boot_peaks: np.ndarray | None
    peak_mag_err_boot: float | None

    def _model(self) -> _Model:
        return _build_model(self.mag_range[0], self.mag_range[1], self.components, self.background)

    def component_densities(self, m) -> dict[str, np.ndarray]:
        """Density (per mag, per star in the window) of each fitted component at magnitudes ``m``;
        the components sum to :meth:`density`; zero outside ``mag_range``."""
        return self._model().components(np.asarray(m, dtype=float), dict(self.params))

    def density(self, m) -> np.ndarray:
        """Total model density (per mag, integrating to 1 over ``mag_range``) at magnitudes ``m``."""
        comps = self.component_densities(m)
        return np.sum(np.stack(list(comps.values())), axis=0)

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly dictionary (NaN -> None, arrays -> lists)."""
        d = {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}
        return to_jsonable(d)


# --------------------------------------------------------------------------------------------------
# public API
# --------------------------------------------------------------------------------------------------
def fit_clump_lf(mag, *, mag_range=None, components=("clump", "rgb", "bump"), n_boot: int = 0, rng=None,
                 peak_guess=None, background: str = "exponential", bump_offset_range=None,
                 bounds=None) -> ClumpLFResult:
    """Fit the red-clump luminosity function of a catalogue by unbinned maximum likelihood.

    Parameters
    ----------
    mag : array of apparent (or absolute) magnitudes in one band, finite.
    mag_range : (m_lo, m_hi) fit window; default ``peak_guess +- 1.5 mag`` (table value).
    components : subset of ``("clump", "rgb", "bump", "agb")``; "clump" is required, "rgb" is the smooth
        RGB background, "bump" the RGB bump (0.5-1.0 mag fainter), "agb" the AGB bump (~1 mag brighter).
    n_boot : number of nonparametric bootstrap refits (0: none); needs ``rng``.
    rng : ``numpy.random.Generator`` or integer seed (used only by the bootstrap).
    peak_guess : starting clump magnitude; default from a trend-subtracted smoothed histogram.
    background : ``"exponential"`` (Nataf et al. 2013, ApJ 769, 88) or ``"quadratic"``
        (Stanek & Garnavich 1998, ApJ 503, L131).
    bump_offset_range : (lo, hi) bounds of the RGB bump's offset below the clump (mag), replacing the
        table's 0.5-1.0 mag: e.g. the population model's own bump offset +- a margin
        (:func:`hbmodel.inference.clump_distance.measure_distance` does so).
    bounds : {parameter name: (lo, hi)} replacing the table's bounds of those parameters, e.g. ``sigma_mag``
        from the population model's clump width convolved with a differential-reddening spread and
        ``bump_ratio`` about the model's own (:func:`hbmodel.inference.clump_distance.measure_distance` with
        ``ebv_spread_sd``).

    The method and its validity range are described in the module docstring.  Raises ``ValueError``
    for NaNs, too few stars in the window or when no significant clump is found.
    """
    # L-BFGS-B makes many tiny BLAS calls; multithreaded BLAS only spins on them (10-100x slower on a
    # loaded machine), so the fit runs with one BLAS thread (restored on exit).
    with threadpool_limits(limits=1, user_api="blas"):
        return _fit_clump_lf(mag, mag_range=mag_range, components=components, n_boot=n_boot, rng=rng,
                             peak_guess=peak_guess, background=background, bump_offset_range=bump_offset_range,
                             bounds=bounds)


def _fit_clump_lf(mag, *, mag_range, components, n_boot, rng, peak_guess, background,
                  bump_offset_range=None, bounds=None) -> ClumpLFResult:
    pr = _priors()
    if bump_offset_range is not None:
        lo_b, hi_b = (float(x) for x in bump_offset_range)
        if not (np.isfinite(lo_b) and np.isfinite(hi_b) and 0.0 < lo_b < hi_b):
            raise ValueError(f"bump_offset_range must be 0 < lo < hi mag (got {bump_offset_range})")
    for name, rng_b in (bounds or {}).items():
        lo_s, hi_s = (float(x) for x in rng_b)
        if not (np.isfinite(lo_s) and np.isfinite(hi_s) and lo_s < hi_s) or (name == "sigma_mag" and lo_s <= 0):
            raise ValueError(f"bounds of {name} must be finite with lo < hi (got {rng_b})")
    try:
        m_all = None if isinstance(mag, str) else np.asarray(mag, dtype=float).ravel()
    except (TypeError, ValueError):
        m_all = None
    if m_all is None or m_all.size == 0:
        raise ValueError("mag must be a non-empty numeric array of magnitudes")
    if not np.all(np.isfinite(m_all)):
        raise ValueError("mag contains NaN or infinite magnitudes; remove them before fitting")
    comps = tuple(components)
    unknown = [c for c in comps if c not in _KNOWN_COMPONENTS]
    if unknown:
        raise ValueError(f"unknown clump-LF components {unknown}; choose from {_KNOWN_COMPONENTS}")
    if "clump" not in comps:
        raise ValueError("components must include 'clump'")
    comps = tuple(c for c in _KNOWN_COMPONENTS if c in comps)
    if background not in _BACKGROUNDS:
        raise ValueError(f"background must be one of {_BACKGROUNDS}, got {background!r}")
    n_boot = int(n_boot)
    if n_boot < 0:
        raise ValueError(f"n_boot must be >= 0, got {n_boot}")
    if n_boot > 0:
        if rng is None:
            raise ValueError("n_boot > 0 needs rng (a numpy.random.Generator or an integer seed)")
        from hbmodel.core.randomness import as_generator
        rng = as_generator(rng)

    if mag_range is None:
        if peak_guess is None:
            if m_all.size < pr["min_stars"]:
                raise ValueError(f"too few stars ({m_all.size}) to fit the clump luminosity function "
                                 f"(need >= {int(pr['min_stars'])})")
            peak_guess = _find_peak(m_all)
        hw = pr["default_half_width_mag"]
        # never let the default window run past the data: an empty stretch would look like a cliff
        lo = max(float(peak_guess) - hw, float(m_all.min()))
        hi = min(float(peak_guess) + hw, float(m_all.max()))
    else:
        lo, hi = check_interval(mag_range, "mag_range", "m_lo", "m_hi")
    width = hi - lo
    if not pr["window_min_mag"] <= width <= pr["window_max_mag"]:
        raise ValueError(f"fit window width {width:g} mag is outside the calibrated range "
                         f"[{pr['window_min_mag']:g}, {pr['window_max_mag']:g}] mag")
    m = m_all[(m_all >= lo) & (m_all <= hi)]
    if m.size < pr["min_stars"]:
        raise ValueError(f"too few stars ({m.size}) in the fit window [{lo:g}, {hi:g}] "
                         f"(need >= {int(pr['min_stars'])})")
    if peak_guess is None:
        peak_guess = _find_peak(m)
    peak_guess = float(peak_guess)
    if not lo < peak_guess < hi:
        raise ValueError(f"peak_guess {peak_guess:g} lies outside the fit window [{lo:g}, {hi:g}]")

    model = _build_model(lo, hi, comps, background, bump_offset_range, bounds)
    res = _minimise(model, m, _start_points(model, m, peak_guess, n_keep=3))
    theta = np.clip(res.x, model.lower, model.upper)
    cov, hess_ok = _covariance(model, m, theta)
    err = np.sqrt(np.where(np.diag(cov) > 0, np.diag(cov), np.nan))
    p = model.unpack(theta)
    perr = dict(zip(model.names, (float(e) for e in err)))
    names = model.names

    # --- clump detection -------------------------------------------------------------------------
    ll_bg = None
    if model.has_bg:
        ll_bg = -_fit_background_only(m, lo, hi, background, model)
        two_dlnl = 2.0 * (-res.fun - ll_bg)
        fc_err = perr.get("fraction_clump", float("nan"))
        weak = (two_dlnl < pr["detect_min_2dlnl"]
                or (np.isfinite(fc_err) and not (p["fraction_clump"] > pr["detect_min_nsigma"] * fc_err)))
    else:
        weak = False
    margin = pr["edge_margin_sigma"] * p["sigma_mag"]
    at_edge = not (lo + margin < p["peak_mag"] < hi - margin)
    # on a caller's own width bounds (a differential-reddening node) the upper bound is no sign of a non-clump
    wide = "sigma_mag" not in (bounds or {}) and p["sigma_mag"] >= model.upper[1] * (1 - 1e-4)
    if weak or at_edge or wide:
        raise ValueError("no red-clump peak found in the catalogue (clump fraction consistent with zero, "
                         "peak at the window edge or clump too wide)")

    # --- bootstrap -------------------------------------------------------------------------------
    boot = None
    boot_err = None
    if n_boot > 0:
        boot = np.empty(n_boot)
        start = [theta]
        for k in range(n_boot):
            mb = m[rng.integers(0, m.size, m.size)]
            rb = _minimise(model, mb, start)
            boot[k] = rb.x[0] if np.isfinite(rb.fun) else np.nan
        boot_err = float(np.nanstd(boot, ddof=1))

    if model.has_bg and background == "exponential":
        slope = p["background_slope"]
    elif model.has_bg:
        x = p["peak_mag"] - 0.5 * (lo + hi)
        slope = (p["quad_a1"] + 2 * p["quad_a2"] * x) / (1 + p["quad_a1"] * x + p["quad_a2"] * x * x)
    else:
        slope = None
    fc_err_out = perr.get("fraction_clump", float("nan"))
    return ClumpLFResult(
        peak_mag=p["peak_mag"], peak_mag_err=perr["peak_mag"],
        sigma_mag=p["sigma_mag"], sigma_mag_err=perr["sigma_mag"],
        fraction_clump=p["fraction_clump"], fraction_clump_err=fc_err_out,
        background_slope=None if slope is None else float(slope),
        bump_offset=p.get("bump_offset") if model.has_bump else None,
        n_stars=int(m.size), mag_range=(lo, hi), loglike=float(-res.fun),
        loglike_background_only=ll_bg, converged=bool(res.success and hess_ok),
        params={k: float(v) for k, v in p.items() if k in names or k == "fraction_clump"},
        param_errors=perr, param_names=names, covariance=cov, components=comps, background=background,
        boot_peaks=boot, peak_mag_err_boot=boot_err)


def _fit_background_only(m: np.ndarray, lo: float, hi: float, background: str, full: _Model) -> float:
    """Minimum of -ln L for the background alone (the null hypothesis of the clump detection)."""
    width = hi - lo
    if background == "exponential":
        def nll(b):
            b = float(np.atleast_1d(b)[0])
            if abs(b) * width < 1e-8:
                return m.size * math.log(width)
            return -float(np.sum(np.log(b * np.exp(b * (m - hi)) / (-math.expm1(-b * width)))))
        i_b = full.names.index("background_slope")
        r = optimize.minimize_scalar(nll, bounds=(full.lower[i_b], full.upper[i_b]), method="bounded",
                                     options={"xatol": 1e-8})
        return float(r.fun)
    x = m - 0.5 * (lo + hi)
    q = full.upper[full.names.index("quad_a1")]

    def nllq(a):
        a1, a2 = a
        h = 0.5 * width
        vals = [1 - a1 * h + a2 * h * h, 1 + a1 * h + a2 * h * h]
        if a2 > 0 and abs(a1 / (2 * a2)) < h:
            vals.append(1 - a1 * a1 / (4 * a2))
        pen = 1e6 * (min(vals) ** 2 + 1e-3) if min(vals) < 0 else 0.0
        d = np.maximum((1 + a1 * x + a2 * x * x) / (width + a2 * width ** 3 / 12.0), 1e-300)
        return -float(np.sum(np.log(d))) + pen
    r = optimize.minimize(nllq, np.zeros(2), method="L-BFGS-B", bounds=[(-q, q), (-q, q)])
    return float(r.fun)

