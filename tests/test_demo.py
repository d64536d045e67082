"""The demo end to end, and configuration files reproducing command-line runs bit for bit."""
import json
import subprocess
import sys

import pytest


@pytest.mark.slow
def test_demo_recovers_injected_truth(tmp_path):
    out = tmp_path / "demo"
    proc = subprocess.run([sys.executable, "-m", "hbmodel", "demo", "--quick", "--out", str(out)],
                          capture_output=True, text=True, timeout=900)
    # exit status 0 means every recovered parameter's 16-84% interval holds the injected truth
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "MISSED" not in proc.stdout
    res = json.loads((out / "kestrel7" / "result.json").read_text())
    truth = json.loads((out / "kestrel7" / "truth.json").read_text())
    assert res["mass_loss"]["lo"] - 0.01 <= truth["mass_loss"] <= res["mass_loss"]["hi"] + 0.01
    assert (out / "corvid_east" / "report.md").exists() and (out / "corvid_east" / "lf.png").exists()


def test_config_file_reproduces_mock_bit_for_bit(tmp_path):
    args = ["--feh", "-1.2", "--alpha-fe", "0.3", "--age", "12", "--eta", "0.4", "--eta-sd", "0.04", "--n-hb", "120",
            "--bands", "V,I", "--distance-modulus", "14.8", "--ebv", "0.05", "--seed", "3"]
    a = tmp_path / "a.ecsv"
    b = tmp_path / "b.ecsv"
    subprocess.run([sys.executable, "-m", "hbmodel", "mock", *args, "--out", str(a)], check=True, capture_output=True)
    cfg = tmp_path / "mock.toml"
    cfg.write_text('feh = -1.2\nalpha-fe = 0.3\nage = 12\neta = 0.4\neta-sd = 0.04\nn-hb = 120\nbands = "V,I"\n'
                   'distance-modulus = 14.8\nebv = 0.05\nseed = 3\n')
    subprocess.run([sys.executable, "-m", "hbmodel", "mock", "--config", str(cfg), "--out", str(b)], check=True,
                   capture_output=True)
    assert a.read_bytes() == b.read_bytes()


def test_unknown_config_key_is_one_line_error(tmp_path):
    cfg = tmp_path / "bad.toml"
    cfg.write_text("feh = -1\nage = 12\neta = 0.4\nwibble = 3\n")
    proc = subprocess.run([sys.executable, "-m", "hbmodel", "predict", "--config", str(cfg)], capture_output=True,
                          text=True)
    assert proc.returncode == 2 and "wibble" in proc.stderr and len(proc.stderr.strip().splitlines()) == 1
