"""``hbmodel mock``: a mock catalogue of a population, observed."""
from __future__ import annotations

import numpy as np

from hbmodel.cli.common import (RenamedOption, add_population_arguments, colour_of, parse_floats, parse_mapping,
                                population_from_args)

NAME = "mock"
HELP = "generate a realistic mock catalogue (RGB, HB, early AGB, field) of a population"
DESCRIPTION = """Generate a mock photometric catalogue of a population.

example:
  hbmodel mock --feh -1.6 --alpha-fe 0.3 --age 12.5 --eta 0.45 --eta-sd 0.03 \\
      --n-hb 300 --bands V,I --distance-modulus 15.2 --ebv 0.05 --seed 7 --out mock.ecsv --plot cmd.png

Output format from the extension: .csv .ecsv .fits .vot/.xml .parquet; a directory ending in .parquet
with --chunk-size writes Parquet partitions (survey-size mocks).
"""


def _depths(text, bands):
    """--depth V=23,I=22.5 -> {band: limit} with canonical band names, each one of ``bands``;
    --depth survey -> the tabulated survey depths of every band (tables/survey_depths.csv)."""
    from hbmodel.photometry.magnitudes import resolve_band
    if text is not None and str(text).strip().casefold() == "survey":
        from hbmodel.observation.effects import survey_depth_5sigma
        return {b: survey_depth_5sigma(b) for b in bands}
    out = {}
    for key, value in parse_mapping(text, "--depth", numeric=True).items():
        band = resolve_band(key, "--depth")
        if band not in bands:
            raise ValueError(f"--depth band {band} is not among --bands {','.join(bands)}")
        out[band] = value
    return out


def add_arguments(p):
    add_population_arguments(p)
    n = p.add_argument_group("size (give one)").add_mutually_exclusive_group()
    n.add_argument("--n-hb", type=int, default=None, help="number of HB stars")
    n.add_argument("--total-mass", type=float, default=None, help="initial mass of the population (Msun)")
    o = p.add_argument_group("observation")
    o.add_argument("--bands", required=True, help="comma-separated bands, e.g. V,I (first = magnitude axis; "
                   "names are case-insensitive, aliases such as K = Ks accepted)")
    o.add_argument("--colour", "--color", dest="colour", action=RenamedOption, default=None, metavar="A-B",
                   help="colour of --plot and --field-box, two of --bands in any order (default FIRST-SECOND)")
    o.add_argument("--distance-modulus", type=float, default=0.0)
    o.add_argument("--ebv", type=float, default=0.0, help="mean E(B-V)")
    o.add_argument("--rv", type=float, default=3.1)
    o.add_argument("--extinction-law", default="F99", help="extinction law (F99, CCM89, G23 ...)")
    o.add_argument("--ebv-sd", type=float, default=0.0, help="Gaussian differential reddening (mag)")
    o.add_argument("--depth", default=None, help="5-sigma limits per band, e.g. V=23,I=22.5; 'survey' = the tabulated survey depths "
                        "(SDSS, PS1, DES, LSST, WISE: tables/survey_depths.csv)")
    o.add_argument("--completeness-m50", type=float, default=None, help="50%% completeness magnitude")
    o.add_argument("--completeness-width", type=float, default=0.15)
    o.add_argument("--binary-fraction", type=float, default=0.0, help="fraction of unresolved binaries")
    o.add_argument("--field-n", type=int, default=0, help="number of field contaminants")
    o.add_argument("--field-box", default=None, help="CMIN,CMAX,MBRIGHT,MFAINT box for uniform contaminants "
                   "(colour --colour, magnitude FIRST band)")
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
    from hbmodel.io.catalogues import read_catalog, write_table
    from hbmodel.observation.mock import PHASE_NAMES, ObservationSpec, make_mock_arrays, mock_column_info, mock_table

    from hbmodel.photometry.magnitudes import parse_bands, resolve_band
    bands = list(parse_bands(args.bands, "--bands"))
    colour = colour_of(args.colour, bands)
    if colour is None and len(bands) > 1:
        colour = (bands[0], bands[1])
    if (args.n_hb is None) == (args.total_mass is None):
        raise ValueError("give exactly one of --n-hb and --total-mass")
    if args.n_hb is not None and args.n_hb <= 0:
        raise ValueError(f"--n-hb must be positive (got {args.n_hb})")
    if args.total_mass is not None and not args.total_mass > 0:
        raise ValueError("--total-mass must be positive")
    box = None
    if args.field_box:
        box = tuple(parse_floats(args.field_box, 4, "--field-box (CMIN,CMAX,MBRIGHT,MFAINT)"))
        if colour is None or bands[0] not in colour:
            raise ValueError(f"--field-box needs a colour that contains the magnitude band {bands[0]} "
                             f"(got {'-'.join(colour) if colour else 'one band'}); set --colour")
        if not (box[0] < box[1] and box[2] < box[3]):
            raise ValueError(f"--field-box {args.field_box}: need CMIN < CMAX and MBRIGHT < MFAINT")
    window = None
    if args.window:
        parts = args.window.split(":")
        if len(parts) != 3:
            raise ValueError("--window must be BAND:BRIGHT:FAINT")
        try:
            window = (resolve_band(parts[0], "--window"), float(parts[1]), float(parts[2]))
        except ValueError as exc:
            if "band" in str(exc):
                raise
            raise ValueError("--window must be BAND:BRIGHT:FAINT") from None
        if not (np.isfinite(window[1]) and np.isfinite(window[2]) and window[1] < window[2]):
            raise ValueError(f"--window {args.window}: BRIGHT must be a smaller magnitude than FAINT "
                             "(e.g. I:13:16); this window holds no stars")
        if window[0] not in bands:
            raise ValueError(f"--window band {window[0]} is not among --bands {','.join(bands)}")
    field_table = read_catalog(args.field_catalog, required=bands) if args.field_catalog else None
    obs = ObservationSpec(distance_modulus=args.distance_modulus, ebv=args.ebv, rv=args.rv,
                          law=args.extinction_law, ebv_sd=args.ebv_sd,
                          depth=_depths(args.depth, bands) or None,
                          completeness_m50=args.completeness_m50, completeness_width=args.completeness_width,
                          completeness_band=bands[0], binary_fraction=args.binary_fraction,
                          n_field=args.field_n, field_box=box, field_table=field_table, window=window,
                          field_colour=colour if box else None)
    pop = population_from_args(args)
    if args.scheduler and not args.chunk_size:
        raise ValueError("--scheduler is used for chunked mocks: give --chunk-size too")
    if args.chunk_size:
        from hbmodel.observation.mock import write_chunked_mock
        parts = write_chunked_mock(pop, bands=bands, n_hb=args.n_hb, total_mass_msun=args.total_mass, obs=obs,
                                   seed=args.seed, out_dir=args.out, chunk_size=args.chunk_size,
                                   n_jobs=args.jobs, scheduler=args.scheduler, force=args.force,
                                   max_memory=args.max_memory, max_disk=args.max_disk)
        print(f"wrote {len(parts)} Parquet partitions to {args.out}")
        return 0
    from hbmodel.observation.mock import mock_estimate
    from hbmodel.core.limits import check_budget
    check_budget(mock_estimate(pop, bands=bands, obs=obs, out=args.out, n_hb=args.n_hb, total_mass_msun=args.total_mass,
                               plot=bool(args.plot)), max_memory=args.max_memory, max_disk=args.max_disk)
    from hbmodel.io.catalogues import check_output_file
    check_output_file(args.out, force=args.force)  # both outputs checked before any work: no table
    if args.plot:                                   # is left behind by a refused plot
        check_output_file(args.plot, force=args.force)
    rng = np.random.default_rng(args.seed)
    what = f"--window {window[0]}:{window[1]:g}:{window[2]:g}" if window else "the completeness limit"
    from hbmodel.observation.mock import EmptyMockError, streams_to_parquet, write_mock_parquet
    if str(args.out).lower().endswith(".parquet") and not args.plot and streams_to_parquet(obs, bands):
        # the same file, written a row group at a time while the rest of the stars are computed
        try:
            counts, _meta = write_mock_parquet(pop, bands=bands, rng=rng, path=args.out, n_hb=args.n_hb,
                                               total_mass_msun=args.total_mass, obs=obs, force=args.force,
                                               meta_extra={"seed": args.seed})
        except EmptyMockError:
            raise ValueError(f"no star survives {what}: the mock would be empty (nothing written)") from None
        _report(args.out, counts)
        return 0
    data, meta = make_mock_arrays(pop, bands=bands, rng=rng, n_hb=args.n_hb, total_mass_msun=args.total_mass,
                                  obs=obs)
    if len(data["phase"]) == 0:
        raise ValueError(f"no star survives {what}: the mock would be empty (nothing written)")
    meta = {**meta, "seed": args.seed}
    table = None
    if str(args.out).lower().endswith(".parquet"):  # straight from the arrays (phase as categories)
        from hbmodel.io.catalogues import write_parquet_columns
        write_parquet_columns(data, args.out, force=args.force, categories={"phase": PHASE_NAMES if meta["n_field"] else PHASE_NAMES[:3]},
                              meta={"hbmodel_mock": {k: v for k, v in meta.items() if k != "n_field"}},
                              column_info=mock_column_info(data))
    else:
        table = mock_table(data, meta)
        write_table(table, args.out, force=args.force)
    if args.plot:
        table = mock_table(data, meta) if table is None else table
        from hbmodel.io.figures import save_figure
        from hbmodel.outputs.plots import plot_cmd, plot_luminosity_function
        title = f"mock: [Fe/H] = {args.feh:+.2f}, {args.age:g} Gyr"
        if len(bands) > 1:  # a CMD; one band has no colour: its luminosity function instead
            fig, _ = plot_cmd(table, bands[0], colour or (bands[0], bands[1]), title=title)
        else:
            fig, _ = plot_luminosity_function(table, bands[0], title=title)
        save_figure(fig, args.plot, force=args.force, pdf=False)
    _report(args.out, np.bincount(data["phase"], minlength=len(PHASE_NAMES)))
    return 0


def _report(out, counts):
    from hbmodel.observation.mock import PHASE_NAMES
    counts = dict(zip(PHASE_NAMES, np.asarray(counts).tolist()))
    print(f"wrote {sum(counts.values())} stars to {out} " + ", ".join(f"{k}={v}" for k, v in counts.items() if v))
