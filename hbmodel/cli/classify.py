"""``hbmodel classify``: per-star probability of core-helium burning versus RGB."""
from __future__ import annotations

from pathlib import Path

import numpy as np

from hbmodel.cli.common import parse_mapping

NAME = "classify"
HELP = "per-star probability that a giant is a clump/HB star rather than an RGB star"
DESCRIPTION = """Classify giants from (Teff, log g[, mass]) with the population model as the likelihood.

The input needs columns teff and logg (and mass with --use-mass); the output is the input table with
a column p_cheb (probability of core-helium burning).

example:
  hbmodel classify giants.ecsv --feh 0.0 --age-range 1:10 --teff-err 80 --logg-err 0.05 --out giants_p.ecsv
"""


def add_arguments(p):
    p.add_argument("catalog")
    p.add_argument("--feh", type=float, required=True)
    p.add_argument("--alpha-fe", type=float, default=0.0)
    ages = p.add_mutually_exclusive_group()
    ages.add_argument("--age", type=float, default=None, help="age in Gyr (single population)")
    ages.add_argument("--age-range", default=None, help="constant star formation between A1:A2 Gyr")
    p.add_argument("--eta", type=float, default=0.3)
    p.add_argument("--teff-err", type=float, default=None, help="typical Teff error (K); default: median teff_err or 80")
    p.add_argument("--logg-err", type=float, default=None, help="typical log g error; default: median logg_err or 0.1")
    p.add_argument("--use-mass", action="store_true", help="also use a mass column (e.g. asteroseismic)")
    p.add_argument("--mass-err", type=float, default=None)
    p.add_argument("--columns", default=None, help="column mapping, e.g. teff=TEFF,logg=LOGG")
    p.add_argument("--out", required=True, help="output table")
    p.add_argument("--force", action="store_true")


def _typical(t, col, given, default):
    if given is not None:
        return given
    if col in t.colnames:
        v = np.asarray(t[col], float)
        v = v[np.isfinite(v) & (v > 0)]
        if v.size:
            return float(np.median(v))
    return default


def run(args):
    from hbmodel.inference.classify import CHeBClassifier
    from hbmodel.io.catalogues import check_output_file, pick_column, read_catalog, write_table
    from hbmodel.cli.distance import _population
    from hbmodel.core.limits import catalog_task_estimate, check_budget
    check_budget(catalog_task_estimate("classify", args.catalog, out=args.out), max_memory=args.max_memory,
                 max_disk=args.max_disk)
    check_output_file(args.out, force=args.force)
    mapping = parse_mapping(args.columns, "--columns")
    t = read_catalog(args.catalog, columns=mapping or None, required=["logg"])
    if len(t) == 0:
        raise ValueError("the catalogue is empty")
    # a user's teff / mass, or the unit-suffixed columns of an hbmodel mock
    what = f"catalogue {Path(args.catalog).name}"
    teff_col = pick_column(t, "teff", what)
    mass_col = pick_column(t, "mass", what) if args.use_mass else None
    pop = _population(args.feh, args.alpha_fe, args.age, args.age_range, args.eta)
    clf = CHeBClassifier(pop, teff_err_k=_typical(t, "teff_err", args.teff_err, 80.0),
                         logg_err=_typical(t, "logg_err", args.logg_err, 0.1),
                         mass_err_msun=_typical(t, "mass_err", args.mass_err, 0.1), use_mass=args.use_mass).fit()
    teff = np.asarray(t[teff_col], float)
    logg = np.asarray(t["logg"], float)
    ok = np.isfinite(teff) & np.isfinite(logg)
    p = np.full(len(t), np.nan)
    mass = np.asarray(t[mass_col], float) if args.use_mass else None
    if args.use_mass:
        ok &= np.isfinite(mass)
    if ok.any():
        p[ok] = clf.predict_proba(teff[ok], logg[ok], None if mass is None else mass[ok])
    t["p_cheb"] = p
    write_table(t, args.out, force=args.force)
    n = int(np.sum(np.isfinite(p)))
    print(f"wrote {args.out}: {n} of {len(t)} stars classified; {int(np.sum(p > 0.5))} more likely core-He burning "
          f"(prior from lifetimes: {clf.prior_cheb_:.2f})")
    return 0
