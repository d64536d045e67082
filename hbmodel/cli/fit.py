"""``hbmodel fit``: infer the RGB mass loss and its dispersion from an observed HB / red clump."""
from __future__ import annotations

import math

from hbmodel.cli.common import RenamedOption

NAME = "fit"
HELP = "infer the mean RGB mass loss and its star-to-star spread from an HB/clump catalogue (and/or masses)"
DESCRIPTION = """Fit the HB / red clump of a catalogue (columns <band>, <band>_err) with the hbmodel surrogate and
emcee; and/or a table of measured masses (columns mass, mass_err, phase = rgb|clump).

examples:
  hbmodel fit cluster.ecsv --bands V,I --feh -1.6 --alpha-fe 0.3 --age 12.5 --age-sd 1 \\
      --distance-modulus 15.0 --dm-sd 0.05 --ebv 0.05 --ebv-sd 0.01 --out result/ --json
  hbmodel fit --masses giants.csv --feh 0.3 --age 8 --age-sd 1 --json
  hbmodel fit --counts clusters.csv --out counts_out/ --jobs 2
"""


def add_arguments(p):
    p.add_argument("catalog", nargs="?", default=None, metavar="CATALOG",
                   help="photometric catalogue (CSV, ECSV, FITS, VOTable, Parquet)")
    p.add_argument("--bands", default="V,I",
                   help="FIRST,SECOND: magnitude axis FIRST, colour FIRST-SECOND unless --colour")
    p.add_argument("--colour", "--color", dest="colour", action=RenamedOption, default=None, metavar="A-B",
                   help="colour axis A-B of the two --bands in either order, e.g. --bands Ks,J --colour J-Ks")
    g = p.add_argument_group("population")
    g.add_argument("--feh", type=float, required=True, help="[Fe/H] (dex)")
    g.add_argument("--alpha-fe", type=float, default=0.0, help="[alpha/Fe] (dex), default 0")
    g.add_argument("--age", type=float, required=True, help="age in Gyr (prior mean)")
    g.add_argument("--age-sd", type=float, default=None, help="prior width of the age (Gyr); default: fixed")
    g.add_argument("--helium", type=float, default=None, help="initial helium Y (default: enrichment law)")
    n = p.add_argument_group("nuisance priors")
    n.add_argument("--distance-modulus", type=float, default=None, help="prior mean of the distance modulus")
    n.add_argument("--dm-sd", type=float, default=0.1, help="prior width of the distance modulus (default 0.1)")
    n.add_argument("--ebv", type=float, default=0.0, help="prior mean of E(B-V) (default 0)")
    n.add_argument("--ebv-sd", type=float, default=0.02, help="prior width of E(B-V) (default 0.02)")
    n.add_argument("--ebv-spread", default="prior", metavar="prior|free|none|SD",
                   help="differential reddening (star-to-star E(B-V) sd), a nuisance parameter: 'prior' "
                        "(default) half-normal of scale --ebv-sd, 'free' uniform 0-0.25 mag, 'none' (no spread), "
                        "or a number: half-normal of that scale")
    n.add_argument("--no-zero-points", action="store_true", help="fix the colour/magnitude zero points at 0")
    p.add_argument("--model", choices=("spread", "helium", "both"), default="spread",
                   help="mass-loss spread, helium spread, or both (default spread)")
    p.add_argument("--no-compare", action="store_true", help="skip the model comparison")
    p.add_argument("--region", default=None, metavar="CMIN,CMAX,MBRIGHT,MFAINT",
                   help="fitted CMD box, colour as --colour (default: model HB/clump extent plus margins)")
    p.add_argument("--columns", default=None, metavar="V=vmag,I=imag,...",
                   help="map canonical names to catalogue columns")
    p.add_argument("--masses", default=None, metavar="FILE", help="measured masses: mass, mass_err, phase")
    p.add_argument("--sampler", choices=("emcee", "laplace"), default="emcee")
    p.add_argument("--max-steps", type=int, default=6000, help="longest emcee chain (steps)")
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--out", default=None, metavar="DIR", help="write result.json, posterior.ecsv and plots")
    p.add_argument("--force", action="store_true", help="allow writing into a non-empty --out directory")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--quiet", action="store_true", help="no progress bar for the emcee chain (shown on a terminal)")
    from hbmodel.cli.fit_counts import add_counts_arguments
    add_counts_arguments(p)  # --counts FILE: eta from catalogue numbers (makes --feh/--age optional)


def run(args):
    from hbmodel.inference.mass_loss_fit import MassLossFit, Priors
    from hbmodel.io.catalogues import read_catalog, staged_out_dir
    from hbmodel.photometry.magnitudes import parse_bands
    from hbmodel.populations.population import Population
    from hbmodel.core.quantities import unit_of
    from hbmodel.outputs.reports import format_interval
    from hbmodel.cli.common import canonical_columns, colour_of, dumps, parse_floats, parse_mapping
    from hbmodel.cli.fit_counts import require_population, run_counts
    if args.counts is not None:
        return run_counts(args)
    require_population(args)
    bands = parse_bands(args.bands, "--bands", n=2)
    colour = colour_of(args.colour, bands)
    args.bands, args.colour = ",".join(bands), ("-".join(colour) if colour else None)  # canonical in the record
    if args.catalog is None and args.masses is None:
        raise ValueError("give a CATALOG and/or --masses FILE")
    if not (math.isfinite(args.age) and args.age > 0):
        raise ValueError(f"--age must be a positive number of Gyr (got {args.age:g})")
    for name in ("dm_sd", "ebv_sd", "age_sd"):
        v = getattr(args, name)
        if v is not None and not (math.isfinite(v) and v > 0):
            raise ValueError(f"--{name.replace('_', '-')} must be positive: a prior of zero width (got {v:g})")
    spread = str(args.ebv_spread).strip().lower()
    if spread not in ("prior", "free", "none"):
        try:
            spread = float(spread)
        except ValueError:
            raise ValueError(f"--ebv-spread must be prior, free, none or a positive number (got {args.ebv_spread!r})") \
                from None
        if not (math.isfinite(spread) and 0 < spread <= 0.25):
            raise ValueError(f"--ebv-spread must be a scale in (0, 0.25] mag (got {spread:g})")
    if args.max_steps < 100:
        raise ValueError("--max-steps must be at least 100")
    region = parse_floats(args.region, 4, "--region") if args.region else None
    from hbmodel.core.limits import check_budget, fit_estimate
    check_budget(fit_estimate(args.catalog, args.masses, max_steps=args.max_steps, out_dir=args.out),
                 max_memory=args.max_memory, max_disk=args.max_disk)
    # read everything before touching the output directory
    cat = None
    if args.catalog is not None:
        cols = canonical_columns(parse_mapping(args.columns, "--columns") or None)
        cat = read_catalog(args.catalog, columns=cols, required=list(bands) + [f"{b}_err" for b in bands])
    masses = None
    if args.masses:
        from hbmodel.io.catalogues import pick_column
        masses = read_catalog(args.masses)
        for name in ("mass", "mass_err"):  # present and numeric, or a one-line error before any work
            pick_column(masses, name, f"masses table {args.masses}")
    if cat is not None and args.distance_modulus is None:
        raise ValueError("a CMD fit needs --distance-modulus DM (prior mean; width --dm-sd)")
    pop = Population(args.feh, args.age, alpha_fe=args.alpha_fe, helium=args.helium)
    pri = Priors(distance_modulus=None if args.distance_modulus is None else (args.distance_modulus, args.dm_sd),
                 ebv=(args.ebv, args.ebv_sd), age_sd_gyr=args.age_sd).with_ebv_spread(spread)
    out_dir = None
    if args.out:  # refused now, not after the sampling
        from hbmodel.io.catalogues import check_output_dir
        check_output_dir(args.out, force=args.force)
    est = MassLossFit(pop, pri, args.model, bands=bands, colour=colour, region=region,
                      zero_points=not args.no_zero_points,
                      sampler=args.sampler, compare_models=not args.no_compare and cat is not None,
                      max_steps=args.max_steps, seed=args.seed,
                      progress=False if args.quiet else None)
    est.fit(cat, masses)
    res = est.result()
    if args.out:
        from hbmodel.outputs.reports import run_record, save_fit_products
        with staged_out_dir(args.out, force=args.force) as stage:  # every product, or none
            save_fit_products(est, stage, title=f"Mass-loss fit: {args.catalog or args.masses}",
                              config=run_record("fit", args),
                              inputs={"catalog": args.catalog, "masses": args.masses, "bands": ",".join(bands),
                                      "colour": "-".join(est.colour_),
                                      "[Fe/H]": args.feh, "[alpha/Fe]": args.alpha_fe, "age [Gyr]": args.age,
                                      "helium": args.helium, "model": est.model, "stars in region": est.n_stars_})
        out_dir = args.out
    if args.json:
        print(dumps(res))
        return 0
    s = res
    dropped = f" ({est.n_dropped_} rows with a missing value dropped)" if est.n_dropped_ else ""
    print(f"hbmodel fit: model {est.model}, {est.n_stars_} stars in the region, {est.n_masses_} masses{dropped}")
    for k in ("mass_loss", "mass_loss_sd", "hb_mass_mean", "eta", "distance_modulus", "ebv", "ebv_spread",
              "helium_fraction", "delta_y"):
        if k in s and s[k]["median"] is not None:
            print(f"  {k:18s} {format_interval(s[k])} {unit_of(k)}".rstrip())
    c = s["convergence"]
    n_eff = "—" if c["n_eff"] is None else f"{int(round(c['n_eff']))}"
    if est.sampler == "laplace":
        print(f"  Laplace approximation at the MAP ({n_eff} draws)")
    else:
        print(f"  converged: {'yes' if c['converged'] else 'no'}  (steps {c['n_steps']}, n_eff {n_eff})")
    gof = s.get("goodness_of_fit")
    if gof:
        print(f"  goodness of fit: posterior-predictive p = {gof['p_value']:.2f}")
    for w in s.get("warnings", []):
        print(f"  warning: {w}")
    if s.get("model_comparison"):
        mc = s["model_comparison"]
        print(f"  preferred model: {mc['preferred']} (dBIC = {mc['delta_bic']:.1f} over {mc['runner_up']}, "
              f"{mc['strength']})")
    if out_dir is not None:
        print(f"  results written to {out_dir}")
    return 0
