#!/usr/bin/env python3
"""Benchmark: a mock of N HB stars (plus their RGB and early-AGB stars) in two bands, compared with the
cost of drawing 20 N normal deviates with numpy in the same process (target ratio <= 3)."""
import sys
import time

import numpy as np

from hbmodel.mock import ObservationSpec, make_mock
from hbmodel.population import MassLoss, Population


def main(n_hb=1_000_000):
    pop = Population(-1.5, 12.5, alpha_fe=0.3, mass_loss=MassLoss.from_eta(0.45, 0.05))
    obs = ObservationSpec(distance_modulus=15.0, ebv=0.05, depth={"V": 22.0, "I": 21.5})
    rng = np.random.default_rng(0)
    make_mock(pop, bands=("V", "I"), rng=rng, n_hb=1000, obs=obs)  # warm-up: imports and per-population caches
    t0 = time.perf_counter()
    t = make_mock(pop, bands=("V", "I"), rng=rng, n_hb=n_hb, obs=obs)
    t_mock = time.perf_counter() - t0
    t0 = time.perf_counter()
    rng.standard_normal(20 * n_hb)
    t_norm = time.perf_counter() - t0
    print(f"mock of {n_hb:,} HB stars ({len(t):,} stars in all, 2 bands): {t_mock:.2f} s")
    print(f"20 x {n_hb:,} normal deviates: {t_norm:.2f} s")
    print(f"ratio {t_mock / t_norm:.2f} (target <= 3)")


if __name__ == "__main__":
    main(int(float(sys.argv[1])) if len(sys.argv) > 1 else 1_000_000)
