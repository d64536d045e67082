"""Regenerate (or check) the printed example outputs in README.md from the actual commands.

The README shows command examples as indented code lines starting with ``$ hbmodel ...`` (continued
with a trailing backslash), each followed by what the command prints.  This script runs every such
command, in README order, in one fresh working directory (as the README tells a reader to), and either
rewrites the printed lines (``--write``) or reports every difference (``--check``, exit status 1 when
any output differs).  A non-``$`` ``hbmodel`` command of the README whose ``--out`` file a later ``$``
command reads is run first, silently (e.g. the mock a ``classify`` example reads).

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

    @property
    def argv(self):
        return shlex.split(self.command)

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


def _outputs(ex: Example):
    a = ex.argv
    return {a[n + 1] for n, t in enumerate(a[:-1]) if t in ("--out", "--plot")}


def _inputs(ex: Example):
    return {t for t in ex.argv[2:] if not t.startswith("-") and re.search(r"\.(ecsv|csv|fits|parquet)$", t)}


def select(examples, fast=False):
    """The ``$`` examples to run (and check), with the setup commands they need, in README order."""
    shown = [e for e in examples if e.shown and not (fast and e.subcommand in SLOW_COMMANDS)]
    made = set().union(*(_outputs(e) for e in shown)) if shown else set()
    need = set().union(*(_inputs(e) for e in shown)) - made if shown else set()
    setup = [e for e in examples if not e.shown and _outputs(e) & need]
    return sorted(shown + setup, key=lambda e: e.first_line)


def run(examples, workdir: Path, *, timeout=1800):
    """Run the examples in ``workdir``; returns {first_line: printed stdout lines} of the ``$`` ones."""
    env = dict(os.environ, PYTHONHASHSEED="0", COLUMNS="100")
    got = {}
    for ex in examples:
        proc = subprocess.run([sys.executable, "-m", "hbmodel", *ex.argv[1:]], cwd=workdir, env=env,
                              capture_output=True, text=True, timeout=timeout)
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
    todo = select(parse(text), fast=a.fast)
    with tempfile.TemporaryDirectory(prefix="hbmodel_readme_") as tmp:
        got = run(todo, Path(tmp))
    diffs = differences(todo, got)
    if a.check:
        print("\n\n".join(diffs) if diffs else f"{sum(e.shown for e in todo)} README examples match their commands")
        return 1 if diffs else 0
    new = rewrite(text, todo, got)
    if new != text:
        tmp = path.with_suffix(".md.tmp")
        tmp.write_text(new, encoding="utf-8")
        os.replace(tmp, path)
    print(f"{len(diffs)} README example outputs updated")
    return 0


if __name__ == "__main__":
    sys.exit(main())
