#!/usr/bin/env python3
"""The model against published targets: 'fit' rows (used by the calibration) and held-out 'check' rows.

    python3 scripts/validate.py                 # both sections, with pull, source and how each value was obtained
    python3 scripts/validate.py --clusters      # the cluster benchmark (eta fitted to each HB ratio)
    python3 scripts/validate.py --markdown      # the README's validation section (stdout)
    python3 scripts/validate.py --readme README.md   # regenerate that section in place (between its markers)

A row passes when |model - target| <= 2 sqrt(sigma_target^2 + sigma_model^2); sigma_model is the
surrogate's stated accuracy per quantity (tables/targets/model_accuracy.csv).  Rows the model cannot
evaluate are listed as failures with the reason.  Exit status 0 always (the test suite asserts).
"""
import argparse
import sys

import numpy as np

from hbmodel.calibration import read_clusters, read_targets, score_rows
from hbmodel.calibration.benchmark import PREDICTED_QUANTITIES, oosterhoff_criterion, run_benchmark


def _fmt(x, n=4):
    return "—" if not np.isfinite(x) else f"{x:.{n}g}"


def _pull(x):
    return "—" if not np.isfinite(x) else f"{x:+.2f}"


def _used_by_stages():
    from hbmodel.calibration.stages import STAGES
    used = {}
    for st in STAGES:
        for r in st.fit_rows():
            used[r["id"]] = st.name
    return used


def _section(scores, role, markdown):
    used = _used_by_stages()
    rows = [s for s in scores if s.role == role]
    n_ok = sum(s.passed for s in rows)
    title = {"fit": "fit rows (used by scripts/calibrate.py)", "check": "check rows (held out: never used by any fit)"}[role]
    lines = []
    if markdown:
        lines += [f"**{title}: {n_ok} of {len(rows)} within 2σ**", "",
                  "| target | model | published | σ | pull | ok | source (where read) | obtained | note |",
                  "|---|---|---|---|---|---|---|---|---|"]
        for s in rows:
            note = s.reason
            if role == "fit":
                note = (f"fitted by stage '{used[s.id]}'" if s.id in used else "no free coefficient fitted to it") + \
                       (f"; {s.reason}" if s.reason else "")
            lines.append(f"| `{s.id}` | {_fmt(s.model)} | {_fmt(s.value)} | {_fmt(s.sigma_total, 2)} | "
                         f"{_pull(s.pull)} | {'yes' if s.passed else '**no**'} | {s.source} ({s.location}) | "
                         f"{s.obtained} | {note} |")
    else:
        lines.append(f"== {title}: {n_ok} of {len(rows)} within 2 sigma")
        w = max((len(s.id) for s in rows), default=10)
        lines.append(f"{'target':<{w}}  {'model':>10}  {'published':>10}  {'sigma':>8}  {'pull':>6}  ok   obtained         source / reason")
        for s in rows:
            lines.append(f"{s.id:<{w}}  {_fmt(s.model):>10}  {_fmt(s.value):>10}  {_fmt(s.sigma_total, 3):>8}  "
                         f"{_pull(s.pull):>6}  {'yes' if s.passed else 'NO '}  {s.obtained:<15}  "
                         f"{s.source} ({s.location}){'  -- ' + s.reason if s.reason else ''}"
                         + ("" if role != "fit" else f"  [{('stage: ' + used[s.id]) if s.id in used else 'not fitted'}]"))
    return lines, n_ok, len(rows)


def _clusters(markdown, role=None):
    res = run_benchmark(progress=lambda n: print(f"  fitting {n} ...", file=sys.stderr, flush=True), role=role)
    c = read_clusters()
    row_role = {(n, q): rl for n, q, rl in zip(c["name"], c["quantity"], c["role"])}
    lines = []
    if markdown:
        lines += ["| cluster | role | [Fe/H] | HB ratio | η fitted | quantity | observed | model | pull |", "|---|---|---|---|---|---|---|---|---|"]
    else:
        lines.append(f"{'cluster':<18} {'role':<5} {'[Fe/H]':>6} {'HBR':>6} {'eta':>6}  quantity       observed      model    pull")
    for r in res:
        hbr = r.observed.get("hb_ratio", (np.nan,))[0]
        qs = [q for q in PREDICTED_QUANTITIES if q in r.observed]
        head = (r.name, r.role, f"{r.feh:+.2f}", _fmt(hbr, 3), _fmt(r.eta, 3) + (" (sat.)" if r.saturated else ""))
        if "*" in r.notes or not qs:
            note = r.notes.get("*", "HB ratio only (eta fitted, nothing else to compare)" if r.kind == "GC"
                               else "no measured RGB / clump masses to compare")
            lines.append(f"| {' | '.join(head)} | — | — | — | {note} |" if markdown else
                         f"{head[0]:<18} {head[1]:<5} {head[2]:>6} {head[3]:>6} {head[4]:>6}  {note}")
            continue
        for q in qs:
            head = (r.name, row_role.get((r.name, q), r.role)) + head[2:]   # a row's own role (held-out rows of a fitted cluster)
            v, u = r.observed[q]
            m = r.predicted.get(q, np.nan)
            extra = r.notes.get(q, "")
            if markdown:
                lines.append(f"| {' | '.join(head)} | {q} | {_fmt(v)} ± {_fmt(u, 2)} | {_fmt(m)} | {_pull(r.pull(q))} {extra} |")
            else:
                lines.append(f"{head[0]:<18} {head[1]:<5} {head[2]:>6} {head[3]:>6} {head[4]:>6}  {q:<13} "
                             f"{_fmt(v):>8} ±{_fmt(u, 2):<5} {_fmt(m):>8} {_pull(r.pull(q)):>6}  {extra}")
    n_ok, n, names = oosterhoff_criterion(res)
    lines.append("")
    lines.append(f"clusters with >= 10 RRab whose mean RRab period is within 0.03 d and RRc fraction within 0.15 of the "
                 f"observed values (eta fitted to the HB ratio): {n_ok} of {n}" + (f" ({', '.join(names)})" if names else ""))
    return lines


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--clusters", action="store_true", help="run the cluster benchmark instead of the target rows")
    ap.add_argument("--markdown", action="store_true", help="print Markdown tables (the README's validation section)")
    ap.add_argument("--readme", metavar="FILE", help="replace the text between the validation markers of FILE "
                    "with the Markdown tables (target rows and cluster benchmark)")
    ap.add_argument("--role", choices=("fit", "check"), help="with --clusters: only the clusters of this role "
                    "(tune physics on 'fit' clusters only; 'check' clusters are held out)")
    args = ap.parse_args(argv)
    if args.clusters and not args.readme:
        print("\n".join(_clusters(args.markdown, args.role)))
        return 0
    markdown = args.markdown or bool(args.readme)
    out = _targets(markdown)
    if not args.readme:
        print("\n".join(out))
        return 0
    out += ["", "Cluster benchmark (`python3 scripts/validate.py --clusters`): each cluster's Reimers η is fitted "
            "to its HB ratio (spread fixed), everything else is predicted.", ""] + _clusters(True)
    return _write_readme(args.readme, out)


def _targets(markdown):
    scores = score_rows(read_targets())
    out = []
    for role in ("fit", "check"):
        lines, n_ok, n = _section(scores, role, markdown)
        out += lines + [""]
    t = read_targets()
    n_mem = sum(o == "memory" for o in t["obtained"])
    n_chk = sum(r == "check" for r in t["role"])
    out.append(f"{len(t)} target rows, {n_chk} check ({n_chk / max(len(t), 1):.0%}); {n_mem} values from memory")
    return out


BEGIN, END = "<!-- validation:begin (generated by scripts/validate.py --readme) -->", "<!-- validation:end -->"


def _write_readme(path, lines):
    from pathlib import Path
    from hbmodel.io.catalogues import atomic_write_text
    text = Path(path).read_text(encoding="utf-8")
    if BEGIN not in text or END not in text:
        print(f"validate.py: error: {path} has no validation markers", file=sys.stderr)
        return 2
    head, rest = text.split(BEGIN, 1)
    _, tail = rest.split(END, 1)
    atomic_write_text(path, head + BEGIN + "\n" + "\n".join(lines) + "\n" + END + tail, force=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
