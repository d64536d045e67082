"""Per-star probability that a giant is core-helium burning (clump / HB) rather than on the RGB.

Bayes' theorem with the population model's densities as likelihoods: the
deterministic weighted nodes of :meth:`Population.model_stars` (weights = time
spent, so the lifetime ratio is the prior) are binned on a grid of
(Teff, log g[, mass]) for each class, smoothed by the measurement errors
(Gaussian convolution, scipy.ndimage), and evaluated at each star.  Where the
two classes overlap the probabilities come out intermediate, as they must.
Early-AGB stars are counted with the shell-burning (non-CHeB) class.

:class:`CHeBClassifier` is a scikit-learn estimator (``BaseEstimator``): ``fit`` returns it, the learned
densities end in ``_``, ``predict_proba`` before ``fit`` raises ``NotFittedError``.
"""
from __future__ import annotations

import numpy as np
from scipy.interpolate import RegularGridInterpolator
from scipy.ndimage import gaussian_filter
from sklearn.base import BaseEstimator
from sklearn.utils.validation import check_is_fitted

from hbmodel.core.validation import as_float_array
from hbmodel.populations.population import Population

__all__ = ["CHeBClassifier"]


class CHeBClassifier(BaseEstimator):
    """Classifier of giants into core-helium-burning vs shell-burning (RGB/AGB) stars.

    Parameters
    ----------
    population : Population
        The population (simple or composite) the stars are drawn from.
    teff_err_k, logg_err, mass_err_msun : float
        Typical measurement errors used to smooth the model densities (per-star errors larger than
        these widen the kernel through the grid smoothing only approximately; pass the median errors).
    use_mass : bool
        Include the stellar mass as a third dimension (e.g. asteroseismic masses).
    """

    def __init__(self, population: Population, *, teff_err_k=80.0, logg_err=0.1, mass_err_msun=0.1,
                 use_mass=False, n_grid=(100, 130, 50)):
        # scikit-learn convention: the constructor only stores its arguments; fit() validates them
        self.population = population
        self.teff_err_k = teff_err_k
        self.logg_err = logg_err
        self.mass_err_msun = mass_err_msun
        self.use_mass = use_mass
        self.n_grid = n_grid

    def fit(self, X=None, y=None):
        """Build the smoothed class densities from the population model (data are not needed; ``X`` and
        ``y`` are accepted for the scikit-learn signature and ignored).  Returns the classifier."""
        for v, name in ((self.teff_err_k, "teff error"), (self.logg_err, "logg error"),
                        (self.mass_err_msun, "mass error")):
            if not (np.isfinite(v) and v > 0):
                raise ValueError(f"{name} must be positive")
        if not isinstance(self.population, Population):
            raise ValueError("CHeBClassifier needs population=Population(feh, age_gyr, ...)")
        st = self.population.model_stars(n_mass=160, n_tau=120, n_agb=60, n_rgb=3000)
        teff, logg, mass, w = st.teff_k, st.logg, st.mass_msun, st.weight
        cheb = st.phase == "hb"
        lo_t, hi_t = 3000.0, 7000.0
        lo_g, hi_g = -0.5, 3.8
        nt, ng, nm = self.n_grid
        edges = [np.linspace(lo_t, hi_t, nt + 1), np.linspace(lo_g, hi_g, ng + 1)]
        data = [teff, logg]
        sig = [float(self.teff_err_k) / (edges[0][1] - edges[0][0]), float(self.logg_err) / (edges[1][1] - edges[1][0])]
        if self.use_mass:
            edges.append(np.linspace(0.4, 3.5, nm + 1))
            data.append(mass)
            sig.append(float(self.mass_err_msun) / (edges[2][1] - edges[2][0]))
        sample = np.column_stack(data)
        dens = {}
        for name, sel in (("cheb", cheb), ("shell", ~cheb)):
            h, _ = np.histogramdd(sample[sel], bins=edges, weights=w[sel])
            dens[name] = gaussian_filter(h, sig, mode="constant")
        centres = [0.5 * (e[1:] + e[:-1]) for e in edges]
        self.interp_ = {k: RegularGridInterpolator(centres, v, bounds_error=False, fill_value=0.0)
                        for k, v in dens.items()}
        self.prior_cheb_ = float(w[cheb].sum() / w.sum())
        return self

    def predict_proba(self, teff_k, logg, mass_msun=None):
        """P(core-helium burning | Teff, log g[, mass]); NaN where both model densities vanish."""
        check_is_fitted(self, "interp_", msg="this %(name)s is not fitted yet: call fit() first")
        teff = as_float_array(teff_k, "teff")
        logg = as_float_array(logg, "logg")
        pts = [teff, logg]
        if self.use_mass:
            if mass_msun is None:
                raise ValueError("this classifier was built with masses: give mass_msun")
            pts.append(as_float_array(mass_msun, "mass"))
        x = np.column_stack(pts)
        dc = self.interp_["cheb"](x)
        ds = self.interp_["shell"](x)
        tot = dc + ds
        with np.errstate(invalid="ignore", divide="ignore"):
            p = np.where(tot > 1e-12 * max(float(np.max(tot)) if tot.size else 0.0, 1e-300), dc / tot, np.nan)
        return p
