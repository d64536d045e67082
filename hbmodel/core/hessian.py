"""The package's one finite-difference Hessian (issue 14: no duplicated helpers), used for the curvature
errors of the clump luminosity-function fit and the Laplace approximation of the mass-loss fit.

Central differences (common practice, e.g. Press et al. 2007, Numerical Recipes 3rd ed., sect. 5.7):
from an analytic gradient ``g``, ``H[:, i] = (g(x + h_i e_i) - g(x - h_i e_i)) / (2 h_i)``, symmetrised;
from function values alone, ``H_ii = (f(x + h_i) - 2 f(x) + f(x - h_i)) / h_i^2`` and
``H_ij = (f(++) - f(+-) - f(-+) + f(--)) / (4 h_i h_j)``, the whole stencil evaluated in one vectorised
call."""
from __future__ import annotations

import numpy as np

__all__ = ["hessian"]


def hessian(x, steps, *, f=None, grad=None, free=None, nonfinite_drop=None) -> np.ndarray:
    """Finite-difference Hessian of a scalar function at ``x`` with steps ``steps`` (one per coordinate).

    ``grad`` (x -> gradient vector): central differences of the gradient over the ``free`` coordinates
    (boolean mask; default all), symmetrised -> (k, k) for the k free coordinates.
    ``f`` (vectorised: (n, d) points -> (n,) values), used without ``grad``: the value stencil, evaluated
    in one call with the centre first -> (d, d); with ``nonfinite_drop`` a non-finite value (a point
    outside the function's support, e.g. a prior bound) counts as the centre's value minus it."""
    x = np.asarray(x, float)
    if grad is not None:
        idx = np.flatnonzero(np.ones(x.size, bool) if free is None else free)
        h = np.zeros((idx.size, idx.size))
        for a, i in enumerate(idx):
            e = np.zeros_like(x); e[i] = steps[i]
            h[:, a] = (grad(x + e)[idx] - grad(x - e)[idx]) / (2.0 * steps[i])
        return 0.5 * (h + h.T)
    if f is None:
        raise ValueError("hessian needs f (values) or grad (gradient)")
    h = np.asarray(steps, float)
    d = x.size
    pts = [x.copy()]
    for i in range(d):
        for j in range(i, d):
            for si, sj in ((1, 1), (1, -1), (-1, 1), (-1, -1)):
                y = x.copy(); y[i] += si * h[i]; y[j] += sj * h[j]
                pts.append(y)
        for sgn in (1, -1):
            y = x.copy(); y[i] += sgn * h[i]; pts.append(y)
    vals = f(np.array(pts))
    if nonfinite_drop is not None:
        vals = np.where(np.isfinite(vals), vals, vals[0] - nonfinite_drop)
    f0 = vals[0]
    k = 1
    H = np.zeros((d, d))
    cache = {}
    for i in range(d):
        for j in range(i, d):
            cache[(i, j)] = vals[k:k + 4]
            k += 4
        fp, fm = vals[k:k + 2]
        k += 2
        H[i, i] = (fp - 2 * f0 + fm) / h[i] ** 2
    for (i, j), (fpp, fpm, fmp, fmm) in cache.items():
        if i != j:
            H[i, j] = H[j, i] = (fpp - fpm - fmp + fmm) / (4 * h[i] * h[j])
    return H
