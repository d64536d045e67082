"""Infer the RGB mass loss (mean and star-to-star spread) of a population from its HB / red clump.

:class:`MassLossFit` is a scikit-learn estimator (``sklearn.base.BaseEstimator``: ``get_params`` /
``set_params``, ``clone``, its repr; ``NotFittedError`` from the result methods before ``fit``): configure it with a :class:`~hbmodel.populations.population.Population`
(composition and age; its own mass-loss prescription is ignored), :class:`Priors` and a model
(``"spread"``: Gaussian spread of the integrated loss; ``"helium"``: a helium-enriched fraction instead of a
spread; ``"both"``), then ``fit(catalog)``, which returns the estimator.  Learned attributes end in ``_``.
This module holds the estimator's configuration and the order of the fit; each step lives in one module of
:mod:`hbmodel.inference.mass_loss_estimator` (priors, data preparation, log posterior, MAP search, Laplace
approximation, emcee, derived quantities, results), mixed into :class:`MassLossFit`.

Method
------
* Likelihood: :mod:`hbmodel.inference.likelihood` on the smooth surrogate CMD density of
  :mod:`hbmodel.inference.surrogate` (unbinned mixture of HB + early AGB + RGB + a uniform field component over
  the fitted region; errors from the catalogue's ``<band>_err`` columns; optional completeness).
* Nuisance shifts: distance modulus ``DM``, reddening ``E = E(B-V)`` and zero-point offsets ``dc`` (colour) and
  ``dm`` (magnitude) act on the data only through the 2-D shift ``s_c = k E + dc``, ``s_m = DM + R_1 E + dm``
  (``R_1 = A_1/E``, ``k = R_1 - R_2`` from :func:`hbmodel.photometry.extinction.extinction_ratio` at the Teff of the RGB
  at the HB's magnitude; the rest of each star's temperature-dependent extinction at the prior mean E, which
  broad bands such as Gaia G have, is carried by the surrogate's nodes).  With Gaussian priors the shift
  therefore has a bivariate Gaussian prior; the sampler explores
  ``(s_c, s_m)`` and ``DM, E, dc, dm`` are drawn afterwards from their exact Gaussian conditional given the
  shift (E >= 0 enforced by rejection in that step only).  The prior widths of ``dc``/``dm`` stand for the
  colour-temperature calibration's uncertainty (0.02 / 0.03 mag, ``tables/fit_settings.csv``).
* Age enters through the tip mass: HB mass = M_tip(age) - dM.
* Sampler: emcee (Foreman-Mackey et al. 2013, PASP 125, 306, affine-invariant ensemble; Goodman & Weare 2010),
  started from the Laplace approximation at a scipy Nelder-Mead MAP; a short differential-evolution
  pilot shapes an independence Metropolis-Hastings proposal used for most later steps
  (:meth:`MassLossFit._run_emcee`); chains are extended until longer than 50 integrated
  autocorrelation times (Goodman & Weare 2010, CAMCoS 5, 65; emcee's integrated-time estimator), else
  ``converged_`` is False.
  ``sampler="laplace"`` instead uses the Gaussian (Laplace) approximation at the MAP (finite-difference
  Hessian) -- fast, used for the simulation-based calibration.
* Model comparison: BIC (Schwarz 1978, Ann. Stat. 6, 461) and AIC (Akaike 1974, IEEE TAC 19, 716) at the MAP
  of each model; |dBIC| > 6 is "strong" (Kass & Raftery 1995, JASA 90, 773).
* Measured masses (``masses=`` table with ``mass``, ``mass_err``, ``phase`` = rgb|clump), e.g. asteroseismic
  masses: hierarchical Gaussian model with the latent true masses marginalised analytically -- RGB masses
  ~ N(M_tip(age), s_rgb^2 + e^2), clump masses ~ N(M_tip(age) - dM, s_rgb^2 + s_dM^2 + e^2).
"""
from __future__ import annotations

import time

import numpy as np
from sklearn.base import BaseEstimator

from hbmodel.core.randomness import as_generator
from hbmodel.physics import giant_branch as gb
from hbmodel.populations.population import Population
from hbmodel.inference.mass_loss_estimator.data import _DataMixin, check_error_scale, observed_locus_scatter
from hbmodel.inference.mass_loss_estimator.derived import _DerivedMixin
from hbmodel.inference.mass_loss_estimator.ensemble import _EnsembleMixin, _IndependenceProposal  # noqa: F401 (tests)
from hbmodel.inference.mass_loss_estimator.laplace import LAPLACE_MIN_DROP, _LaplaceMixin
from hbmodel.inference.mass_loss_estimator.optimise import _OptimiseMixin
from hbmodel.inference.mass_loss_estimator.posterior import MODELS, _PosteriorMixin
from hbmodel.inference.mass_loss_estimator.priors import EBV_SPREAD_MAX, Priors
from hbmodel.inference.mass_loss_estimator.results import REPORTED, _ResultsMixin

__all__ = ["Priors", "MassLossFit", "MODELS", "REPORTED", "EBV_SPREAD_MAX", "LAPLACE_MIN_DROP",
           "check_error_scale", "observed_locus_scatter"]


class MassLossFit(_DataMixin, _PosteriorMixin, _OptimiseMixin, _LaplaceMixin, _EnsembleMixin, _DerivedMixin,
                  _ResultsMixin, BaseEstimator):
    """Estimator of the mean integrated RGB mass loss and its dispersion (see the module docstring).

    Parameters
    ----------
    population : Population
        Simple population (one age and composition); its mass-loss prescription is ignored.
    priors : Priors
    model : "spread" | "helium" | "both"
    bands : (str, str)
        Plane (first - second, first); catalogue columns ``<band>`` and ``<band>_err``.
    colour : (str, str) or None
        The colour axis ``A - B`` as the user sees it (``region``, ``colour_offset``, plots); the two
        ``bands`` in either order (default: first - second).  The likelihood does not depend on this
        choice (a reflection of the colour axis).
    region : (cmin, cmax, mbright, mfaint) or None
        Observed colour / magnitude box in the ``colour`` convention; default = the model HB/clump
        extent plus margins.
    completeness : callable(mag) -> probability, optional
        Detection probability vs observed first-band magnitude (e.g. :class:`hbmodel.observation.effects.Completeness`).
    zero_points : bool
        Fit colour / magnitude zero-point offsets (default True).
    sampler : "emcee" | "laplace"
    compare_models : bool
        Also find the MAP of the other models and compare by BIC / AIC.
    n_walkers, max_steps, chunk, min_steps : emcee settings; the chain grows by ``chunk`` steps until converged
        (at least ``min_steps``) or ``max_steps``.
    seed : int or numpy.random.Generator
    rv, law : extinction law parameters.
    progress : bool or None
        A progress bar over the emcee steps on standard error; None (default): only when it is a terminal.
    """

    def __init__(self, population=None, priors=None, model="spread", *, bands=("V", "I"), region=None,
                 completeness=None, zero_points=True, sampler="emcee", compare_models=True, n_walkers=16,
                 max_steps=6000, chunk=100, min_steps=200, seed=0, rv=3.1, law="F99", error_model=None, colour=None,
                 progress=None):
        self.population = population
        self.priors = priors
        self.model = model
        self.bands = bands
        self.colour = colour
        self.region = region
        self.completeness = completeness
        self.zero_points = zero_points
        self.sampler = sampler
        self.compare_models = compare_models
        self.n_walkers = n_walkers
        self.max_steps = max_steps
        self.chunk = chunk
        self.min_steps = min_steps
        self.seed = seed
        self.rv = rv
        self.law = law
        self.error_model = error_model
        self.progress = progress

    # ------------------------------------------------------------------ set-up
    def _check(self):
        if not isinstance(self.population, Population):
            raise ValueError("MassLossFit needs population=Population(feh, age_gyr, ...)")
        if len(self.population.components) != 1:
            raise ValueError("MassLossFit supports a simple population (one age and composition)")
        if self.population.helium_enriched_fraction > 0:
            raise ValueError("give the population without a helium-enriched fraction: the fit infers it")
        if self.model not in MODELS:
            raise ValueError(f"unknown model {self.model!r}; choose one of {', '.join(MODELS)}")
        if self.sampler not in ("emcee", "laplace"):
            raise ValueError("sampler must be 'emcee' or 'laplace'")
        pri = self.priors if self.priors is not None else Priors()
        if not isinstance(pri, Priors):
            raise ValueError("priors must be a hbmodel.inference.mass_loss_fit.Priors")
        from hbmodel.photometry.magnitudes import get_band
        bands = tuple(get_band(b).name for b in self.bands)  # canonical names (aliases such as K -> Ks)
        if len(bands) != 2 or bands[0] == bands[1]:
            raise ValueError("give two different bands, e.g. ('V', 'I')")
        colour = bands if self.colour is None else tuple(get_band(b).name for b in self.colour)
        if len(colour) != 2 or set(colour) != set(bands):
            raise ValueError(f"the colour {'-'.join(colour)} must be made of the fitted bands "
                             f"{bands[0]} and {bands[1]} (in either order)")
        self.colour_ = colour
        # internally the colour is always bands[0] - bands[1]; -1 = the user's colour is its reflection
        self._colour_sign = 1.0 if colour == bands else -1.0
        return pri, bands

    def fit(self, catalog=None, masses=None):
        """Fit a catalogue (astropy Table or dict with ``<band>``, ``<band>_err``) and/or measured masses.

        BLAS runs single-threaded during the fit: the products here are small, and multi-threaded
        OpenBLAS on a busy machine is many times slower for them (measured: scripts/bench_fit.py)."""
        from threadpoolctl import threadpool_limits
        with threadpool_limits(1, "blas"):
            return self._fit(catalog, masses)


    def _fit(self, catalog, masses):
        t_start = time.perf_counter()
        pri, bands = self._check()
        self._pri = pri
        rng = as_generator(self.seed, "seed")
        self._has_cmd = catalog is not None
        self._has_masses = masses is not None
        self.n_dropped_ = 0
        if not (self._has_cmd or self._has_masses):
            raise ValueError("give a catalogue and/or a table of measured masses")
        comp = self.population.components[0]
        self.age0_ = comp.age_gyr
        self._age_free = pri.age_sd_gyr is not None
        sub = self.population.subpopulations[0]
        self._sub = sub
        if self._has_cmd:
            self._prepare_cmd(catalog, pri, bands)
            self._age_grid = self.surrogate_.age_grid
            self._tip_grid = self.surrogate_.tip_mass[0]
        else:
            lo, hi = gb.AGE_RANGE_GYR
            sd = pri.age_sd_gyr or 0.0
            self._age_grid = (np.linspace(max(lo, comp.age_gyr - 5 * sd), min(hi, comp.age_gyr + 5 * sd), 41)
                              if sd else np.array([comp.age_gyr - 1e-6, comp.age_gyr + 1e-6]))
            y_arg = None if self.population.helium is None else sub.composition.y
            self._tip_grid = np.asarray(gb.tip_mass_msun(self._age_grid, sub.mh, y_arg), float)
        if self._has_masses:
            self._prepare_masses(masses)
        env = float(self._tip_grid.min() - sub.core_mass_msun - 0.003)
        self._ml_range = tuple(pri.mass_loss) if pri.mass_loss is not None else (0.0, env)
        self._bnds = {}
        all_names = set()
        for m in MODELS:
            all_names |= set(self._param_names(m))
        for n in all_names:
            self._bnds[n] = self._bounds(n, pri)
        self._n_evals = 0
        names = self._param_names(self.model)
        self.param_names_ = names
        x_map, lp_map = self._map(names)
        self.map_theta_ = x_map
        t_opt = time.perf_counter() - t_start
        if self.sampler == "laplace":
            cov = self._laplace(names, x_map)
            chain = self._laplace_draws(names, x_map, cov, rng)
            self.autocorr_time_ = None
            self.converged_ = True
            self.acceptance_fraction_ = None
            self.n_eff_ = float(len(chain))
            self.n_steps_ = 0
            self.laplace_cov_ = cov
            self.laplace_check_ = self._laplace_check(names, x_map, cov)
        else:
            chain = self._run_emcee(names, x_map, rng)
        self.chain_theta_ = chain
        self.posterior_ = self._derive(chain, names, rng)
        self.map_params_ = self._derive(x_map[None], names, rng, conditional_mean=True)
        self.map_params_ = {k: float(v[0]) for k, v in self.map_params_.items()}
        self.map_log_posterior_ = float(lp_map)
        self.max_log_likelihood_ = float(self._log_like_fn(names)(x_map[None])[0])
        self.n_stars_ = int(self.likelihood_.n) if self._has_cmd else 0
        self.n_masses_ = int(sum(len(v) for k, v in self._masses.items() if k.startswith("m_"))) if self._has_masses else 0
        self.comparison_ = self._compare(names, x_map) if (self.compare_models and self._has_cmd) else None
        self.zero_point_sensitivity_ = self._zero_point_sensitivity(names, x_map) if (
            self._has_cmd and self.zero_points) else None
        self.fit_time_s_ = time.perf_counter() - t_start
        self.optimise_time_s_ = t_opt
        self.n_evaluations_ = int(self._n_evals)
        return self
