#!/usr/bin/env python3
"""Benchmark: place 10^6 (HB mass, phase) points through ZAHB -> HB evolution -> pulsation on one core."""
import os
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402

from hbmodel.physics import hb_evolution as hbe  # noqa: E402
from hbmodel.physics.pulsation import period_days, pulsation_mode  # noqa: E402
from hbmodel.physics.zahb import zahb_state  # noqa: E402


def main(n=1_000_000, repeat=3):
    rng = np.random.default_rng(0)
    mass = rng.uniform(0.50, 0.80, n)
    tau = rng.random(n)
    mc = np.full(n, 0.49)
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        z = zahb_state(mass, mc, -1.5)
        logl, logt = hbe.hb_track(z.logl, z.logteff, tau)
        t_hb = hbe.hb_lifetime_myr(mc, z.logteff)
        mode = pulsation_mode(logt, logl, mass)
        p = period_days(logl, mass, logt, mode)
        best = min(best, time.perf_counter() - t0)
    print(f"placed {n:,} HB (mass, phase) points (ZAHB + track + lifetime + pulsation): {best:.3f} s "
          f"({best / n * 1e9:.0f} ns per point; target well under 1 s)")
    assert np.isfinite(t_hb).all() and np.isfinite(logl).all() and p.shape == (n,)


if __name__ == "__main__":
    main()
