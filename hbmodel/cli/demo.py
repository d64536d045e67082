"""``hbmodel demo``: the whole job on an invented scenario, end to end."""
from __future__ import annotations

import time
from importlib import resources

import numpy as np

NAME = "demo"
HELP = "run predict -> fit -> distance on an invented scenario and compare with the injected truth"
DESCRIPTION = """Run the whole job on an invented scenario shipped with hbmodel (hbmodel/demo_data):

  Kestrel-7    an old metal-poor globular cluster (blue-to-red HB, RR Lyrae): fit the RGB mass loss
  Halcyon-3    an intermediate-age metal-rich open cluster (red clump): fit the RGB mass loss
  Corvid-East  a disc field: red-clump distance with the population correction

Writes a report folder (JSON, tables, plots, report.md) and prints what was recovered versus the truth.

example:
  hbmodel demo --out demo_output/ [--quick]
"""


def add_arguments(p):
    p.add_argument("--out", default="hbmodel_demo_output",
                   help="report folder (default hbmodel_demo_output, in the current directory)")
    p.add_argument("--force", action="store_true", help="write into an existing report folder")
    p.add_argument("--quick", action="store_true", help="shorter chains (for tests)")


def scenario() -> dict:
    text = resources.files("hbmodel.demo_data").joinpath("scenario.toml").read_text(encoding="utf-8")
    from hbmodel.cli.common import toml_parser
    return toml_parser().loads(text)


def _catalog(name):
    from hbmodel.io.catalogues import read_catalog
    with resources.as_file(resources.files("hbmodel.demo_data").joinpath(name)) as path:
        return read_catalog(path)


def _population(s):
    from hbmodel.populations.population import MassLoss, Population
    ml = MassLoss.from_eta(s["eta"], s["eta_sd"])
    if "age_range" in s:
        return Population.constant_star_formation(*s["age_range"], s["feh"], alpha_fe=s.get("alpha_fe", 0.0),
                                                  mass_loss=ml)
    return Population(s["feh"], s["age"], alpha_fe=s["alpha_fe"], mass_loss=ml)


def _fit_cluster(key, s, out, quick, force, lines):
    from hbmodel.inference.mass_loss_fit import MassLossFit, Priors
    from hbmodel.io.catalogues import atomic_write_json
    from hbmodel.populations.population import Population
    cat = _catalog(s["catalog"])
    truth = _population(s).predict(bands=("V",))
    pop = Population(s["feh"], s["age"], alpha_fe=s["alpha_fe"])
    pri = Priors(distance_modulus=(s["distance_modulus"], 0.05), ebv=(s["ebv"], 0.02))
    kw = dict(max_steps=1500, compare_models=False) if quick else {}
    est = MassLossFit(population=pop, priors=pri, model="spread", bands=tuple(s["bands"]), seed=1, **kw)
    if "masses" in s:  # a red clump barely constrains the loss photometrically: use the seismic masses
        est.fit(masses=_catalog(s["masses"]))
    else:
        est.fit(cat)
    from hbmodel.outputs.reports import format_interval, save_fit_products
    d = out / key
    d.mkdir(exist_ok=True)
    known = {"mass_loss": truth["mass_loss"], "mass_loss_sd": truth["hb_mass_sd"],
             "hb_mass_mean": truth["hb_mass_mean"]}
    if "masses" not in s:  # the photometric fit samples the distance and reddening too
        known.update(distance_modulus=s["distance_modulus"], ebv=s["ebv"])
    summ = save_fit_products(est, d, title=f"{s['title'].split(':')[0]} mass-loss fit (demo)", force=True,
                             inputs={"catalog": s.get("masses") or s["catalog"], "[Fe/H]": s["feh"],
                                     "[alpha/Fe]": s["alpha_fe"], "age [Gyr]": s["age"], "model": est.model},
                             truth=known)
    atomic_write_json(d / "truth.json", truth, force=force)
    ml = summ["mass_loss"]
    ok = ml["lo"] - 0.01 <= truth["mass_loss"] <= ml["hi"] + 0.01
    lines.append(f"  {s['title'].split(':')[0]:<12} mass loss {format_interval(ml)} Msun   "
                 f"truth {truth['mass_loss']:.3f}   {'recovered' if ok else 'MISSED'}")
    sd = summ.get("mass_loss_sd")
    if sd:
        lines.append(f"  {'':<12} spread    {format_interval(sd)} Msun   truth {truth['hb_mass_sd']:.3f}")
    return ok


def run(args):
    from hbmodel.inference.clump_distance import CALIBRATION_SD_MAG, measure_distance
    from hbmodel.io.catalogues import atomic_write_json, prepare_out_dir
    from hbmodel.io.figures import save_figure
    from hbmodel.outputs.plots import plot_clump_lf, plot_cmd
    from hbmodel.outputs.reports import distance_error_budget, distance_report, format_interval, format_value, write_report
    from hbmodel.core.limits import Estimate, check_budget
    # measured (--quick): 0.55 GB peak resident, a 1.1 MB report folder; rounded up for the full chains
    check_budget(Estimate("the demo", memory_bytes=2**30, disk_bytes=20 * 2**20, disk_path=args.out),
                 max_memory=args.max_memory, max_disk=args.max_disk)
    t0 = time.perf_counter()
    out = prepare_out_dir(args.out, force=args.force)
    scen = scenario()
    lines = ["hbmodel demo — an invented scenario (all objects and observations are made up)", ""]
    # 1. predictions
    lines.append("predict:")
    for key in ("kestrel7", "halcyon3"):
        s = scen[key]
        d = _population(s).predict()
        atomic_write_json(out / f"{key}_predict.json", d, force=True)
        hb = d["hb_type"]
        lines.append(f"  {s['title'].split(':')[0]:<12} HB type {hb:+.2f}, RR fraction {d['fraction_rr']:.2f}, "
                     f"HB mass {d['hb_mass_mean']:.3f} Msun, clump M_I "
                     + (f"{d['clump_absmag']['I']:+.2f}" if d.get("clump_absmag") else "—"))
        cat = _catalog(s["catalog"])
        # observed catalogue: phases unknown, all stars in one colour
        fig, _ = plot_cmd(cat, "V", ("V", "I"), title=s["title"].split(":")[0] + " (observed)")
        save_figure(fig, out / f"{key}_cmd.png", force=True)
    # 2. mass-loss fits
    lines += ["", "fit (mean integrated RGB mass loss, 16-84% interval; Kestrel-7 from its V, I photometry,",
              "     Halcyon-3 from asteroseismic RGB and clump masses):"]
    all_ok = True
    for key in ("kestrel7", "halcyon3"):
        all_ok &= _fit_cluster(key, scen[key], out, args.quick, True, lines)
    # 3. clump distance
    s = scen["corvid_east"]
    cat = _catalog(s["catalog"])
    pop = _population(s)
    res = measure_distance(np.asarray(cat["Ks"]), pop, "Ks", ebv=None, colour=("J", "Ks"),
                           colour_mags={"J": np.asarray(cat["J"]), "Ks": np.asarray(cat["Ks"])},
                           mag_err=np.asarray(cat["Ks_err"]))
    d = res.to_dict()
    d["error_budget_mag"] = distance_error_budget(res)
    (out / "corvid_east").mkdir(exist_ok=True)
    atomic_write_json(out / "corvid_east" / "result.json", d, force=True)
    fig, _ = plot_clump_lf(np.asarray(cat["Ks"]), res.lf, band="Ks",
                           title=f"Corvid-East: $(m-M)_0$ = {format_interval(res.distance_modulus)} mag")
    save_figure(fig, out / "corvid_east" / "lf.png", force=True)
    dm = res.distance_modulus
    ok = dm["lo"] - 0.01 <= s["distance_modulus"] <= dm["hi"] + 0.01
    all_ok &= ok
    lines += ["", "distance (red clump in Ks, reddening from J-Ks):",
              f"  Corvid-East  DM {format_interval(dm)} mag   truth {s['distance_modulus']:.3f}   "
              f"{'recovered' if ok else 'MISSED'};  E(B-V) {format_value(res.ebv, res.ebv_err)} mag "
              f"(truth {s['ebv']:.2f})"]
    write_report(out / "corvid_east" / "report.md", None, force=True, text=distance_report(
        res, title="Corvid-East red-clump distance (demo)", plots=["lf.png"],
        inputs={"catalog": s["catalog"], "band": "Ks", "reddening": "from the clump colour J − Ks",
                "[Fe/H] [dex]": f"{s['feh']:g} ± 0 (--feh-sd 0)",
                "ages [Gyr]": f"{s['age_range'][0]:g} – {s['age_range'][1]:g}, constant star formation",
                "Reimers η": f"{s['eta']:g} ± {s['eta_sd']:g}", "extinction law": "F99, R_V = 3.1",
                "clump calibration σ [mag]": CALIBRATION_SD_MAG}))
    lines += ["", f"report folder: {out.resolve()}   ({time.perf_counter() - t0:.0f} s)"]
    text = "\n".join(lines)
    from hbmodel.io.catalogues import atomic_write_text
    atomic_write_text(out / "summary.txt", text + "\n", force=True)
    print(text)
    return 0 if all_ok else 1
