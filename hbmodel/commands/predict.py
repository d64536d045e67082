"""``hbmodel predict``: deterministic HB / clump predictions for a population."""
from __future__ import annotations

from ._common import add_population_arguments, dumps, population_from_args

NAME = "predict"
HELP = "predict HB/clump morphology, RR Lyrae content and clump magnitudes for a population"
DESCRIPTION = """Predict the horizontal branch and red clump of a stellar population.

example:
  hbmodel predict --feh -1.5 --alpha-fe 0.3 --age 12.5 --eta 0.45 --eta-sd 0.03 --json
"""


def add_arguments(p):
    add_population_arguments(p)
    p.add_argument("--json", action="store_true", help="print one JSON object")


def _fmt(v, spec=".3f"):
    return "—" if v is None else format(v, spec)


def run(args):
    pop = population_from_args(args)
    res = pop.predict()
    if args.json:
        print(dumps(res))
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
    return 0
