"""``hbmodel fit --counts FILE``: Reimers eta, its spread and helium from catalogue numbers.

Hooked into ``hbmodel fit`` (``commands/fit.py`` calls :func:`add_counts_arguments` and, when ``--counts``
is given, :func:`run_counts`); the library side is :mod:`hbmodel.inference.counts_fit`.
"""
from __future__ import annotations

import math

COUNTS_HELP = ("counts table, one row per cluster: name, feh and n_blue, n_var, n_red (or hb_ratio with n_hb); "
               "optional alpha_fe, age, age_sd, pab_mean, pab_err, pc_mean, pc_err, n_rrab, n_rrc, n_rgb, "
               "hb_blue_tail_teff, hb_ratio_err, seed. Fits eta (and its spread / helium: --model) per cluster")
_TABLE_FORMATS = ("ecsv", "csv", "parquet")


def add_counts_arguments(p):
    """The options of the counts path; --feh and --age then come from the table (not required)."""
    g = p.add_argument_group("catalogue numbers (--counts)")
    g.add_argument("--counts", default=None, metavar="FILE", help=COUNTS_HELP)
    g.add_argument("--jobs", type=int, default=1, help="parallel workers for --counts (joblib), default 1")
    g.add_argument("--scheduler", default=None, help="Dask scheduler address for --counts, e.g. tcp://host:8786")
    g.add_argument("--counts-eta-sd", type=float, default=None, metavar="SD",
                   help="fix the star-to-star spread of eta at SD (default: fitted, uniform prior 0-0.25); "
                        "an HB ratio alone cannot separate eta from its spread")
    g.add_argument("--table-format", choices=_TABLE_FORMATS, default="ecsv",
                   help="format of the --counts results table in --out (default ecsv)")
    for a in p._actions:
        if a.dest in ("feh", "age"):
            a.required = False


def require_population(args):
    """The CMD / masses path still needs --feh and --age (not required by argparse any more)."""
    missing = [f"--{k}" for k in ("feh", "age") if getattr(args, k) is None]
    if missing:
        raise ValueError(f"the following arguments are required: {', '.join(missing)} (or use --counts FILE)")


def _estimate(n_clusters, max_steps, n_jobs, out):
    from hbmodel.core.limits import Estimate
    # per worker: the chain (32 walkers, <= 6 parameters, three copies) and the emulator tables (~30 MB)
    mem = min(n_jobs, max(n_clusters, 1)) * (3.0 * 32 * max_steps * 7 * 8.0 + 60e6)
    disk = n_clusters * 80e3 if out else 0.0
    return Estimate("this counts fit", memory_bytes=mem, disk_bytes=disk, disk_path=out,
                    detail=f"{n_clusters} clusters, {max_steps:,} steps of 32 walkers at most")


def run_counts(args) -> int:
    import numpy as np

    from hbmodel.inference.counts_fit import eta_figure, fit_counts, hierarchical_eta, read_counts, results_table, run_counts_table
    from hbmodel.outputs.reports import format_interval
    from hbmodel.cli.common import dumps
    if args.catalog is not None or args.masses is not None:
        raise ValueError("--counts takes no CATALOG and no --masses (one fit per row of the counts table)")
    for opt in ("feh", "age", "age_sd", "helium", "distance_modulus", "region", "columns"):
        if getattr(args, opt, None) is not None:
            raise ValueError(f"--{opt.replace('_', '-')} does not apply to --counts: the counts table gives each "
                             "cluster's [Fe/H] and age")
    if args.jobs < 1:
        raise ValueError("--jobs must be at least 1")
    if args.max_steps < 100:
        raise ValueError("--max-steps must be at least 100")
    if args.counts_eta_sd is not None and not (math.isfinite(args.counts_eta_sd) and 0 <= args.counts_eta_sd <= 0.25):
        raise ValueError(f"--counts-eta-sd must lie in [0, 0.25] (got {args.counts_eta_sd:g})")
    if args.sampler != "emcee":
        raise ValueError("--counts samples with emcee only (its posteriors are far from Gaussian)")
    clusters = read_counts(args.counts)
    from hbmodel.core.limits import check_budget
    check_budget(_estimate(len(clusters), args.max_steps, args.jobs, args.out),
                 max_memory=args.max_memory, max_disk=args.max_disk)
    hier = None
    if args.out:
        import pathlib

        from hbmodel.io.catalogues import atomic_savefig, write_table
        out = pathlib.Path(args.out)
        table_path = out / f"counts_results.{args.table_format}"
        summary, hier = run_counts_table(clusters, out, model=args.model, max_steps=args.max_steps, n_jobs=args.jobs,
                                         scheduler=args.scheduler, force=args.force, seed_offset=args.seed,
                                         eta_sd_fixed=args.counts_eta_sd)
        table = results_table(summary, hier)
        if len(table):
            write_table(table, table_path, force=True)  # the run's own product: rewritten on a resumed run
            fig = eta_figure(summary, hier)
            atomic_savefig(fig, out / "eta_feh_age.png", force=True)
            atomic_savefig(fig, out / "eta_feh_age.pdf", force=True)
        rows = [dict(zip(summary.colnames, [r[k] for k in summary.colnames])) for r in summary]
        failed = [r for r in rows if str(r["status"]) == "failed"]
        keys = [k for k in table.colnames if k != "name" and not (k[-3:] in ("_lo", "_hi") and k[:-3] in table.colnames)]
        results = [{"name": str(r["name"]), **{k: _cell(r, k) for k in keys}}
                   for r in rows if str(r["status"]) != "failed"]
    else:
        import joblib
        fits = joblib.Parallel(n_jobs=args.jobs)(
            joblib.delayed(fit_counts)(c, args.model, max_steps=args.max_steps, seed=int(c.seed) ^ int(args.seed),
                                       eta_sd_fixed=args.counts_eta_sd)
            for c in clusters)
        results = [{"name": f.cluster.name, **f.summary()} for f in fits]
        failed = []
        if len(fits) >= 2:
            hier = hierarchical_eta([f.samples[:, f.names.index("eta")] for f in fits])
    if args.json:
        print(dumps({"clusters": results, "failed": [{"name": str(r["name"]), "reason": str(r["reason"])}
                                                     for r in failed],
                     "population_eta": hier}))
        return 1 if failed else 0
    print(f"hbmodel fit --counts: {len(clusters)} cluster{'s' if len(clusters) != 1 else ''}, model {args.model}")
    for r in results:
        parts = [f"eta {format_interval(r['eta'])}"] if isinstance(r.get("eta"), dict) else []
        for k in ("eta_sd", "helium_fraction", "delta_y"):
            if isinstance(r.get(k), dict):
                parts.append(f"{k} {format_interval(r[k])}")
        conv = "yes" if r.get("converged") else "no"
        print(f"  {r['name']}: {', '.join(parts)}; converged {conv}, p = {r.get('p_value', float('nan')):.2f}")
        if r.get("warnings"):
            print(f"    warning: {r['warnings']}")
    for r in failed:
        print(f"  {r['name']}: failed: {r['reason']}")
    if hier is not None:
        print(f"  population: mean eta {format_interval(hier['mu'])}, scatter {format_interval(hier['tau'])} "
              f"({hier['n_clusters']} clusters)")
    if args.out:
        print(f"  results written to {args.out}")
    return 1 if failed else 0


def _cell(row, key):
    """A summary cell back as a number / interval / text (intervals from <key>, <key>_lo, <key>_hi)."""
    import numpy as np
    v = row.get(key)
    if np.ma.is_masked(v):
        return None
    lo, hi = row.get(f"{key}_lo"), row.get(f"{key}_hi")
    if lo is not None and hi is not None and not np.ma.is_masked(lo):
        return {"median": float(v), "lo": float(lo), "hi": float(hi)}
    return v.item() if hasattr(v, "item") else v
