"""Gaussian (Laplace) approximation of the mass-loss posterior at its maximum: covariance from a
finite-difference Hessian, its check along the mass loss, and draws truncated to the prior box."""
from __future__ import annotations

import numpy as np

from hbmodel.core.hessian import hessian

__all__ = ["LAPLACE_MIN_DROP"]

#: Finite-difference step of the Laplace Hessian, in units of the optimiser's parameter steps (own choice,
#: checked by the simulation-based calibration tests).
_LAPLACE_STEP = 0.3
#: Smallest drop of the log posterior 2 sigma from the MAP along the mass loss (2 for a Gaussian) below which
#: the Laplace approximation is warned (own choice: half the Gaussian value).
LAPLACE_MIN_DROP = 1.0


class _LaplaceMixin:
    """Laplace approximation of :class:`~hbmodel.inference.mass_loss_fit.MassLossFit`."""

    def _laplace(self, names, x):
        """Gaussian (Laplace) approximation of the posterior at the MAP ``x``: covariance matrix.

        The finite-difference stencil is moved inside the prior box where the MAP sits on (or near) a
        bound (e.g. no spread), so it never samples outside the prior; the precision matrix is made
        positive definite (eigenvalues floored) and given the curvature of each uniform prior box,
        12 / width^2, so that a direction the data do not constrain keeps the box's own variance
        instead of an unbounded one."""
        f = self._log_post_fn(names)
        d = len(x)
        h = self._steps(names) * _LAPLACE_STEP
        xc = np.array(x, float)
        widths = np.zeros(d)
        for i, n in enumerate(names):
            lo, hi = self._bnds[n]
            widths[i] = hi - lo
            h[i] = min(h[i], 0.2 * (hi - lo))
            xc[i] = min(max(xc[i], lo + 1.01 * h[i]), hi - 1.01 * h[i])
        H = hessian(xc, h, f=f, nonfinite_drop=1e3)  # outside the prior: 1e3 below the centre
        P = -0.5 * (H + H.T)
        scale = np.sqrt(np.maximum(np.abs(np.diag(P)), 1e-300))
        w, V = np.linalg.eigh(P / np.outer(scale, scale))
        w = np.maximum(w, 1e-9 * max(float(w.max()), 1e-300))
        P = (V * w) @ V.T * np.outer(scale, scale)
        box = np.where(np.isfinite(widths) & (widths > 0), 12.0 / np.maximum(widths, 1e-300) ** 2, 0.0)
        P = P + np.diag(box)
        cov = np.linalg.inv(P)
        return 0.5 * (cov + cov.T)

    def _laplace_check(self, names, x_map, cov):
        """Drop of the log posterior 2 sigma either side of the MAP along the mass loss (moving the other
        parameters along their Laplace regression on it, kept inside their prior box): 2.0 each for a Gaussian posterior.  A drop below
        1 means a flatter posterior or another mode there (e.g. a red clump, whose luminosity hardly depends
        on the mass): the Laplace intervals are then too narrow."""
        f = self._log_post_fn(names)
        step = 2.0 * cov[:, 0] / np.sqrt(cov[0, 0])
        pts = np.array([x_map, x_map - step, x_map + step])
        for i, n in enumerate(names[1:], start=1):  # the others stay inside their prior box
            lo, hi = self._bnds[n]
            pts[:, i] = np.clip(pts[:, i], lo, hi)
        vals = f(pts)
        drops = vals[0] - vals[1:]
        return {"drop_minus_2sigma": float(drops[0]), "drop_plus_2sigma": float(drops[1])}


    def _laplace_draws(self, names, x_map, cov, rng, n=4000):
        """Draws of the Laplace Gaussian truncated to the prior box (rejection, then clipping)."""
        lo = np.array([self._bnds[nm][0] for nm in names], float)
        hi = np.array([self._bnds[nm][1] for nm in names], float)
        kept, have = [], 0
        for _ in range(20):
            dr = rng.multivariate_normal(x_map, cov, size=n)
            dr = dr[np.all((dr >= lo) & (dr <= hi), axis=1)]
            kept.append(dr)
            have += len(dr)
            if have >= n:
                break
        out = np.concatenate(kept)[:n]
        if len(out) < n // 4:   # the box holds little of the Gaussian: clip instead of rejecting
            out = np.clip(rng.multivariate_normal(x_map, cov, size=n), lo, hi)
        return out
