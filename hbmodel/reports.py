"""Self-contained Markdown reports (with the PNGs beside them) for fit and distance runs,
and the run record (configuration + hbmodel version) every result folder carries."""
from __future__ import annotations

import datetime as _dt
import platform

from . import __version__

__all__ = ["run_record", "markdown_report", "write_report"]


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
