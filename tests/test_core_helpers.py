"""The shared helpers of the lowest room: the one finite-difference Hessian and the one atomic writer / JSON
converter (issue 14: one implementation each, used by every room)."""
import json
import os

import numpy as np
import pytest

from hbmodel.core.files import atomic_path, json_text, to_jsonable
from hbmodel.core.hessian import hessian

A = np.array([[4.0, 1.0, -0.5], [1.0, 3.0, 0.2], [-0.5, 0.2, 2.0]])
X0 = np.array([0.3, -0.2, 0.1])


def test_value_stencil_is_exact_on_a_quadratic():
    # central second differences have no truncation error on a quadratic (their error term is the third
    # and fourth derivatives: Press et al. 2007, Numerical Recipes 3rd ed., sect. 5.7)
    f = lambda x: -0.5 * np.einsum("ni,ij,nj->n", x, A, x) + x @ np.array([1.0, 2.0, 3.0])  # noqa: E731
    H = hessian(X0, np.array([0.01, 0.02, 0.03]), f=f)
    assert np.allclose(H, -A, atol=1e-8)


def test_gradient_stencil_matches_the_analytic_hessian():
    # f = exp(a.x): Hessian a a^T exp(a.x) (calculus); central differences of the gradient err by O(h^2)
    a = np.array([0.5, -1.0, 2.0])
    grad = lambda x: a * np.exp(a @ x)  # noqa: E731
    H = hessian(X0, np.full(3, 1e-4), grad=grad)
    assert np.allclose(H, np.outer(a, a) * np.exp(a @ X0), rtol=1e-6)
    # only the free coordinates: the sub-matrix of the full Hessian
    Hf = hessian(X0, np.full(3, 1e-4), grad=grad, free=np.array([True, False, True]))
    assert np.allclose(Hf, H[np.ix_([0, 2], [0, 2])], rtol=1e-12)


def test_value_stencil_outside_the_support_counts_as_a_drop():
    # a point beyond a bound (log density -inf) is a large drop from the centre, not a NaN Hessian
    f = lambda x: np.where(x[:, 0] > 0.305, -np.inf, -0.5 * np.sum(x ** 2, axis=1))  # noqa: E731
    H = hessian(X0, np.full(3, 0.01), f=f, nonfinite_drop=1e3)
    assert np.all(np.isfinite(H)) and H[0, 0] < -1e6
    assert H[1, 1] == pytest.approx(-1.0, abs=1e-8)


def test_atomic_path_never_clobbers_and_leaves_nothing_behind(tmp_path):
    target = tmp_path / "r.json"
    target.write_text("old")
    with pytest.raises(FileExistsError):
        with atomic_path(target, force=False) as tmp:
            tmp.write_text("new")
    assert target.read_text() == "old"
    with pytest.raises(RuntimeError):
        with atomic_path(tmp_path / "s.json") as tmp:
            tmp.write_text("half")
            raise RuntimeError("writer failed")
    assert sorted(os.listdir(tmp_path)) == ["r.json"]  # no partial file, no temporary
    with atomic_path(target) as tmp:  # force (default): replaced whole
        tmp.write_text("new")
    assert target.read_text() == "new" and sorted(os.listdir(tmp_path)) == ["r.json"]


def test_json_converter():
    # RFC 8259 (JSON) has no NaN/Infinity: written as null by default; numpy types become plain values
    d = {"a": np.float64(np.nan), "b": np.arange(3), "c": (np.int64(2), np.bool_(True)), 4: np.inf}
    assert json.loads(json_text(d)) == {"a": None, "b": [0, 1, 2], "c": [2, True], "4": None}
    assert "NaN" in json_text(d, nan_to_none=False)  # kept for records read back by Python
    with pytest.raises(ValueError, match="cannot write an object of type object"):
        to_jsonable({"x": object()})


def test_one_line_messages():
    # case: the command line's one-line errors (common practice: one line, the exception's type and first line)
    from hbmodel.core.messages import compact, describe_exception, first_line

    assert first_line(ValueError("\n  bad column 'x'  \nsecond line")) == "bad column 'x'"
    assert describe_exception(OSError("disk full\nmore")) == "OSError: disk full"
    assert describe_exception(KeyError()) == "KeyError"
    long = compact("a\n b " * 200, limit=50)
    assert len(long) == 50 and long.endswith("...") and "\n" not in long
    assert compact("short\ttext") == "short text"


def test_one_random_state_convention():
    # case: every random draw takes a Generator (used as given) or a seed (a new Generator); None is refused
    # (NumPy NEP 19, the default_rng policy; issue 14: one convention everywhere)
    import numpy as np
    import pytest

    from hbmodel.core.randomness import as_generator

    g = np.random.default_rng(5)
    assert as_generator(g) is g
    assert as_generator(7).normal() == np.random.default_rng(7).normal()
    assert as_generator(np.random.SeedSequence(3)).normal() == np.random.default_rng(np.random.SeedSequence(3)).normal()
    for bad in (None, -1, 1.5, True, "3"):
        with pytest.raises(ValueError, match="seed|Generator"):
            as_generator(bad)


def test_sampling_functions_share_the_convention():
    # case: Population.sample and make_mock take a seed or a Generator alike, with the same stars for both
    import numpy as np
    import pytest

    from hbmodel.observation.mock import make_mock
    from hbmodel.populations.population import MassLoss, Population

    pop = Population(feh=-1.6, age_gyr=12.5, mass_loss=MassLoss.from_eta(0.45))
    a = pop.sample(200, 11)
    b = pop.sample(200, np.random.default_rng(11))
    assert np.array_equal(a.mass_msun, b.mass_msun)
    m1 = make_mock(pop, bands=("V", "I"), rng=4, n_hb=100)
    m2 = make_mock(pop, bands=("V", "I"), rng=np.random.default_rng(4), n_hb=100)
    assert np.array_equal(np.asarray(m1["V"]), np.asarray(m2["V"]))
    with pytest.raises(ValueError, match="no hidden random state"):
        pop.sample(10, None)


def test_astropy_quantities_at_the_api_edge():
    # case: a Quantity age or distance modulus works and is converted (astropy units; 1 Gyr = 1000 Myr),
    # a plain number is in the unit the argument's name states, an incompatible unit is refused in one line
    import astropy.units as u
    import numpy as np
    import pytest

    from hbmodel.observation.mock import ObservationSpec
    from hbmodel.populations.population import Population

    assert Population(-1.5, 12000 * u.Myr).components == Population(-1.5, 12.0).components
    assert (Population.constant_star_formation(1 * u.Gyr, 10000 * u.Myr, 0.0).components
            == Population.constant_star_formation(1.0, 10.0, 0.0).components)
    ages = np.array([1.0, 5.0])
    assert (Population.from_history(ages * 1000 * u.Myr, [1, 1], 0.0).components
            == Population.from_history(ages, [1, 1], 0.0).components)
    spec = ObservationSpec(distance_modulus=15.1 * u.mag, ebv=0.02 * u.mag)
    assert spec.distance_modulus == pytest.approx(15.1) and isinstance(spec.ebv, float)
    with pytest.raises(ValueError, match="convertible to Gyr"):
        Population(-1.5, 3 * u.kpc)
    with pytest.raises(ValueError, match="units of time"):
        Population.from_history([1, 2] * u.kpc, [1, 1], 0.0)


def test_mass_loss_laws_come_from_their_table():
    # case: the laws are the rows of tables/mass_loss_laws.csv (Reimers 1975; Schroeder & Cuntz 2005), found by
    # name; an unknown name is refused in one line by the API and by the command line (exit 2)
    import subprocess
    import sys
    from importlib import resources

    import pytest

    from hbmodel.physics.mass_loss import LAWS
    from hbmodel.populations.population import MassLoss

    rows = [ln.split(",")[0] for ln in resources.files("hbmodel.tables").joinpath("mass_loss_laws.csv")
            .read_text().splitlines() if ln and not ln.startswith("#")][1:]
    assert LAWS == tuple(rows) and {"reimers", "schroeder_cuntz"} <= set(LAWS)
    with pytest.raises(ValueError, match="choose one of reimers, schroeder_cuntz"):
        MassLoss.from_eta(0.4, law="blocker")
    proc = subprocess.run([sys.executable, "-m", "hbmodel", "predict", "--feh", "-1.5", "--age", "12", "--eta", "0.4",
                           "--law", "blocker"], capture_output=True, text=True, timeout=120)
    err = proc.stderr.strip()
    assert proc.returncode == 2 and len(err.splitlines()) == 1, err
    assert err.startswith("hbmodel: error:") and "unknown mass-loss law 'blocker'" in err, err
