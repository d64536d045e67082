"""The cluster benchmark through ``hbmodel fit --counts``: per-cluster Reimers eta from the catalogue
numbers of ``tables/targets/clusters.ecsv`` (HB ratio, RR Lyrae counts and mean periods, ages where
published), the population mean and scatter of eta across the clusters (importance reweighting of the
per-cluster samples), compared with McDonald & Zijlstra 2015, MNRAS 448, 502 (arXiv:1501.00874, abstract:
median Reimers eta of 56 Galactic globular clusters 0.477, standard deviation 0.070 among the clusters,
systematic +0.050/-0.062).  Prints the wall time of the whole table on ``--jobs`` workers.

    python scripts/counts_benchmark.py [--jobs 2] [--free-spread] [--out DIR] [--write-table FILE.csv]
"""
from __future__ import annotations

import argparse
import tempfile
import time

import numpy as np

#: McDonald & Zijlstra 2015, MNRAS 448, 502, abstract (read): median eta_R among 56 GCs, the standard
#: deviation among clusters and the systematic uncertainty.
MZ15_ETA, MZ15_SCATTER, MZ15_SYS = 0.477, 0.070, (0.050, 0.062)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--free-spread", action="store_true",
                    help="fit the spread of eta too (default: fixed at the benchmark's 0.045)")
    ap.add_argument("--out", default=None, help="keep the per-cluster results here (default: a temporary folder)")
    ap.add_argument("--write-table", default=None, metavar="FILE", help="also write the counts table (CSV/ECSV)")
    ap.add_argument("--max-steps", type=int, default=6000)
    a = ap.parse_args(argv)
    from hbmodel.calibration.evaluators import ETA_SPREAD_OLD
    from hbmodel.inference.counts_fit import COUNT_COLUMNS, benchmark_counts, run_counts_table
    clusters = benchmark_counts()
    if a.write_table:
        from hbmodel.io.catalogues import write_table
        cols = {k: [] for k in COUNT_COLUMNS if k != "seed"}
        for c in clusters:
            for k in cols:
                v = getattr(c, {"age": "age_gyr", "age_sd": "age_sd_gyr"}.get(k, k))
                cols[k].append(v)
        write_table({k: v for k, v in cols.items() if any(isinstance(x, str) or np.isfinite(x) for x in v)},
                    a.write_table)
    sd = None if a.free_spread else ETA_SPREAD_OLD
    t0 = time.perf_counter()
    with tempfile.TemporaryDirectory() as tmp:
        summary, hier = run_counts_table(clusters, a.out or tmp, n_jobs=a.jobs, eta_sd_fixed=sd,
                                         max_steps=a.max_steps, progress=False)
    dt = time.perf_counter() - t0
    print(f"{len(clusters)} benchmark globular clusters, eta spread "
          f"{'fitted' if sd is None else f'fixed at {sd}'}: {dt:.0f} s on {a.jobs} workers")
    print(f"  {'cluster':18s} {'[Fe/H]':>6s} {'HB ratio':>8s}  eta (16-84 %)         conv  p     warnings")
    hbr = {c.name: c.hb_ratio for c in clusters}
    for r in summary:
        if str(r["status"]) == "failed":
            print(f"  {r['name']:18s} failed: {r['reason']}")
            continue
        print(f"  {str(r['name']):18s} {r['feh']:+6.2f} {hbr[str(r['name'])]:+8.2f}  {r['eta']:.3f} "
              f"[{r['eta_lo']:.3f}, {r['eta_hi']:.3f}]  {'yes' if r['converged'] else 'no ':3s}  "
              f"{r['p_value']:.2f}  {r['warnings']}")
    if hier is not None:
        m, t = hier["mu"], hier["tau"]
        print(f"population mean eta {m['median']:.3f} (16-84 %: {m['lo']:.3f}-{m['hi']:.3f}), scatter "
              f"{t['median']:.3f} ({t['lo']:.3f}-{t['hi']:.3f}), {hier['n_clusters']} clusters")
        print(f"McDonald & Zijlstra 2015 (MNRAS 448, 502, abstract): median {MZ15_ETA} with standard deviation "
              f"{MZ15_SCATTER} among 56 clusters, systematic +{MZ15_SYS[0]}/-{MZ15_SYS[1]}; difference of the "
              f"means {m['median'] - MZ15_ETA:+.3f}")


if __name__ == "__main__":
    main()
