"""Parameter space and log posterior of the mass-loss fit: the parameters of each model, their prior
boxes, the log prior (prior boxes, age, the bivariate Gaussian shift prior, the half-normal reddening
spread), the likelihood of measured masses, and the optimiser's starting point and step sizes.  The
sampler works on the plain ``log_post(theta)`` of :meth:`_PosteriorMixin._log_post_fn`."""
from __future__ import annotations

import numpy as np

__all__ = ["MODELS"]

MODELS = ("spread", "helium", "both")


class _PosteriorMixin:
    """Parameter space and log posterior of :class:`~hbmodel.inference.mass_loss_fit.MassLossFit`."""

    def _tip(self, age):
        """Tip mass of the (normal-helium) population at ages ``age`` (interpolated, smooth)."""
        return np.interp(age, self._age_grid, self._tip_grid)


    def _param_names(self, model):
        names = ["mass_loss"]
        if model in ("spread", "both"):
            names.append("mass_loss_sd")
        if model in ("helium", "both") and self._has_cmd:
            names += ["helium_fraction", "delta_y"]
        if self._age_free:
            names.append("age")
        if self._has_cmd:
            names.append("field_fraction")
            if self._pri.ebv_spread is not None:
                names.append("ebv_spread")
            names += ["shift_colour", "shift_mag"]
        if self._has_masses:
            names.append("rgb_mass_sd")
        return names


    def _bounds(self, name, pri):
        if name == "mass_loss":
            return self._ml_range
        if name == "age":
            return (self._age_grid[0], self._age_grid[-1])
        if name == "shift_colour":
            return (self._shift_lo[0], self._shift_hi[0])
        if name == "shift_mag":
            return (self._shift_lo[1], self._shift_hi[1])
        return tuple(float(v) for v in getattr(pri, name))


    def _unpack(self, theta, names):
        theta = np.atleast_2d(theta)
        p = {n: theta[:, i] for i, n in enumerate(names)}
        n = theta.shape[0]
        p.setdefault("mass_loss_sd", np.zeros(n))
        p.setdefault("age", np.full(n, self.age0_))
        return p


    def _log_prior(self, theta, names):
        theta = np.atleast_2d(theta)
        lp = np.zeros(theta.shape[0])
        for i, n in enumerate(names):
            lo, hi = self._bnds[n]
            x = theta[:, i]
            lp = np.where((x < lo) | (x > hi), -np.inf, lp)
        p = self._unpack(theta, names)
        if self._age_free:
            lp = lp - 0.5 * ((p["age"] - self.age0_) / self._pri.age_sd_gyr) ** 2
        if self._has_cmd:
            d = np.stack([p["shift_colour"], p["shift_mag"]], axis=1) - self._shift_mu
            lp = lp - 0.5 * np.einsum("ni,ij,nj->n", d, self._shift_icov, d)
        if "ebv_spread" in p and self._pri.ebv_spread_sd is not None:  # half-normal
            lp = lp - 0.5 * (p["ebv_spread"] / self._pri.ebv_spread_sd) ** 2
        return lp


    def _log_like_masses(self, p):
        M = self._masses
        tip = self._tip(p["age"])[:, None]
        s_rgb = p["rgb_mass_sd"][:, None]
        v1 = s_rgb ** 2 + M["e_rgb"][None, :] ** 2
        ll = -0.5 * np.sum((M["m_rgb"][None, :] - tip) ** 2 / v1 + np.log(2 * np.pi * v1), axis=1)
        v2 = s_rgb ** 2 + p["mass_loss_sd"][:, None] ** 2 + M["e_cl"][None, :] ** 2
        mu2 = tip - p["mass_loss"][:, None]
        ll = ll - 0.5 * np.sum((M["m_cl"][None, :] - mu2) ** 2 / v2 + np.log(2 * np.pi * v2), axis=1)
        return ll


    def _log_post_fn(self, names):
        def f(theta):
            theta = np.atleast_2d(theta)
            lp = self._log_prior(theta, names)
            ok = np.isfinite(lp)
            out = np.full(theta.shape[0], -np.inf)
            if not ok.any():
                return out
            p = self._unpack(theta[ok], names)
            ll = np.zeros(ok.sum())
            if self._has_cmd:
                ll = ll + self.likelihood_(p)
            if self._has_masses:
                ll = ll + self._log_like_masses(p)
            out[ok] = lp[ok] + ll
            self._n_evals += ok.sum()
            return out
        return f


    def _log_like_fn(self, names):
        def f(theta):
            p = self._unpack(theta, names)
            ll = 0.0
            if self._has_cmd:
                ll = ll + self.likelihood_(p)
            if self._has_masses:
                ll = ll + self._log_like_masses(p)
            return ll
        return f


    def _start(self, names, scan=True):
        """Initial point: prior centres, and a grid scan over the mean mass loss (one vectorised call)."""
        x0 = []
        for n in names:
            lo, hi = self._bnds[n]
            x0.append({"mass_loss_sd": min(0.015, hi), "helium_fraction": 0.3, "delta_y": 0.03,
                       "field_fraction": min(0.03, hi), "rgb_mass_sd": min(0.02, hi), "age": self.age0_,
                       "ebv_spread": min(0.01, 0.5 * hi),
                       "shift_colour": self._shift_mu[0] if self._has_cmd else 0,
                       "shift_mag": self._shift_mu[1] if self._has_cmd else 0}.get(n, 0.5 * (lo + hi)))
        x0 = np.array(x0, float)
        if "ebv_spread" in names and self._has_cmd:  # at a spread of the likelihood's pre-convolved basis
            i = names.index("ebv_spread")
            x0[i] = self.likelihood_.nearest_spread_level(x0[i])
        if not scan:
            return x0
        lo, hi = self._bnds["mass_loss"]
        grid = np.linspace(lo + 1e-3, hi - 1e-3, 80)
        th = np.repeat(x0[None], grid.size, 0)
        th[:, 0] = grid
        lp = self._log_post_fn(names)(th)
        x0[0] = grid[int(np.argmax(lp))]
        return x0


    def _steps(self, names):
        st = {"mass_loss": 0.01, "mass_loss_sd": 0.006, "helium_fraction": 0.1, "delta_y": 0.01, "age": 0.3,
              "field_fraction": 0.01, "rgb_mass_sd": 0.01, "ebv_spread": 0.004}
        out = []
        for n in names:
            if n == "shift_colour":
                out.append(min(0.02, self._shift_sd[0]))
            elif n == "shift_mag":
                out.append(min(0.03, self._shift_sd[1]))
            elif n == "age":
                out.append(min(0.3, self._pri.age_sd_gyr))
            else:
                out.append(st[n])
        return np.array(out)
