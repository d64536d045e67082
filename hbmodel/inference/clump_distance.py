"""Red-clump distances with population corrections.

1. Fit the clump-region luminosity function of the catalogue
   (:func:`hbmodel.inference.clump_lf.fit_clump_lf`: Gaussian clump on an exponential
   RGB background plus the RGB bump -- Stanek & Garnavich 1998, ApJ 503, L131;
   Nataf et al. 2013, ApJ 769, 88).
2. Population correction: the same LF model fitted to the population's own
   absolute magnitudes (a large draw with a fixed internal seed, so the result
   is deterministic), which gives the clump peak absolute magnitude *as the LF
   fit measures it* -- any skewness of the clump is then calibrated out
   (Girardi & Salaris 2001, MNRAS 323, 109 for the size of these corrections).
3. ``DM = m_peak - M_peak - A_band``, with the LF-fit (statistical) and the
   population-model (systematic) uncertainties propagated by Monte Carlo
   (Paczyński & Stanek 1998, ApJ 494, L219 for the method).
4. Optionally the reddening from the clump colour: observed minus predicted
   intrinsic colour -> E(colour) -> E(B-V) -> A_band.
5. Optionally differential reddening: a star-to-star E(B-V) spread sigma_E (a nuisance parameter with a
   half-normal prior of the user's scale) widens every Gaussian of the LF by A_band spread = R_band sigma_E
   (the exponential background keeps its shape under a Gaussian blur).  The clump's own width (intrinsic
   plus photometric) is the population model's, measured as the data's is, so the data's clump width
   constrains sigma_E; the LF is fitted at :data:`SPREAD_NODES` nodes of sigma_E at equal-mass quantiles of
   the prior and the peak is marginalised over them with weights proportional to each node's likelihood.
   Without it a clump widened by the spread is split by the fit into a clump and a too-large RGB "bump"
   (a mock with A_I spread 0.34 mag: peak 0.12 mag too bright).
"""
from __future__ import annotations

import functools
from dataclasses import dataclass, field

import numpy as np

from hbmodel.inference.clump_lf import fit_clump_lf
from hbmodel.populations.population import MassLoss, Population

__all__ = ["ClumpModel", "clump_model", "measure_distance", "DistanceResult", "CALIBRATION_SD_MAG",
           "reference_population"]

#: Zero-point uncertainty of hbmodel's clump absolute magnitudes (mag): the scatter of the clump rows of
#: scripts/validate.py about their references (|model - reference| <= 0.05 mag) -- own estimate.
CALIBRATION_SD_MAG = 0.05
_MODEL_SEED = 20240601  # fixed internal seed: model clump peaks are deterministic
_MODEL_N_HB = 6000
#: Nodes of the differential-reddening spread (equal prior mass each) and the range of the clump's own
#: width (and of the RGB bump-to-clump ratio) allowed about the population model's (own choice: known to
#: ~20 %; an age or metallicity spread of the data widens the clump beyond it, which the spread then absorbs).
SPREAD_NODES = 16
OWN_WIDTH_RANGE = (0.8, 1.25)


@dataclass(frozen=True)
class ClumpModel:
    band: str
    peak_absmag: float
    sigma_mag: float
    colour: tuple | None
    intrinsic_colour: float | None
    teff_k: float


def _model_sample(pop: Population, bands):
    rng = np.random.default_rng(_MODEL_SEED)
    stars = pop.sample(_MODEL_N_HB, rng, rgb_logl_range=(1.2, 2.4))
    return stars, stars.absolute_magnitudes(tuple(bands))


def clump_model(pop: Population, band: str, colour: tuple | None = None, smear_mag: float = 0.05) -> ClumpModel:
    """Clump peak absolute magnitude in ``band`` (and the intrinsic clump colour) for a population.

    The model magnitudes are smeared by a Gaussian of ``smear_mag`` (the data's photometric scatter) before
    the LF fit, so that the model peak is measured exactly as the data's is."""
    bands = [band] + ([c for c in colour if c != band] if colour else [])
    stars, mags = _model_sample(pop, bands)
    noise = np.random.default_rng(_MODEL_SEED + 1).normal(0.0, max(float(smear_mag), 0.01), len(stars))
    mags = dict(mags)
    mags[band] = mags[band] + noise
    hb = stars.phase == "hb"
    if not hb.any():
        raise ValueError("the population model has no core-helium-burning stars")
    guess = float(np.median(mags[band][hb]))
    win = (guess - 1.5, guess + 1.5)
    res = fit_clump_lf(mags[band], mag_range=win, peak_guess=guess)
    near = hb & (np.abs(mags[band] - res.peak_mag) < max(res.sigma_mag, 0.05))
    ic = None
    if colour:
        ic = float(np.median(mags[colour[0]][near] - mags[colour[1]][near]))
    return ClumpModel(band, float(res.peak_mag), float(res.sigma_mag), tuple(colour) if colour else None, ic,
                      float(np.median(stars.teff_k[near])))


@functools.lru_cache(maxsize=16)
def _reference_peak(band: str, smear_mag: float) -> float:
    return clump_model(reference_population(), band, smear_mag=smear_mag).peak_absmag


def reference_population() -> Population:
    """The solar-neighbourhood reference used for population corrections: [Fe/H] = 0, constant
    star-formation rate 1-10 Gyr (common practice for the local Hipparcos clump)."""
    ages = np.array([1.0, 1.5, 2.0, 3.0, 4.0, 5.0, 6.0, 8.0, 10.0])
    return Population.from_history(ages, np.gradient(ages), 0.0, mass_loss=MassLoss.from_eta(0.3, 0.03))


@dataclass
class DistanceResult:
    band: str
    distance_modulus: dict
    distance_kpc: dict
    clump_peak_mag: float
    clump_peak_mag_err: float
    clump_absmag: float
    clump_absmag_err: float
    population_correction: float
    ebv: float
    ebv_err: float
    extinction_mag: float
    n_stars: int
    lf: object = field(repr=False)
    n_dropped: int = 0      # stars without a finite magnitude (missing values), dropped before the fit
    ebv_spread: dict | None = None  # posterior of the star-to-star E(B-V) spread (median, lo, hi), if fitted

    def to_dict(self):
        return {"band": self.band, "distance_modulus": self.distance_modulus, "distance_kpc": self.distance_kpc,
                "clump_peak_mag": self.clump_peak_mag, "clump_peak_mag_err": self.clump_peak_mag_err,
                "clump_absmag": self.clump_absmag, "clump_absmag_err": self.clump_absmag_err,
                "population_correction": self.population_correction, "ebv": self.ebv, "ebv_err": self.ebv_err,
                "extinction_mag": self.extinction_mag, "n_stars": self.n_stars, "n_rows_dropped_missing": self.n_dropped,
                "ebv_spread": self.ebv_spread, "lf_fit": self.lf.to_dict()}


def _pct(x):
    lo, med, hi = np.percentile(x, [15.865, 50.0, 84.135])
    return {"median": float(med), "lo": float(lo), "hi": float(hi)}


#: Half-width (mag) of the RGB-bump offsets the clump-LF fit may use around the population model's
#: own bump offset (own choice: ~3x the bump-offset scatter of the calibration, tables/targets/bump.ecsv),
#: and the smallest offset allowed (a bump closer to the clump than ~2 clump widths is not separable).
BUMP_OFFSET_HALF_WIDTH_MAG = 0.25
BUMP_OFFSET_MIN_MAG = 0.15


def model_bump_offset_range(pop: Population, band: str):
    """(lo, hi) offsets (mag) of the RGB bump below the clump that the LF fit may use: the population
    model's bump-minus-clump magnitude +- :data:`BUMP_OFFSET_HALF_WIDTH_MAG` (``None`` -- the table's
    0.5-1.0 mag -- when the model has no bump or clump in this band, or puts its bump brighter than
    the clump)."""
    p = pop.predict(bands=(band,))
    bump, clump = p.get("bump_absmag"), p.get("clump_absmag")
    if not bump or not clump or bump.get(band) is None or clump.get(band) is None:
        return None
    d = float(bump[band]) - float(clump[band])
    if not np.isfinite(d) or d <= BUMP_OFFSET_MIN_MAG:
        return None
    return (max(d - BUMP_OFFSET_HALF_WIDTH_MAG, BUMP_OFFSET_MIN_MAG), d + BUMP_OFFSET_HALF_WIDTH_MAG)


def measure_distance(mag, pop: Population, band: str, *, colour_mags=None, colour: tuple | None = None,
                     ebv: float | None = 0.0, ebv_sd: float = 0.0, rv: float = 3.1, law: str = "F99",
                     population_sd_mag: float = 0.0, mag_range=None, rng=None, mag_err=None,
                     ebv_spread_sd: float = 0.0) -> DistanceResult:
    """Distance modulus from the red clump of apparent magnitudes ``mag`` in ``band``.

    ``ebv=None`` with ``colour`` and ``colour_mags`` (dict band -> apparent mags of the same stars as
    ``colour_mags[band]``, which must be given too) derives E(B-V) from the clump's colour.  ``population_sd_mag`` adds the uncertainty of the population mix (e.g. from the
    spread of clump models over the age/[Fe/H] prior) to the calibration floor.  ``ebv_spread_sd`` > 0 fits
    a star-to-star E(B-V) spread with a half-normal prior of that scale (module docstring, step 5).
    """
    from hbmodel.photometry.extinction import extinction_ratio
    from hbmodel.photometry.magnitudes import get_band
    band = get_band(band).name  # canonical names (aliases such as K -> Ks)
    colour = tuple(get_band(b).name for b in colour) if colour else colour
    if colour_mags is not None:
        colour_mags = {get_band(b).name: v for b, v in colour_mags.items()}
    mag = np.asarray(mag, float)
    if mag_err is not None:
        mag_err = np.asarray(mag_err, float)[np.isfinite(mag)]
    n_dropped = int(np.sum(~np.isfinite(mag)))
    mag = mag[np.isfinite(mag)]
    ebv_spread_sd = float(ebv_spread_sd)
    if not (np.isfinite(ebv_spread_sd) and ebv_spread_sd >= 0):
        raise ValueError(f"the E(B-V) spread scale must be a non-negative number (got {ebv_spread_sd:g})")
    if mag.size < 50:
        raise ValueError(f"too few stars for a clump fit ({mag.size}; need at least 50)")
    rng = np.random.default_rng(0) if rng is None else rng
    lf_kw = dict(mag_range=mag_range, bump_offset_range=model_bump_offset_range(pop, band))
    spread_post = None
    if ebv_spread_sd > 0:
        lf, lf_kw, m_peak_nodes, spread_post = _fit_with_spread(mag, pop, band, lf_kw, mag_err, ebv_spread_sd,
                                                                rv, law)
    else:
        lf = fit_clump_lf(mag, **lf_kw)
    if spread_post is None and not lf.converged and lf.params.get("bump_ratio", 1.0) <= 1e-3:
        # no RGB bump in the data (e.g. smeared by an age spread): the same fit without that component
        no_bump = fit_clump_lf(mag, mag_range=mag_range, components=("clump", "rgb"))
        if no_bump.converged:
            lf, lf_kw = no_bump, dict(mag_range=mag_range, components=("clump", "rgb"))
    peak_mag, peak_err = float(lf.peak_mag), float(lf.peak_mag_err)
    if spread_post is not None:  # the mixture over the spread's nodes: its mean and sd
        pk, pe, w = m_peak_nodes
        peak_mag = float(np.sum(w * pk))
        peak_err = float(np.sqrt(np.sum(w * (pe ** 2 + (pk - peak_mag) ** 2))))
    elif not lf.converged or not np.isfinite(peak_err) or peak_err <= 0:
        # unclean fit or singular Hessian: the curvature error is not trustworthy, use the bootstrap
        lf = fit_clump_lf(mag, n_boot=60, rng=np.random.default_rng(rng.integers(2**32)), **lf_kw)
        peak_mag, peak_err = float(lf.peak_mag), float(lf.peak_mag_err_boot)
    smear = _smear(mag_err)
    model = clump_model(pop, band, colour if ebv is None else None, smear_mag=smear)
    ebv_err = float(ebv_sd)
    if ebv is None:
        if colour is None or colour_mags is None:
            raise ValueError("reddening from colour needs --colour and both colour bands in the catalogue")
        c_obs = np.asarray(colour_mags[colour[0]], float) - np.asarray(colour_mags[colour[1]], float)
        sel = np.isfinite(c_obs)
        m_all = np.asarray(colour_mags[band], float)
        near = sel & (np.abs(m_all - lf.peak_mag) < max(lf.sigma_mag, 0.05))
        if near.sum() < 10:
            raise ValueError("too few clump stars with colours to measure the reddening")
        c_med = float(np.median(c_obs[near]))
        k = float(extinction_ratio(colour[0], model.teff_k, rv, law) - extinction_ratio(colour[1], model.teff_k, rv, law))
        ebv = max((c_med - model.intrinsic_colour) / k, 0.0)
        ebv_err = float(1.2533 * np.std(c_obs[near]) / np.sqrt(near.sum()) / abs(k))
        ebv_err = float(np.hypot(ebv_err, 0.02 / abs(k)))  # colour-calibration floor (0.02 mag)
    r_band = float(extinction_ratio(band, model.teff_k, rv, law))
    n = 40000
    if spread_post is None:
        m_peak = rng.normal(peak_mag, peak_err, n)
    else:  # the mixture over the spread's nodes
        pk, pe, w = m_peak_nodes
        k = rng.choice(pk.size, size=n, p=w)
        m_peak = rng.normal(pk[k], pe[k])
    abs_err = float(np.hypot(CALIBRATION_SD_MAG, population_sd_mag))
    m_abs = rng.normal(model.peak_absmag, abs_err, n)
    e = np.clip(rng.normal(ebv, ebv_err, n), 0.0, None) if ebv_err > 0 else np.full(n, ebv)
    dm = m_peak - m_abs - r_band * e
    dist = 10.0 ** (dm / 5.0 + 1.0) / 1e3
    return DistanceResult(band, _pct(dm), _pct(dist), peak_mag, peak_err,
                          model.peak_absmag, abs_err, model.peak_absmag - _reference_peak(band, smear), float(ebv),
                          ebv_err, float(r_band * ebv), int(lf.n_stars), lf, n_dropped, spread_post)


def _smear(mag_err) -> float:
    """Photometric scatter (mag) the model clump is smeared by: the median error (+ 0.02 mag floor)."""
    smear = 0.05
    if mag_err is not None:
        err = np.asarray(mag_err, float)
        err = err[np.isfinite(err)]
        if err.size:
            smear = float(np.hypot(np.median(err), 0.02))
    return round(smear, 3)


def _fit_with_spread(mag, pop, band, lf_kw, mag_err, scale, rv, law):
    """The clump LF marginalised over a star-to-star E(B-V) spread (module docstring, step 5).

    Returns the highest-likelihood node's LF fit, the keyword arguments that reproduce it, the nodes'
    (peaks, peak errors, weights) and the spread's posterior summary."""
    from scipy.special import ndtri

    from hbmodel.photometry.extinction import extinction_ratio
    smear = _smear(mag_err)
    own = clump_model(pop, band, smear_mag=smear)
    r_band = float(extinction_ratio(band, own.teff_k, rv, law))
    s_lo, s_hi = (f * own.sigma_mag for f in OWN_WIDTH_RANGE)
    bounds = {}
    if "bump" in lf_kw.get("components", ("bump",)) and lf_kw.get("bump_offset_range") is not None:
        # a widened clump swallows a nearby RGB bump: the bump-to-clump ratio is the population's (the model's
        # own LF fitted with the same bump window), within OWN_WIDTH_RANGE of it
        stars, mags = _model_sample(pop, [band])
        mm = mags[band] + np.random.default_rng(_MODEL_SEED + 1).normal(0.0, smear, len(stars))
        fm = fit_clump_lf(mm, mag_range=(own.peak_absmag - 1.5, own.peak_absmag + 1.5),
                          peak_guess=own.peak_absmag, bump_offset_range=lf_kw["bump_offset_range"])
        rb = float(fm.params.get("bump_ratio", 0.0))
        if rb > 0:
            bounds["bump_ratio"] = (OWN_WIDTH_RANGE[0] * rb, OWN_WIDTH_RANGE[1] * rb)
    q = (np.arange(SPREAD_NODES) + 0.5) / SPREAD_NODES
    sig_e = scale * ndtri(0.5 * (1.0 + q))            # half-normal quantiles: equal prior mass per node
    fits, kws = [], []
    for se in sig_e:
        a = r_band * se
        kw = dict(lf_kw, bounds=dict(bounds, sigma_mag=(float(np.hypot(s_lo, a)), float(np.hypot(s_hi, a)))))
        try:
            fits.append(fit_clump_lf(mag, **kw))
        except ValueError:
            fits.append(None)  # no clump at this spread: no weight
        kws.append(kw)
    ok = [i for i, f in enumerate(fits) if f is not None and np.isfinite(f.peak_mag_err) and f.peak_mag_err > 0]
    if not ok:
        raise ValueError("no red-clump fit at any differential-reddening spread of the prior")
    ll = np.array([fits[i].loglike for i in ok])
    w = np.exp(ll - ll.max())
    w /= w.sum()
    best = ok[int(np.argmax(ll))]
    pk = np.array([fits[i].peak_mag for i in ok])
    pe = np.array([fits[i].peak_mag_err for i in ok])
    se = sig_e[ok]
    order = np.argsort(se)
    cdf = np.cumsum(w[order])
    lo, med, hi = (float(se[order][min(np.searchsorted(cdf, c), se.size - 1)]) for c in (0.15865, 0.5, 0.84135))
    post = {"median": med, "lo": lo, "hi": hi, "prior_scale": float(scale), "nodes": se.tolist(),
            "weights": w.tolist()}
    return fits[best], kws[best], (pk, pe, w), post
