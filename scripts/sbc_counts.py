"""Simulation-based calibration of ``hbmodel fit --counts`` (Talts et al. 2018, arXiv:1804.06788).

Injects (eta, sigma_eta, [Fe/H]) drawn uniformly (eta 0.25-0.75, sigma_eta 0-0.12, [Fe/H] -2.2...-1.0,
age 12.5 Gyr) and fits with those uniform ranges as the priors (SBC needs the truth drawn from the prior), computes the HB fractions and mean RRab period with
``Population.predict`` (not the fit's emulator), draws the catalogue numbers (HB count Poisson(N_HB),
B:V:R multinomial, period Gaussian), fits them and prints how often the 68 % and 95 % intervals hold the
truth (target: 60-76 % of >= 100 draws for 68 %) and the rank histogram of the truth.

    python scripts/sbc_counts.py [--draws 100] [--n-hb 150] [--jobs 2] [--seed 0]
"""
from __future__ import annotations

import argparse
import time

import numpy as np


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--draws", type=int, default=100)
    ap.add_argument("--n-hb", type=int, default=150)
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--seed", type=int, default=0)
    a = ap.parse_args(argv)
    from hbmodel.inference.counts_fit import sbc_counts
    t0 = time.perf_counter()
    res = sbc_counts(a.draws, seed=a.seed, n_hb=a.n_hb, n_jobs=a.jobs)
    dt = time.perf_counter() - t0
    n = len(res)
    print(f"{n} draws, {a.n_hb} HB stars each (Poisson), {dt:.0f} s on {a.jobs} workers "
          f"({sum(r['converged'] for r in res)} converged)")
    for k in ("eta", "eta_sd"):
        rank = np.array([r[f"{k}_rank"] for r in res])
        c68 = np.mean((rank >= 0.16) & (rank <= 0.84))
        c95 = np.mean((rank >= 0.025) & (rank <= 0.975))
        hist = np.histogram(rank, bins=10, range=(0, 1))[0]
        lo, hi = 0.68 - 2 * np.sqrt(0.68 * 0.32 / n), 0.68 + 2 * np.sqrt(0.68 * 0.32 / n)
        print(f"  {k:7s} 68% coverage {c68:.2f} (binomial 2-sigma range {lo:.2f}-{hi:.2f}), 95% coverage {c95:.2f}; "
              f"rank histogram (10 bins) {' '.join(map(str, hist))}")


if __name__ == "__main__":
    main()
