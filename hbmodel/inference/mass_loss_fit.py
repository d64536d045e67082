"""Infer the RGB mass loss (mean and star-to-star spread) of a population from its HB / red clump.

:class:`MassLossFit` is a scikit-learn-style estimator: configure it with a :class:`~hbmodel.populations.population.Population`
(composition and age; its own mass-loss prescription is ignored), :class:`Priors` and a model
(``"spread"``: Gaussian spread of the integrated loss; ``"helium"``: a helium-enriched fraction instead of a
spread; ``"both"``), then ``fit(catalog)``.  Learned attributes end in ``_``.

Method
------
* Likelihood: the smooth surrogate CMD density of :mod:`hbmodel.inference.likelihood` (unbinned mixture of HB + early
  AGB + RGB + a uniform field component over the fitted region; errors from the catalogue's ``<band>_err``
  columns; optional completeness).
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
from dataclasses import dataclass

import numpy as np

from hbmodel.physics import giant_branch as gb
from hbmodel.inference.likelihood import (CMDLikelihood, ErrorModel, build_surrogate, fit_constants, hess_poisson_deviance,
                         pixel_for_errors, population_extent)
from hbmodel.physics.mass_loss import mass_loss_from_eta
from hbmodel.populations.population import Population

__all__ = ["Priors", "MassLossFit", "MODELS", "REPORTED"]

MODELS = ("spread", "helium", "both")
#: Finite-difference step of the Laplace Hessian, in units of the optimiser's parameter steps (own choice,
#: checked by the simulation-based calibration tests).
_LAPLACE_STEP = 0.3
#: Smallest drop of the log posterior 2 sigma from the MAP along the mass loss (2 for a Gaussian) below which
#: the Laplace approximation is warned (own choice: half the Gaussian value).
LAPLACE_MIN_DROP = 1.0
#: Parameters reported in the summary (when present).
REPORTED = ("mass_loss", "mass_loss_sd", "hb_mass_mean", "eta", "distance_modulus", "ebv", "ebv_spread",
            "helium_fraction",
            "delta_y", "age", "field_fraction", "colour_offset", "mag_offset", "rgb_mass_sd")


def _pos_width(name, v):
    v = float(v)
    if not np.isfinite(v) or v <= 0:
        raise ValueError(f"prior width of {name} must be positive (got {v:g})")
    return v


def _interval(name, lo_hi):
    lo, hi = (float(x) for x in lo_hi)
    if not (np.isfinite(lo) and np.isfinite(hi)) or hi <= lo:
        raise ValueError(f"prior range of {name} must have positive width (got [{lo:g}, {hi:g}])")
    return lo, hi


#: Largest star-to-star E(B-V) spread (mag) a fit may explore (own choice: larger differential reddening
#: smears the clump into the RGB and is better corrected with a reddening map first).
EBV_SPREAD_MAX = 0.25

#: Valid bounds ``(lo, hi, hi included)`` of the uniform prior ranges: fractions lie in [0, 1] (the field
#: fraction below 1, a catalogue of field stars only has no population to fit); the helium enrichment
#: is modelled up to 0.15.
_UNIFORM_BOUNDS = {"mass_loss": (0.0, np.inf, False), "mass_loss_sd": (0.0, np.inf, False),
                   "helium_fraction": (0.0, 1.0, True), "delta_y": (0.0, 0.15, True),
                   "field_fraction": (0.0, 1.0, False), "rgb_mass_sd": (0.0, np.inf, False),
                   "ebv_spread": (0.0, EBV_SPREAD_MAX, True)}


@dataclass(frozen=True)
class Priors:
    """Priors.  Gaussians are ``(mean, sd)``, uniforms ``(lo, hi)``; ``None`` = default.

    ``distance_modulus`` is needed for a CMD fit (the model must be placed); ``ebv`` defaults to N(0, 0.02);
    ``age_sd_gyr`` None fixes the age at the population's; ``mass_loss`` defaults to [0, envelope mass];
    zero-point widths default to 0.02 / 0.03 mag (``zero_points=False`` in :class:`MassLossFit` fixes them).

    Differential reddening: ``ebv_spread`` = (lo, hi) is the range of the star-to-star E(B-V) spread (sd,
    mag), a nuisance parameter of the CMD fit; ``ebv_spread_sd`` makes its prior half-normal of that scale
    (uniform in the range when None).  ``ebv_spread=None`` (default) assumes no differential reddening.
    :meth:`with_ebv_spread` builds the usual choices.
    """

    distance_modulus: tuple | None = None
    ebv: tuple = (0.0, 0.02)
    age_sd_gyr: float | None = None
    mass_loss: tuple | None = None
    mass_loss_sd: tuple = (0.0, 0.08)
    helium_fraction: tuple = (0.0, 1.0)
    delta_y: tuple = (0.0, 0.10)
    field_fraction: tuple = (0.0, 0.5)
    colour_offset_sd: float | None = None
    mag_offset_sd: float | None = None
    rgb_mass_sd: tuple = (0.0, 0.1)
    ebv_spread: tuple | None = None
    ebv_spread_sd: float | None = None

    def with_ebv_spread(self, mode):
        """These priors with a differential-reddening spread: ``"prior"`` -- half-normal of scale the E(B-V)
        prior width (the mean's uncertainty sets the scale of the star-to-star scatter too), up to four times
        it; a positive number -- half-normal of that scale, up to four times it; ``"free"`` -- uniform on
        [0, EBV_SPREAD_MAX]; ``"none"`` or None -- no differential reddening."""
        import dataclasses
        if mode is None or mode == "none":
            return dataclasses.replace(self, ebv_spread=None, ebv_spread_sd=None)
        if mode == "free":
            return dataclasses.replace(self, ebv_spread=(0.0, EBV_SPREAD_MAX), ebv_spread_sd=None)
        scale = float(self.ebv[1]) if mode == "prior" else _pos_width("ebv_spread", mode)
        return dataclasses.replace(self, ebv_spread=(0.0, min(4.0 * scale, EBV_SPREAD_MAX)), ebv_spread_sd=scale)

    def __post_init__(self):
        if self.distance_modulus is not None:
            dm, sd = self.distance_modulus
            if not np.isfinite(float(dm)):
                raise ValueError("distance modulus prior mean must be finite")
            _pos_width("distance_modulus", sd)
        e, esd = self.ebv
        if not np.isfinite(float(e)) or float(e) < 0:
            raise ValueError(f"E(B-V) prior mean must be non-negative (got {float(e):g})")
        _pos_width("ebv", esd)
        if self.age_sd_gyr is not None:
            _pos_width("age", self.age_sd_gyr)
        for name, (lo_ok, hi_ok, closed) in _UNIFORM_BOUNDS.items():
            if getattr(self, name) is None:
                continue
            lo, hi = _interval(name, getattr(self, name))
            if lo < lo_ok or hi > hi_ok or (hi == hi_ok and not closed):
                valid = f"[{lo_ok:g}, {hi_ok:g}{']' if closed else ')'}"
                raise ValueError(f"prior range of {name} [{lo:g}, {hi:g}] must lie within {valid}")
        for name in ("colour_offset_sd", "mag_offset_sd", "ebv_spread_sd"):
            if getattr(self, name) is not None:
                _pos_width(name, getattr(self, name))


#: Quoted colour errors may exceed the observed colour scatter of the catalogue's giant branch by at most
#: this factor (plus ``ERROR_SCALE_SLACK_MAG``) before the fit refuses them: the observed scatter includes
#: the errors, so quoted errors several times larger are in the wrong unit (millimag, a flux/sigma).
ERROR_SCALE_MAX_RATIO = 3.0
ERROR_SCALE_SLACK_MAG = 0.03


def observed_locus_scatter(colour, mag, bin_mag=0.25, min_stars=8):
    """Robust colour scatter (mag) of the narrowest sequence of a CMD: per ``bin_mag`` magnitude bin the
    normalised median absolute deviation of the colours about their median (1.4826 MAD, common
    practice), then the median over the bins holding at least ``min_stars`` stars (the RGB dominates most
    bins; the HB's wide colour range affects only a few).  NaN with too few stars."""
    colour, mag = np.asarray(colour, float), np.asarray(mag, float)
    if colour.size < min_stars:
        return float("nan")
    edges = np.arange(mag.min(), mag.max() + bin_mag, bin_mag)
    idx = np.digitize(mag, edges)
    out = []
    for k in np.unique(idx):
        c = colour[idx == k]
        if c.size >= min_stars:
            out.append(1.4826 * np.median(np.abs(c - np.median(c))))
    return float(np.median(out)) if out else float("nan")


def check_error_scale(colour, mag, colour_err, bands):
    """ValueError when the quoted photometric errors cannot be magnitudes: their median colour error is
    more than :data:`ERROR_SCALE_MAX_RATIO` times (+ :data:`ERROR_SCALE_SLACK_MAG`) the observed colour
    scatter of the CMD's narrowest sequence (:func:`observed_locus_scatter`)."""
    obs = observed_locus_scatter(colour, mag)
    quoted = float(np.median(colour_err))
    if np.isfinite(obs) and quoted > ERROR_SCALE_MAX_RATIO * obs + ERROR_SCALE_SLACK_MAG:
        b1, b2 = bands
        raise ValueError(f"the quoted errors {b1}_err, {b2}_err (median colour error {quoted:.3g} mag) are "
                         f"{quoted / max(obs, 1e-6):.0f}x the observed colour scatter of the giant branch "
                         f"({obs:.3g} mag): they cannot be magnitude errors - are they in millimag, or a "
                         f"signal-to-noise (flux over error) column? Give 1-sigma errors in magnitudes")


def _read_table_like(t, what):
    from astropy.table import Table
    if isinstance(t, Table):
        return t
    if isinstance(t, dict):
        try:
            return Table({k: np.asarray(v) for k, v in t.items()})
        except Exception as exc:
            raise ValueError(f"cannot make a table from the {what} columns: {exc}") from None
    raise ValueError(f"{what} must be an astropy Table or a dict of columns, got {type(t).__name__}")


class MassLossFit:
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
    """

    def __init__(self, population=None, priors=None, model="spread", *, bands=("V", "I"), region=None,
                 completeness=None, zero_points=True, sampler="emcee", compare_models=True, n_walkers=16,
                 max_steps=6000, chunk=100, min_steps=200, seed=0, rv=3.1, law="F99", error_model=None, colour=None):
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

    # sklearn-style parameter access
    def get_params(self, deep=True):
        return {k: getattr(self, k) for k in ("population", "priors", "model", "bands", "region", "completeness",
                                              "zero_points", "sampler", "compare_models", "n_walkers",
                                              "max_steps", "chunk", "min_steps", "seed", "rv", "law", "error_model",
                                              "colour")}

    def set_params(self, **kw):
        for k, v in kw.items():
            if k not in self.get_params():
                raise ValueError(f"unknown parameter {k!r}")
            setattr(self, k, v)
        return self

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

    def _prepare_cmd(self, catalog, pri, bands):
        from hbmodel.photometry.extinction import extinction_ratio
        from hbmodel.io.catalogues import check_errors, drop_missing
        t = _read_table_like(catalog, "catalogue")
        if len(t) == 0:
            raise ValueError("the catalogue is empty")
        need = [b for b in bands] + [f"{b}_err" for b in bands]
        miss = [c for c in need if c not in t.colnames]
        if miss:
            raise ValueError(f"catalogue lacks column(s) {', '.join(miss)} (available: {', '.join(t.colnames[:20])})")
        t, self.n_dropped_ = drop_missing(t, need)   # missing magnitudes or errors: dropped and counted
        check_errors(t, bands)
        mags = {b: np.asarray(t[b], float) for b in bands}
        errs = {b: np.asarray(t[f"{b}_err"], float) for b in bands}
        for b in bands:
            if not np.all(np.isfinite(mags[b])):
                raise ValueError(f"column {b!r} has NaN or infinite magnitudes")
        if pri.distance_modulus is None:
            raise ValueError("a CMD fit needs a distance-modulus prior (--distance-modulus DM [--dm-sd S])")
        comp = self.population.components[0]
        cst = fit_constants()
        self.age0_ = comp.age_gyr
        ext_col, ext_mag, m_base, teff_ref = population_extent(feh=comp.feh, alpha_fe=comp.alpha_fe,
                                                               age_gyr=comp.age_gyr,
                                                               helium=self.population.helium, bands=bands)
        r1 = float(extinction_ratio(bands[0], teff_ref, self.rv, self.law))
        r2 = float(extinction_ratio(bands[1], teff_ref, self.rv, self.law))
        # shift prior (linear map of Gaussian DM, E, dc, dm)
        dm0, dmsd = (float(v) for v in pri.distance_modulus)
        e0, esd = (float(v) for v in pri.ebv)
        if self.zero_points:
            sdc = pri.colour_offset_sd if pri.colour_offset_sd is not None else cst["colour_offset_sd"]
            sdm = pri.mag_offset_sd if pri.mag_offset_sd is not None else cst["mag_offset_sd"]
        else:
            sdc = sdm = 0.0
        A = np.array([[0.0, r1 - r2, 1.0, 0.0], [1.0, r1, 0.0, 1.0]])  # (s_c, s_m) = A @ (DM, E, dc, dm)
        mu4 = np.array([dm0, e0, 0.0, 0.0])
        cov4 = np.diag([dmsd ** 2, esd ** 2, sdc ** 2, sdm ** 2])
        self._nuis = dict(A=A, mu4=mu4, cov4=cov4, r1=r1, r2=r2)
        s_mu = A @ mu4
        s_cov = A @ cov4 @ A.T
        self._shift_mu, self._shift_cov = s_mu, s_cov
        self._shift_icov = np.linalg.inv(s_cov)
        s_sd = np.sqrt(np.diag(s_cov))
        self._shift_sd = s_sd
        # fitted region (observed)
        if self.region is None:
            cmin = float(np.quantile(ext_col, 0.002)) - 0.15
            cmax = float(np.quantile(ext_col, 0.998)) + 0.20
            mb = float(np.min(ext_mag)) - 0.5
            mf = min(float(np.max(ext_mag)) + 0.5, m_base - 0.25)
            region = (cmin + s_mu[0], cmax + s_mu[0], mb + s_mu[1], mf + s_mu[1])
        else:
            region = tuple(float(v) for v in self.region)
            if len(region) != 4 or not all(np.isfinite(region)) or region[1] <= region[0] or region[3] <= region[2]:
                raise ValueError("region must be (colour_min, colour_max, mag_bright, mag_faint) with min < max")
            if self._colour_sign < 0:  # the user's colour box -> the internal bands[0] - bands[1] colour
                region = (-region[1], -region[0], region[2], region[3])
            if region[3] - s_mu[1] > m_base:
                raise ValueError(f"region reaches fainter than the modelled RGB base (M = {m_base:.2f} "
                                 f"+ DM = {m_base + s_mu[1]:.2f}): sub-giants are not modelled")
        self.region_ = region
        colour = mags[bands[0]] - mags[bands[1]]
        mag = mags[bands[0]]
        inr = (colour >= region[0]) & (colour <= region[1]) & (mag >= region[2]) & (mag <= region[3])
        if not inr.any():
            c_lo, c_hi = self._user_region(region)[:2]
            raise ValueError(f"no stars in the fitted region ({'-'.join(self.colour_)} {c_lo:.2f}..{c_hi:.2f}, "
                             f"{bands[0]} {region[2]:.2f}..{region[3]:.2f})")
        check_error_scale(colour[inr], mag[inr], np.hypot(errs[bands[0]][inr], errs[bands[1]][inr]), bands)
        near = (mag >= region[2] - 1.0) & (mag <= region[3] + 1.0)
        em = self.error_model or ErrorModel.from_catalog({b: mags[b][near] for b in bands},
                                                         {b: errs[b][near] for b in bands})
        self.error_model_ = em
        # differential reddening: stars move along the reddening vector; the images reach two of the
        # largest spreads further so that stars scattered into the region from outside are modelled
        red_vec = np.array([r1 - r2, r1])
        spread_hi = float(pri.ebv_spread[1]) if pri.ebv_spread is not None else 0.0
        pad_c = 4.0 * s_sd[0] + 0.15 + 2.0 * spread_hi * abs(red_vec[0])
        pad_m = 4.0 * s_sd[1] + 0.15 + 2.0 * spread_hi * abs(red_vec[1])
        self._shift_lo = s_mu - 4.0 * s_sd
        self._shift_hi = s_mu + 4.0 * s_sd
        col_range = (region[0] - s_mu[0] - pad_c, region[1] - s_mu[0] + pad_c)
        mag_range = (region[2] - s_mu[1] - pad_m, region[3] - s_mu[1] + pad_m)
        dy_max = float(pri.delta_y[1]) if (self.model != "spread" or self.compare_models) else 0.0
        self.surrogate_ = build_surrogate(feh=comp.feh, alpha_fe=comp.alpha_fe, age_gyr=comp.age_gyr,
                                          helium=self.population.helium, bands=bands, err_model=em,
                                          col_range=col_range, mag_range=mag_range, shift_c=float(s_mu[0]),
                                          shift_m=float(s_mu[1]), age_sd_gyr=pri.age_sd_gyr or 0.0,
                                          delta_y_max=dy_max,
                                          pixel=pixel_for_errors(np.hypot(errs[bands[0]][inr],
                                                                          errs[bands[1]][inr])),
                                          extinction=(e0, float(self.rv), self.law, r1, r2))
        self.likelihood_ = CMDLikelihood(self.surrogate_, colour[inr], mag[inr], region, self.completeness,
                                         shift_lo=self._shift_lo, shift_hi=self._shift_hi,
                                         reddening_vector=red_vec, spread_max=spread_hi)
        self.data_ = {"colour": colour[inr], "mag": mag[inr]}

    def _prepare_masses(self, masses):
        t = _read_table_like(masses, "masses")
        for c in ("mass", "mass_err", "phase"):
            if c not in t.colnames:
                raise ValueError(f"masses table lacks column {c!r} (need mass, mass_err, phase)")
        m = np.asarray(t["mass"], float)
        e = np.asarray(t["mass_err"], float)
        ph = np.char.lower(np.asarray(t["phase"]).astype(str))
        if len(m) == 0:
            raise ValueError("the masses table is empty")
        if not np.all(np.isfinite(m)) or np.any(m <= 0):
            raise ValueError("masses must be finite and positive")
        if not np.all(np.isfinite(e)) or np.any(e <= 0):
            raise ValueError("mass_err must be finite and > 0 (NaN or non-positive errors found)")
        bad = sorted(set(ph) - {"rgb", "clump"})
        if bad:
            raise ValueError(f"phase must be 'rgb' or 'clump' (found {', '.join(bad)})")
        rgb, cl = ph == "rgb", ph == "clump"
        if not rgb.any() or not cl.any():
            raise ValueError("the masses table needs both RGB and clump stars")
        self._masses = dict(m_rgb=m[rgb], e_rgb=e[rgb], m_cl=m[cl], e_cl=e[cl])

    def _tip(self, age):
        """Tip mass of the (normal-helium) population at ages ``age`` (interpolated, smooth)."""
        return np.interp(age, self._age_grid, self._tip_grid)

    # ------------------------------------------------------------------ parameters
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
        pts = [xc.copy()]
        for i in range(d):
            for j in range(i, d):
                for si, sj in ((1, 1), (1, -1), (-1, 1), (-1, -1)):
                    y = xc.copy(); y[i] += si * h[i]; y[j] += sj * h[j]
                    pts.append(y)
            for sgn in (1, -1):
                y = xc.copy(); y[i] += sgn * h[i]; pts.append(y)
        vals = f(np.array(pts))
        vals = np.where(np.isfinite(vals), vals, vals[0] - 1e3)
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

    # ------------------------------------------------------------------ fit
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
        rng = self.seed if isinstance(self.seed, np.random.Generator) else np.random.default_rng(self.seed)
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

    def _run_emcee(self, names, x_map, rng):
        """emcee from the MAP.  The walkers start as draws of the Laplace approximation there (the
        surrogate and likelihood of the MAP search are reused as they are).  A short pilot run of
        differential-evolution moves (ter Braak 2006; ter Braak & Vrugt 2008) lets them settle; their
        mean and covariance then shape an independence Metropolis-Hastings proposal
        (:class:`_IndependenceProposal`), which on these near-Gaussian posteriors has autocorrelation
        times of a few steps, used for most steps of the main run, mixed with differential-evolution
        moves for what the proposal misses (e.g. a parameter piled against its prior bound).  The main
        chain grows by ``chunk`` steps until, after at least ``min_steps``, it is longer than
        ``tau_factor`` autocorrelation times past its burn-in (:func:`_burn_in`); the pilot is discarded."""
        import emcee
        d = len(names)
        nw = max(int(self.n_walkers), 2 * d + 2)
        nw += nw % 2
        try:
            cov = self._laplace(names, x_map)
            p0 = rng.multivariate_normal(x_map, cov, size=nw)
        except (np.linalg.LinAlgError, ValueError):
            cov = None
            p0 = x_map[None] + 0.1 * self._steps(names)[None] * rng.standard_normal((nw, d))
        if self._has_cmd and cov is not None and "shift_colour" in names:
            # the likelihood forms the walkers' images on the pixels their stars reach: from here on the
            # walkers' shifts stay within a few Laplace widths of the MAP (outside: the whole prior box's)
            i, k = names.index("shift_colour"), names.index("shift_mag")
            half = _FOCUS_SIGMAS * np.sqrt(np.maximum(np.diag(cov)[[i, k]], 0.0))
            centre = x_map[[i, k]]
            self.likelihood_.focus_shifts(centre - half, centre + half)
        for i, n in enumerate(names):
            lo, hi = self._bnds[n]
            x = p0[:, i]
            x = np.where(x < lo, 2 * lo - x, x)  # reflect into the prior box
            x = np.where(x > hi, 2 * hi - x, x)
            p0[:, i] = np.clip(x, lo + 1e-9 * (hi - lo), hi - 1e-9 * (hi - lo))
        f = self._log_post_fn(names)

        def ensemble(moves):
            s = emcee.EnsembleSampler(nw, d, f, vectorize=True, moves=moves)
            # emcee draws from its own RandomState: seed it from our Generator (reproducible, no global state)
            s.random_state = np.random.RandomState(int(rng.integers(2 ** 31))).get_state()
            return s

        state, moves = p0, [(emcee.moves.DEMove(), 0.8), (emcee.moves.DESnookerMove(), 0.2)]
        n_pilot = 0
        for k in _PILOT_STEPS:  # each pilot's second half shapes the next run's proposal
            if n_pilot + k > int(self.max_steps) // 4:
                break
            pilot = ensemble(moves)
            state = pilot.run_mcmc(state, k, progress=False)
            n_pilot += k
            pts = pilot.get_chain()[k // 2:].reshape(-1, d)
            try:
                prop = _IndependenceProposal(pts.mean(axis=0), np.cov(pts, rowvar=False),
                                             [self._bnds[n][0] for n in names], [self._bnds[n][1] for n in names])
            except (np.linalg.LinAlgError, ValueError):
                break
            moves = [(emcee.moves.MHMove(prop), _MH_WEIGHT), (emcee.moves.DEMove(), 1.0 - _MH_WEIGHT)]
        sampler = ensemble(moves)
        tau = np.full(d, np.inf)
        factor = fit_constants()["tau_factor"]
        n_done, burn = 0, 0
        n_main = int(self.max_steps) - n_pilot
        while n_done < n_main:
            k = min(int(self.chunk), n_main - n_done)
            state = sampler.run_mcmc(state, k, progress=False)
            n_done += k
            # autocorrelation past the first fifth of the chain; the burn-in is a few autocorrelation times
            ch = sampler.get_chain()
            tau = emcee.autocorr.integrated_time(ch[n_done // 5:], quiet=True, tol=0)
            burn = _burn_in(n_done, tau)
            if n_done >= self.min_steps and np.all(np.isfinite(tau)) and n_done - burn > factor * np.max(tau):
                break
        self.n_steps_ = n_pilot + n_done
        ch = sampler.get_chain()
        taumax = float(np.max(tau))
        self.autocorr_time_ = {n: float(t) for n, t in zip(names, tau)}
        self.converged_ = bool(np.all(np.isfinite(tau)) and (n_done - burn) > factor * taumax)
        self.acceptance_fraction_ = float(np.mean(sampler.acceptance_fraction))
        thin = max(1, int(taumax / 2)) if np.isfinite(taumax) else 1
        flat = ch[burn::thin].reshape(-1, d)
        self.n_eff_ = float((n_done - burn) * nw / taumax) if np.isfinite(taumax) and taumax > 0 else 0.0
        return flat

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
        A, _mu4, cov4 = self._nuis["A"], self._nuis["mu4"], self._nuis["cov4"].copy()
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

    # ------------------------------------------------------------------ results
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

    def _user_region(self, region):
        """An internal (bands[0] - bands[1]) region in the user's ``colour`` convention."""
        if self._colour_sign > 0:
            return tuple(region)
        return (-region[1], -region[0], region[2], region[3])

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
        if not hasattr(self, "posterior_"):
            raise ValueError("call fit() first")

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

    # figures of a fitted estimator: hbmodel.outputs.plots (plot_fit_hess, plot_fit_cmd, plot_corner,
    # plot_hb_mass) -- the inference room does not import the outputs room
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


#: Initial Nelder-Mead simplex of the zero-point sensitivity's MAP (started at the free-zero-point MAP), in
#: units of the usual steps (own choice).
_ZP_STEP_SCALE = 0.25

#: Half-width, in Laplace standard deviations about the MAP, of the shift box whose stars' pixels the
#: sampler's likelihood keeps (own choice; walkers beyond it only cost more, their values are the same).
_FOCUS_SIGMAS = 8.0

#: Steps of the pilot runs of :meth:`MassLossFit._run_emcee` (differential evolution, then the proposal
#: of the first) and the share of independence-proposal steps after them (measured: scripts/bench_fit.py).
_PILOT_STEPS = (100, 50)
_MH_WEIGHT = 0.85


def _burn_in(n_steps, tau, n_tau=5):
    """Steps discarded as burn-in: ``n_tau`` autocorrelation times (the walkers start spread like the
    posterior, from the Laplace approximation at the MAP), never more than a fifth of the chain."""
    taumax = float(np.max(tau))
    if not np.isfinite(taumax):
        return n_steps // 5
    return int(min(n_steps // 5, np.ceil(n_tau * taumax)))


class _IndependenceProposal:
    """Independence proposal of an emcee ``MHMove``: a multivariate Student t (``nu`` degrees of
    freedom: heavier-tailed than the posterior, as an independence sampler needs; Tierney 1994, Ann.
    Stat. 22, 1701) of centre ``mean`` and scale matrix ``cov`` (a pilot run's), folded into the prior
    box ``lo``-``hi`` by one reflection at each bound within reach (a posterior piled against a bound,
    e.g. no field stars, then loses no proposals to it); the folded density is the sum over the mirror
    images.  Returns the proposed points and the log ratio ln q(x) - ln q(x') of the
    Metropolis-Hastings acceptance."""

    def __init__(self, mean, cov, lo=None, hi=None, nu=10.0):
        self.mean = np.asarray(mean, float)
        d = self.mean.size
        cov = np.atleast_2d(np.asarray(cov, float))
        self.chol = np.linalg.cholesky(cov)
        self.icov = np.linalg.inv(cov)
        self.nu = float(nu)
        sd = np.sqrt(np.diag(cov))
        self.lo = np.full(d, -np.inf) if lo is None else np.asarray(lo, float)
        self.hi = np.full(d, np.inf) if hi is None else np.asarray(hi, float)
        near = (np.isfinite(self.lo) & (self.mean - self.lo < 12 * sd)) | (np.isfinite(self.hi) & (self.hi - self.mean < 12 * sd))
        self.fold = np.flatnonzero(near & np.isfinite(self.lo) & np.isfinite(self.hi))
        # every combination of (identity, mirror at lo, mirror at hi) over the folded coordinates
        self.images = (np.array(np.meshgrid(*[[0, 1, 2]] * self.fold.size, indexing="ij")).reshape(self.fold.size, -1).T
                       if self.fold.size else np.zeros((1, 0), int))

    def _log_t(self, x):
        dx = x - self.mean
        q = np.einsum("...j,jk,...k->...", dx, self.icov, dx)
        return -0.5 * (self.nu + self.mean.size) * np.log1p(q / self.nu)

    def log_q(self, x):
        x = np.atleast_2d(np.asarray(x, float))
        inside = np.all((x >= self.lo) & (x <= self.hi), axis=1)
        if not self.fold.size:
            return self._log_t(x)
        lo, hi = self.lo[self.fold], self.hi[self.fold]
        imgs = np.repeat(x[None], len(self.images), axis=0)          # (n_images, n, d)
        v = x[:, self.fold][None]                                      # (1, n, k)
        c = self.images[:, None, :]                                    # (n_images, 1, k)
        imgs[:, :, self.fold] = np.where(c == 1, 2 * lo - v, np.where(c == 2, 2 * hi - v, v))
        lt = self._log_t(imgs)                                         # (n_images, n)
        folded = np.logaddexp.reduce(lt, axis=0)
        return np.where(inside, folded, lt[0])

    def __call__(self, x0, random):
        n, d = x0.shape
        z = random.standard_normal((n, d)) @ self.chol.T
        g = random.chisquare(self.nu, n) / self.nu
        x = self.mean + z / np.sqrt(g)[:, None]
        for i in self.fold:  # one reflection into the box (points beyond stay outside: rejected)
            lo, hi = self.lo[i], self.hi[i]
            xi = x[:, i]
            xi = np.where((xi < lo) & (xi >= 2 * lo - hi), 2 * lo - xi, xi)
            x[:, i] = np.where((xi > hi) & (xi <= 2 * hi - lo), 2 * hi - xi, xi)
        return x, self.log_q(x0) - self.log_q(x)
