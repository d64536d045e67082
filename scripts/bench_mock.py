#!/usr/bin/env python3
"""Benchmark: a mock of N HB stars (plus their RGB and early-AGB stars) in two bands, compared with the
cost of drawing 20 N normal deviates with numpy in the same process (target ratio <= 3).

Both timings are the best of ``--repeat`` runs (the convention of :mod:`timeit`): the first run of
either pays the operating system's page faults for fresh memory, which says nothing about the code.
The first mock (cold: tables built, memory fresh) is printed too."""
import argparse
import time

import numpy as np

from hbmodel.observation.mock import ObservationSpec, make_mock
from hbmodel.populations.population import MassLoss, Population


def best_of(fn, repeat):
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
        n = len(out)
        del out
    return best, n


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("n_hb", nargs="?", type=float, default=1e6)
    ap.add_argument("--repeat", type=int, default=5)
    a = ap.parse_args()
    n_hb = int(a.n_hb)
    pop = Population(-1.5, 12.5, alpha_fe=0.3, mass_loss=MassLoss.from_eta(0.45, 0.05))
    obs = ObservationSpec(distance_modulus=15.0, ebv=0.05, depth={"V": 22.0, "I": 21.5})
    rng = np.random.default_rng(0)
    t0 = time.perf_counter()
    make_mock(pop, bands=("V", "I"), rng=rng, n_hb=n_hb, obs=obs)
    t_cold = time.perf_counter() - t0
    t_mock, n = best_of(lambda: make_mock(pop, bands=("V", "I"), rng=rng, n_hb=n_hb, obs=obs), a.repeat)
    t_norm, _ = best_of(lambda: rng.standard_normal(20 * n_hb), a.repeat)
    print(f"mock of {n_hb:,} HB stars ({n:,} stars in all, 2 bands): {t_mock:.3f} s "
          f"(best of {a.repeat}; first call, tables built and memory fresh: {t_cold:.2f} s)")
    print(f"20 x {n_hb:,} normal deviates: {t_norm:.3f} s (best of {a.repeat})")
    print(f"ratio {t_mock / t_norm:.2f} (target <= 3)")


if __name__ == "__main__":
    main()
