"""Simulation-based calibration of the mass-loss fit (Talts et al. 2018, arXiv:1804.06788).

Truths are drawn from the fit's own priors, mocks from ``make_mock`` (Monte-Carlo stars), and each mock is
fitted with the Laplace (Gaussian-at-the-MAP) approximation -- a documented shortcut that keeps 100 fits within
about a minute.  Well-calibrated 68% intervals contain the truth 68% of the time; with 100 mocks (issue 15 asks
for >= 100 draws) the binomial 1-sigma scatter is 4.7%, so the acceptance band 60-76% is ~ +-1.7 sigma (we print
the figure).  With the former 50 mocks (+-1.2 sigma) the band was crossed by one mock's luck: 56% of the first 50
and 62% of all 100 after the per-node extinction change (measured).
"""
import numpy as np
import pytest

from hbmodel.inference.mass_loss_fit import MassLossFit, Priors
from hbmodel.inference.likelihood import ErrorModel
from hbmodel.observation.mock import ObservationSpec, make_mock
from hbmodel.populations.population import MassLoss, Population


@pytest.mark.slow
def test_sbc_coverage_of_68_percent_intervals():
    rng = np.random.default_rng(2024)
    pri = Priors(distance_modulus=(15.0, 0.05), ebv=(0.05, 0.01), mass_loss=(0.15, 0.23),
                 mass_loss_sd=(0.005, 0.03))
    pop_fit = Population(-1.6, 12.5, alpha_fe=0.3)
    n_mock, inside, em = 100, 0, None
    for k in range(n_mock):  # one fit per mock (the mocks are the experiment)
        dm_true = rng.uniform(*pri.mass_loss)
        sd_true = rng.uniform(*pri.mass_loss_sd)
        dist = rng.normal(15.0, 0.05)
        ebv = max(rng.normal(0.05, 0.01), 0.0)
        pop = Population(-1.6, 12.5, alpha_fe=0.3, mass_loss=MassLoss.from_delta_m(dm_true, sd_true))
        cat = make_mock(pop, bands=("V", "I"), rng=rng, n_hb=120,
                        obs=ObservationSpec(distance_modulus=dist, ebv=ebv, depth={"V": 22.5, "I": 21.8}))
        if em is None:  # same error law for every mock: one surrogate (cached)
            em = ErrorModel.from_catalog({b: np.asarray(cat[b]) for b in "VI"},
                                         {b: np.asarray(cat[f"{b}_err"]) for b in "VI"})
        f = MassLossFit(pop_fit, pri, sampler="laplace", compare_models=False, zero_points=False,
                        error_model=em, seed=k).fit(cat)
        s = f.summary()["mass_loss"]
        inside += s["lo"] <= dm_true <= s["hi"]
    cover = inside / n_mock
    print(f"SBC: 68% intervals of the mass loss contain the truth in {cover:.0%} of {n_mock} mocks")
    assert 0.60 <= cover <= 0.76


def _sbc_script():
    import importlib.util
    import pathlib
    import sys
    path = pathlib.Path(__file__).resolve().parents[1] / "scripts" / "sbc_fit.py"
    spec = importlib.util.spec_from_file_location("sbc_fit", path)
    mod = importlib.util.module_from_spec(spec)
    sys.modules["sbc_fit"] = mod  # dataclasses of the script resolve their module
    spec.loader.exec_module(mod)
    return mod


@pytest.mark.slow
def test_sbc_red_clump_gaia_bands_with_differential_reddening_emcee_small():
    # The CI-sized version of `scripts/sbc_fit.py --regime clump --sampler emcee --bands G,RP --ebv-spread`
    # (the full run and its measured coverage are in the README): two prior draws (mass loss, its spread,
    # distance, E(B-V), zero points and a half-normal E(B-V) spread), each mocked by Monte-Carlo stars and
    # fitted with emcee.  Two draws cannot measure a coverage; they catch a grossly miscalibrated fit: a
    # calibrated posterior puts the truth beyond 3.5 half-widths of its 68 % interval with probability
    # 5e-4 (normal tails, common practice), while the failures this guards against were 10-50 of them (the
    # issue's 0.457 +- 0.007 for a true 0.082; one extinction ratio for all stars in G gave p = 0.000).
    sbc = _sbc_script()
    res = sbc.run("clump", 2, bands=("G", "RP"), sampler="emcee", ebv_spread=True, seed=2024, max_steps=1500,
                  verbose=True)
    print(res)
    assert res["n_draws"] == 2 and 0.0 <= res["coverage_68"] <= res["coverage_95"] <= 1.0
    assert res["coverage_95"] >= 0.5
    assert abs(res["pull_mean"]) + res["pull_sd"] < 3.5
