"""Self-contained Markdown reports (with the PNGs beside them) for fit and distance runs,
and the run record (configuration + hbmodel version) every result folder carries."""
from __future__ import annotations

import platform

from . import __version__

__all__ = ["run_record", "markdown_report", "write_report", "save_fit_products"]


def run_record(command: str, args) -> dict:
    """The full configuration of a run, so it can be repeated exactly (``--config`` accepts it back)."""
    opts = {k: v for k, v in sorted(vars(args).items()) if not k.startswith("_") and k not in ("command",)}
    return {"hbmodel_version": __version__, "command": command, "options": opts,
            "python": platform.python_version()}


def _fmt(v):
    if isinstance(v, float):
        return f"{v:.4g}"
    if isinstance(v, dict) and {"median", "lo", "hi"} <= set(v):
        return f"{v['median']:.4g} (+{v['hi'] - v['median']:.3g} / −{v['median'] - v['lo']:.3g})"
    return str(v)


def markdown_report(title: str, *, inputs: dict, results: dict, priors: dict | None = None,
                    convergence: dict | None = None, plots: list | None = None, warnings: list | None = None,
                    notes: str | None = None) -> str:
    lines = [f"# {title}", "", f"hbmodel {__version__}", ""]
    lines += ["## Inputs", "", "| option | value |", "|---|---|"]
    lines += [f"| {k} | {_fmt(v)} |" for k, v in inputs.items() if v is not None]
    if priors:
        lines += ["", "## Priors", "", "| parameter | prior |", "|---|---|"]
        lines += [f"| {k} | {_fmt(v)} |" for k, v in priors.items()]
    lines += ["", "## Results (median, 16th-84th percentiles)", "", "| quantity | value |", "|---|---|"]
    lines += [f"| {k} | {_fmt(v)} |" for k, v in results.items() if v is not None]
    if convergence:
        lines += ["", "## Convergence", "", "| figure | value |", "|---|---|"]
        lines += [f"| {k} | {_fmt(v)} |" for k, v in convergence.items()]
    if warnings:
        lines += ["", "## Warnings", ""] + [f"- {w}" for w in warnings]
    if plots:
        lines += ["", "## Figures", ""] + [f"![{p}]({p})" for p in plots]
    if notes:
        lines += ["", notes]
    lines += [""]
    return "\n".join(lines)


def write_report(path, title, *, force=False, **kwargs):
    from .io import atomic_write_text
    return atomic_write_text(path, markdown_report(title, **kwargs), force=force)


def save_fit_products(est, out_dir, *, title, inputs, force=False, config=None):
    """Write a fitted :class:`hbmodel.fit.MassLossFit`'s result.json, posterior.ecsv, plots, report.md
    (and ``config.json`` when ``config`` is given) into ``out_dir``."""
    import json

    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from .io import atomic_savefig, atomic_write_json, write_table
    res = est.result()
    atomic_write_json(out_dir / "result.json", res, force=force)
    write_table(est.posterior_table(), out_dir / "posterior.ecsv", force=force)
    figs = {"corner.png": est.plot_corner(), "hb_mass.png": est.plot_hb_mass()}
    if getattr(est, "_has_cmd", False):
        figs["hess.png"] = est.plot_hess()
        figs["cmd.png"] = est.plot_cmd()
    for name, fig in figs.items():
        atomic_savefig(fig, out_dir / name, force=force, dpi=90)
        plt.close(fig)
    if config is not None:
        atomic_write_json(out_dir / "config.json", config, force=force)
    pri = est.priors
    conv = res["convergence"]
    warn = [] if conv["converged"] else ["the chain did not converge (length < 50 autocorrelation times)"]
    write_report(out_dir / "report.md", title, force=force, inputs=inputs,
                 priors=None if pri is None else {
                     "distance modulus": pri.distance_modulus, "E(B-V)": pri.ebv, "age sd [Gyr]": pri.age_sd_gyr,
                     "mass-loss spread": pri.mass_loss_sd, "field fraction": pri.field_fraction},
                 results={k: v for k, v in res.items() if isinstance(v, dict) and "median" in v},
                 convergence=conv, plots=list(figs), warnings=warn,
                 notes=("Model comparison: " + json.dumps(res.get("model_comparison"), default=str))
                 if res.get("model_comparison") else None)
    return res
