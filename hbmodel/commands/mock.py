"""``hbmodel mock``: a mock catalogue of a population, observed."""
from __future__ import annotations

import numpy as np

from ._common import add_population_arguments, parse_floats, parse_mapping, population_from_args

NAME = "mock"
HELP = "generate a realistic mock catalogue (RGB, HB, early AGB, field) of a population"
DESCRIPTION = """Generate a mock photometric catalogue of a population.

example:
  hbmodel mock --feh -1.6 --alpha-fe 0.3 --age 12.5 --eta 0.45 --eta-sd 0.03 \\
      --n-hb 300 --bands V,I --distance-modulus 15.2 --ebv 0.05 --seed 7 --out mock.ecsv --plot cmd.png

Output format from the extension: .csv .ecsv .fits .vot/.xml .parquet; a directory ending in .parquet
with --chunk-size writes Parquet partitions (survey-size mocks).
"""


def _band_map(text, what):
    return parse_mapping(text, what, numeric=True)


def add_arguments(p):
    add_population_arguments(p)
    n = p.add_argument_group("size (give one)")
    n.add_argument("--n-hb", type=int, default=None, help="number of HB stars")
    n.add_argument("--total-mass", type=float, default=None, help="initial mass of the population (Msun)")
    o = p.add_argument_group("observation")
    o.add_argument("--bands", required=True, help="comma-separated bands, e.g. V,I (first = magnitude axis)")
    o.add_argument("--distance-modulus", type=float, default=0.0)
    o.add_argument("--ebv", type=float, default=0.0, help="mean E(B-V)")
    o.add_argument("--rv", type=float, default=3.1)
    o.add_argument("--extinction-law", default="F99", help="extinction law (F99, CCM89, G23 ...)")
    o.add_argument("--ebv-sd", type=float, default=0.0, help="Gaussian differential reddening (mag)")
    o.add_argument("--depth", default=None, help="5-sigma limits per band, e.g. V=23,I=22.5")
    o.add_argument("--completeness-m50", type=float, default=None, help="50%% completeness magnitude")
    o.add_argument("--completeness-width", type=float, default=0.15)
    o.add_argument("--binary-fraction", type=float, default=0.0, help="fraction of unresolved binaries")
    o.add_argument("--field-n", type=int, default=0, help="number of field contaminants")
    o.add_argument("--field-box", default=None, help="CMIN,CMAX,MBRIGHT,MFAINT box for uniform contaminants")
    o.add_argument("--field-catalog", default=None, help="field catalogue to resample contaminants from")
    o.add_argument("--window", default=None, help="keep only BAND:BRIGHT:FAINT, e.g. I:13:16")
    p.add_argument("--seed", type=int, default=0, help="random seed (same seed -> identical file)")
    p.add_argument("--out", required=True, help="output file (.csv .ecsv .fits .vot .xml .parquet)")
    p.add_argument("--force", action="store_true", help="overwrite an existing output")
    p.add_argument("--plot", default=None, help="write a CMD plot (PNG)")
    p.add_argument("--chunk-size", type=int, default=None, help="stars per Parquet partition (survey-size mocks)")
    p.add_argument("--jobs", type=int, default=1, help="parallel workers for chunked mocks")
    p.add_argument("--scheduler", default=None, help="Dask scheduler address for chunked mocks")


def run(args):
    from ..io import read_catalog, write_table
    from ..plot_style import save_figure
    from ..mock import ObservationSpec, make_mock

    bands = [b.strip() for b in args.bands.split(",") if b.strip()]
    if not bands:
        raise ValueError("--bands must list at least one band")
    from ..photometry import get_band
    for b in bands:
        get_band(b)
    if (args.n_hb is None) == (args.total_mass is None):
        raise ValueError("give exactly one of --n-hb and --total-mass")
    if args.n_hb is not None and args.n_hb <= 0:
        raise ValueError(f"--n-hb must be positive (got {args.n_hb})")
    if args.total_mass is not None and not args.total_mass > 0:
        raise ValueError("--total-mass must be positive")
    box = None
    if args.field_box:
        box = tuple(parse_floats(args.field_box, 4, "--field-box (CMIN,CMAX,MBRIGHT,MFAINT)"))
    window = None
    if args.window:
        parts = args.window.split(":")
        if len(parts) != 3:
            raise ValueError("--window must be BAND:BRIGHT:FAINT")
        try:
            window = (parts[0], float(parts[1]), float(parts[2]))
        except ValueError:
            raise ValueError("--window must be BAND:BRIGHT:FAINT") from None
    field_table = read_catalog(args.field_catalog, required=bands) if args.field_catalog else None
    obs = ObservationSpec(distance_modulus=args.distance_modulus, ebv=args.ebv, rv=args.rv,
                          law=args.extinction_law, ebv_sd=args.ebv_sd,
                          depth=_band_map(args.depth, "--depth") or None,
                          completeness_m50=args.completeness_m50, completeness_width=args.completeness_width,
                          completeness_band=bands[0], binary_fraction=args.binary_fraction,
                          n_field=args.field_n, field_box=box, field_table=field_table, window=window)
    pop = population_from_args(args)
    if args.scheduler and not args.chunk_size:
        raise ValueError("--scheduler is used for chunked mocks: give --chunk-size too")
    if args.chunk_size:
        from ..mock import write_chunked_mock
        parts = write_chunked_mock(pop, bands=bands, n_hb=args.n_hb, total_mass_msun=args.total_mass, obs=obs,
                                   seed=args.seed, out_dir=args.out, chunk_size=args.chunk_size,
                                   n_jobs=args.jobs, scheduler=args.scheduler, force=args.force)
        print(f"wrote {len(parts)} Parquet partitions to {args.out}")
        return 0
    rng = np.random.default_rng(args.seed)
    table = make_mock(pop, bands=bands, rng=rng, n_hb=args.n_hb, total_mass_msun=args.total_mass, obs=obs)
    write_table(table, args.out, force=args.force)
    if args.plot:
        from ..plots import plot_cmd, plot_luminosity_function
        title = f"mock: [Fe/H] = {args.feh:+.2f}, {args.age:g} Gyr"
        if len(bands) > 1:  # a CMD; one band has no colour: its luminosity function instead
            fig, _ = plot_cmd(table, bands[0], (bands[0], bands[1]), title=title)
        else:
            fig, _ = plot_luminosity_function(table, bands[0], title=title)
        save_figure(fig, args.plot, force=args.force, pdf=False)
    counts = {ph: int(np.sum(table["phase"] == ph)) for ph in ("rgb", "hb", "agb", "field")}
    print(f"wrote {len(table)} stars to {args.out} "
          + ", ".join(f"{k}={v}" for k, v in counts.items() if v))
    return 0
