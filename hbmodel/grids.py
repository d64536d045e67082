"""Prediction grids: HB type versus [Fe/H] (the classic diagnostic diagram) and the clump
absolute-magnitude surface over age x [Fe/H] (the population-correction surface)."""
from __future__ import annotations

import numpy as np

from .population import MassLoss, Population

__all__ = ["parse_range", "hb_type_grid", "clump_grid"]


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

    from .photometry import get_band
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
