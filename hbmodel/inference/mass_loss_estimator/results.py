"""Results of a fitted mass-loss estimator: percentile summary, the JSON-ready result, Hess diagrams, the
posterior-predictive goodness of fit and plain-text warnings.  Figures: :mod:`hbmodel.outputs.plots`."""
from __future__ import annotations

import numpy as np

from hbmodel.inference.likelihood import hess_poisson_deviance
from hbmodel.inference.mass_loss_estimator.laplace import LAPLACE_MIN_DROP

__all__ = ["REPORTED"]

#: Parameters reported in the summary (when present).
REPORTED = ("mass_loss", "mass_loss_sd", "hb_mass_mean", "eta", "distance_modulus", "ebv", "ebv_spread",
            "helium_fraction",
            "delta_y", "age", "field_fraction", "colour_offset", "mag_offset", "rgb_mass_sd")


class _ResultsMixin:
    """Summaries and diagnostics of a fitted :class:`~hbmodel.inference.mass_loss_fit.MassLossFit`."""

    def summary(self) -> dict:
        """16/50/84th percentiles of each reported parameter."""
        self._fitted()
        out = {}
        for k in REPORTED:
            if k in self.posterior_:
                v = np.asarray(self.posterior_[k], float)
                v = v[np.isfinite(v)]
                if v.size == 0:
                    out[k] = {"median": None, "lo": None, "hi": None}
                    continue
                lo, med, hi = np.percentile(v, [16, 50, 84])
                out[k] = {"median": float(med), "lo": float(lo), "hi": float(hi)}
        return out


    def result(self) -> dict:
        """The full JSON-ready result: summary, model, counts, convergence, comparison, zero points."""
        out = dict(self.summary())
        out.update({
            "model": self.model, "n_stars": self.n_stars_, "n_masses": self.n_masses_, "sampler": self.sampler,
            "n_rows_dropped_missing": self.n_dropped_,
            "bands": list(self.bands), "colour": "-".join(self.colour_),
            "region": list(self._user_region(self.region_)) if self._has_cmd else None,
            "convergence": {"autocorr_time": self.autocorr_time_, "n_eff": self.n_eff_,
                            "acceptance": self.acceptance_fraction_, "n_steps": self.n_steps_,
                            "converged": self.converged_,
                            "laplace_check": getattr(self, "laplace_check_", None) if self.sampler == "laplace"
                            else None},
            "model_comparison": self.comparison_,
            "zero_point_sensitivity": self.zero_point_sensitivity_,
            "map": self.map_params_, "max_log_likelihood": self.max_log_likelihood_,
            "fit_time_s": self.fit_time_s_,
        })
        if self._has_cmd:
            out["hess_deviance"] = self.hess_deviance()
        out["goodness_of_fit"] = self.goodness_of_fit() if self._has_cmd else None
        out["warnings"] = self.warnings()
        gof = out["goodness_of_fit"]
        if gof is not None and gof["p_value"] < 0.01:
            out["warnings"].append(f"poor fit: posterior-predictive p = {gof['p_value']:.3f} of the Hess "
                                   "deviance (the model does not describe the CMD)")
        return out


    def _binned_model(self, theta, ce, me, sub=6):
        """Model counts integrated over each Hess bin (``sub`` x ``sub`` midpoints per bin: a narrow
        locus is not sampled correctly by one midpoint per bin); ``theta`` one point or (n, d) points."""
        fc = np.linspace(ce[0], ce[-1], (ce.size - 1) * sub + 1)
        fm = np.linspace(me[0], me[-1], (me.size - 1) * sub + 1)
        theta = np.asarray(theta, float)
        fine = self.likelihood_.model_hess_batch(self._unpack(np.atleast_2d(theta), self.param_names_), fc, fm)
        out = fine.reshape(-1, me.size - 1, sub, ce.size - 1, sub).sum(axis=(2, 4))
        return out[0] if theta.ndim == 1 else out


    def goodness_of_fit(self, n_rep=100, nbins=(30, 30), seed=0):
        """Posterior-predictive p-value (Gelman, Meng & Stern 1996, Stat. Sinica 6, 733) of the Hess
        Poisson deviance (Dolphin 2002, eq. 10): for posterior draws, the deviance of the data against the
        draw's model Hess is compared with that of a Poisson replicate of the model; p = fraction of
        replicates at least as discrepant."""
        self._fitted()
        rng = np.random.default_rng(seed)
        cmin, cmax, mb, mf = self.region_
        ce = np.linspace(cmin, cmax, nbins[0] + 1)
        me = np.linspace(mb, mf, nbins[1] + 1)
        obs, _, _ = np.histogram2d(self.data_["mag"], self.data_["colour"], bins=(me, ce))
        chain = np.asarray(self.chain_theta_, float)
        idx = rng.choice(chain.shape[0], size=min(n_rep, chain.shape[0]), replace=False)
        d_obs, d_rep = [], []
        for model in self._binned_model(chain[idx], ce, me):  # one batched pass over the draws
            d_obs.append(hess_poisson_deviance(obs, model))
            d_rep.append(hess_poisson_deviance(rng.poisson(model), model))
        d_obs, d_rep = np.array(d_obs), np.array(d_rep)
        return {"p_value": float(np.mean(d_rep >= d_obs)), "deviance_observed": float(np.median(d_obs)),
                "deviance_replicated": float(np.median(d_rep)), "n_draws": int(idx.size)}


    def warnings(self) -> list:
        """Plain-text warnings about this fit: an unconverged chain, or a sampled parameter whose
        posterior piles up on a bound of its prior range (more than 20% of the draws within 2% of the
        range from the bound, i.e. the data push beyond what the prior allows)."""
        self._fitted()
        out = []
        if not self.converged_:
            out.append("the chain has not converged (raise --max-steps); intervals are unreliable")
        chk = getattr(self, "laplace_check_", None) if self.sampler == "laplace" else None
        if chk is not None and min(chk.values()) < LAPLACE_MIN_DROP:
            out.append(f"the posterior of mass_loss is not Gaussian (log posterior drops by "
                       f"{min(chk.values()):.2f} instead of 2 at 2 sigma from the MAP, or another mode lies there): "
                       f"the Laplace intervals are too narrow; use the emcee sampler")
        chain = np.asarray(self.chain_theta_, float)
        for i, n in enumerate(self.param_names_):
            lo, hi = self._bnds[n]
            if n in ("shift_colour", "shift_mag", "age") or not np.isfinite(hi - lo) or hi <= lo:
                continue
            x = chain[:, i]
            tol = 0.02 * (hi - lo)
            for side, b, near in (("lower", lo, x < lo + tol), ("upper", hi, x > hi - tol)):
                if n in ("mass_loss_sd", "field_fraction", "helium_fraction", "delta_y",
                         "ebv_spread") and side == "lower":
                    continue  # zero spread / no field is a legitimate answer, not a failure
                if np.mean(near) > 0.2:
                    out.append(f"{n} piles up on the {side} bound of its prior ({b:g}): the model cannot "
                               f"describe the data inside the prior (e.g. unmodelled differential reddening)")
        return out


    def _fitted(self):
        """Raise ``sklearn.exceptions.NotFittedError`` (a ValueError) unless :meth:`fit` has run."""
        from sklearn.utils.validation import check_is_fitted
        check_is_fitted(self, "posterior_", msg="this %(name)s is not fitted yet: call fit() first")


    def posterior_table(self):
        from astropy.table import Table
        self._fitted()
        return Table({k: np.asarray(v) for k, v in self.posterior_.items()})


    def _map_p(self):
        return self._unpack(self.map_theta_[None], self.param_names_)


    def hess(self, nbins=(40, 40)):
        """Observed and model Hess diagrams of the fitted region (observed plane) at the MAP."""
        self._fitted()
        cmin, cmax, mb, mf = self.region_
        ce = np.linspace(cmin, cmax, nbins[0] + 1)
        me = np.linspace(mb, mf, nbins[1] + 1)
        obs, _, _ = np.histogram2d(self.data_["mag"], self.data_["colour"], bins=(me, ce))
        model = self.likelihood_.model_hess(self._map_p(), ce, me)
        return ce, me, obs, model


    def hess_deviance(self, nbins=(30, 30)):
        ce, me, obs, model = self.hess(nbins)
        return {"poisson_deviance": hess_poisson_deviance(obs, model), "n_bins": int(np.sum(model > 0.5) )}
