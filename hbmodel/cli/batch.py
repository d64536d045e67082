"""``hbmodel batch``: many fits or distances in parallel (joblib, or a Dask cluster)."""
from __future__ import annotations

NAME = "batch"
HELP = "run fit or distance jobs from a table in parallel (joblib or a Dask cluster), resumably"
DESCRIPTION = """Run one job per row of a JOBS table (CSV/ECSV).

Columns (checked like a config file: an unknown column, a missing required column or an unreadable
cell is an error naming the row and column; [optional]):
  --task fit:      name, catalog, bands, feh, age, distance_modulus[, alpha_fe, dm_sd, ebv, ebv_sd, model, seed]
  --task distance: name, catalog, band (or bands), feh, age (or age_min and age_max), ebv
                   [, alpha_fe, ebv_sd, eta, seed]
Band names are case-insensitive and accept aliases (K = Ks).  Each job's result is written atomically to
DIR/<name>/result.json when it finishes; a re-run skips a finished job only if its options and the SHA-256
of its catalogue are unchanged; a failing job is reported and does not stop the others.  DIR/summary.ecsv,
summary.csv and summary.png are written at the end.

examples:
  hbmodel batch fields.csv --task distance --out fields_out --jobs 2
  hbmodel batch clusters.csv --task fit --out fits_out --scheduler tcp://127.0.0.1:8786
"""


def add_arguments(p):
    p.add_argument("jobs_table", metavar="JOBS", help="jobs table (CSV or ECSV)")
    p.add_argument("--out", required=True, help="output directory")
    p.add_argument("--task", choices=("fit", "distance"), default="fit")
    p.add_argument("--jobs", type=int, default=1, help="parallel workers (joblib)")
    p.add_argument("--scheduler", default=None, help="Dask scheduler address, e.g. tcp://host:8786")
    p.add_argument("--force", action="store_true", help="re-run finished jobs")


def run(args):
    import numpy as np

    from hbmodel.io.jobs import read_jobs, run_batch
    from hbmodel.batch.tasks import JOB_SCHEMAS, TASKS
    if args.jobs < 1:
        raise ValueError("--jobs must be at least 1")
    jobs = read_jobs(args.jobs_table, schema=JOB_SCHEMAS[args.task])
    from hbmodel.io.jobs import _jobs_as_dicts, check_batch_out_dir
    check_batch_out_dir(args.out, [job["name"] for job in _jobs_as_dicts(jobs)])  # before any work
    from hbmodel.core.limits import batch_estimate, check_budget
    check_budget(batch_estimate(_jobs_as_dicts(jobs), args.task, n_jobs=args.jobs, scheduler=args.scheduler,
                                out_dir=args.out), max_memory=args.max_memory, max_disk=args.max_disk)
    summary = run_batch(jobs, TASKS[args.task], args.out, n_jobs=args.jobs, scheduler=args.scheduler,
                        force=args.force)
    status = np.asarray(summary["status"]).astype(str)
    n_fail = int(np.sum(status == "failed"))
    print(f"{len(summary)} jobs: {len(summary) - n_fail} done, {n_fail} failed; summary in {args.out}/summary.ecsv")
    for row in summary:
        if str(row["status"]) == "failed":
            print(f"  {row['name']}: {row['reason']}")
    return 0 if n_fail == 0 else 1
