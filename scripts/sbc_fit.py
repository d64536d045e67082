"""Simulation-based calibration of the CMD mass-loss fit (Talts et al. 2018, arXiv:1804.06788).

For each regime, ``--n-draws`` truths are drawn from the fit's own priors (mean mass loss and its spread
uniform, distance modulus and E(B-V) Gaussian, colour / magnitude zero points Gaussian and, with
``--ebv-spread``, a half-normal star-to-star E(B-V) spread), a mock catalogue is made from each truth
(``hbmodel.observation.mock.make_mock``: Monte-Carlo stars, a different code path from the fit's surrogate), and the
mock is fitted with the same priors.  Printed: the fraction of 68 % (16-84th percentile) and 95 %
(2.5-97.5th) intervals of the mean mass loss that hold the truth, with its binomial 1-sigma error, and the
mean and sd of the pulls (median - truth) / (half the 68 % interval).  A calibrated fit holds the truth in
68 % / 95 % of the draws.

Regimes: ``clump`` -- a metal-rich red clump ([Fe/H] 0, 4 Gyr, 300 HB stars); ``blue-hb`` -- a metal-poor
blue/intermediate HB ([Fe/H] -1.6, 12.5 Gyr, 120 HB stars).  Every mock of a regime shares the error law
of the first one, so one surrogate serves all fits (built once, cached).

    python scripts/sbc_fit.py --regime clump --n-draws 100              # Laplace (fast)
    python scripts/sbc_fit.py --regime blue-hb --n-draws 100 --sampler emcee --max-steps 3000
    python scripts/sbc_fit.py --regime clump --bands G,RP --ebv-spread --n-draws 50
    python scripts/sbc_fit.py --regime clump --sampler emcee --max-steps 2000 --bands J,Ks --ebv-spread

Every draw's line carries its 68 % and 95 % intervals, so an interrupted run can still be summarised.
A CI-sized version (two emcee draws, Gaia bands, differential reddening) is in tests/test_fit_sbc.py.
"""
from __future__ import annotations

import argparse
import dataclasses
import time

import numpy as np
from threadpoolctl import threadpool_limits

from hbmodel.inference.mass_loss_fit import MassLossFit, Priors
from hbmodel.inference.likelihood import ErrorModel, fit_constants
from hbmodel.observation.mock import ObservationSpec, make_mock
from hbmodel.populations.population import MassLoss, Population


@dataclasses.dataclass(frozen=True)
class Regime:
    feh: float
    age_gyr: float
    alpha_fe: float
    n_hb: int
    mass_loss: tuple
    mass_loss_sd: tuple
    distance_modulus: float
    ebv: float
    depth_mag: float       # 5-sigma depth of the first band, the second 1 mag brighter


REGIMES = {
    "clump": Regime(0.0, 4.0, 0.0, 300, (0.03, 0.15), (0.005, 0.03), 12.0, 0.1, 21.0),
    "blue-hb": Regime(-1.6, 12.5, 0.3, 120, (0.15, 0.23), (0.005, 0.03), 15.0, 0.05, 22.5),
}
DM_SD, EBV_SD = 0.05, 0.02


def run(regime: str, n_draws: int, *, bands=("V", "I"), sampler="laplace", ebv_spread=False, seed=2024,
        max_steps=3000, verbose=True):
    r = REGIMES[regime]
    rng = np.random.default_rng(seed)
    pri = Priors(distance_modulus=(r.distance_modulus, DM_SD), ebv=(r.ebv, EBV_SD), mass_loss=r.mass_loss,
                 mass_loss_sd=r.mass_loss_sd).with_ebv_spread("prior" if ebv_spread else "none")
    cst = fit_constants()
    sdc, sdm = cst["colour_offset_sd"], cst["mag_offset_sd"]
    pop_fit = Population(r.feh, r.age_gyr, alpha_fe=r.alpha_fe)
    depth = {bands[0]: r.depth_mag, bands[1]: r.depth_mag - 1.0}
    truths, meds, lo68, hi68, lo95, hi95 = [], [], [], [], [], []
    em, t0 = None, time.perf_counter()
    for k in range(n_draws):  # one fit per mock: the mocks are the experiment
        dm_true = rng.uniform(*r.mass_loss)
        sd_true = rng.uniform(*r.mass_loss_sd)
        dist = rng.normal(r.distance_modulus, DM_SD)
        ebv = abs(rng.normal(r.ebv, EBV_SD))  # E >= 0 (the fit's prior is truncated there too)
        spread = abs(rng.normal(0.0, EBV_SD)) if ebv_spread else 0.0
        dc, dmag = rng.normal(0.0, sdc), rng.normal(0.0, sdm)
        pop = Population(r.feh, r.age_gyr, alpha_fe=r.alpha_fe,
                         mass_loss=MassLoss.from_delta_m(dm_true, sd_true))
        cat = make_mock(pop, bands=bands, rng=rng, n_hb=r.n_hb,
                        obs=ObservationSpec(distance_modulus=dist, ebv=ebv, ebv_sd=spread, depth=depth))
        # zero points: colour (first - second) off by dc, magnitudes by dmag
        cat[bands[0]] = cat[bands[0]] + dmag
        cat[bands[1]] = cat[bands[1]] + dmag - dc
        if em is None:
            em = ErrorModel.from_catalog({b: np.asarray(cat[b]) for b in bands},
                                         {b: np.asarray(cat[f"{b}_err"]) for b in bands})
        f = MassLossFit(pop_fit, pri, bands=bands, sampler=sampler, compare_models=False, error_model=em,
                        seed=k, max_steps=max_steps).fit(cat)
        post = np.asarray(f.posterior_["mass_loss"], float)
        q = np.percentile(post, [2.5, 16, 50, 84, 97.5])
        truth = pop.mean_mass_loss()
        truths.append(truth); lo95.append(q[0]); lo68.append(q[1]); meds.append(q[2])
        hi68.append(q[3]); hi95.append(q[4])
        if verbose:
            print(f"  {regime} draw {k + 1:3d}/{n_draws}: truth {truth:.4f}  fit {q[2]:.4f} "
                  f"[{q[1]:.4f}, {q[3]:.4f}] 95% [{q[0]:.4f}, {q[4]:.4f}]  ({time.perf_counter() - t0:.0f} s)",
                  flush=True)
    t, lo68, hi68 = np.array(truths), np.array(lo68), np.array(hi68)
    c68 = float(np.mean((lo68 <= t) & (t <= hi68)))
    c95 = float(np.mean((np.array(lo95) <= t) & (t <= np.array(hi95))))
    pulls = (np.array(meds) - t) / np.maximum(0.5 * (hi68 - lo68), 1e-12)
    return {"regime": regime, "bands": "-".join(bands), "sampler": sampler, "ebv_spread": ebv_spread,
            "n_draws": n_draws, "coverage_68": c68, "coverage_68_err": float(np.sqrt(0.68 * 0.32 / n_draws)),
            "coverage_95": c95, "coverage_95_err": float(np.sqrt(0.95 * 0.05 / n_draws)),
            "pull_mean": float(pulls.mean()), "pull_sd": float(pulls.std()),
            "time_s": time.perf_counter() - t0}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--regime", choices=("clump", "blue-hb", "both"), default="both")
    ap.add_argument("--n-draws", type=int, default=100)
    ap.add_argument("--bands", default="V,I")
    ap.add_argument("--sampler", choices=("laplace", "emcee"), default="laplace")
    ap.add_argument("--max-steps", type=int, default=3000, help="longest emcee chain per fit")
    ap.add_argument("--ebv-spread", action="store_true", help="mocks with differential reddening, fitted with it")
    ap.add_argument("--seed", type=int, default=2024)
    ap.add_argument("--quiet", action="store_true")
    a = ap.parse_args(argv)
    if a.n_draws < 1:
        ap.error("--n-draws must be at least 1")
    bands = tuple(b.strip() for b in a.bands.split(","))
    regimes = ("clump", "blue-hb") if a.regime == "both" else (a.regime,)
    with threadpool_limits(1, "blas"):
        res = [run(g, a.n_draws, bands=bands, sampler=a.sampler, ebv_spread=a.ebv_spread, seed=a.seed,
                   max_steps=a.max_steps, verbose=not a.quiet) for g in regimes]
    for s in res:
        print(f"SBC {s['regime']} ({s['bands']}, {s['sampler']}, differential reddening "
              f"{'yes' if s['ebv_spread'] else 'no'}): 68% intervals hold the truth in "
              f"{s['coverage_68']:.0%} ± {s['coverage_68_err']:.0%}, 95% intervals in {s['coverage_95']:.0%} "
              f"± {s['coverage_95_err']:.0%} of {s['n_draws']} draws; pulls {s['pull_mean']:+.2f} ± "
              f"{s['pull_sd']:.2f}; {s['time_s']:.0f} s")


if __name__ == "__main__":
    main()
