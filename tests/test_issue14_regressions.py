"""Regression tests for the confirmed bugs of issue 14 (each failed on the code before its fix)."""
import os
import subprocess
import sys

import numpy as np
import pytest

from hbmodel.observation.mock import make_mock
from hbmodel.populations.population import MassLoss, Population


def _median_hb_mass(pop, seed, n_hb=3000):
    mock = make_mock(pop, bands=("V", "I"), rng=np.random.default_rng(seed), n_hb=n_hb)
    return float(np.median(mock["mass_msun"][mock["phase"] == "hb"]))


def test_bug1_stale_mocks_after_mass_loss_reassignment():
    # Bug 1 (stale mocks): the sampler cached on population.__dict__ survived `pop.mass_loss = ...`,
    # so mocks kept the HB masses of the old mass loss while `predict` used the new one.
    # Populations are now immutable values (assignment raises); the changed copy from replace() must
    # not reuse the caches of the original.
    pop = Population(-1.5, 12.0, mass_loss=MassLoss.from_eta(0.3, 0.03))
    before = _median_hb_mass(pop, 1)
    with pytest.raises(AttributeError, match="immutable"):
        pop.mass_loss = MassLoss.from_eta(0.6, 0.03)
    pop = pop.replace(mass_loss=MassLoss.from_eta(0.6, 0.03))
    after = _median_hb_mass(pop, 2)
    fresh = _median_hb_mass(Population(-1.5, 12.0, mass_loss=MassLoss.from_eta(0.6, 0.03)), 3)
    # MC error of a median of n draws ~ 1.25 sd / sqrt(n): sd ~ 0.015 Msun here, so ~3e-4 Msun per mock
    assert abs(after - fresh) < 0.002
    assert before - after > 0.05  # more mass loss -> lighter HB stars (the change is far above the MC error)


def test_population_replace_changes_only_what_is_asked():
    base = Population(-1.5, 12.0, alpha_fe=0.3, mass_loss=MassLoss.from_eta(0.4, 0.02), helium=0.26)
    p = base.replace(feh=-1.0)
    assert p.components[0].feh == -1.0 and p.components[0].age_gyr == 12.0 and p.components[0].alpha_fe == 0.3
    assert p.helium == 0.26 and p.mass_loss is base.mass_loss and base.components[0].feh == -1.5
    with pytest.raises(TypeError, match="unknown"):
        base.replace(metallicity=0.0)


def test_bug1_other_defining_fields_rebuild_the_population():
    # Bug 1 (stale caches), same mechanism: assigning a defining field after construction must
    # give the same predictions as a fresh population built with that value.
    pop = Population(-1.5, 12.0)
    _median_hb_mass(pop, 1, n_hb=200)  # fill the caches
    with pytest.raises(AttributeError, match="replace"):
        pop.helium = 0.30
    pop = pop.replace(helium=0.30)
    fresh = Population(-1.5, 12.0, helium=0.30)
    assert pop.subpopulations[0].tip_mass_msun == pytest.approx(fresh.subpopulations[0].tip_mass_msun, rel=1e-12)
    assert _median_hb_mass(pop, 5) == pytest.approx(_median_hb_mass(fresh, 5), abs=1e-9)


@pytest.mark.parametrize("name, value, valid", [
    ("helium_fraction", (0.0, 2.0), "[0, 1]"),   # bug 2: accepted before (operator precedence)
    ("helium_fraction", (-0.5, 0.5), "[0, 1]"),
    ("field_fraction", (0.0, 1.0), "[0, 1)"),
    ("delta_y", (0.0, 0.3), "[0, 0.15]"),
    ("mass_loss", (-0.1, 0.2), "[0, inf)"),
    ("mass_loss_sd", (-0.1, 0.2), "[0, inf)"),
])
def test_bug2_priors_out_of_range_are_rejected_with_the_valid_range(name, value, valid):
    # Bug 2: `not 0 <= lo and hi <= 1` parsed as `(not 0 <= lo) and hi <= 1`, so
    # Priors(helium_fraction=(0, 2)) was accepted.  Every bounded range must name itself and its bounds.
    from hbmodel.inference.mass_loss_fit import Priors
    with pytest.raises(ValueError) as err:
        Priors(**{name: value})
    assert name in str(err.value) and valid in str(err.value)


def test_bug2_priors_at_the_edges_are_accepted():
    # Bug 2, the other side: the widest valid ranges stay valid.
    from hbmodel.inference.mass_loss_fit import Priors
    p = Priors(helium_fraction=(0.0, 1.0), delta_y=(0.0, 0.15), field_fraction=(0.0, 0.99), mass_loss=(0.0, 0.4))
    assert p.helium_fraction == (0.0, 1.0) and p.delta_y == (0.0, 0.15)


def _run_python(code, tmp_path):
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(sys.path))
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=tmp_path, env=env,
                          timeout=300)


def test_bug3_cli_works_without_tomllib(tmp_path):
    # Bug 3: requires-python >= 3.10 but commands/demo.py imported tomllib (3.11+) at module level, so on
    # Python 3.10 every command crashed.  Simulate 3.10 (no tomllib, no tomli): --help must still work.
    code = ("import sys; sys.modules['tomllib'] = None; sys.modules['tomli'] = None\n"
            "import hbmodel.cli.demo\n"
            "from hbmodel.cli.main import main\n"
            "sys.exit(main(['--help']))\n")
    res = _run_python(code, tmp_path)
    assert res.returncode == 0, res.stderr
    assert "demo" in res.stdout and "predict" in res.stdout


def test_bug3_toml_falls_back_to_tomli(tmp_path):
    # Bug 3, the fallback: without tomllib the demo scenario and --config files are read with tomli
    # (stood in for here by the standard-library parser registered under the name tomli).
    (tmp_path / "cfg.toml").write_text("feh = \"oops\"\n")
    code = ("import sys, tomllib; sys.modules['tomli'] = tomllib; sys.modules['tomllib'] = None\n"
            "from hbmodel.cli.demo import scenario\n"
            "assert isinstance(scenario(), dict) and scenario()\n"
            "from hbmodel.cli.main import main\n"
            "sys.exit(main(['predict', '--config', 'cfg.toml', '--age', '12']))\n")
    res = _run_python(code, tmp_path)
    # the config file was read: its bad value is reported as a usage error naming --feh
    assert res.returncode == 2, res.stderr
    assert "feh" in res.stderr and "Traceback" not in res.stderr


def test_bug3_no_toml_parser_is_a_one_line_error(tmp_path):
    # Bug 3, neither parser: a --config file gives a clear one-line error and exit 2, never a traceback.
    (tmp_path / "cfg.toml").write_text("feh = -1.5\n")
    code = ("import sys; sys.modules['tomllib'] = None; sys.modules['tomli'] = None\n"
            "from hbmodel.cli.main import main\n"
            "sys.exit(main(['predict', '--config', 'cfg.toml', '--age', '12', '--eta', '0.4']))\n")
    res = _run_python(code, tmp_path)
    assert res.returncode == 2
    assert "tomli" in res.stderr and len(res.stderr.strip().splitlines()) == 1


def test_bug4_plots_leave_the_users_matplotlib_backend_alone(tmp_path):
    # Bug 4: plot helpers called matplotlib.use("Agg") and so switched the user's interactive backend.
    # The user picks a non-Agg backend (svg needs no display); every plot helper and a plotting CLI
    # command run in that process; the backend must be the user's afterwards.
    code = """
import sys
import matplotlib
matplotlib.use("svg")
import numpy as np
from astropy.table import Table
from hbmodel.outputs import plots
from hbmodel.io.jobs import summary_figure
from hbmodel.cli.main import main
from hbmodel.observation.mock import make_mock
from hbmodel.io.figures import new_figure
from hbmodel.populations.population import MassLoss, Population
pop = Population(-1.6, 12.5, alpha_fe=0.3, mass_loss=MassLoss.from_eta(0.45, 0.03))
t = make_mock(pop, bands=("V", "I"), rng=np.random.default_rng(7), n_hb=100)
plots.plot_cmd(t, "V", ("V", "I"))
plots.plot_luminosity_function(t, "V")
plots.plot_hb_type_grid(Table({"series": ["age"] * 3, "series_value": [12.0] * 3,
                               "hb_type": [-1.0, 0.0, 0.8], "feh": [-0.8, -1.5, -2.2]}))
plots.plot_clump_grid(Table({"feh": [0.0, 0.0], "age_gyr": [2.0, 5.0], "M_I": [-0.4, -0.2]}), "I", eta=0.3)
new_figure()
assert main(["mock", "--feh", "0", "--age", "3", "--eta", "0.3", "--n-hb", "60", "--bands", "V,I",
             "--seed", "1", "--out", "m.ecsv", "--plot", "m.png"]) == 0
print(matplotlib.get_backend())
"""
    res = _run_python(code, tmp_path)
    assert res.returncode == 0, res.stderr
    assert res.stdout.strip().splitlines()[-1].lower() == "svg"
    assert (tmp_path / "m.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def _clump_grid_table(tmp_path, spec, name):
    from astropy.table import Table
    from hbmodel.cli.main import main
    out = tmp_path / name
    assert main(["predict", "--feh", "0", "--age", "4", "--eta", "0.3", "--bands", "I",
                 "--clump-grid", spec, "--out", str(out)]) == 0
    return Table.read(out / "clump_grid.ecsv")


def test_bug5_clump_grid_accepts_either_order_and_spaces(tmp_path):
    # Bug 5: --clump-grid accepted only age=...,feh=... in that order with no space after the comma.
    ref = _clump_grid_table(tmp_path, "age=2:6:4,feh=-0.4,0.2", "ref")
    assert len(ref) == 4 and sorted(set(np.round(ref["feh"], 6))) == [-0.4, 0.2]
    for i, spec in enumerate(["feh=-0.4,0.2,age=2:6:4", "age=2:6:4, feh=-0.4, 0.2",
                              " feh = -0.4 , 0.2 , age = 2 : 6 : 4 "]):
        t = _clump_grid_table(tmp_path, spec, f"t{i}")
        assert t.colnames == ref.colnames
        for c in ref.colnames:
            assert np.array_equal(np.asarray(t[c]), np.asarray(ref[c])), (spec, c)


@pytest.mark.parametrize("spec", ["age=2:6:4", "feh=0", "age=2:6:4,feh=0,age=3", "age=2:6:4,z=0.01",
                                  "age=2:6:4;feh=0", "", "age=,feh=0"])
def test_bug5_bad_clump_grid_is_a_one_line_usage_error(spec, tmp_path, capsys):
    # Bug 5, bad specifications: one line naming --clump-grid, exit 2, no grid written.
    from hbmodel.cli.main import main
    rc = main(["predict", "--feh", "0", "--age", "4", "--eta", "0.3", "--clump-grid", spec,
               "--out", str(tmp_path / "g")])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1 and "--clump-grid" in err[0]
    assert not (tmp_path / "g" / "clump_grid.ecsv").exists()
