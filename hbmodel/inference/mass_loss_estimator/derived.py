"""Derived quantities of the mass-loss fit: the Reimers eta of each mass loss, the distance modulus,
reddening and zero points drawn from their Gaussian conditional given the sampled shift, and the HB-mass
distribution."""
from __future__ import annotations

import numpy as np

from hbmodel.physics.mass_loss import mass_loss_from_eta


class _DerivedMixin:
    """Derived quantities of :class:`~hbmodel.inference.mass_loss_fit.MassLossFit`."""

    def _eta_table(self):
        """eta(dM) on a grid, per age node: mass_loss_from_eta integrated once, then inverted (monotone)."""
        if getattr(self, "_eta_tab", None) is not None:
            return self._eta_tab
        sub = self._sub
        ages = np.linspace(self._age_grid[0], self._age_grid[-1], 5 if self._age_free else 1)
        etas = np.linspace(0.0, 2.99, 241)
        rows = []
        for a in ages:  # a handful of ages (not per sample)
            tip = float(self._tip(a))
            dm, lost = mass_loss_from_eta(etas, tip, sub.core_mass_msun, sub.mh, helium_excess=sub.helium_excess,
                                          x_env=sub.composition.x, law="reimers")
            dm = np.where(lost, np.nan, dm)
            rows.append(dm)
        self._eta_tab = (ages, etas, np.array(rows))
        return self._eta_tab


    def _eta_of(self, dm, age):
        ages, etas, rows = self._eta_table()
        out = np.empty(len(dm))
        vals = []
        for r in rows:
            ok = np.isfinite(r)
            vals.append(np.interp(dm, r[ok], etas[ok], right=np.nan))
        vals = np.array(vals)
        if len(ages) == 1:
            return vals[0]
        u = np.clip(np.interp(age, ages, np.arange(len(ages))), 0, len(ages) - 1 - 1e-12)
        j = np.floor(u).astype(int)
        t = u - j
        idx = np.arange(len(dm))
        out = vals[j, idx] * (1 - t) + vals[j + 1, idx] * t
        return out


    def _derive(self, chain, names, rng, conditional_mean=False):
        p = self._unpack(chain, names)
        out = {k: np.asarray(v, float) for k, v in p.items() if k not in ("shift_colour", "shift_mag")}
        if not self._age_free:
            out.pop("age", None)
        if self.model == "helium":
            out.pop("mass_loss_sd", None)
        out["hb_mass_mean"] = self._tip(p["age"]) - p["mass_loss"]
        out["eta"] = self._eta_of(p["mass_loss"], p["age"])
        if self._has_cmd:
            s = np.stack([p["shift_colour"], p["shift_mag"]], axis=1)
            out["shift_colour"] = s[:, 0]
            out["shift_mag"] = s[:, 1]
            A, mu4, cov4 = self._nuis["A"], self._nuis["mu4"], self._nuis["cov4"]
            S = A @ cov4 @ A.T
            K = cov4 @ A.T @ np.linalg.inv(S)
            mean = mu4[None] + (s - (A @ mu4)[None]) @ K.T
            ccov = cov4 - K @ A @ cov4
            ccov = 0.5 * (ccov + ccov.T)
            if conditional_mean:
                x = mean
            else:
                L = np.linalg.cholesky(ccov + 1e-14 * np.eye(4))
                x = mean + rng.standard_normal(mean.shape) @ L.T
                for _ in range(50):  # E(B-V) >= 0 by rejection (only in this conditional step)
                    bad = x[:, 1] < 0
                    if not bad.any():
                        break
                    x[bad] = mean[bad] + rng.standard_normal((bad.sum(), 4)) @ L.T
                x[:, 1] = np.maximum(x[:, 1], 0.0)
            out["distance_modulus"], out["ebv"] = x[:, 0], x[:, 1]
            if self.zero_points:  # the colour zero point in the user's colour convention
                out["colour_offset"], out["mag_offset"] = self._colour_sign * x[:, 2], x[:, 3]
        return out


    def hb_mass_distribution(self, grid=None, n_draws=200):
        """Posterior median and 16-84% band of the HB-mass density (normal + helium-enriched stars)."""
        self._fitted()
        p = self._unpack(self.chain_theta_, self.param_names_)
        tip = self._tip(p["age"])
        mean = tip - p["mass_loss"]
        sd = np.maximum(p["mass_loss_sd"], 1e-3)
        if grid is None:
            grid = np.linspace(np.min(mean - 4 * sd) - 0.05, np.max(mean + 4 * sd), 300)
        idx = np.linspace(0, len(mean) - 1, min(n_draws, len(mean))).astype(int)
        from scipy.stats import norm
        dens = (1 - p.get("helium_fraction", np.zeros(len(mean)))[idx, None]) * norm.pdf(grid[None], mean[idx, None], sd[idx, None])
        if "helium_fraction" in p and self._has_cmd:
            s = self.surrogate_
            tip_he = np.array([np.interp(a, s.age_grid, s.tip_mass[-1]) for a in p["age"][idx]])
            tip_he = tip[idx] + (tip_he - tip[idx]) * p["delta_y"][idx] / max(s.delta_y_nodes[-1], 1e-9)
            dens += p["helium_fraction"][idx, None] * norm.pdf(grid[None], (tip_he - p["mass_loss"][idx])[:, None],
                                                              sd[idx, None])
        return grid, np.percentile(dens, [16, 50, 84], axis=0)
