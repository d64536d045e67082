"""Issue 16, strict inputs: every case of the issue gives a one-line error (exit 2) or the corrected
behaviour.  Each test names the case it covers."""
import json

import numpy as np
import pytest
from astropy.table import Table

from hbmodel.cli.main import main
from hbmodel.photometry.magnitudes import parse_bands, parse_colour, resolve_band

POP = ["--feh", "-1.5", "--alpha-fe", "0.3", "--age", "12.5"]


def _one_line_error(capsys, argv, *needles):
    assert main(argv) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "Traceback" not in err, err
    for n in needles:
        assert n in err, (n, err)
    return err


# --------------------------------------------------------------------------- bands
@pytest.mark.parametrize("argv", [
    ["predict", *POP, "--eta", "0.45", "--bands", "ACS_F625W"],            # was silently ignored, exit 0
    ["mock", *POP, "--eta", "0.45", "--n-hb", "20", "--bands", "V,ACS_F625W", "--out", "m.ecsv"],
    ["mock", *POP, "--eta", "0.45", "--n-hb", "20", "--bands", "V,I", "--window", "ACS_F625W:1:2",
     "--out", "m.ecsv"],
    ["fit", "cat.ecsv", "--bands", "V,ACS_F625W", *POP],
    ["distance", "cat.ecsv", "--band", "ACS_F625W", "--feh", "0", "--age", "4"],
    ["distance", "cat.ecsv", "--band", "Ks", "--colour", "J-ACS_F625W", "--feh", "0", "--age", "4"],
])
def test_unknown_band_is_an_error_in_every_command_naming_the_nearest(argv, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    _one_line_error(capsys, argv, "unknown band 'ACS_F625W'", "nearest known band: ACS_F606W")
    assert not (tmp_path / "m.ecsv").exists()


def test_band_aliases_resolve_case_insensitively_to_canonical_names():
    # 2MASS users write K or Ks; Gaia users g/bp/rp; any case (tables/bands.csv name + aliases)
    for alias in ("K", "k", "ks", "KS", "Ks", "K_s"):
        assert resolve_band(alias) == "Ks"
    assert [resolve_band(b) for b in ("g", "bp", "Rp", "v", "i", "Ic")] == ["G", "BP", "RP", "V", "I", "I"]
    assert parse_bands("v, k") == ("V", "Ks")
    assert parse_colour("j-k") == ("J", "Ks")
    with pytest.raises(ValueError, match="given twice"):
        parse_bands("K,Ks")
    with pytest.raises(ValueError, match="two different bands"):
        parse_colour("k-Ks")


def test_predict_honours_bands_with_aliases_and_prints_canonical_names(capsys):
    assert main(["predict", "--feh", "0", "--age", "4", "--eta", "0.3", "--bands", "k,bp", "--json"]) == 0
    alias = json.loads(capsys.readouterr().out)["clump_absmag"]
    assert main(["predict", "--feh", "0", "--age", "4", "--eta", "0.3", "--bands", "Ks,BP", "--json"]) == 0
    canon = json.loads(capsys.readouterr().out)["clump_absmag"]
    assert set(alias) == {"Ks", "BP"} and alias == canon
    # a red clump is brighter in Ks than in BP (red giant, Teff ~ 4700 K)
    assert alias["Ks"] < alias["BP"] - 2.0


def test_mock_columns_use_canonical_band_names(tmp_path, capsys):
    out = tmp_path / "m.ecsv"
    assert main(["mock", *POP, "--eta", "0.45", "--n-hb", "30", "--bands", "v,k", "--depth", "k=19",
                 "--out", str(out)]) == 0
    t = Table.read(out)
    assert {"V", "Ks", "V_err", "Ks_err"} <= set(t.colnames) and "k" not in t.colnames
    _one_line_error(capsys, ["mock", *POP, "--eta", "0.45", "--n-hb", "30", "--bands", "V,I", "--depth",
                             "Ks=19", "--out", str(tmp_path / "n.ecsv")], "--depth band Ks is not among")


def test_catalogue_band_columns_are_found_under_an_alias(tmp_path):
    from hbmodel.io.catalogues import read_catalog
    Table({"K": [12.0, 12.5], "k_err": [0.02, 0.03], "J": [13.0, 13.6]}).write(tmp_path / "c.ecsv")
    t = read_catalog(tmp_path / "c.ecsv", required=("Ks", "Ks_err", "J"))
    assert list(t["Ks"]) == [12.0, 12.5] and list(t["Ks_err"]) == [0.02, 0.03]
    Table({"K": [12.0], "ks": [12.1]}).write(tmp_path / "two.ecsv")  # ambiguous: no guess
    with pytest.raises(ValueError, match="lacks required column"):
        read_catalog(tmp_path / "two.ecsv", required=("Ks",))


# --------------------------------------------------------------------------- --colour
def test_color_option_sets_the_field_box_colour_independently_of_band_order(tmp_path):
    # issue 16: colours were always FIRST-SECOND; --bands Ks,J --colour J-Ks puts the box in J-Ks
    common = [*POP, "--eta", "0.45", "--n-hb", "30", "--bands", "Ks,J", "--distance-modulus", "15",
              "--depth", "Ks=20,J=21", "--field-n", "200", "--field-box", "0.2,0.8,12,14", "--seed", "1"]
    assert main(["mock", *common, "--colour", "j-ks", "--out", str(tmp_path / "a.ecsv")]) == 0
    assert main(["mock", *common, "--out", str(tmp_path / "b.ecsv")]) == 0
    for name, sign in (("a.ecsv", 1.0), ("b.ecsv", -1.0)):
        f = Table.read(tmp_path / name)
        f = f[f["phase"] == "field"]
        j_ks = sign * (np.asarray(f["J_true"]) - np.asarray(f["Ks_true"]))
        assert len(f) == 200 and j_ks.min() >= 0.2 - 1e-9 and j_ks.max() <= 0.8 + 1e-9
        assert 12 <= np.min(f["Ks_true"]) and np.max(f["Ks_true"]) <= 14  # magnitude axis = FIRST band


def test_color_must_use_the_given_bands(tmp_path, capsys):
    _one_line_error(capsys, ["mock", *POP, "--eta", "0.45", "--n-hb", "20", "--bands", "V,I", "--colour", "J-Ks",
                             "--out", str(tmp_path / "m.ecsv")], "--colour J-Ks", "not among the bands V,I")
    _one_line_error(capsys, ["fit", "x.ecsv", "--bands", "Ks,J", "--colour", "V-I", *POP], "--colour V-I")
    _one_line_error(capsys, ["distance", "x.ecsv", "--band", "Ks", "--colour", "J+Ks", "--feh", "0", "--age", "4"],
                    "--colour must be two bands joined by '-'")


def test_former_option_spellings_work_for_one_release_with_a_warning(tmp_path, capsys):
    # issue 14: one spelling ('colour') everywhere and '--mag-range' for the distance window; the former
    # spellings (--color, --reddening-from-color, distance --region) still work, warn once on stderr and
    # give the same result -- on the command line and as config-file keys
    common = [*POP, "--eta", "0.45", "--n-hb", "30", "--bands", "Ks,J", "--depth", "Ks=20,J=21",
              "--field-n", "50", "--field-box", "0.2,0.8,12,14", "--seed", "3"]
    assert main(["mock", *common, "--colour", "J-Ks", "--out", str(tmp_path / "new.ecsv")]) == 0
    capsys.readouterr()
    assert main(["mock", *common, "--color", "J-Ks", "--out", str(tmp_path / "old.ecsv")]) == 0
    err = capsys.readouterr().err
    assert "--color is deprecated" in err and "use --colour" in err
    a, b = Table.read(tmp_path / "new.ecsv"), Table.read(tmp_path / "old.ecsv")
    assert np.array_equal(np.asarray(a["J"]), np.asarray(b["J"]))
    cfg = tmp_path / "old.toml"
    cfg.write_text('color = "J-Ks"\n')
    assert main(["mock", *common, "--config", str(cfg), "--out", str(tmp_path / "cfg.ecsv")]) == 0
    assert "'color' is deprecated" in capsys.readouterr().err
    assert np.array_equal(np.asarray(Table.read(tmp_path / "cfg.ecsv")["J"]), np.asarray(a["J"]))
    # distance: the former --region and the new --mag-range are the same option (checked before any work)
    argv = ["distance", str(tmp_path / "new.ecsv"), "--band", "Ks", "--feh", "0", "--age", "4"]
    _one_line_error(capsys, argv + ["--mag-range", "14,13"], "--mag-range must be MAG_BRIGHT,MAG_FAINT")
    assert main(argv + ["--region", "14,13"]) == 2
    err = capsys.readouterr().err.splitlines()
    assert len(err) == 2 and "--region is deprecated" in err[0] and "--mag-range must be" in err[1]


def test_fit_colour_option_is_a_reflection_of_the_colour_axis():
    # fitting V vs I-V must give the same mass loss as V vs V-I (the likelihood is invariant under a
    # reflection of the colour axis); the region and the colour zero point are reported in the user's colour
    from hbmodel.inference.mass_loss_fit import MassLossFit, Priors
    from hbmodel.observation.mock import ObservationSpec, make_mock
    from hbmodel.populations.population import MassLoss, Population
    truth = Population(0.0, 8.0, mass_loss=MassLoss.from_delta_m(0.10, 0.01))
    cat = make_mock(truth, bands=("V", "I"), rng=np.random.default_rng(3), n_hb=200,
                    obs=ObservationSpec(distance_modulus=15.0, ebv=0.05, depth={"V": 22.5, "I": 21.8}))
    pri = Priors(distance_modulus=(15.0, 0.05), ebv=(0.05, 0.01))
    kw = dict(sampler="laplace", compare_models=False, seed=2)
    vi = MassLossFit(Population(0.0, 8.0), pri, bands=("V", "I"), region=(0.7, 1.6, 15.0, 16.5), **kw).fit(cat)
    iv = MassLossFit(Population(0.0, 8.0), pri, bands=("V", "I"), colour=("i", "V"),
                     region=(-1.6, -0.7, 15.0, 16.5), **kw).fit(cat)
    a, b = vi.result(), iv.result()
    assert a["n_stars"] == b["n_stars"] > 100
    assert b["colour"] == "I-V" and a["colour"] == "V-I"
    assert b["region"] == pytest.approx([-1.6, -0.7, 15.0, 16.5])
    assert b["mass_loss"]["median"] == pytest.approx(a["mass_loss"]["median"], abs=1e-6)
    assert b["colour_offset"]["median"] == pytest.approx(-a["colour_offset"]["median"], abs=1e-6)
    with pytest.raises(ValueError, match="must be made of the fitted bands"):
        MassLossFit(Population(0.0, 8.0), pri, bands=("V", "I"), colour=("J", "Ks"), **kw).fit(cat)


# --------------------------------------------------------------------------- TOML config
@pytest.mark.parametrize("line,needles", [
    ('feh = "minus one"', ["config key 'feh'", "'minus one'"]),    # was: could not convert string to float
    ("n-hb = 10.7", ["config key 'n-hb'", "expected an integer", "10.7"]),   # was silently truncated to 10
    ('n-hb = "ten"', ["config key 'n-hb'", "expected an integer"]),
    ('force = "yes"', ["config key 'force'", "true or false"]),
    ('law = "linear"', ["config key 'law'", "unknown mass-loss law 'linear'", "reimers, schroeder_cuntz"]),
    ("seed = true", ["config key 'seed'", "not a boolean"]),
])
def test_config_value_errors_name_the_key(line, needles, tmp_path, capsys):
    cfg = tmp_path / "c.toml"
    cfg.write_text(f'age = 12\neta = 0.4\nbands = "V,I"\nout = "{tmp_path / "m.ecsv"}"\n{line}\n')
    argv = ["mock", "--config", str(cfg)] + ([] if line.startswith("feh") else ["--feh", "-1"])
    argv += [] if line.startswith("n-hb") else ["--n-hb", "10"]
    _one_line_error(capsys, argv, *needles)
    assert not (tmp_path / "m.ecsv").exists()


def test_config_integer_is_used_exactly(tmp_path):
    cfg = tmp_path / "c.toml"
    cfg.write_text(f'feh = -1\nage = 12\neta = 0.4\nn-hb = 10\nbands = ["V", "I"]\nout = "{tmp_path / "m.ecsv"}"\n')
    assert main(["mock", "--config", str(cfg)]) == 0
    assert int(np.sum(Table.read(tmp_path / "m.ecsv")["phase"] == "hb")) == 10


# --------------------------------------------------------------------------- mutually exclusive options
@pytest.mark.parametrize("cfg,argv,needles", [
    ("", ["--age", "5", "--age-range", "1:10"], ["--age-range", "not allowed with", "--age"]),  # range won
    ("age = 5", ["--age-range", "1:10"], ["--age (config file)", "--age-range (command line)"]),
    ('age = 5\nage-range = "1:10"', [], ["--age (config file)", "--age-range (config file)"]),
])
def test_age_and_age_range_are_mutually_exclusive(cfg, argv, needles, tmp_path, capsys):
    (tmp_path / "c.toml").write_text(cfg + "\n")
    for cmd in (["distance", "x.ecsv", "--band", "Ks"], ["classify", "x.ecsv", "--out", str(tmp_path / "o.ecsv")]):
        _one_line_error(capsys, [*cmd, "--feh", "0", "--config", str(tmp_path / "c.toml"), *argv], *needles)


@pytest.mark.parametrize("cfg,argv,needles", [
    ("", ["--eta", "0.4", "--hb-masses", "m.csv"], ["not allowed with"]),
    ("eta = 0.4", ["--mass-loss", "0.2"], ["--eta/--mass-loss/--hb-masses are mutually exclusive",
                                          "--eta (config file)", "--mass-loss (command line)"]),
    ('mass-loss = 0.2\nhb-masses = "m.csv"', ["--eta", "0.3"], ["--eta (command line)", "--mass-loss (config"]),
])
def test_eta_mass_loss_hb_masses_are_mutually_exclusive(cfg, argv, needles, tmp_path, capsys):
    (tmp_path / "c.toml").write_text(cfg + "\n")
    _one_line_error(capsys, ["predict", "--feh", "-1", "--age", "12", "--config", str(tmp_path / "c.toml"), *argv],
                    *needles)


def test_n_hb_and_total_mass_are_mutually_exclusive(tmp_path, capsys):
    (tmp_path / "c.toml").write_text("total-mass = 1e5\n")
    base = ["mock", *POP, "--eta", "0.45", "--bands", "V,I", "--out", str(tmp_path / "m.ecsv")]
    _one_line_error(capsys, [*base, "--n-hb", "10", "--total-mass", "1e5"], "not allowed with")
    _one_line_error(capsys, [*base, "--n-hb", "10", "--config", str(tmp_path / "c.toml")],
                    "--n-hb (command line)", "--total-mass (config file)")
    assert not (tmp_path / "m.ecsv").exists()


def test_config_value_overridden_by_the_same_flag_is_not_a_conflict(tmp_path, capsys):
    (tmp_path / "c.toml").write_text("eta = 0.2\n")
    assert main(["predict", "--feh", "-1", "--age", "12", "--config", str(tmp_path / "c.toml"), "--eta", "0.45",
                 "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["eta"] == pytest.approx(0.45, abs=0.01)


# --------------------------------------------------------------------------- empty results
@pytest.mark.parametrize("window,needles", [
    ("V:20:10", ["--window V:20:10", "BRIGHT must be a smaller magnitude than FAINT"]),  # wrote 0 stars, exit 0
    ("V:30:40", ["no star survives --window V:30:40"]),
])
def test_window_without_stars_is_an_error_and_writes_nothing(window, needles, tmp_path, capsys):
    out = tmp_path / "w.ecsv"
    _one_line_error(capsys, ["mock", *POP, "--eta", "0.45", "--n-hb", "50", "--bands", "V,I", "--window", window,
                             "--out", str(out)], *needles)
    assert not out.exists()


def test_chunked_mock_with_an_empty_window_is_an_error_not_an_endless_loop(tmp_path, capsys):
    out = tmp_path / "m.parquet"
    _one_line_error(capsys, ["mock", *POP, "--eta", "0.45", "--n-hb", "500", "--bands", "V,I", "--window", "V:30:40",
                             "--chunk-size", "200", "--out", str(out)], "survives the window", "empty")
    assert not out.exists()


# --------------------------------------------------------------------------- out-of-range eta
def test_eta_that_strips_every_envelope_says_why(capsys):
    # issue 16: --eta 2.5 printed "— ± —" without a reason
    assert main(["predict", "--feh", "-1", "--age", "12", "--eta", "2.5"]) == 0
    out = capsys.readouterr().out
    assert "— ± —" in out and "note: no star reaches the HB" in out and "whole envelope" in out
    limit = float(out.split("envelope is gone for eta >= ")[1].split()[0])
    assert 0.0 < limit < 2.5
    assert main(["predict", "--feh", "-1", "--age", "12", "--eta", "2.5", "--json"]) == 0
    res = json.loads(capsys.readouterr().out)
    assert res["hb_mass_mean"] is None and res["fraction_envelope_lost"] == 1.0
    assert len(res["notes"]) == 1 and "no star reaches the HB" in res["notes"][0]
    # just below the limit stars do reach the HB, and nothing needs explaining
    assert main(["predict", "--feh", "-1", "--age", "12", "--eta", f"{0.8 * limit:.3f}", "--json"]) == 0
    res = json.loads(capsys.readouterr().out)
    assert res["hb_mass_mean"] > res["core_mass"] and res["notes"] == []


def test_outputs_are_checked_before_any_work(tmp_path, capsys):
    # Issue 15 ("late failures"): fit checked --out only after the sampling, and `mock --plot existing.png`
    # exited 2 but left the table written.  Both are now refused before any work.
    from hbmodel.cli.main import main
    (tmp_path / "old.png").write_bytes(b"not a figure")
    table = tmp_path / "m.ecsv"
    assert main(["mock", "--feh", "-1.5", "--age", "12", "--eta", "0.4", "--n-hb", "50", "--bands", "V,I",
                 "--out", str(table), "--plot", str(tmp_path / "old.png")]) == 2
    assert "exists" in capsys.readouterr().err and not table.exists()
    assert main(["mock", "--feh", "-1.5", "--age", "12", "--eta", "0.4", "--n-hb", "50", "--bands", "V,I",
                 "--distance-modulus", "15", "--out", str(table)]) == 0
    (tmp_path / "afile").write_text("x")
    assert main(["fit", str(table), "--bands", "V,I", "--feh", "-1.5", "--age", "12",
                 "--distance-modulus", "15", "--out", str(tmp_path / "afile")]) == 2
    assert "not a directory" in capsys.readouterr().err


def test_missing_values_are_dropped_counted_and_bounded(tmp_path, capsys):
    # Issue 15 ("inconsistent missing values"): fit refused any NaN or masked magnitude/error while distance
    # dropped them silently.  One policy now: rows with a missing value in a used column are dropped and
    # counted (printed and in the JSON); a catalogue losing more than half its rows is refused.
    import json

    import numpy as np
    from astropy.table import Table

    from hbmodel.cli.main import main
    cat = tmp_path / "m.ecsv"
    assert main(["mock", "--feh", "-1.5", "--age", "12", "--eta", "0.4", "--n-hb", "150", "--bands", "V,I",
                 "--distance-modulus", "15", "--seed", "3", "--out", str(cat)]) == 0
    t = Table.read(cat)
    t["V"] = np.ma.masked_array(t["V"], mask=np.arange(len(t)) % 10 == 0)   # 10 % masked (Gaia-style gaps)
    t["I_err"][1] = np.nan
    holes = tmp_path / "holes.ecsv"
    t.write(holes)
    capsys.readouterr()
    fit = ["fit", str(holes), "--bands", "V,I", "--feh", "-1.5", "--age", "12", "--distance-modulus", "15",
           "--ebv", "0.05", "--sampler", "laplace", "--no-compare", "--json"]
    assert main(fit) == 0
    n_missing = int(np.sum(np.arange(len(t)) % 10 == 0)) + 1
    assert json.loads(capsys.readouterr().out)["n_rows_dropped_missing"] == n_missing
    t["V"] = np.ma.masked_array(t["V"], mask=np.arange(len(t)) % 3 != 0)    # two thirds missing
    t.write(holes, overwrite=True)
    assert main(fit) == 2
    assert "more than half" in capsys.readouterr().err
