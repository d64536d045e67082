"""Prediction grids: HB type versus [Fe/H] (the classic diagnostic diagram) and the clump
absolute-magnitude surface over age x [Fe/H] (the population-correction surface)."""
from __future__ import annotations

import numpy as np

from hbmodel.populations.population import MassLoss, Population

__all__ = ["parse_range", "range_count", "hb_type_grid", "clump_grid", "grid_estimate"]

#: Measured cost of one grid model (``Population.predict``: 0.04-0.06 s on one core), rounded up.
SECONDS_PER_MODEL = 0.1


def parse_range(text: str, name: str):
    """'a:b:step' (inclusive) or 'v1,v2,...' -> float array."""
    try:
        if ":" in text:
            a, b, st = (float(x) for x in text.split(":"))
            if st <= 0 or b < a:
                raise ValueError
            return np.round(np.arange(a, b + 0.5 * st, st), 10)
        return np.array([float(x) for x in text.split(",") if x.strip()])
    except ValueError:
        raise ValueError(f"{name}: expected START:STOP:STEP or a comma-separated list, got {text!r}") from None


def range_count(text: str, name: str) -> int:
    """Number of values :func:`parse_range` gives for ``text``, counted without making them."""
    if ":" not in text:
        return len(parse_range(text, name))
    try:
        a, b, st = (float(x) for x in text.split(":"))
        n = (b - a) / st + 0.5
        if not (np.isfinite(n) and st > 0 and b >= a):
            raise ValueError
    except (ValueError, ZeroDivisionError):
        raise ValueError(f"{name}: expected START:STOP:STEP or a comma-separated list, got {text!r}") from None
    return int(np.ceil(n))


def grid_estimate(n_models: int, out_dir, what: str):
    """:class:`hbmodel.core.limits.Estimate` of a prediction grid of ``n_models`` populations written to
    ``out_dir`` (an ECSV row and a few kB of memory per model, plus the plots; no disk without
    ``out_dir``)."""
    from hbmodel.core.limits import Estimate
    return Estimate(what, models=int(n_models), memory_bytes=4096.0 * n_models,
                    disk_bytes=400.0 * n_models + 2**20 if out_dir is not None else 0.0, disk_path=out_dir,
                    seconds=SECONDS_PER_MODEL * n_models, detail=f"{SECONDS_PER_MODEL:g} s per model" if n_models > 1 else "")


def hb_type_grid(fehs, series: str, series_values, *, age_gyr=12.5, alpha_fe=0.3, eta=0.45, eta_sd=0.03,
                 helium=None, law="reimers"):
    """Table of HB type, B:V:R fractions and mean RR Lyrae period over [Fe/H] for a series in age or eta."""
    from astropy.table import Table
    if series not in ("age", "eta"):
        raise ValueError("the series parameter must be 'age' or 'eta'")
    rows = []
    for sv in series_values:
        for feh in fehs:
            age = sv if series == "age" else age_gyr
            e = sv if series == "eta" else eta
            pop = Population(float(feh), float(age), alpha_fe=alpha_fe, helium=helium,
                             mass_loss=MassLoss.from_eta(e, eta_sd, law))
            d = pop.predict(bands=("V",))
            rows.append((series, float(sv), float(feh), d["hb_type"], d["fraction_blue"], d["fraction_rr"],
                         d["fraction_red"], np.nan if d["rr_period_mean"] is None else d["rr_period_mean"],
                         d["hb_mass_mean"]))
    return Table(rows=rows, names=("series", "series_value", "feh", "hb_type", "fraction_blue", "fraction_rr",
                                   "fraction_red", "rr_period_mean", "hb_mass_mean"))


def clump_grid(ages, fehs, bands, *, alpha_fe=0.0, eta=0.3, eta_sd=0.03, helium=None, law="reimers"):
    """Clump median absolute magnitude (and spread) per band over age x [Fe/H]."""
    from astropy.table import Table

    from hbmodel.photometry.magnitudes import get_band
    bands = tuple(get_band(b).name for b in bands)  # canonical names (aliases such as K -> Ks)
    rows = []
    for age in ages:
        for feh in fehs:
            pop = Population(float(feh), float(age), alpha_fe=alpha_fe, helium=helium,
                             mass_loss=MassLoss.from_eta(eta, eta_sd, law))
            d = pop.predict(bands=tuple(bands))
            mags = d.get("clump_absmag") or {}
            sp = d.get("clump_absmag_spread") or {}
            rows.append([float(age), float(feh), d.get("clump_teff") or np.nan]
                        + [mags.get(b, np.nan) for b in bands] + [sp.get(b, np.nan) for b in bands])
    names = ["age_gyr", "feh", "clump_teff"] + [f"M_{b}" for b in bands] + [f"M_{b}_spread" for b in bands]
    return Table(rows=rows, names=names)
