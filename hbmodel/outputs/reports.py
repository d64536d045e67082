"""Self-contained Markdown reports (with the figures beside them) for fit and distance runs, the
number formatting they share (values rounded to their uncertainty), and the run record
(configuration + hbmodel version) every result folder carries.

Size (460+ lines): the fit and distance reports share the number formatting and the Markdown/HTML helpers of the
first sections.
"""
from __future__ import annotations

import math
import platform
import re

import numpy as np

from hbmodel.core.version import __version__
from hbmodel.core.quantities import text_label, unit_of

__all__ = ["run_record", "format_value", "format_interval", "markdown_table", "markdown_report", "write_report",
           "fit_report", "distance_report", "save_fit_products", "lf_failed_components", "distance_error_budget",
           "fit_prior_rows", "markdown_to_html"]


def run_record(command: str, args) -> dict:
    """The full configuration of a run, so it can be repeated exactly (``--config`` accepts it back)."""
    opts = {k: v for k, v in sorted(vars(args).items()) if not k.startswith("_") and k not in ("command",)}
    return {"hbmodel_version": __version__, "command": command, "options": opts,
            "python": platform.python_version()}


# ----------------------------------------------------------------------------------- numbers
def _finite_pos(x) -> bool:
    return x is not None and isinstance(x, (int, float, np.floating, np.integer)) and math.isfinite(x) and x > 0


def _decimals(err: float, sig: int = 2) -> int:
    """Decimal places showing ``err`` to ``sig`` significant figures (negative: tens, hundreds, ...)."""
    d = sig - 1 - int(math.floor(math.log10(abs(err))))
    r = float(_at(abs(err), d))
    if r > 0 and int(math.floor(math.log10(r))) > int(math.floor(math.log10(abs(err)))):
        d -= 1  # 0.0996 -> 0.10, not 0.100
    return d


def _at(v: float, d: int) -> str:
    """``v`` rounded half-up at ``d`` decimal places (negative ``d``: tens, hundreds ...) of its decimal
    form to 12 significant figures (so 0.0305, or 15.3 - 15.2695 = 0.030499999999999, -> "0.031" as a
    reader rounds it, not the binary neighbour's "0.030"), never "-0"."""
    from decimal import ROUND_HALF_UP, Decimal
    q = Decimal(f"{float(v):.12g}").quantize(Decimal(1).scaleb(-d), rounding=ROUND_HALF_UP)
    s = format(q, "f") if d > 0 else format(q.quantize(Decimal(1)), "f")
    return s[1:] if s.startswith("-") and Decimal(s) == 0 else s


def format_value(value, plus=None, minus=None, *, sig: int = 2, unit: str = "") -> str:
    """A value with its uncertainty, rounded to ``sig`` significant figures of the smaller error
    (the value to the same decimal place): ``format_value(15.3, 0.0309, 0.0305)`` ->
    ``"15.300 +0.031/−0.031"``; a single error gives ``"13.4820 ± 0.0040"``.  Without a usable error
    the value keeps 4 significant figures.  ``None``/NaN values print as "—"."""
    if value is None or not math.isfinite(float(value)):
        return "—"
    value = float(value)
    errs = [float(e) for e in (plus, minus) if _finite_pos(e)]
    suffix = f" {unit}" if unit else ""
    if not errs:
        return f"{value:.4g}{suffix}"
    d = _decimals(min(errs), sig)
    if minus is None or plus is None:
        return f"{_at(value, d)} ± {_at(errs[0], d)}{suffix}"
    return f"{_at(value, d)} +{_at(float(plus), d)}/−{_at(float(minus), d)}{suffix}"


def format_interval(q: dict, *, unit: str = "") -> str:
    """``{"median", "lo", "hi"}`` (16/50/84 %) -> ``"median +(hi-median)/−(median-lo)"``, rounded."""
    med, lo, hi = q.get("median"), q.get("lo"), q.get("hi")
    if med is None:
        return "—"
    if lo is None or hi is None:
        return format_value(med, unit=unit)
    return format_value(med, hi - med, med - lo, unit=unit)


def _cell(v) -> str:
    if v is None:
        return "—"
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        return f"{float(v):.4g}" if math.isfinite(v) else "—"
    if isinstance(v, dict) and "median" in v:
        return format_interval(v)
    if isinstance(v, (list, tuple)):
        return ", ".join(_cell(x) for x in v)
    return str(v).replace("|", "\\|")


def markdown_table(headers, rows) -> list[str]:
    """GitHub-flavoured Markdown table lines; cells are formatted with :func:`_cell` unless strings."""
    out = ["| " + " | ".join(headers) + " |", "|" + "|".join("---" for _ in headers) + "|"]
    out += ["| " + " | ".join(c if isinstance(c, str) else _cell(c) for c in r) + " |" for r in rows]
    return out


# ----------------------------------------------------------------------------------- generic report
def markdown_report(title: str, *, inputs: dict, results: dict, priors: dict | None = None,
                    convergence: dict | None = None, plots: list | None = None, warnings: list | None = None,
                    notes: str | None = None) -> str:
    """A simple report: warnings first, then tables of results (value, unit), inputs and figures."""
    lines = [f"# {title}", "", f"hbmodel {__version__}", ""]
    lines += _warning_lines(warnings)
    lines += ["## Results (median, 16–84 % interval)", ""]
    lines += markdown_table(["quantity", "value", "unit"],
                            [[text_label(k), _cell(v), unit_of(k) or "—"] for k, v in results.items() if v is not None])
    if priors:
        lines += ["", "## Priors", ""] + markdown_table(["parameter", "prior"], [[k, _cell(v)] for k, v in priors.items()])
    if convergence:
        lines += ["", "## Convergence", ""] + markdown_table(["figure", "value"],
                                                             [[k, _cell(v)] for k, v in convergence.items()])
    lines += ["", "## Inputs", ""] + markdown_table(["option", "value"],
                                                     [[k, _cell(v)] for k, v in inputs.items() if v is not None])
    lines += _figure_lines(plots)
    if notes:
        lines += ["", notes]
    return "\n".join(lines + [""])


def _warning_lines(warnings) -> list[str]:
    if not warnings:
        return ["**No warnings.**", ""]
    return ["## Warnings", ""] + [f"- **{w}**" for w in warnings] + [""]


def _figure_lines(plots) -> list[str]:
    if not plots:
        return []
    out = ["", "## Figures"]
    for p in plots:
        out += ["", f"![{p}]({p})" + (f" ([PDF]({p[:-4]}.pdf))" if p.endswith(".png") else "")]
    return out


def write_report(path, title, *, force=False, text=None, html=True, **kwargs):
    """Write a report atomically: ``text`` as given, or :func:`markdown_report` of ``kwargs``; with
    ``html`` also ``report.html`` beside it, the figures embedded (one file, viewable offline)."""
    from pathlib import Path

    from hbmodel.io.catalogues import atomic_write_text
    path = Path(path)
    text = text if text is not None else markdown_report(title, **kwargs)
    out = atomic_write_text(path, text, force=force)
    if html:
        atomic_write_text(path.with_suffix(".html"), markdown_to_html(text, path.parent), force=force)
    return out


_INLINE = [(re.compile(r"!\[([^\]]*)\]\(([^)]+)\)"), "img"), (re.compile(r"\[([^\]]+)\]\(([^)]+)\)"), "a"),
           (re.compile(r"\*\*(.+?)\*\*"), "b"), (re.compile(r"`([^`]+)`"), "code")]


def _inline(text: str, base_dir) -> str:
    """Escape, then render images (embedded as data URIs when the file exists), links, bold and code."""
    import base64
    import html as _html
    from pathlib import Path
    out = _html.escape(text, quote=False)

    def img(m):
        alt, src = m.group(1), _html.unescape(m.group(2))
        f = Path(base_dir) / src
        if f.suffix.lower() == ".png" and f.is_file():
            data = base64.b64encode(f.read_bytes()).decode("ascii")
            return f'<img alt="{_html.escape(alt)}" src="data:image/png;base64,{data}" style="max-width:100%">'
        return f"[{_html.escape(alt)}]"
    out = _INLINE[0][0].sub(img, out)
    out = _INLINE[1][0].sub(lambda m: f'<a href="{m.group(2)}">{m.group(1)}</a>', out)
    out = _INLINE[2][0].sub(r"<b>\1</b>", out)
    return _INLINE[3][0].sub(r"<code>\1</code>", out)


def markdown_to_html(text: str, base_dir=".") -> str:
    """A self-contained HTML page of a report written by this module (headings, paragraphs, lists,
    tables, bold, code, links; PNG figures from ``base_dir`` embedded), so it opens offline as one file."""
    import html as _html
    lines = text.split("\n")
    body, para, i = [], [], 0

    def flush():
        if para:
            body.append("<p>" + " ".join(_inline(x, base_dir) for x in para) + "</p>")
            para.clear()
    while i < len(lines):
        ln = lines[i]
        if ln.startswith("#"):
            flush()
            level = len(ln) - len(ln.lstrip("#"))
            body.append(f"<h{level}>{_inline(ln[level:].strip(), base_dir)}</h{level}>")
        elif ln.startswith("|"):
            flush()
            rows = []
            while i < len(lines) and lines[i].startswith("|"):
                if not re.fullmatch(r"\|[-:|]+\|", lines[i].strip()):  # not the header separator
                    rows.append([c.strip() for c in lines[i].strip()[1:-1].split(" | ")])
                i += 1
            head, data = rows[0], rows[1:]
            body.append("<table><thead><tr>" + "".join(f"<th>{_inline(c, base_dir)}</th>" for c in head)
                        + "</tr></thead><tbody>" + "".join(
                            "<tr>" + "".join(f"<td>{_inline(c, base_dir)}</td>" for c in r) + "</tr>" for r in data)
                        + "</tbody></table>")
            continue
        elif ln.startswith("- "):
            flush()
            items = []
            while i < len(lines) and lines[i].startswith("- "):
                items.append(f"<li>{_inline(lines[i][2:], base_dir)}</li>")
                i += 1
            body.append("<ul>" + "".join(items) + "</ul>")
            continue
        elif not ln.strip():
            flush()
        else:
            para.append(ln)
        i += 1
    flush()
    title = next((x.lstrip("# ").strip() for x in lines if x.startswith("# ")), "hbmodel report")
    style = ("body{font-family:sans-serif;max-width:60em;margin:2em auto;line-height:1.4}"
             "table{border-collapse:collapse;margin:0.5em 0}th,td{border:1px solid #bbb;padding:2px 8px}"
             "th{background:#eee}td{font-variant-numeric:tabular-nums}")
    return (f"<!DOCTYPE html>\n<html><head><meta charset=\"utf-8\"><title>{_html.escape(title)}</title>"
            f"<style>{style}</style></head><body>\n" + "\n".join(body) + "\n</body></html>\n")


# ----------------------------------------------------------------------------------- fit report
_PARAM_UNIT = {"mass_loss": "Msun", "mass_loss_sd": "Msun", "helium_fraction": "", "delta_y": "",
               "field_fraction": "", "rgb_mass_sd": "Msun", "age": "Gyr", "shift_colour": "mag", "shift_mag": "mag",
               "ebv_spread": "mag"}
_PARAM_TEXT = {"shift_colour": "colour shift (E(B−V) and zero point)",
               "shift_mag": "magnitude shift (distance, extinction and zero point)"}


def fit_prior_rows(est) -> list[list[str]]:
    """One row per sampled parameter: name, prior type (Gaussian / uniform), its numbers, unit."""
    pri = est._pri
    rows = []
    for n in est.param_names_:
        unit = _PARAM_UNIT.get(n, "")
        name = _PARAM_TEXT.get(n, text_label(n))
        if n == "age":
            rows.append([name, "Gaussian", f"mean {est.age0_:g}, sd {pri.age_sd_gyr:g}", unit])
        elif n == "ebv_spread" and pri.ebv_spread_sd is not None:
            lo, hi = est._bnds[n]
            rows.append([name, "half-normal", f"scale {pri.ebv_spread_sd:g}, within [{lo:.4g}, {hi:.4g}]", unit])
        elif n in ("shift_colour", "shift_mag"):
            i = 0 if n == "shift_colour" else 1
            mu, sd = est._shift_mu[i], math.sqrt(est._shift_cov[i, i])
            rows.append([name, "Gaussian (correlated)", f"mean {mu:.3f}, sd {sd:.3f}", unit])
        else:
            lo, hi = est._bnds[n]
            rows.append([name, "uniform", f"[{lo:.4g}, {hi:.4g}]", unit or "—"])
    if est._has_cmd:
        dm, dmsd = pri.distance_modulus
        e, esd = pri.ebv
        rows.append(["distance modulus (enters the shifts)", "Gaussian", f"mean {dm:g}, sd {dmsd:g}", "mag"])
        rows.append(["E(B − V) (enters the shifts)", "Gaussian, E ≥ 0", f"mean {e:g}, sd {esd:g}", "mag"])
        if est.zero_points:
            cs = est._nuis["cov4"]
            rows.append(["colour / magnitude zero points", "Gaussian",
                         f"sd {math.sqrt(cs[2, 2]):g} / {math.sqrt(cs[3, 3]):g}", "mag"])
    for r in rows:
        r[3] = r[3] or "—"
    return rows


def _convergence_lines(conv: dict, sampler: str) -> list[str]:
    lines = ["## Convergence", ""]
    if sampler == "laplace":
        return lines + ["Laplace approximation at the MAP (no chain).", ""]
    tau = conv.get("autocorr_time") or {}
    n_steps = conv.get("n_steps") or 0
    ok = {k: t is not None and math.isfinite(t) and t > 0 for k, t in tau.items()}
    rows = [[_PARAM_TEXT.get(k, text_label(k)), f"{t:.1f}" if ok[k] else "—",
             f"{n_steps / t:.0f}" if ok[k] else "—"] for k, t in tau.items()]
    lines += markdown_table(["parameter", "autocorrelation time τ [steps]", "chain length / τ"], rows)
    acc = conv.get("acceptance")
    n_eff = conv.get("n_eff")
    lines += [""] + markdown_table(["figure", "value"], [
        ["chain length [steps]", str(int(n_steps))],
        ["effective independent draws n_eff", str(int(round(n_eff))) if n_eff is not None else "—"],
        ["mean acceptance fraction", f"{acc:.2f}" if acc is not None else "—"],
        ["converged (post-burn-in chain > 50 τ)", "yes" if conv.get("converged") else "no"]])
    return lines + [""]


def _comparison_lines(mc: dict | None) -> list[str]:
    if not mc:
        return []
    rows = []
    best = min(v["bic"] for v in mc["models"].values())
    for m, v in sorted(mc["models"].items(), key=lambda kv: kv[1]["bic"]):
        rows.append([m + (" (preferred)" if m == mc["preferred"] else ""), str(v["n_params"]),
                     f"{v['max_log_likelihood']:.1f}", f"{v['bic']:.1f}", f"{v['bic'] - best:.1f}",
                     f"{v['aic']:.1f}"])
    return (["## Model comparison", ""]
            + markdown_table(["model", "parameters", "max ln L", "BIC", "ΔBIC", "AIC"], rows)
            + ["", f"Preferred by BIC: **{mc['preferred']}** (ΔBIC = {mc['delta_bic']:.1f} over "
                   f"{mc['runner_up']}: {mc['strength']} evidence); preferred by AIC: {mc['preferred_aic']}.", ""])


def fit_report(est, res: dict, *, title: str, inputs: dict, plots=()) -> str:
    """Markdown report of a fitted :class:`hbmodel.inference.mass_loss_fit.MassLossFit` and its ``result()``."""
    lines = [f"# {title}", "", f"hbmodel {__version__}; model **{res['model']}**, sampler {res['sampler']}", ""]
    lines += _warning_lines(res.get("warnings"))
    gof = res.get("goodness_of_fit")
    if gof:
        verdict = "acceptable" if gof["p_value"] >= 0.01 else "POOR: the model does not describe the CMD"
        lines += [f"**Goodness of fit:** posterior-predictive p = {gof['p_value']:.2f} ({verdict}); Hess Poisson "
                  f"deviance {gof['deviance_observed']:.1f} observed vs {gof['deviance_replicated']:.1f} for "
                  f"replicates ({gof['n_draws']} posterior draws).", ""]
    reg = res.get("region")
    b0, b1 = (res.get("bands") or ["?", "?"])[:2]
    if reg:
        lines += [f"**Fitted region:** {b0} − {b1} from {reg[0]:.2f} to {reg[1]:.2f} mag, {b0} from "
                  f"{reg[2]:.2f} to {reg[3]:.2f} mag; {res.get('n_stars')} stars.", ""]
    if res.get("n_masses"):
        lines += [f"**Measured masses:** {res['n_masses']}.", ""]
    lines += ["## Results (median, 16–84 % interval)", ""]
    rows = [[text_label(k), format_interval(v), unit_of(k) or "—"] for k, v in res.items()
            if isinstance(v, dict) and "median" in v and v["median"] is not None]
    lines += markdown_table(["quantity", "value", "unit"], rows) + [""]
    lines += ["## Priors", ""] + markdown_table(["parameter", "type", "prior", "unit"], fit_prior_rows(est)) + [""]
    lines += _convergence_lines(res.get("convergence") or {}, res.get("sampler"))
    lines += _comparison_lines(res.get("model_comparison"))
    zp = res.get("zero_point_sensitivity")
    if zp:
        lines += ["## Zero-point sensitivity", "",
                  f"Mass loss at the MAP with the zero points free {zp['mass_loss_map_free']:.4f} Msun, fixed at "
                  f"zero {zp['mass_loss_map_fixed']:.4f} Msun (shift {_at(zp['shift'], 4)} Msun).", ""]
    lines += ["## Inputs", ""] + markdown_table(["option", "value"],
                                                 [[k, _cell(v)] for k, v in inputs.items() if v is not None])
    lines += _figure_lines(list(plots))
    return "\n".join(lines + [""])


def save_fit_products(est, out_dir, *, title, inputs, force=False, config=None, truth=None):
    """Write a fitted :class:`hbmodel.inference.mass_loss_fit.MassLossFit`'s result.json, posterior.ecsv, figures (PNG +
    PDF), report.md (and ``config.json`` when ``config`` is given) into ``out_dir``; ``truth`` (dict of
    true parameter values, e.g. in the demo) is marked in the corner and HB-mass figures."""
    from hbmodel.outputs import plots
    from hbmodel.io.catalogues import atomic_write_json, write_table
    from hbmodel.io.figures import save_figure
    res = est.result()
    atomic_write_json(out_dir / "result.json", res, force=force)
    write_table(est.posterior_table(), out_dir / "posterior.ecsv", force=force)
    figs = {"corner.png": plots.plot_corner(est, truth=truth)[0],
            "hb_mass.png": plots.plot_hb_mass(est, truth=truth)[0]}
    if getattr(est, "_has_cmd", False):
        figs["cmd.png"] = plots.plot_fit_cmd(est)[0]
        figs["hess.png"] = plots.plot_fit_hess(est)[0]
        gof = res.get("goodness_of_fit") or {}
        figs["ppc.png"] = plots.plot_posterior_predictive(est, p_value=gof.get("p_value"))[0]
    for name, fig in figs.items():
        save_figure(fig, out_dir / name, force=force)
    if config is not None:
        atomic_write_json(out_dir / "config.json", config, force=force)
    write_report(out_dir / "report.md", title, force=force,
                 text=fit_report(est, res, title=title, inputs=inputs, plots=list(figs)))
    return res


# ----------------------------------------------------------------------------------- distance report
_LF_COMPONENT_OF = {"peak_mag": "clump", "sigma_mag": "clump", "fraction_clump": "clump",
                    "background_slope": "RGB background", "quad_a1": "RGB background", "quad_a2": "RGB background",
                    "bump_offset": "RGB bump", "bump_ratio": "RGB bump", "agb_offset": "AGB bump",
                    "agb_ratio": "AGB bump"}


def _lf_problems(lf) -> dict:
    """{component: reason} of a clump-LF fit's ill-determined parameters.  A parameter pinned on a bound
    of its range is the cause (its neighbours then lose their curvature too, e.g. the bump offset of an
    undetected bump), so pinned parameters are reported alone when there are any; otherwise those
    without a finite curvature error."""
    from hbmodel.inference.clump_lf import _build_model
    model = _build_model(lf.mag_range[0], lf.mag_range[1], lf.components, lf.background)
    pinned, singular = {}, {}
    for i, n in enumerate(lf.param_names):
        v, e = lf.params.get(n), lf.param_errors.get(n)
        lo, hi = float(model.lower[i]), float(model.upper[i])
        comp = _LF_COMPONENT_OF.get(n, n)
        if v is not None and min(v - lo, hi - v) <= 1e-5 * (hi - lo):
            pinned.setdefault(comp, f"{n} = {v:.3g} on the bound of its range [{lo:.3g}, {hi:.3g}]")
        elif e is None or not math.isfinite(e) or e <= 0:
            singular.setdefault(comp, f"{n} has no finite curvature error")
    return pinned or singular


def lf_failed_components(lf) -> list[str]:
    """Components of a clump-LF fit (:class:`hbmodel.inference.clump_lf.ClumpLFResult`) with an ill-determined
    parameter (see :func:`_lf_problems`); empty for a clean fit with finite errors."""
    return list(_lf_problems(lf))


def lf_warning(lf) -> str | None:
    """The report line of an unclean clump-LF fit: which component failed and why, where the errors
    come from."""
    if lf.converged:
        return None
    probs = _lf_problems(lf)
    what = ("; ".join(f"the {c} component is ill-determined ({why})" for c, why in probs.items())
            if probs else "the optimiser stopped early")
    src = (f"the clump-peak error comes from a bootstrap of {len(lf.boot_peaks)} refits"
           if lf.peak_mag_err_boot is not None and lf.boot_peaks is not None
           else "the clump-peak error is the curvature error of the remaining parameters and may be optimistic")
    return f"the clump-LF fit is unclean: {what}; {src}"


def distance_error_budget(res) -> dict:
    """Statistical and systematic 1-sigma terms (mag) of a :class:`hbmodel.inference.clump_distance.DistanceResult`:
    clump peak and reddening are statistical (shrink with more stars); the absolute-magnitude calibration
    and the population uncertainty ([Fe/H], age) are systematic (shared by every field)."""
    from hbmodel.inference.clump_distance import CALIBRATION_SD_MAG
    r_band = res.extinction_mag / res.ebv if res.ebv > 0 else 0.0
    peak = float(res.clump_peak_mag_err)
    redd = float(r_band * res.ebv_err)
    cal = float(CALIBRATION_SD_MAG)
    pop = float(math.sqrt(max(res.clump_absmag_err ** 2 - cal ** 2, 0.0)))
    stat, sys_ = math.hypot(peak, redd), math.hypot(cal, pop)
    return {"clump_peak": peak, "reddening": redd, "calibration": cal, "population": pop,
            "statistical": stat, "systematic": sys_, "total": math.hypot(stat, sys_)}


def distance_report(res, *, title: str, inputs: dict, plots=()) -> str:
    """Markdown report of a red-clump distance: warnings, the distance with statistical and systematic
    errors apart, the error budget, every measured quantity with its unit, every input."""
    b = res.band
    eb = distance_error_budget(res)
    dm, dk = res.distance_modulus, res.distance_kpc
    warn = [w for w in (lf_warning(res.lf),) if w]
    lines = [f"# {title}", "", f"hbmodel {__version__}", ""] + _warning_lines(warn)
    d = _decimals(min(eb["statistical"], eb["systematic"]) if eb["systematic"] > 0 else eb["statistical"])
    lines += [f"**Distance modulus:** (m − M)0 = {_at(dm['median'], d)} ± {_at(eb['statistical'], d)} (stat) "
              f"± {_at(eb['systematic'], d)} (sys) mag; distance {format_interval(dk)} kpc (16–84 %, all errors).",
              ""]
    lines += ["## Error budget", ""] + markdown_table(["term", "σ [mag]", "type"], [
        [f"clump peak in {b} ({'bootstrap' if res.lf.peak_mag_err_boot is not None else 'LF-fit curvature'})",
         f"{eb['clump_peak']:.4f}", "statistical"],
        [f"reddening (A_{b} error)", f"{eb['reddening']:.4f}", "statistical"],
        ["clump absolute-magnitude calibration", f"{eb['calibration']:.4f}", "systematic"],
        ["population ([Fe/H] and age uncertainty)", f"{eb['population']:.4f}", "systematic"],
        ["**statistical total**", f"{eb['statistical']:.4f}", ""],
        ["**systematic total**", f"{eb['systematic']:.4f}", ""],
        ["**total**", f"{eb['total']:.4f}", ""]]) + [""]
    lo, hi = res.lf.mag_range
    lines += ["## Results", ""] + markdown_table(["quantity", "value", "unit"], [
        ["distance modulus (m − M)0 (16–84 %)", format_interval(dm), "mag"],
        ["distance (16–84 %)", format_interval(dk), "kpc"],
        [f"observed clump peak {b}", format_value(res.clump_peak_mag, res.clump_peak_mag_err), "mag"],
        [f"clump width σ({b})", format_value(res.lf.sigma_mag, res.lf.sigma_mag_err), "mag"],
        [f"model clump M_{b}", format_value(res.clump_absmag, res.clump_absmag_err), "mag"],
        ["population correction (vs the solar-neighbourhood clump)", f"{res.population_correction:+.3f}", "mag"],
        ["E(B − V)", format_value(res.ebv, res.ebv_err) if res.ebv_err > 0 else f"{res.ebv:.3f} (fixed)", "mag"],
        [f"extinction A_{b}", format_value(res.extinction_mag, eb["reddening"]) if eb["reddening"] > 0
         else f"{res.extinction_mag:.3f}", "mag"],
        ["stars in the LF fit window", str(res.n_stars), "—"],
        [f"LF fit window in {b}", f"{lo:.2f} – {hi:.2f}", "mag"],
        ["LF components", ", ".join(res.lf.components) + f" ({res.lf.background} background)", "—"],
        ["LF fit converged", "yes" if res.lf.converged else "no", "—"]]) + [""]
    lines += ["## Inputs", ""] + markdown_table(["input", "value"],
                                                 [[k, _cell(v)] for k, v in inputs.items() if v is not None])
    lines += _figure_lines(list(plots))
    return "\n".join(lines + [""])
