"""Simulation-based calibration of the mass-loss fit (Talts et al. 2018, arXiv:1804.06788).

Truths are drawn from the fit's own priors, mocks from ``make_mock`` (Monte-Carlo stars), and each mock is
fitted with the Laplace (Gaussian-at-the-MAP) approximation -- a documented shortcut that keeps 50 fits within
a few minutes.  Well-calibrated 68% intervals contain the truth 68% of the time; with 50 mocks the binomial
1-sigma scatter is 6.6%, so the brief's acceptance band 60-76% is ~ +-1.2 sigma (we print the figure).
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
    n_mock, inside, em = 50, 0, None
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
