"""``hbmodel distance``: red-clump distance with a population correction."""
from __future__ import annotations

import numpy as np

from hbmodel.cli.common import RenamedOption, canonical_columns, dumps, parse_floats, parse_mapping

NAME = "distance"
HELP = "red-clump distance of a field or cluster, with the population correction"
DESCRIPTION = """Fit the clump luminosity function of a catalogue and turn its peak into a distance.

examples:
  hbmodel distance field.ecsv --band Ks --feh 0.0 --age 4 --ebv 0.3 --json
  hbmodel distance field.ecsv --band Ks --colour J-Ks --reddening-from-colour --feh -0.2 --age-range 1:10
"""


def add_arguments(p):
    p.add_argument("catalog", help="catalogue file (.csv .ecsv .fits .vot .parquet)")
    p.add_argument("--band", required=True, help="band of the clump luminosity function (I or Ks best)")
    p.add_argument("--colour", "--color", dest="colour", action=RenamedOption, default=None, metavar="A-B",
                   help="colour for reddening, e.g. J-Ks (any band order; names case-insensitive)")
    p.add_argument("--columns", default=None, help="column mapping, e.g. Ks=kmag,J=jmag")
    g = p.add_argument_group("population")
    g.add_argument("--feh", type=float, required=True, help="[Fe/H] of the clump stars")
    g.add_argument("--feh-sd", type=float, default=0.0, help="spread / uncertainty of [Fe/H]")
    g.add_argument("--alpha-fe", type=float, default=0.0)
    ages = g.add_mutually_exclusive_group()
    ages.add_argument("--age", type=float, default=None, help="age in Gyr (single population)")
    ages.add_argument("--age-range", default=None, help="constant star formation between A1:A2 Gyr")
    g.add_argument("--age-sd", type=float, default=0.0, help="uncertainty of the age (Gyr)")
    g.add_argument("--eta", type=float, default=0.3, help="Reimers eta (default 0.3)")
    r = p.add_argument_group("reddening")
    r.add_argument("--ebv", type=float, default=None, help="E(B-V) (default 0 unless --reddening-from-colour)")
    r.add_argument("--ebv-sd", type=float, default=0.0, help="uncertainty of the mean E(B-V)")
    r.add_argument("--ebv-spread", type=float, default=0.0, metavar="SD",
                   help="differential reddening: scale of the half-normal prior of the star-to-star E(B-V) "
                        "spread, a nuisance of the clump LF fit (default 0: none)")
    r.add_argument("--reddening-from-colour", "--reddening-from-color", dest="reddening_from_colour",
                   action=RenamedOption, flag=True, help="derive E(B-V) from the clump colour")
    r.add_argument("--rv", type=float, default=3.1)
    r.add_argument("--extinction-law", default="F99")
    p.add_argument("--mag-range", "--region", dest="mag_range", action=RenamedOption, default=None,
                   metavar="MAG_BRIGHT,MAG_FAINT", help="fit window of the luminosity function (default: peak ± 1.5 mag)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--out", default=None, help="result directory (result.json, lf.png)")
    p.add_argument("--force", action="store_true")


def _population(feh, alpha, age, age_range, eta):
    from hbmodel.populations.grids import parse_range
    from hbmodel.populations.population import MassLoss, Population
    ml = MassLoss.from_eta(eta, 0.03)
    if age_range:
        a = parse_range(age_range.replace(":", ",") if age_range.count(":") == 1 else age_range, "--age-range")
        if len(a) != 2 or a[0] >= a[1]:
            raise ValueError("--age-range must be A1:A2 with A1 < A2")
        return Population.constant_star_formation(a[0], a[1], feh, alpha_fe=alpha, mass_loss=ml)
    if age is None:
        raise ValueError("give --age or --age-range")
    return Population(feh, age, alpha_fe=alpha, mass_loss=ml)


def population_sd(args, band, smear=0.05):
    """Spread of the model clump peak over the [Fe/H] and age uncertainties (finite differences)."""
    from hbmodel.inference.clump_distance import clump_model
    terms = []
    if args.feh_sd > 0:
        hi = clump_model(_population(min(args.feh + args.feh_sd, 0.5), args.alpha_fe, args.age, args.age_range,
                                     args.eta), band, smear_mag=smear).peak_absmag
        lo = clump_model(_population(max(args.feh - args.feh_sd, -2.5), args.alpha_fe, args.age, args.age_range,
                                     args.eta), band, smear_mag=smear).peak_absmag
        terms.append(0.5 * (hi - lo))
    if args.age_sd > 0 and args.age is not None and not args.age_range:
        hi = clump_model(_population(args.feh, args.alpha_fe, min(args.age + args.age_sd, 14.0), None, args.eta),
                         band, smear_mag=smear).peak_absmag
        lo = clump_model(_population(args.feh, args.alpha_fe, max(args.age - args.age_sd, 0.5), None, args.eta),
                         band, smear_mag=smear).peak_absmag
        terms.append(0.5 * (hi - lo))
    return float(np.sqrt(np.sum(np.square(terms)))) if terms else 0.0


def _report_inputs(args) -> dict:
    """Every input of a distance run, with its unit, for the report."""
    from hbmodel.inference.clump_distance import CALIBRATION_SD_MAG
    if args.age_range:
        age = f"{args.age_range.replace(':', ' – ')}, constant star formation"
    else:
        age = f"{args.age:g} ± {args.age_sd:g} (--age-sd)"
    redd = (f"from the clump colour {args.colour}" if args.reddening_from_colour
            else f"E(B − V) = {args.ebv or 0.0:g} ± {args.ebv_sd:g} mag (given)")
    return {"catalog": args.catalog, "band": args.band, "colour": args.colour,
            "[Fe/H] [dex]": f"{args.feh:g} ± {args.feh_sd:g} (--feh-sd)", "[alpha/Fe] [dex]": args.alpha_fe,
            "age [Gyr]": age, "Reimers η (mass loss of the clump model)": args.eta, "reddening": redd,
            "extinction law": f"{args.extinction_law}, R_V = {args.rv:g}",
            "fit window [mag]": args.mag_range or "automatic (peak ± 1.5 mag)",
            "clump calibration σ [mag]": CALIBRATION_SD_MAG, "column mapping": args.columns}


def run(args):
    from hbmodel.inference.clump_distance import measure_distance
    from hbmodel.io.catalogues import atomic_write_json, check_output_dir, drop_missing, read_catalog, staged_out_dir
    from hbmodel.photometry.magnitudes import parse_colour, resolve_band
    band = resolve_band(args.band, "--band")
    colour = parse_colour(args.colour, "--colour") if args.colour else None
    args.band, args.colour = band, ("-".join(colour) if colour else None)  # canonical names in the run record
    if args.reddening_from_colour and colour is None:
        raise ValueError("--reddening-from-colour needs --colour")
    if args.ebv is not None and args.ebv < 0:
        raise ValueError("E(B-V) must be non-negative")
    if not (np.isfinite(args.ebv_spread) and 0 <= args.ebv_spread <= 1):
        raise ValueError("--ebv-spread must be an E(B-V) spread scale between 0 and 1 mag")
    from hbmodel.core.limits import catalog_task_estimate, check_budget
    check_budget(catalog_task_estimate("distance", args.catalog, out=args.out), max_memory=args.max_memory,
                 max_disk=args.max_disk)
    mapping = canonical_columns(parse_mapping(args.columns, "--columns"))
    needed = [band] + (list(colour) if colour and args.reddening_from_colour else [])
    t = read_catalog(args.catalog, columns=mapping or None, required=sorted(set(needed)))
    if len(t) == 0:
        raise ValueError("the catalogue is empty")
    t, n_dropped = drop_missing(t, sorted(set(needed)))  # one missing-value policy: dropped and counted
    mag = np.asarray(t[band], float)
    err = np.asarray(t[f"{band}_err"], float) if f"{band}_err" in t.colnames else None
    region = None
    if args.mag_range:
        region = tuple(parse_floats(args.mag_range, 2, "--mag-range"))
        if region[0] >= region[1]:
            raise ValueError("--mag-range must be MAG_BRIGHT,MAG_FAINT with MAG_BRIGHT < MAG_FAINT")
    pop = _population(args.feh, args.alpha_fe, args.age, args.age_range, args.eta)
    out = check_output_dir(args.out, force=args.force) if args.out else None  # refused now, not after the work
    ebv = None if args.reddening_from_colour else (args.ebv or 0.0)
    cm = {b: np.asarray(t[b], float) for b in set(needed)} if ebv is None else None
    res = measure_distance(mag, pop, band, colour_mags=cm, colour=colour, ebv=ebv, ebv_sd=args.ebv_sd,
                           rv=args.rv, law=args.extinction_law, population_sd_mag=population_sd(args, band),
                           mag_range=region, mag_err=err, ebv_spread_sd=args.ebv_spread)
    from hbmodel.outputs.reports import distance_error_budget
    d = res.to_dict()
    d["n_rows_dropped_missing"] = n_dropped + res.n_dropped
    d["error_budget_mag"] = distance_error_budget(res)  # 1-sigma terms: statistical and systematic apart
    if out is not None:
        from hbmodel.io.figures import save_figure
        from hbmodel.outputs.plots import plot_clump_lf
        from hbmodel.outputs.reports import distance_report, format_interval, run_record, write_report
        with staged_out_dir(out, force=args.force) as stage:  # every product, or none
            atomic_write_json(stage / "result.json", d)
            atomic_write_json(stage / "config.json", run_record("distance", args))
            fig, _ = plot_clump_lf(mag[np.isfinite(mag)], res.lf, band=args.band,
                                   title=f"$(m-M)_0$ = {format_interval(res.distance_modulus)} mag")
            save_figure(fig, stage / "lf.png")
            write_report(stage / "report.md", None, text=distance_report(
                res, title=f"Red-clump distance: {args.catalog}", plots=["lf.png"], inputs=_report_inputs(args)))
    if args.json:
        d.pop("lf_fit")
        print(dumps(d))
    else:
        dm = res.distance_modulus
        dk = res.distance_kpc
        from hbmodel.outputs.reports import distance_error_budget, format_value, lf_warning
        eb = distance_error_budget(res)
        print(f"clump peak {args.band} = {format_value(res.clump_peak_mag, res.clump_peak_mag_err)} mag "
              f"({res.n_stars} stars in the fit window"
              + (f"; {d['n_rows_dropped_missing']} rows with a missing value dropped" if d["n_rows_dropped_missing"] else "")
              + ")")
        print(f"model clump M_{args.band} = {format_value(res.clump_absmag, res.clump_absmag_err)} mag "
              f"(population correction {res.population_correction:+.3f} mag vs the solar-neighbourhood clump)")
        print(f"E(B-V) = {format_value(res.ebv, res.ebv_err)} mag, A_{args.band} = {res.extinction_mag:.3f} mag")
        if res.ebv_spread is not None:
            sp = res.ebv_spread
            print(f"star-to-star E(B-V) spread {sp['median']:.3f} [{sp['lo']:.3f}, {sp['hi']:.3f}] mag "
                  f"(half-normal prior of scale {sp['prior_scale']:g})")
        print(f"distance modulus {format_value(dm['median'], dm['hi'] - dm['median'], dm['median'] - dm['lo'])} "
              f"mag (stat {eb['statistical']:.3f}, sys {eb['systematic']:.3f} mag); "
              f"distance {format_value(dk['median'], dk['hi'] - dk['median'], dk['median'] - dk['lo'])} kpc")
        w = lf_warning(res.lf)
        if w:
            print(f"warning: {w}")
    return 0
