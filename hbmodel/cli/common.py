"""Argument groups shared by several sub-commands (population, mass loss)."""
from __future__ import annotations

import argparse
import sys
import math

import numpy as np

from hbmodel.core.files import json_text


def toml_parser():
    """The TOML parser module: the standard library's ``tomllib`` (Python >= 3.11), else the ``tomli``
    package (a dependency on Python 3.10); imported on use so that no command needs it to start."""
    try:
        import tomllib
    except ImportError:
        try:
            import tomli as tomllib
        except ImportError:
            raise ValueError("reading TOML needs Python >= 3.11 or the tomli package (pip install tomli)") from None
    return tomllib


class RenamedOption(argparse.Action):
    """An option under its new name (the first option string) that still accepts its former spelling(s)
    for one release, with a one-line warning on stderr (issue 14: one spelling, 'colour', everywhere).

    ``flag=True`` makes it a switch (``store_true``)."""

    def __init__(self, option_strings, dest, flag=False, **kw):
        self.flag = flag
        if flag:
            kw.update(nargs=0, default=kw.get("default", False))
        super().__init__(option_strings, dest, **kw)

    def __call__(self, parser, namespace, values, option_string=None):
        if option_string is not None and option_string != self.option_strings[0]:
            warn_renamed(option_string, self.option_strings[0])
        setattr(namespace, self.dest, True if self.flag else values)


def warn_renamed(old: str, new: str) -> None:
    print(f"hbmodel: warning: {old} is deprecated and will be removed in the next release; use {new}",
          file=sys.stderr)


def renamed_config_keys(parser: argparse.ArgumentParser) -> dict:
    """Former config-file keys (dest form) of the parser's renamed options -> their current dest."""
    out = {}
    for a in parser._actions:
        if isinstance(a, RenamedOption):
            for s in a.option_strings[1:]:
                out[s.lstrip("-").replace("-", "_")] = a.dest
    return out


def _law_name(text: str) -> str:
    """``--law``: the name of a row of tables/mass_loss_laws.csv (checked at parse time, so that a config-file
    value is named by its key)."""
    from hbmodel.physics.mass_loss import check_law
    try:
        return check_law(text.strip())
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def add_population_arguments(p: argparse.ArgumentParser, *, mass_loss_required=True, age_required=True):
    g = p.add_argument_group("population")
    g.add_argument("--feh", type=float, required=True, help="[Fe/H] (dex), -2.5 ... +0.5")
    g.add_argument("--alpha-fe", type=float, default=0.0, help="[alpha/Fe] (dex), default 0")
    g.add_argument("--age", type=float, required=age_required, help="age in Gyr (0.5 ... 14)")
    g.add_argument("--helium", type=float, default=None,
                   help="initial helium mass fraction Y (default: Yp + 1.5 Z)")
    g.add_argument("--helium-enriched-fraction", type=float, default=0.0,
                   help="fraction of stars enriched in helium (multiple populations)")
    g.add_argument("--delta-y", type=float, default=0.0, help="helium enrichment of that fraction")
    m = p.add_argument_group("RGB mass loss (give one of --eta, --mass-loss, --hb-masses)")
    one = m.add_mutually_exclusive_group()
    one.add_argument("--eta", type=float, default=None, help="mass-loss efficiency of --law")
    m.add_argument("--eta-sd", type=float, default=0.0, help="star-to-star Gaussian spread in eta")
    one.add_argument("--mass-loss", type=float, default=None, help="mean integrated RGB mass loss (Msun)")
    m.add_argument("--mass-loss-sd", type=float, default=0.0, help="star-to-star spread of the loss (Msun)")
    m.add_argument("--law", default="reimers", type=_law_name,
                   help="mass-loss law, a row of tables/mass_loss_laws.csv: reimers (default), schroeder_cuntz")
    one.add_argument("--hb-masses", default=None, metavar="FILE",
                   help="user HB-mass distribution: a table with a 'mass' (or 'mass_msun') column (replaces --eta/--mass-loss)")
    p.set_defaults(_mass_loss_required=mass_loss_required)


def add_resource_arguments(p: argparse.ArgumentParser):
    """--max-memory / --max-disk, on every command (see :mod:`hbmodel.core.limits`)."""
    from hbmodel.core.limits import size_argument
    g = p.add_argument_group("resource limits (default: 80% of the available memory, 90% of the free disk)")
    g.add_argument("--max-memory", type=size_argument, default=None, metavar="SIZE",
                   help="largest memory the run may plan to use, e.g. 4G or 500M")
    g.add_argument("--max-disk", type=size_argument, default=None, metavar="SIZE",
                   help="largest disk space the run's output may plan to use, e.g. 20G")


def mass_loss_from_args(args):
    from hbmodel.populations.population import MassLoss
    given = [x is not None for x in (args.eta, args.mass_loss, args.hb_masses)]
    if sum(given) > 1:
        raise ValueError("give only one of --eta, --mass-loss and --hb-masses")
    if args.hb_masses is not None:
        from hbmodel.io.catalogues import read_catalog
        from hbmodel.io.catalogues import pick_column
        t = read_catalog(args.hb_masses)
        col = pick_column(t, "mass", f"HB-mass table {args.hb_masses}")
        return MassLoss.from_hb_masses(np.asarray(t[col], float))
    if args.eta is not None:  # MassLoss validates the values (one-line ValueError)
        return MassLoss.from_eta(args.eta, args.eta_sd, args.law)
    if args.mass_loss is not None:
        return MassLoss.from_delta_m(args.mass_loss, args.mass_loss_sd, args.law)
    if getattr(args, "_mass_loss_required", True):
        raise ValueError("give the RGB mass loss: --eta ETA or --mass-loss DM (Msun)")
    return None


def population_from_args(args, mass_loss=None):
    from hbmodel.populations.population import Population
    if args.age is not None and not (math.isfinite(args.age) and args.age > 0):
        raise ValueError(f"--age must be a positive number of Gyr (got {args.age:g})")
    ml = mass_loss if mass_loss is not None else mass_loss_from_args(args)
    return Population(args.feh, args.age, alpha_fe=args.alpha_fe, helium=args.helium, mass_loss=ml,
                      helium_enriched_fraction=args.helium_enriched_fraction, helium_delta_y=args.delta_y)


def dumps(obj) -> str:
    """The JSON printed by the commands (:func:`hbmodel.core.files.json_text`)."""
    return json_text(obj, ensure_ascii=True)


def parse_mapping(text, what, *, numeric=False):
    """'A=x,B=y' -> {'A': 'x', 'B': 'y'} (values as floats with ``numeric``); empty text -> {}."""
    out = {}
    if not text:
        return out
    for item in text.split(","):
        if "=" not in item:
            raise ValueError(f"{what}: expected NAME=VALUE pairs, got {item!r}")
        k, v = (x.strip() for x in item.split("=", 1))
        if numeric:
            try:
                v = float(v)
            except ValueError:
                raise ValueError(f"{what}: {v!r} is not a number") from None
        out[k] = v
    return out


def parse_floats(text, n, what):
    """'a,b,...' -> list of ``n`` finite floats, or a one-line ValueError naming the option."""
    try:
        vals = [float(v) for v in str(text).split(",")]
    except ValueError:
        raise ValueError(f"{what} must be {n} comma-separated numbers (got {text!r})") from None
    if len(vals) != n or not all(math.isfinite(v) for v in vals):
        raise ValueError(f"{what} must be {n} comma-separated finite numbers (got {text!r})")
    return vals


def canonical_columns(mapping: dict | None) -> dict | None:
    """A ``--columns`` mapping with band keys (and ``<band>_err``, ``<band>_flux_over_error``) under their
    canonical band names."""
    from hbmodel.photometry.magnitudes import resolve_band
    if not mapping:
        return mapping

    def canon(key):
        base, err = key, ""
        for suffix in ("_err", "_flux_over_error"):
            if key.endswith(suffix):
                base, err = key[: -len(suffix)], suffix
        try:
            return resolve_band(base) + err
        except ValueError:
            return key  # not a band (e.g. teff, mass)
    return {canon(k): v for k, v in mapping.items()}


def colour_of(text, bands, what="--colour"):
    """``--colour A-B`` as canonical bands, which must be among ``bands``; None when not given."""
    from hbmodel.photometry.magnitudes import parse_colour
    if not text:
        return None
    colour = parse_colour(text, what)
    missing = [b for b in colour if b not in bands]
    if missing:
        raise ValueError(f"{what} {colour[0]}-{colour[1]}: band {missing[0]} is not among the bands "
                         f"{','.join(bands)}")
    return colour
