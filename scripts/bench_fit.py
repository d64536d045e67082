"""Benchmark of hbmodel.inference.mass_loss_fit: one likelihood evaluation and a whole fit of a 2,000-star HB.

The mock is the one of ``scripts/bench_cli.py`` (a 12.5 Gyr metal-poor cluster, 400 HB stars, 2,031 stars
in all, 1,745 in the fitted region), fitted as ``hbmodel fit`` does by default (E(B-V) spread nuisance
with the half-normal prior of scale ``--ebv-sd``, no model comparison).  Printed:

* the likelihood per evaluation, single and batched over 16 walkers, on the stars' pixels with the
  pre-convolved basis (what the fit uses) and on whole images convolved per walker (the exact path);
* the whole fit in this process (surrogate build + MAP + emcee + posterior-predictive check) and its
  posterior (median and 16/84 % points);
* ``--whole-process``: ``hbmodel fit`` of the same catalogue as a fresh process, against the numpy floor
  of ``scripts/bench_cli.py`` (a fresh process drawing 20 x 10^6 normal deviates), run in turn
  ``--repeat`` times: the medians and the ratio to the floor.

Usage: ``python scripts/bench_fit.py [--whole-process] [--repeat R] [--ebv-spread prior|none|...]``.
"""
import argparse
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from hbmodel.inference.mass_loss_fit import MassLossFit, Priors
from hbmodel.observation.mock import ObservationSpec, make_mock
from hbmodel.populations.population import MassLoss, Population

FLOOR = [sys.executable, "-c", "import numpy as np; np.random.default_rng(0).standard_normal(20_000_000)"]


def _per_call(L, p, n_rep):
    t = time.perf_counter()
    for _ in range(n_rep):
        L(p)
    return (time.perf_counter() - t) / n_rep


def _likelihood_timing(L, p):
    """Seconds per evaluation: single and per walker batched over 16 walkers, fast and exact path."""
    nw = 16
    pb = {k: np.repeat(v, nw) for k, v in p.items()}
    if "ebv_spread" in pb:  # walkers spread over the posterior's range, as in the sampler
        pb["ebv_spread"] = np.linspace(0.5, 1.5, nw) * max(float(p["ebv_spread"][0]), 1e-4)
    out = {}
    with threadpool_limits(1, "blas"):
        for fast in (True, False):
            L.at_stars = fast
            for q in (p, pb):
                L(q)  # warm-up (pre-convolved levels, work arrays)
            out[fast] = (_per_call(L, p, 100 if fast else 20), _per_call(L, pb, 20 if fast else 5) / nw)
        L.at_stars = True
    return out


def _whole_process(cmd, repeat, cwd):
    wall = {"fit": [], "floor": []}
    for name, c in (("fit", cmd), ("floor", FLOOR)):  # warm-up: page cache, on-disk table cache
        subprocess.run(c, cwd=cwd, check=True, stdout=subprocess.DEVNULL)
    for _ in range(repeat):
        for name, c in (("fit", cmd), ("floor", FLOOR)):
            t = time.perf_counter()
            subprocess.run(c, cwd=cwd, check=True, stdout=subprocess.DEVNULL)
            wall[name].append(time.perf_counter() - t)
    return statistics.median(wall["fit"]), min(wall["fit"]), statistics.median(wall["floor"])


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--ebv-spread", default="prior", help="as hbmodel fit --ebv-spread (default prior)")
    ap.add_argument("--whole-process", action="store_true", help="also time hbmodel fit as fresh processes")
    ap.add_argument("--repeat", type=int, default=2, help="whole-process runs (median and minimum quoted)")
    ap.add_argument("--seed", type=int, default=0, help="sampler seed")
    a = ap.parse_args()
    spread = a.ebv_spread if a.ebv_spread in ("prior", "free", "none") else float(a.ebv_spread)
    rng = np.random.default_rng(1)
    truth = Population(-1.6, 12.5, alpha_fe=0.3, mass_loss=MassLoss.from_eta(0.45, 0.03))
    cat = make_mock(truth, bands=("V", "I"), rng=rng, n_hb=400,
                    obs=ObservationSpec(distance_modulus=15.0, ebv=0.05, depth={"V": 22.5, "I": 21.8}))
    pri = Priors(distance_modulus=(15.0, 0.05), ebv=(0.05, 0.01)).with_ebv_spread(spread)
    t0 = time.perf_counter()
    f = MassLossFit(Population(-1.6, 12.5, alpha_fe=0.3), pri, compare_models=False, seed=a.seed).fit(cat)
    t_fit = time.perf_counter() - t0
    t0 = time.perf_counter()
    res = f.result()
    t_result = time.perf_counter() - t0
    L = f.likelihood_
    p = {k: np.atleast_1d(v)[:1] for k, v in f._map_p().items()}
    tim = _likelihood_timing(L, p)
    print(f"catalogue: {len(cat)} stars, {L.n} in the fitted region; --ebv-spread {a.ebv_spread}")
    for fast, label in ((True, "stars' pixels, pre-convolved basis"), (False, "whole images, exact convolution")):
        one, batch = tim[fast]
        print(f"likelihood ({label}): {one * 1e3:.2f} ms single, {batch * 1e3:.2f} ms per walker batched (16)")
    print(f"  fast / exact: x{tim[False][0] / tim[True][0]:.1f} single, x{tim[False][1] / tim[True][1]:.1f} batched")
    print(f"whole fit in process (surrogate build + MAP + emcee): {t_fit:.1f} s (optimise part "
          f"{f.optimise_time_s_:.1f} s), result() with the posterior-predictive check {t_result:.1f} s; "
          f"steps {f.n_steps_}, max tau {max(f.autocorr_time_.values()):.1f}, converged {f.converged_}, "
          f"n_eff {f.n_eff_:.0f}, acceptance {f.acceptance_fraction_:.2f}")
    for k in ("mass_loss", "mass_loss_sd", "distance_modulus", "ebv", "ebv_spread", "field_fraction"):
        if k in res:
            s = res[k]
            print(f"  {k:17s} median {s['median']:.5f}  16-84 % [{s['lo']:.5f}, {s['hi']:.5f}]")
    print(f"  truth: mass loss {truth.mean_mass_loss():.4f}")
    if a.whole_process:
        with tempfile.TemporaryDirectory(prefix="hbmodel_bench_fit_") as d:
            cat.write(Path(d) / "gc.ecsv")
            cmd = [sys.executable, "-m", "hbmodel", "fit", "gc.ecsv", "--bands", "V,I", "--feh", "-1.6",
                   "--alpha-fe", "0.3", "--age", "12.5", "--distance-modulus", "15.0", "--dm-sd", "0.05",
                   "--ebv", "0.05", "--ebv-sd", "0.01", "--ebv-spread", str(a.ebv_spread), "--no-compare",
                   "--seed", str(a.seed)]
            med, best, floor = _whole_process(cmd, a.repeat, d)
        print(f"whole process hbmodel fit: {med:.1f} s median, {best:.1f} s best of {a.repeat}; numpy floor "
              f"{floor:.2f} s (ratio {med / floor:.0f})")


if __name__ == "__main__":
    main()
