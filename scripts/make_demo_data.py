#!/usr/bin/env python3
"""Regenerate the demo's invented observations (hbmodel/demo_data/*.ecsv) from scenario.toml.

Only observables are written (magnitudes and errors); the truth stays in scenario.toml.
"""
import sys
from pathlib import Path

import numpy as np

from hbmodel.cli.common import toml_parser
from hbmodel.io.catalogues import write_table
from hbmodel.observation.mock import ObservationSpec, make_mock
from hbmodel.populations.population import MassLoss, Population

HERE = Path(__file__).resolve().parent.parent / "hbmodel" / "demo_data"


def population(s):
    ml = MassLoss.from_eta(s["eta"], s["eta_sd"])
    if "age_range" in s:
        ages = np.geomspace(*s["age_range"], 8)
        return Population.from_history(ages, np.gradient(ages), s["feh"], alpha_fe=s["alpha_fe"] if "alpha_fe" in s else 0.0,
                                       mass_loss=ml)
    return Population(s["feh"], s["age"], alpha_fe=s["alpha_fe"], mass_loss=ml)


def _masses(s):
    """Invented asteroseismic masses: RGB giants at the tip mass, clump giants at their HB masses."""
    from astropy.table import Table
    pop = population(s)
    rng = np.random.default_rng(s["seed"] + 1)
    stars = pop.sample(400, rng)
    rgb = stars.mass_msun[(stars.phase == "rgb") & (stars.logl > 1.0)][: s["n_rgb_masses"]]
    cl = stars.mass_msun[stars.phase == "hb"][: s["n_clump_masses"]]
    m = np.concatenate([rgb, cl])
    err = s["mass_err_frac"] * m
    obs = m + err * rng.standard_normal(m.size)
    phase = np.array(["rgb"] * rgb.size + ["clump"] * cl.size)
    return Table({"mass": np.round(obs, 4), "mass_err": np.round(err, 4), "phase": phase},
                 meta={"note": "invented asteroseismic masses for the hbmodel demo"})


def main():
    scen = toml_parser().loads((HERE / "scenario.toml").read_text())
    for key, s in scen.items():
        obs = ObservationSpec(distance_modulus=s["distance_modulus"], ebv=s["ebv"], depth=s["depth"],
                              window=tuple(s["window"]) if "window" in s else None)
        t = make_mock(population(s), bands=tuple(s["bands"]), rng=np.random.default_rng(s["seed"]), n_hb=s["n_hb"],
                      obs=obs)
        keep = [c for b in s["bands"] for c in (b, f"{b}_err")]
        t = t[keep]
        for c in keep:
            t[c] = np.round(np.asarray(t[c], float), 4)
        t.meta = {"object": key, "note": "invented observations for the hbmodel demo"}
        write_table(t, HERE / s["catalog"], force=True)
        print(f"{key}: {len(t)} stars -> {s['catalog']}")
        if "masses" in s:
            write_table(_masses(s), HERE / s["masses"], force=True)
            print(f"{key}: masses -> {s['masses']}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
