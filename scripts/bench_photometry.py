"""Benchmark: absolute magnitudes of 10^6 stars in all 11 bands, and extinction.

Prints wall-clock figures (one core); tests never assert timings.
Usage: python3 scripts/bench_photometry.py [n_stars] [seed]
"""
from __future__ import annotations

import sys
import time

import numpy as np

from hbmodel.photometry.extinction import apparent_magnitudes
from hbmodel.photometry.magnitudes import BAND_NAMES, absolute_magnitudes


def main(n: int = 1_000_000, seed: int = 12345) -> None:
    rng = np.random.default_rng(seed)
    teff = 10.0 ** rng.uniform(np.log10(3000.0), np.log10(50000.0), n)
    logg = rng.uniform(-0.5, 6.5, n)
    feh = rng.uniform(-2.5, 0.5, n)
    logl = rng.uniform(-1.0, 3.5, n)
    ebv = rng.uniform(0.0, 1.0, n)
    absolute_magnitudes(teff[:10], logg[:10], feh[:10], logl[:10])  # warm the table caches
    apparent_magnitudes(absolute_magnitudes(teff[:10], logg[:10], feh[:10], logl[:10]), 10.0,
                        ebv[:10], teff[:10])
    best = np.inf
    for _ in range(3):
        t0 = time.perf_counter()
        mags = absolute_magnitudes(teff, logg, feh, logl)
        best = min(best, time.perf_counter() - t0)
    print(f"absolute_magnitudes: {n:,} stars x {len(BAND_NAMES)} bands: {best:.3f} s (best of 3)")
    best = np.inf
    for _ in range(3):
        t0 = time.perf_counter()
        apparent_magnitudes(mags, 14.5, ebv, teff)
        best = min(best, time.perf_counter() - t0)
    print(f"apparent_magnitudes (F99, R_V=3.1): {n:,} stars x {len(BAND_NAMES)} bands: {best:.3f} s")


if __name__ == "__main__":
    args = [int(a) for a in sys.argv[1:3]]
    main(*args)
