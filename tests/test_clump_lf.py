"""Tests of hbmodel.inference.clump_lf, the unbinned red-clump luminosity-function fitter.

Synthetic clump-region luminosity functions are drawn here with numpy alone (independently of the fitter):
a Gaussian clump of sigma 0.15 mag on an exponential RGB background of slope B = 0.65 per mag in I
(from memory: Nataf et al. 2013, ApJ 769, 88 find B ~0.55-0.75/mag towards the bulge), an RGB bump
0.7 mag fainter than the clump holding ~15% of the clump's count (from memory: Nataf et al. 2013 measure
~0.74 mag and N_bump/N_clump ~0.2) and, where stated, an AGB bump ~1.05 mag brighter holding ~5%
(from memory, the same paper: ~1.07 mag, ~3%).
"""
from __future__ import annotations

import json

import numpy as np
import pytest

from hbmodel.inference.clump_lf import ClumpLFResult, fit_clump_lf
from hbmodel.outputs.plots import plot_clump_lf

MC, SIG, B = 15.5, 0.15, 0.65
LO, HI = MC - 1.5, MC + 1.5


def draw_lf(rng, n, *, mc=MC, sigma=SIG, slope=B, lo=LO, hi=HI, f_clump=0.35, bump_ratio=0.15,
            bump_offset=0.7, agb_ratio=0.0, agb_offset=-1.05):
    """n stars in [lo, hi]: truncated Gaussians + exponential background by inverse CDF."""
    fb, fa = f_clump * bump_ratio, f_clump * agb_ratio
    k = rng.multinomial(n, [f_clump, fb, fa, 1.0 - f_clump - fb - fa])
    parts = []
    for cnt, mu in ((k[0], mc), (k[1], mc + bump_offset), (k[2], mc + agb_offset)):
        x = rng.normal(mu, sigma, 4 * cnt + 100)
        parts.append(x[(x >= lo) & (x <= hi)][:cnt])
    u = rng.random(k[3])
    parts.append(lo + np.log1p(u * np.expm1(slope * (hi - lo))) / slope)
    out = np.concatenate(parts)
    rng.shuffle(out)
    return out


# ---------------------------------------------------------------------------------------------------
# statistics
# ---------------------------------------------------------------------------------------------------
@pytest.mark.slow
def test_peak_unbiased_and_errors_calibrated_over_many_seeds():
    # 100 independent catalogues of 3000 stars.  An MLE is asymptotically unbiased with the inverse
    # Fisher information as its variance (Cramer-Rao; common practice), so (i) the mean recovered peak
    # must match the input within 0.01 mag and within 4 standard errors of the mean, (ii) the quoted
    # Hessian error must match the seed-to-seed scatter (ratio 0.8-1.25; with 100 seeds the sampling
    # error of the scatter is ~7%), (iii) ~68% of pulls |peak - true| / err lie below 1 (Gaussian
    # coverage; binomial 1-sigma ~4.7% with 100 seeds, window +-2.7 sigma).
    peaks, errs, sigmas, slopes, offsets = [], [], [], [], []
    for seed in range(100):
        r = fit_clump_lf(draw_lf(np.random.default_rng(20_000 + seed), 3000))
        assert r.converged
        peaks.append(r.peak_mag); errs.append(r.peak_mag_err); sigmas.append(r.sigma_mag)
        slopes.append(r.background_slope); offsets.append(r.bump_offset)
    peaks, errs = np.array(peaks), np.array(errs)
    bias = peaks.mean() - MC
    sem = peaks.std(ddof=1) / np.sqrt(peaks.size)
    assert abs(bias) < 0.01
    assert abs(bias) < 4 * sem
    ratio = errs.mean() / peaks.std(ddof=1)
    assert 0.8 < ratio < 1.25, ratio
    cover = np.mean(np.abs(peaks - MC) / errs < 1.0)
    assert 0.55 < cover < 0.81, cover
    # the other physical parameters come back too (same sources as the simulation)
    assert abs(np.mean(sigmas) - SIG) < 0.005
    assert abs(np.mean(slopes) - B) < 0.02
    assert abs(np.mean(offsets) - 0.7) < 0.02


def test_bootstrap_error_agrees_with_hessian_error():
    # Nonparametric bootstrap (Efron 1979, Ann. Stat. 7, 1) and the inverse Hessian estimate the same
    # sampling error for a well-behaved MLE; 100 resamples give the bootstrap sd to ~7%.
    m = draw_lf(np.random.default_rng(7), 4000)
    r = fit_clump_lf(m, n_boot=100, rng=np.random.default_rng(8))
    assert r.boot_peaks.shape == (100,)
    assert 0.8 < r.peak_mag_err_boot / r.peak_mag_err < 1.25
    # bootstrap peaks scatter around the fitted peak, not elsewhere
    assert abs(np.mean(r.boot_peaks) - r.peak_mag) < 3 * r.peak_mag_err


def test_single_fit_recovers_truth_within_quoted_errors():
    r = fit_clump_lf(draw_lf(np.random.default_rng(3), 5000), mag_range=(LO, HI))
    assert r.converged
    assert abs(r.peak_mag - MC) < 4 * r.peak_mag_err
    assert abs(r.sigma_mag - SIG) < 4 * r.sigma_mag_err
    assert abs(r.background_slope - B) < 4 * r.param_errors["background_slope"]
    assert abs(r.bump_offset - 0.7) < 4 * r.param_errors["bump_offset"]
    assert abs(r.params["bump_ratio"] - 0.15) < 4 * r.param_errors["bump_ratio"]
    assert r.n_stars == 5000
    # 5000 stars, 35% clump: sigma/sqrt(N_clump) ~ 0.0036 mag is the floor, background inflates it
    assert 0.0036 < r.peak_mag_err < 0.01


def test_agb_bump_component_recovered():
    m = draw_lf(np.random.default_rng(11), 8000, agb_ratio=0.06)
    r = fit_clump_lf(m, components=("clump", "rgb", "bump", "agb"))
    assert abs(r.peak_mag - MC) < 4 * r.peak_mag_err
    assert abs(r.params["agb_offset"] - (-1.05)) < 4 * r.param_errors["agb_offset"]
    assert r.params["agb_ratio"] > 2 * r.param_errors["agb_ratio"]


def test_quadratic_background_option():
    # Stanek & Garnavich 1998, ApJ 503, L131 (from memory): quadratic polynomial background under
    # the clump Gaussian.  On exponential data the polynomial is an approximation, yet the peak must
    # come back within the errors, and d ln(bg)/dm at the peak near the exponential's slope.
    m = draw_lf(np.random.default_rng(12), 5000)
    r = fit_clump_lf(m, background="quadratic")
    assert abs(r.peak_mag - MC) < 4 * r.peak_mag_err
    assert abs(r.background_slope - B) < 0.15


def test_default_window_and_peak_finder_on_a_wide_catalogue():
    # Catalogue spanning 7 mag of RGB (exponential LF, Nataf et al. 2013, from memory), the clump a
    # small feature: the peak finder must locate it and the default window is +-1.5 mag around it.
    rng = np.random.default_rng(13)
    m = draw_lf(rng, 12000, lo=12.0, hi=19.0, f_clump=0.12)
    r = fit_clump_lf(m)
    assert abs(r.peak_mag - MC) < 4 * r.peak_mag_err
    lo, hi = r.mag_range
    assert abs(0.5 * (lo + hi) - MC) < 0.15 and abs((hi - lo) - 3.0) < 1e-9


# ---------------------------------------------------------------------------------------------------
# bad input
# ---------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("seed", range(6))
def test_pure_background_has_no_clump(seed):
    m = draw_lf(np.random.default_rng(100 + seed), 3000, f_clump=0.0)
    with pytest.raises(ValueError, match="no red-clump peak found in the catalogue"):
        fit_clump_lf(m)


def test_pure_background_fixed_window_has_no_clump():
    m = draw_lf(np.random.default_rng(200), 4000, f_clump=0.0)
    with pytest.raises(ValueError, match="no red-clump peak"):
        fit_clump_lf(m, mag_range=(LO, HI), peak_guess=MC)


def test_too_few_stars():
    m = draw_lf(np.random.default_rng(1), 40)
    with pytest.raises(ValueError, match="too few stars"):
        fit_clump_lf(m)
    big = draw_lf(np.random.default_rng(2), 3000)
    with pytest.raises(ValueError, match="too few stars"):
        fit_clump_lf(big, mag_range=(10.0, 11.5))


def test_nan_rejected():
    m = draw_lf(np.random.default_rng(1), 1000)
    m[5] = np.nan
    with pytest.raises(ValueError, match="NaN"):
        fit_clump_lf(m)


@pytest.mark.parametrize("kwargs, msg", [
    (dict(components=("rgb", "bump")), "must include 'clump'"),
    (dict(components=("clump", "dust")), "unknown"),
    (dict(background="cubic"), "background must be"),
    (dict(n_boot=5), "needs rng"),
    (dict(n_boot=-1), "n_boot"),
    (dict(mag_range=(15.3, 15.7)), "outside the calibrated range"),
    (dict(mag_range=(16.0, 15.0)), "m_lo < m_hi"),
    (dict(mag_range=(14.0, 17.0), peak_guess=18.0), "outside the fit window"),
    (dict(bounds={"sigma_mag": (0.2, 0.1)}), "bounds of sigma_mag"),
    (dict(bounds={"sigma_mag": (0.0, 0.1)}), "bounds of sigma_mag"),
])
def test_bad_arguments(kwargs, msg):
    m = draw_lf(np.random.default_rng(1), 2000)
    with pytest.raises(ValueError, match=msg):
        fit_clump_lf(m, **kwargs)


def test_blurred_clump_with_a_near_bump_needs_the_bump_ratio_bounded():
    # A clump widened to 0.32 mag (e.g. differential reddening) with the RGB bump only 0.35 mag fainter
    # (metal-rich, as the population model puts it at [Fe/H] 0, 4 Gyr) and ~15 % of the clump (Nataf et al.
    # 2013, from memory): the free fit trades clump for bump (the two Gaussians overlap; measured here: bump
    # ratio 0.6, its bound, and a peak error of 0.083 mag); the bump ratio and width bounded about the
    # population's, as clump_distance does with a spread, break that (peak +0.028 +- 0.011 mag).  Bounds
    # are honoured exactly.
    rng = np.random.default_rng(3)
    m = draw_lf(rng, 6000, sigma=0.32, bump_offset=0.35, bump_ratio=0.15)
    kw = dict(mag_range=(LO, HI), bump_offset_range=(0.2, 0.5))
    free = fit_clump_lf(m, **kw)
    bounded = fit_clump_lf(m, bounds={"bump_ratio": (0.12, 0.19), "sigma_mag": (0.25, 0.4)}, **kw)
    assert 0.12 <= bounded.params["bump_ratio"] <= 0.19 and 0.25 <= bounded.sigma_mag <= 0.4
    assert free.params["bump_ratio"] > 0.3
    assert bounded.peak_mag_err < 0.5 * free.peak_mag_err
    assert abs(bounded.peak_mag - MC) < 3 * bounded.peak_mag_err


# ---------------------------------------------------------------------------------------------------
# result object and plot
# ---------------------------------------------------------------------------------------------------
def test_density_normalised_and_components_sum():
    m = draw_lf(np.random.default_rng(4), 3000, agb_ratio=0.05)
    r = fit_clump_lf(m, components=("clump", "rgb", "bump", "agb"))
    assert isinstance(r, ClumpLFResult)
    grid = np.linspace(*r.mag_range, 20001)
    dens = r.density(grid)
    assert abs(np.trapezoid(dens, grid) - 1.0) < 1e-4   # a probability density on the window
    comps = r.component_densities(grid)
    assert set(comps) == {"clump", "rgb", "bump", "agb"}
    np.testing.assert_allclose(sum(comps.values()), dens, rtol=1e-12)
    assert abs(np.trapezoid(comps["clump"], grid) - r.fraction_clump) < 1e-4
    assert np.all(r.density(np.array([r.mag_range[0] - 0.1, r.mag_range[1] + 0.1])) == 0.0)
    # the maximised likelihood equals the sum of log densities at the stars
    inside = m[(m >= r.mag_range[0]) & (m <= r.mag_range[1])]
    assert abs(np.sum(np.log(r.density(inside))) - r.loglike) < 1e-6 * abs(r.loglike)
    d = json.loads(json.dumps(r.to_dict(), allow_nan=False))
    assert d["n_stars"] == r.n_stars and len(d["covariance"]) == len(r.param_names)


def test_plot_returns_axes_with_curves():
    import matplotlib
    matplotlib.use("Agg")
    m = draw_lf(np.random.default_rng(5), 3000)
    r = fit_clump_lf(m)
    fig, ax = plot_clump_lf(m, r)
    # total model + clump + bump + rgb curves
    assert len(ax.lines) >= 4
    # the counts-scaled total model matches the histogram's total number of stars
    xy = ax.patches[0].get_xy()                       # the step histogram outline
    edges = np.unique(np.round(xy[:, 0], 9))
    binw = np.diff(edges).min()
    x, y = ax.lines[0].get_data()
    assert abs(np.trapezoid(y, x) / binw - r.n_stars) < 0.01 * r.n_stars
