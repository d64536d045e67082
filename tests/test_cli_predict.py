"""`hbmodel predict`: JSON keys, determinism, and one-line errors with exit status 2."""
import json
import subprocess
import sys

import pytest

from hbmodel.cli.main import main

BASE = ["predict", "--feh", "-1.5", "--alpha-fe", "0.3", "--age", "12.5", "--eta", "0.45", "--eta-sd", "0.03"]


def run_json(capsys, argv):
    assert main(argv + ["--json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_predict_json_has_required_keys_and_is_deterministic(capsys):
    a = run_json(capsys, BASE)
    b = run_json(capsys, BASE)
    assert a == b  # deterministic: no Monte Carlo in predictions
    for key in ("tip_mass", "core_mass", "mass_loss", "hb_mass_mean", "hb_mass_sd", "hb_lifetime_myr",
                "hb_teff_median", "hb_logg_median"):
        assert isinstance(a[key], float), key
    # consistency: HB mass = tip mass - mean loss
    assert a["hb_mass_mean"] == pytest.approx(a["tip_mass"] - a["mass_loss"], abs=1e-3)


def test_mass_loss_and_eta_forms_agree(capsys):
    a = run_json(capsys, BASE)
    b = run_json(capsys, ["predict", "--feh", "-1.5", "--alpha-fe", "0.3", "--age", "12.5",
                          "--mass-loss", str(a["mass_loss"])])
    assert b["hb_mass_mean"] == pytest.approx(a["hb_mass_mean"], abs=2e-3)
    assert b["eta"] == pytest.approx(0.45, abs=0.01)


@pytest.mark.parametrize("argv,msg", [
    (["predict", "--feh", "5", "--age", "12", "--eta", "0.4"], "outside"),
    (["predict", "--feh", "-1", "--age", "-3", "--eta", "0.4"], "age"),
    (["predict", "--feh", "-1", "--age", "12", "--eta", "-0.4"], "eta"),
    (["predict", "--feh", "-1", "--age", "12", "--eta", "0.4", "--mass-loss", "0.2"], "not allowed with"),
    (["predict", "--feh", "-1", "--age", "0.1", "--eta", "0.4"], "age"),
    (["predict", "--feh", "-1", "--age", "12"], "mass loss"),
    (["predict", "--feh", "abc", "--age", "12", "--eta", "0.4"], "invalid float"),
])
def test_bad_input_one_line_exit_2(argv, msg):
    proc = subprocess.run([sys.executable, "-m", "hbmodel", *argv], capture_output=True, text=True)
    assert proc.returncode == 2
    err = proc.stderr.strip()
    assert len(err.splitlines()) == 1 and "Traceback" not in err
    assert msg in err


def test_config_file_matches_command_line(tmp_path, capsys):
    cfg = tmp_path / "run.toml"
    cfg.write_text('feh = -1.5\nalpha-fe = 0.3\nage = 12.5\neta = 0.45\neta_sd = 0.03\n')
    a = run_json(capsys, BASE)
    b = run_json(capsys, ["predict", "--config", str(cfg)])
    assert a == b
    # a flag on the command line overrides the file
    c = run_json(capsys, ["predict", "--config", str(cfg), "--eta", "0.30"])
    assert c["mass_loss"] < a["mass_loss"]


def test_hb_type_grid_writes_table_and_png(tmp_path):
    from astropy.table import Table
    out = tmp_path / "grid"
    rc = main(["predict", "--feh", "-1.5", "--alpha-fe", "0.3", "--age", "12.5", "--eta", "0.45", "--eta-sd", "0.06",
               "--grid", "feh=-2.2:-0.6:0.4", "--series", "age=11,13", "--out", str(out)])
    assert rc == 0
    t = Table.read(out / "hb_type_grid.ecsv")
    assert len(t) == 10 and (out / "hb_type_grid.png").stat().st_size > 1000
    # Lee, Demarque & Zinn 1994: older -> bluer HB at fixed [Fe/H] (second parameter)
    old = t[(t["series_value"] == 13) & (t["feh"] == -1.4)]["hb_type"][0]
    young = t[(t["series_value"] == 11) & (t["feh"] == -1.4)]["hb_type"][0]
    assert old > young
