"""Fuzz the command-line parser (hypothesis): any argument list gives an exit status, never a traceback."""
import os

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from hbmodel.cli.main import main

FLAGS = ["--feh", "--age", "--eta", "--eta-sd", "--mass-loss", "--helium", "--alpha-fe", "--bands", "--n-hb",
         "--out", "--band", "--ebv", "--json", "--config", "--grid", "--law", "--seed", "--window", "--force",
         "--colour", "--age-range", "--hb-masses"]
VALUES = ["-1.5", "12", "0.4", "nan", "inf", "-3", "5", "abc", "V,I", "V,Q", "", "0", "1e9", "feh=1:0:0.1",
          "reimers", "x.toml", "I:1:2", "-0", "J-Ks", "k-j", "K", "1:10", "V:20:10"]
tokens = st.sampled_from(FLAGS + VALUES)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(cmd=st.sampled_from(["predict", "mock", "distance", "classify", "nonsense", "--help"]),
       rest=st.lists(tokens, max_size=8))
def test_cli_never_raises(tmp_path, capsys, cmd, rest):
    cwd = os.getcwd()
    os.chdir(tmp_path)
    try:
        rc = main([cmd, *rest])
    finally:
        os.chdir(cwd)
    assert rc in (0, 1, 2)
    err = capsys.readouterr().err
    assert "Traceback" not in err
    if rc == 2 and err.strip():
        # one-line message (argparse usage errors print a usage line first)
        assert err.strip().splitlines()[-1].startswith(("hbmodel: error", "usage:")) or "error" in err


@pytest.mark.parametrize("argv", [["predict", "--feh", "nan", "--age", "12", "--eta", "0.4"],
                                  ["predict", "--feh", "-1", "--age", "inf", "--eta", "0.4"],
                                  ["predict", "--config", "missing.toml"]])
def test_non_finite_and_missing_config(argv, capsys):
    assert main(argv) == 2
    assert "Traceback" not in capsys.readouterr().err
