"""The README's printed examples are what the commands print (scripts/readme_examples.py; issue 17:
the mock count, the distance example's intermediate numbers and the classify numbers had gone stale)."""
import importlib.util
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def rx():
    spec = importlib.util.spec_from_file_location("readme_examples", ROOT / "scripts" / "readme_examples.py")
    mod = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = mod  # dataclasses look their module up while the class is built
    try:
        spec.loader.exec_module(mod)
        yield mod
    finally:
        sys.modules.pop(spec.name, None)


def test_readme_examples_match_a_fresh_run_fast_subset(rx, capsys):
    # every "$ hbmodel ..." example except the emcee fit, run in order in a fresh directory, and the
    # prose numbers marked <!--readme:...--> that those runs determine
    assert rx.main(["--check", "--fast"]) == 0, capsys.readouterr().out


SAMPLE = """Some text.

    $ hbmodel predict --feh -1.6 --alpha-fe 0.3 --age 12.5 \\
        --eta 0.45 --eta-sd 0.04
    Population: wrong
      RGB-tip mass        9.999 Msun

    hbmodel mock --feh 0 --age 3 --eta 0.3 --n-hb 50 --bands V,I --seed 2 --out a.ecsv
    $ hbmodel classify a.ecsv --feh 0 --age 3 --out b.ecsv
    wrote b.ecsv: stale

Mean <!--readme:n-->7<!--/readme--> here.
"""


def test_parser_finds_examples_continuations_and_setup(rx):
    ex = rx.parse(SAMPLE)
    shown = [e for e in ex if e.shown]
    assert [e.subcommand for e in shown] == ["predict", "classify"]
    assert shown[0].command.endswith("--age 12.5 --eta 0.45 --eta-sd 0.04")
    assert shown[0].printed == ("Population: wrong", "  RGB-tip mass        9.999 Msun")
    todo = rx.select(ex)
    # the classify example reads a.ecsv, so the plain mock line that writes it is run first
    assert [e.subcommand for e in todo] == ["predict", "mock", "classify"]
    assert rx.facts_in(SAMPLE) == ["n"]


def test_stale_output_is_reported_and_rewritten(rx, tmp_path):
    ex = rx.parse(SAMPLE)
    todo = rx.select(ex)
    got = rx.run(todo, tmp_path)
    diffs = rx.differences(todo, got)
    assert len(diffs) == 2 and "9.999" in diffs[0] and "stale" in diffs[1]
    new = rx.rewrite(SAMPLE, todo, got)
    shown_old = [e for e in todo if e.shown]
    shown_new = [e for e in rx.parse(new) if e.shown]
    assert [e.printed for e in shown_new] == [tuple(got[e.first_line]) for e in shown_old]
    assert "9.999" not in new and "RGB-tip mass" in new and "wrote b.ecsv:" in new
    assert rx.rewrite_facts("a <!--readme:n-->7<!--/readme--> b", {"n": "8"}) == "a <!--readme:n-->8<!--/readme--> b"
    assert rx.fact_differences("<!--readme:n-->7<!--/readme-->", {"n": "8"}) == ["fact n: README '7', computed '8'"]
