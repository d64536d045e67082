"""Regenerate (or check) the printed example outputs in README.md from the actual commands.

The README shows command examples as indented code lines starting with ``$ hbmodel ...`` (continued
with a trailing backslash), each followed by what the command prints.  This script runs every such
command, in README order, in one fresh working directory (as the README tells a reader to), and either
rewrites the printed lines (``--write``) or reports every difference (``--check``, exit status 1 when
any output differs).  A non-``$`` command of the README (an ``hbmodel`` line, possibly redirected with
``>``, or a ``python3 -c "..."`` snippet) whose output file a ``$`` command or a fact reads is run first,
silently (e.g. the mock a ``classify`` example reads).

Numbers quoted in the prose are marked ``<!--readme:NAME-->value<!--/readme-->`` (invisible when the
Markdown is rendered); NAME is a function in :data:`FACTS` computed from the files the examples wrote.

    python scripts/readme_examples.py --check          # all examples (the emcee fit takes ~1-2 min)
    python scripts/readme_examples.py --check --fast   # without the emcee fit (seconds)
    python scripts/readme_examples.py --write          # rewrite README.md in place (atomically)
"""
from __future__ import annotations

import argparse
import dataclasses
import os
import re
import shlex
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
_INDENT = "    "
#: Commands left out of ``--fast`` (a full emcee chain).
SLOW_COMMANDS = ("fit",)


@dataclasses.dataclass(frozen=True)
class Example:
    command: str          # the command as typed (continuations joined)
    first_line: int       # index of the "$ ..." line
    out_start: int        # index of the first printed line
    out_end: int          # one past the last printed line
    printed: tuple        # the printed lines as shown in the README (indent removed)
    shown: bool           # True for a "$" example (its output is checked); False for a setup command
    kind: str = "hbmodel"  # "hbmodel", "python" (a python3 -c snippet) or "shell" (a printf ... > FILE line)

    @property
    def argv(self):
        return shlex.split(self.command) if self.kind == "hbmodel" else []

    @property
    def redirect(self):
        """(argv without the redirection, target file or None) of ``hbmodel ... > FILE``."""
        a = self.argv
        if ">" in a:
            i = a.index(">")
            return a[:i], a[i + 1]
        return a, None

    @property
    def subcommand(self):
        return self.argv[1] if len(self.argv) > 1 else ""


def _join(lines, i):
    """The command starting at ``lines[i]`` with its backslash continuations; returns (text, next index)."""
    parts = []
    while True:
        text = lines[i].strip()
        if text.startswith("$ "):
            text = text[2:]
        if text.endswith("\\"):
            parts.append(text[:-1].strip())
            i += 1
            continue
        parts.append(text)
        return " ".join(parts), i + 1


def parse(readme_text: str) -> list[Example]:
    """Every ``$ hbmodel`` example and every plain ``hbmodel`` command line of the README, in order."""
    lines = readme_text.split("\n")
    out, i = [], 0
    while i < len(lines):
        ln = lines[i]
        if ln.startswith(_INDENT + 'python3 -c "'):
            j = i + 1
            while j < len(lines) and not lines[j].rstrip().endswith('"'):
                j += 1
            code = "\n".join(x[len(_INDENT):] for x in lines[i:j + 1])
            code = code[len('python3 -c "'):].rstrip()[:-1]
            out.append(Example(code, i, j + 1, j + 1, (), False, "python"))
            i = j + 1
            continue
        if ln.startswith(_INDENT + "printf "):  # a file written by the shell (e.g. a jobs table)
            cmd, j = _join(lines, i)
            out.append(Example(cmd, i, j, j, (), False, "shell"))
            i = j
            continue
        shown = ln.startswith(_INDENT + "$ hbmodel ")
        plain = ln.startswith(_INDENT + "hbmodel ") and not ln.startswith(_INDENT + "hbmodel --")
        if not (shown or plain):
            i += 1
            continue
        cmd, j = _join(lines, i)
        k = j
        if shown:
            while k < len(lines) and lines[k].startswith(_INDENT) and lines[k].strip() \
                    and not lines[k].startswith(_INDENT + "$ "):
                k += 1
        printed = tuple(x[len(_INDENT):] for x in lines[j:k])
        out.append(Example(cmd, i, j, k, printed, shown))
        i = max(k, j)
    return out


_FILE = r"[\w./-]+\.(?:ecsv|csv|fits|parquet|json|png)"


def _outputs(ex: Example):
    if ex.kind == "shell":
        return set(re.findall(r">\s*(" + _FILE + r")\s*$", ex.command))
    if ex.kind == "python":
        return set(re.findall(r"\.write\('(" + _FILE + r")'\)", ex.command))
    a, target = ex.redirect
    outs = {a[n + 1] for n, t in enumerate(a[:-1]) if t in ("--out", "--plot")}
    return outs | ({target} if target else set())


def _inputs(ex: Example):
    if ex.kind == "shell":  # the files the written text names (e.g. the catalogues of a jobs table)
        return set(re.findall(r"(?<![\w/])(" + _FILE + r")", ex.command)) - _outputs(ex)
    if ex.kind == "python":
        return set(re.findall(r"read\('(" + _FILE + r")'\)", ex.command))
    a, _ = ex.redirect
    outs = _outputs(ex)
    return {t for t in a[2:] if re.fullmatch(_FILE, t) and t not in outs}


def _made_by(examples, path):
    """The example whose output (file or directory) holds ``path``."""
    for e in examples:
        for o in _outputs(e):
            if path == o or path.startswith(o.rstrip("/") + "/"):
                return e
    return None


def _is_slow(ex: Example):
    return ex.kind == "hbmodel" and ex.subcommand in SLOW_COMMANDS


def select(examples, fast=False, facts=(), extra=()):
    """The ``$`` examples to run (and check), with the setup commands they, the ``facts`` and the
    ``extra`` examples (e.g. those writing the README's figures) need (transitively), in README order.
    ``fast`` leaves out the slow commands and what needs them."""
    todo = [e for e in examples if e.shown and not (fast and _is_slow(e))]
    todo += [e for e in extra if e not in todo]
    need = set().union(set(), *(_inputs(e) for e in todo), *(FACT_INPUTS[f] for f in facts))
    setup = [e for e in examples if not e.shown]
    while True:
        made = set().union(set(), *(_outputs(e) for e in todo))
        add = [e for e in setup if e not in todo and _outputs(e) & (need - made)]
        if not add:
            break
        todo += add
        need |= set().union(*(_inputs(e) for e in add))
    todo = sorted(todo, key=lambda e: e.first_line)
    if fast and any(_is_slow(e) for e in todo):
        raise ValueError("--fast: a fact needs a slow command; leave the fact out")
    return todo


def run(examples, workdir: Path, *, timeout=1800):
    """Run the examples in ``workdir``; returns {first_line: printed stdout lines} of the ``$`` ones."""
    env = dict(os.environ, PYTHONHASHSEED="0", COLUMNS="100")
    got = {}
    for ex in examples:
        argv, target = ex.redirect
        if ex.kind == "shell":
            cmd = ["bash", "-c", ex.command]
            argv, target = [], None
        elif ex.kind == "python":
            cmd = [sys.executable, "-c", ex.command]
        else:
            cmd = [sys.executable, "-m", "hbmodel", *argv[1:]]
        proc = subprocess.run(cmd, cwd=workdir, env=env, capture_output=True, text=True, timeout=timeout)
        if target:
            (workdir / target).write_text(proc.stdout, encoding="utf-8")
        if proc.returncode != 0:
            raise RuntimeError(f"README example failed (exit {proc.returncode}): {ex.command}\n{proc.stderr}")
        if ex.shown:
            got[ex.first_line] = tuple(proc.stdout.rstrip("\n").split("\n")) if proc.stdout.strip() else ()
    return got


def differences(examples, got) -> list[str]:
    """Human-readable differences between what the README prints and what the commands print."""
    out = []
    for ex in examples:
        if ex.shown and ex.first_line in got and tuple(got[ex.first_line]) != ex.printed:
            lines = [f"README line {ex.first_line + 1}: $ {ex.command}"]
            lines += [f"  README : {x}" for x in ex.printed] + [f"  command: {x}" for x in got[ex.first_line]]
            out.append("\n".join(lines))
    return out


def rewrite(readme_text: str, examples, got) -> str:
    """The README with every run example's printed lines replaced by the command's output."""
    lines = readme_text.split("\n")
    for ex in sorted((e for e in examples if e.shown and e.first_line in got), key=lambda e: -e.first_line):
        lines[ex.out_start:ex.out_end] = [_INDENT + x if x else "" for x in got[ex.first_line]]
    return "\n".join(lines)


def _needs_slow(examples, fact):
    try:
        select(examples, fast=True, facts=[fact])
        return False
    except ValueError:
        return True


# ------------------------------------------------------------------------------------------ prose facts
def _classify_table(workdir):
    from astropy.table import Table
    return Table.read(workdir / "plover3_p.ecsv")


def _mean_p(workdir, phase):
    import numpy as np
    t = _classify_table(workdir)
    p = np.asarray(t["p_cheb"], float)[np.asarray(t["phase"]).astype(str) == phase]
    return f"{np.nanmean(p):.2f}"


def _n_unclassified(workdir):
    import numpy as np
    return str(int(np.sum(~np.isfinite(np.asarray(_classify_table(workdir)["p_cheb"], float)))))


def _plover3_mass_loss(workdir):
    import json
    sys.path.insert(0, str(ROOT))
    from hbmodel.outputs.reports import format_interval
    return format_interval(json.loads((workdir / "plover3_fit.json").read_text())["mass_loss"])


#: figures shown in the README: file written by an example -> its copy under docs/figures (``--write``).
FIGURES = {"hbtype/hb_type_grid.png": "predict_hb_type.png", "clumpgrid/clump_grid_I.png": "predict_clump_grid_I.png",
           "sandpiper9_cmd.png": "mock_cmd.png", "sandpiper9_fit/hess.png": "fit_hess.png",
           "sandpiper9_fit/cmd.png": "fit_cmd.png", "sandpiper9_fit/corner.png": "fit_corner.png",
           "sandpiper9_fit/ppc.png": "fit_ppc.png", "sandpiper9_fit/hb_mass.png": "fit_hb_mass.png",
           "tern_south_dist/lf.png": "distance_lf.png", "fields_out/summary.png": "batch_summary.png"}

def _plover3_truth(_workdir):
    sys.path.insert(0, str(ROOT))
    from hbmodel.populations.population import MassLoss, Population
    return f"{Population(0.1, 3.0, mass_loss=MassLoss.from_eta(0.3, 0.03)).predict()['mass_loss']:.3f}"


#: prose numbers: NAME -> function(workdir) -> text, and the files each reads.
FACTS = {"plover3_truth_mass_loss": _plover3_truth, "classify_p_clump": lambda w: _mean_p(w, "hb"), "classify_p_rgb": lambda w: _mean_p(w, "rgb"),
         "classify_n_unclassified": _n_unclassified, "plover3_mass_loss": _plover3_mass_loss}
FACT_INPUTS = {"plover3_truth_mass_loss": set(), "classify_p_clump": {"plover3_p.ecsv"}, "classify_p_rgb": {"plover3_p.ecsv"},
               "classify_n_unclassified": {"plover3_p.ecsv"}, "plover3_mass_loss": {"plover3_fit.json"}}
_MARK = re.compile(r"<!--readme:(\w+)-->(.*?)<!--/readme-->")


def facts_in(text):
    return [m.group(1) for m in _MARK.finditer(text)]


def fact_differences(text, values):
    return [f"fact {n}: README {old!r}, computed {values[n]!r}" for n, old in _MARK.findall(text)
            if n in values and values[n] != old]


def rewrite_facts(text, values):
    return _MARK.sub(lambda m: f"<!--readme:{m.group(1)}-->{values.get(m.group(1), m.group(2))}<!--/readme-->",
                     text)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    g = p.add_mutually_exclusive_group(required=True)
    g.add_argument("--check", action="store_true", help="report differences; exit 1 if any")
    g.add_argument("--write", action="store_true", help="rewrite the printed outputs in the README")
    p.add_argument("--fast", action="store_true", help=f"skip the slow examples ({', '.join(SLOW_COMMANDS)})")
    p.add_argument("--readme", default=str(ROOT / "README.md"))
    a = p.parse_args(argv)
    path = Path(a.readme)
    text = path.read_text(encoding="utf-8")
    examples = parse(text)
    facts = [f for f in facts_in(text) if f in FACTS]
    if a.fast:  # only the facts whose inputs the fast commands make
        fast_todo = select(examples, fast=True)
        made = set().union(set(), *(_outputs(e) for e in fast_todo))
        facts = [f for f in facts if FACT_INPUTS[f] <= made or not _needs_slow(examples, f)]
    figure_makers = [e for e in map(lambda f: _made_by(examples, f), FIGURES) if e] \
        if a.write and not a.fast else []  # the commands that write the README's figures
    todo = select(examples, fast=a.fast, facts=facts, extra=figure_makers)
    with tempfile.TemporaryDirectory(prefix="hbmodel_readme_") as tmp:
        got = run(todo, Path(tmp))
        values = {f: FACTS[f](Path(tmp)) for f in facts}
        if a.write and not a.fast:
            import shutil
            for src, dst in FIGURES.items():
                if (Path(tmp) / src).exists():
                    shutil.copyfile(Path(tmp) / src, ROOT / "docs" / "figures" / dst)
    diffs = differences(todo, got) + fact_differences(text, values)
    if a.check:
        print("\n\n".join(diffs) if diffs else f"{sum(e.shown for e in todo)} README examples match their commands")
        return 1 if diffs else 0
    new = rewrite_facts(rewrite(text, todo, got), values)
    if new != text:
        tmp = path.with_suffix(".md.tmp")
        tmp.write_text(new, encoding="utf-8")
        os.replace(tmp, path)
    print(f"{len(diffs)} README example outputs updated")
    return 0


if __name__ == "__main__":
    sys.exit(main())
