"""``hbmodel predict``: deterministic HB / clump predictions for a population."""
from __future__ import annotations

import re

import numpy as np

from hbmodel.cli.common import add_population_arguments, dumps, population_from_args

NAME = "predict"
HELP = "predict HB/clump morphology, RR Lyrae content and clump magnitudes for a population"
DESCRIPTION = """Predict the horizontal branch and red clump of a stellar population.

examples:
  hbmodel predict --feh -1.5 --alpha-fe 0.3 --age 12.5 --eta 0.45 --eta-sd 0.03 --json
  hbmodel predict --feh -1.5 --alpha-fe 0.3 --age 12.5 --eta 0.45 \
      --grid feh=-2.3:-0.5:0.1 --series age=11,12.5,13.5 --out hbtype/
  hbmodel predict --feh 0 --age 4 --eta 0.3 --clump-grid age=1:12:1,feh=-1:0.4:0.2 --bands I,Ks --out clump/
"""


def add_arguments(p):
    add_population_arguments(p)
    p.add_argument("--json", action="store_true", help="print one JSON object")
    g = p.add_argument_group("grids")
    g.add_argument("--grid", default=None, help="HB-type diagram over [Fe/H]: feh=START:STOP:STEP")
    g.add_argument("--series", default=None, help="lines of the HB-type diagram: age=V1,V2,... or eta=V1,...")
    g.add_argument("--clump-grid", default=None,
                   help="clump magnitudes over age=A:B:S,feh=F:G:S (either order; a list v1,v2,... for either)")
    g.add_argument("--bands", default=None,
                   help="bands of the clump magnitudes (default: all bands; I,Ks for --clump-grid)")
    g.add_argument("--out", default=None, help="output directory of a grid (table + PNG)")
    g.add_argument("--force", action="store_true", help="write into an existing output directory")
    g.add_argument("--max-models", type=int, default=None, metavar="N",
                   help="largest number of models in a grid (default 10000, about 10 minutes)")


def envelope_note(pop, res) -> str | None:
    """Why HB quantities are missing (—) or describe only part of the stars: envelopes lost on the RGB."""
    lost = float(res.get("fraction_envelope_lost") or 0.0)
    if lost <= 0.0:
        return None
    ml = pop.mass_loss
    why = ""
    if ml.kind == "eta":
        from hbmodel.physics.mass_loss import ETA_RANGE
        eta_lost = pop._eta_map(pop.subpopulations[0], ETA_RANGE[1])[2]
        if np.isfinite(eta_lost):
            why = (f"; with the {ml.law} law at [Fe/H] {pop.subpopulations[0].composition.feh:+.2f} and this age "
                   f"the envelope is gone for eta >= {eta_lost:.2f} (the law's calibrated range is "
                   f"[{ETA_RANGE[0]:g}, {ETA_RANGE[1]:g}]; given {ml.describe()})")
    if res.get("hb_mass_mean") is None:
        return (f"no star reaches the HB: the RGB mass loss removes the whole envelope "
                f"({res['tip_mass'] - res['core_mass']:.3f} Msun above the {res['core_mass']:.3f} Msun helium "
                f"core), so the stars leave the RGB as helium white dwarfs and every HB quantity is undefined{why}")
    return (f"{100 * lost:.0f}% of the stars lose their whole envelope on the RGB and never reach the HB; "
            f"the HB quantities describe the others{why}")


def _fmt(v, spec=".3f"):
    return "—" if v is None else format(v, spec)


def _clump_grid_spec(text):
    """``age=A:B:S,feh=F:G:S`` (either order, spaces allowed; each a range or a list) -> (age, feh) texts."""
    usage = f"--clump-grid must be age=A:B:S,feh=F:G:S (either order; lists v1,v2,... also work), got {text!r}"
    spec = {}
    for part in re.split(r",(?=\s*[A-Za-z_]\w*\s*=)", text):  # a comma starts a new key only before NAME=
        key, eq, value = (x.strip() for x in part.partition("="))
        if not eq or key not in ("age", "feh") or key in spec or not value:
            raise ValueError(usage)
        spec[key] = value
    if set(spec) != {"age", "feh"}:
        raise ValueError(usage)
    return spec["age"], spec["feh"]


def _grid(args):
    from hbmodel.populations.grids import clump_grid, grid_estimate, hb_type_grid, parse_range, range_count
    from hbmodel.photometry.magnitudes import parse_bands
    from hbmodel.io.catalogues import prepare_out_dir, write_table
    from hbmodel.io.figures import save_figure
    from hbmodel.outputs.plots import plot_clump_grid, plot_hb_type_grid
    from hbmodel.core.limits import check_budget

    def budget(n_models, what):  # before any model is made
        check_budget(grid_estimate(n_models, args.out, what), max_memory=args.max_memory, max_disk=args.max_disk,
                     max_models=args.max_models)
    if not args.out:
        raise ValueError("a grid needs --out DIR")
    if args.age is None:
        raise ValueError("give --age (the base population of the grid)")
    eta = args.eta if args.eta is not None else 0.45
    if args.grid is not None:
        key, _, rng = args.grid.partition("=")
        if key.strip() != "feh":
            raise ValueError("--grid must be feh=START:STOP:STEP")
        series, vals = "age", None
        if args.series:
            series, _, vals = args.series.partition("=")
            series = series.strip()
        budget(range_count(rng, "--grid") * (range_count(vals, "--series") if vals is not None else 1),
               "this HB-type grid")
        fehs = parse_range(rng, "--grid")
        values = np.array([args.age]) if vals is None else parse_range(vals, "--series")
        out = prepare_out_dir(args.out, force=args.force)
        t = hb_type_grid(fehs, series, values, age_gyr=args.age, alpha_fe=args.alpha_fe, eta=eta,
                         eta_sd=args.eta_sd, helium=args.helium, law=args.law)
        write_table(t, out / "hb_type_grid.ecsv", force=args.force)
        fig, _ = plot_hb_type_grid(t)
        save_figure(fig, out / "hb_type_grid.png", force=args.force)
        print(f"wrote {out / 'hb_type_grid.ecsv'} and {out / 'hb_type_grid.png'} ({len(t)} models)")
        return 0
    age_txt, feh_txt = _clump_grid_spec(args.clump_grid)
    budget(range_count(age_txt, "--clump-grid age") * range_count(feh_txt, "--clump-grid feh"), "this clump grid")
    ages, fehs = parse_range(age_txt, "--clump-grid age"), parse_range(feh_txt, "--clump-grid feh")
    bands = list(parse_bands(args.bands or "I,Ks", "--bands"))
    out = prepare_out_dir(args.out, force=args.force)
    t = clump_grid(ages, fehs, bands, alpha_fe=args.alpha_fe, eta=eta, eta_sd=args.eta_sd, helium=args.helium,
                   law=args.law)
    write_table(t, out / "clump_grid.ecsv", force=args.force)
    for b in bands:
        fig, _ = plot_clump_grid(t, b, eta=eta)
        save_figure(fig, out / f"clump_grid_{b}.png", force=args.force)
    print(f"wrote {out / 'clump_grid.ecsv'} and {len(bands)} plots ({len(t)} models)")
    return 0


def run(args):
    from hbmodel.photometry.magnitudes import parse_bands
    if args.bands is not None:  # checked in every mode: an unknown band is an error, never ignored
        args.bands = ",".join(parse_bands(args.bands, "--bands"))
    if args.grid is not None or args.clump_grid is not None:  # an empty grid option is an error, not a prediction
        return _grid(args)
    from hbmodel.populations.grids import grid_estimate
    from hbmodel.core.limits import check_budget
    check_budget(grid_estimate(1, None, "this prediction"), max_memory=args.max_memory, max_models=args.max_models)
    pop = population_from_args(args)
    res = pop.predict(bands=tuple(args.bands.split(",")) if args.bands else None)
    note = envelope_note(pop, res)
    if args.json:
        print(dumps({**res, "notes": [note] if note else []}))
        return 0
    print(f"Population: [Fe/H] = {args.feh:+.2f}, [alpha/Fe] = {args.alpha_fe:+.2f}, age = {args.age:g} Gyr, "
          f"Y = {pop.subpopulations[0].composition.y:.3f}; mass loss {pop.mass_loss.describe()}")
    print(f"  RGB-tip mass        {_fmt(res['tip_mass'])} Msun    core mass at flash {_fmt(res['core_mass'])} Msun")
    print(f"  mean RGB mass loss  {_fmt(res['mass_loss'])} Msun    (eta = {_fmt(res.get('eta'))})")
    print(f"  HB mass             {_fmt(res['hb_mass_mean'])} ± {_fmt(res['hb_mass_sd'])} Msun; "
          f"HB lifetime {_fmt(res['hb_lifetime_myr'], '.0f')} Myr")
    print(f"  HB median Teff      {_fmt(res['hb_teff_median'], '.0f')} K, log g {_fmt(res['hb_logg_median'], '.2f')}")
    if res.get("hb_type") is not None:
        print(f"  HB type (B-R)/(B+V+R) {res['hb_type']:+.2f}   B:V:R = {res['fraction_blue']:.2f}:"
              f"{res['fraction_rr']:.2f}:{res['fraction_red']:.2f}   R-parameter {_fmt(res.get('r_parameter'), '.2f')}")
        print(f"  RR Lyrae mean fundamentalised period {_fmt(res.get('rr_period_mean'))} d; "
              f"ZAHB M_V at the strip {_fmt(res.get('zahb_mv_rr'), '.2f')}")
    if res.get("clump_absmag"):
        mags = "  ".join(f"{b}={v:+.2f}" for b, v in res["clump_absmag"].items())
        print(f"  clump / red HB (Teff {res['clump_teff']:.0f} K): {mags}")
    if note:
        print(f"  note: {note}")
    return 0
