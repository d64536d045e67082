"""Posterior maximum of the mass-loss fit (Nelder-Mead with a restart), the comparison of the models by
BIC / AIC at their maxima, and the sensitivity of the mass loss to the zero-point offsets."""
from __future__ import annotations

import numpy as np

from hbmodel.inference.mass_loss_estimator.posterior import MODELS

#: Initial Nelder-Mead simplex of the zero-point sensitivity's MAP (started at the free-zero-point MAP), in
#: units of the usual steps (own choice).
_ZP_STEP_SCALE = 0.25


class _OptimiseMixin:
    """MAP search and model comparison of :class:`~hbmodel.inference.mass_loss_fit.MassLossFit`."""

    def _map(self, names, x0=None, step_scale=1.0):
        """Posterior maximum: Nelder-Mead from the mass-loss scan's best point (or from ``x0``, with the
        initial simplex ``step_scale`` times the usual steps: smaller from a nearby maximum)."""
        from scipy.optimize import minimize
        f = self._log_post_fn(names)
        x0 = self._start(names) if x0 is None else x0
        steps = self._steps(names) * step_scale
        best = None
        x = x0
        for _ in range(2):  # a restart shakes Nelder-Mead out of a collapsed simplex
            simplex = [x] + [x + np.eye(len(x))[i] * steps[i] * np.where(x[i] + steps[i] > self._bnds[n][1], -1, 1)
                             for i, n in enumerate(names)]
            def obj(t):
                v = float(f(t)[0])
                return -v if np.isfinite(v) else 1e300
            r = minimize(obj, x, method="Nelder-Mead",
                         options=dict(initial_simplex=np.array(simplex), maxiter=400 * len(x), xatol=1e-5, fatol=2e-3,
                                      adaptive=True))
            if best is not None and best.fun - r.fun < 0.05:
                best = r if r.fun < best.fun else best
                break
            best = r if best is None or r.fun < best.fun else best
            x = best.x
            steps = steps * 0.5
        return best.x, -best.fun


    def _compare(self, names, x_map):
        res = {}
        n = self.likelihood_.n + (self.n_masses_ if self._has_masses else 0)
        for m in MODELS:
            nm = self._param_names(m)
            if m == self.model:
                x, lp = x_map, None
            else:  # start from this fit's MAP, new parameters at their default starting values
                x0 = self._start(nm, scan=False)
                for i, name in enumerate(nm):
                    if name in names:
                        x0[i] = x_map[names.index(name)]
                x, lp = self._map(nm, x0=x0)
            ll = float(self._log_like_fn(nm)(x[None])[0])
            k = len(nm)
            res[m] = {"max_log_likelihood": ll, "n_params": k, "bic": k * np.log(n) - 2 * ll, "aic": 2 * k - 2 * ll}
        order = sorted(res, key=lambda m: res[m]["bic"])
        d = res[order[1]]["bic"] - res[order[0]]["bic"]
        strength = "strong" if d > 6 else ("positive" if d > 2 else "weak")
        return {"criterion": "BIC", "models": res, "preferred": order[0], "delta_bic": float(d),
                "runner_up": order[1], "strength": strength,
                "preferred_aic": min(res, key=lambda m: res[m]["aic"])}


    def _zero_point_sensitivity(self, names, x_map):
        """Mass loss with the zero points fixed at 0 (shift prior without them) vs free, at the MAP,
        plus the posterior correlations of the mass loss with the nuisance parameters."""
        A, cov4 = self._nuis["A"], self._nuis["cov4"].copy()
        saved = (self._shift_icov, self._shift_mu)
        cov_fixed = cov4.copy()
        cov_fixed[2, 2] = cov_fixed[3, 3] = 0.0
        self._shift_icov = np.linalg.inv(A @ cov_fixed @ A.T)
        try:  # the maximum moves little from the free-zero-point MAP: a smaller initial simplex
            x0, _ = self._map(names, x0=x_map.copy(), step_scale=_ZP_STEP_SCALE)
        finally:
            self._shift_icov, self._shift_mu = saved
        post = self.posterior_
        corr = {}
        for k in ("distance_modulus", "ebv", "colour_offset", "mag_offset", "age", "field_fraction"):
            if k in post and np.std(post[k]) > 0:
                corr[k] = float(np.corrcoef(post["mass_loss"], post[k])[0, 1])
        return {"mass_loss_map_free": float(x_map[0]), "mass_loss_map_fixed": float(x0[0]),
                "shift": float(x_map[0] - x0[0]), "posterior_correlation_with_mass_loss": corr}
