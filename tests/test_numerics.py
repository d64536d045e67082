"""numpy-only numerics of the start-up path (hbmodel.core.numerics): the PCHIP interpolant is scipy's
PchipInterpolator to the bit and has the properties Fritsch & Carlson (1980) prove; the normal CDF
matches the handbook's table and scipy.special.ndtr; and a mock made in a fresh process imports no
scipy at all (what these helpers are for)."""
import os
import subprocess
import sys

import numpy as np
import pytest
from scipy.interpolate import PchipInterpolator
from scipy.special import ndtr

from hbmodel.core.numerics import Pchip, normal_cdf
from hbmodel.core.tables import read_table


def _cases():
    rng = np.random.default_rng(11)
    x = np.cumsum(rng.uniform(0.05, 1.0, 40))
    yield "random", x, rng.normal(size=40)
    yield "monotone", x, np.cumsum(rng.uniform(0.0, 1.0, 40))
    yield "flat stretch and sign changes", np.arange(9.0), np.array([0, 1, 1, 1, 3, 2, 2, 5, 4.0])
    yield "two nodes", np.array([1.0, 3.0]), np.array([2.0, -1.0])
    yield "three nodes", np.array([0.0, 0.4, 2.0]), np.array([1.0, 0.0, 3.0])
    for name, xc, yc, lx, ly in (("tip_age.csv", "mass_msun", "age_tip_gyr", True, True),
                                 ("zahb_teff.csv", "menv_msun", "log_teff", True, False)):
        t = read_table(name)
        for mh in np.unique(t["mh"]):
            s = t["mh"] == mh
            xx = np.log10(t[xc][s]) if lx else t[xc][s]
            yield f"{name} [M/H]={mh:+.2f}", xx, (np.log10(t[yc][s]) if ly else t[yc][s])


@pytest.mark.parametrize("extrapolate", [False, True])
def test_pchip_is_scipys_interpolant_to_the_bit(extrapolate):
    # reference: scipy.interpolate.PchipInterpolator (the implementation it replaces on the start-up path)
    rng = np.random.default_rng(3)
    for name, x, y in _cases():
        xi = np.concatenate([rng.uniform(x[0] - 0.3, x[-1] + 0.3, 20000), x, [np.nan]])
        ref = PchipInterpolator(x, y, extrapolate=extrapolate)(xi)
        got = Pchip(x, y, extrapolate=extrapolate)(xi)
        np.testing.assert_array_equal(got, ref, err_msg=name)


def test_pchip_properties_of_fritsch_carlson():
    # Fritsch & Carlson 1980, SIAM J. Numer. Anal. 17, 238: monotone data give a monotone interpolant
    # through the data; the PCHIP slopes reproduce a straight line exactly; a data extremum is flat
    x = np.array([0.0, 1.0, 1.5, 4.0, 4.2, 7.0])
    y = np.array([0.0, 0.1, 2.0, 2.1, 5.0, 5.0])
    f = Pchip(x, y, extrapolate=False)
    xi = np.linspace(0.0, 7.0, 20001)
    assert np.all(np.diff(f(xi)) >= -1e-12)
    np.testing.assert_array_equal(f(x), y)
    line = Pchip(x, 3.0 - 0.5 * x)
    np.testing.assert_allclose(line(xi), 3.0 - 0.5 * xi, rtol=0, atol=1e-13)
    peak = Pchip([0.0, 1.0, 2.0, 3.0], [0.0, 2.0, 1.0, 0.0])
    h = 1e-6
    assert abs(peak(1.0 + h) - peak(1.0 - h)) / (2 * h) < 1e-5
    assert np.isnan(f(7.5)) and np.isnan(f(-0.1)) and np.isfinite(Pchip(x, y)(7.5))
    with pytest.raises(ValueError, match="strictly increasing"):
        Pchip([0.0, 2.0, 1.0], [0.0, 1.0, 2.0])


def test_normal_cdf_against_the_handbook_and_scipy():
    # Abramowitz & Stegun 1964, Handbook of Mathematical Functions, Table 26.1 (P(x) to 10 decimals)
    for x, p in ((0.0, 0.5), (1.0, 0.8413447461), (2.0, 0.9772498681), (3.0, 0.9986501020),
                 (1.5, 0.9331927987)):
        assert normal_cdf(x) == pytest.approx(p, abs=1e-10)
        assert normal_cdf(-x) == pytest.approx(1.0 - p, abs=1e-10)
    # far tail (common practice: Phi(-10) = 7.6198530e-24, from memory), where 1 - Phi(10) would be 0
    assert normal_cdf(-10.0) == pytest.approx(7.6198530e-24, rel=1e-7)
    x = np.linspace(-8.0, 9.0, 100001)
    np.testing.assert_allclose(normal_cdf(x), ndtr(x), rtol=4e-15, atol=0)
    x = np.linspace(-37.0, -8.0, 100001)  # down to 1e-300: the tails' erfc agree to ~1e-14 of themselves
    np.testing.assert_allclose(normal_cdf(x), ndtr(x), rtol=1e-13, atol=0)
    assert np.isnan(normal_cdf(np.nan))


def test_a_mock_in_a_fresh_process_imports_no_scipy(tmp_path):
    # the population, its sampler tables and the observed mock come from numpy alone once the on-disk
    # cache holds the extinction ratios (the first process computes them with dust_extinction, on scipy)
    code = ("import sys, numpy as np\n"
            "from hbmodel import Population, MassLoss\n"
            "from hbmodel.observation.mock import make_mock_arrays, ObservationSpec\n"
            "pop = Population(-1.5, 12.5, alpha_fe=0.3, mass_loss=MassLoss.from_eta(0.45, 0.05))\n"
            "d, _ = make_mock_arrays(pop, bands=('V', 'I'), rng=np.random.default_rng(1), n_hb=2000,\n"
            "                        obs=ObservationSpec(distance_modulus=15.0, ebv=0.05, depth={'V': 22.0, 'I': 21.5}))\n"
            "assert (d['phase'] == 1).sum() > 1500\n"
            "print(sorted(m for m in sys.modules if m == 'scipy' or m.startswith('scipy.')))\n")
    env = dict(os.environ, HBMODEL_CACHE_DIR=str(tmp_path / "cache"))
    env.pop("HBMODEL_NO_CACHE", None)
    runs = [subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300,
                           env=env, cwd=tmp_path) for _ in range(2)]
    assert all(r.returncode == 0 for r in runs), runs[0].stderr + runs[1].stderr
    assert runs[0].stdout.strip() != "[]"  # cold cache: the reference computation, with scipy
    assert runs[1].stdout.strip() == "[]"
