"""The on-disk cache of derived tables (hbmodel.core.cache): what it returns is what the reference library
gives (dust_extinction, through the uncached computation), a fresh process skips that library, and
the cache stays correct when disabled, damaged, bounded or written by several processes."""
import os
import subprocess
import sys

import numpy as np
import pytest

from hbmodel.core import cache as _cache
from hbmodel.photometry.extinction import _ratio_grid, extinction_ratio

TEFF = np.array([3500.0, 4800.0, 6500.0, 12000.0])


def _fresh(monkeypatch, tmp_path, **env):
    monkeypatch.setenv("HBMODEL_CACHE_DIR", str(tmp_path / "cache"))
    monkeypatch.delenv("HBMODEL_NO_CACHE", raising=False)
    for k, v in env.items():
        monkeypatch.setenv(k, v)
    _ratio_grid.cache_clear()


def _uncached(band, rv, law, monkeypatch):
    monkeypatch.setenv("HBMODEL_NO_CACHE", "1")
    _ratio_grid.cache_clear()
    out = extinction_ratio(band, TEFF, rv=rv, law=law)
    monkeypatch.delenv("HBMODEL_NO_CACHE")
    _ratio_grid.cache_clear()
    return out


def test_cached_ratio_is_the_reference_computation(monkeypatch, tmp_path):
    # reference: the ratio computed from the dust_extinction law (cache off); the cached copy must be
    # bit-identical, in this process and read back in the next
    _fresh(monkeypatch, tmp_path)
    ref = _uncached("I", 3.3, "CCM89", monkeypatch)
    first = extinction_ratio("I", TEFF, rv=3.3, law="CCM89")
    files = list((tmp_path / "cache").glob("extinction-ratio-*.npy"))
    assert len(files) == 1
    _ratio_grid.cache_clear()
    again = extinction_ratio("I", TEFF, rv=3.3, law="CCM89")
    np.testing.assert_array_equal(first, ref)
    np.testing.assert_array_equal(again, ref)
    # another R_V is another entry (the key holds every input)
    extinction_ratio("I", TEFF, rv=3.4, law="CCM89")
    assert len(list((tmp_path / "cache").glob("extinction-ratio-*.npy"))) == 2


def test_fresh_process_with_a_warm_cache_skips_dust_extinction(monkeypatch, tmp_path):
    _fresh(monkeypatch, tmp_path)
    extinction_ratio("V", TEFF, rv=3.1, law="F99")
    code = ("import sys; from hbmodel.photometry.extinction import extinction_ratio; "
            "extinction_ratio('V', 5000.0, 3.1, 'F99'); print('dust_extinction' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120,
                         env=dict(os.environ))
    assert out.stdout.strip() == "False", out.stderr


def test_disabled_cache_writes_nothing(monkeypatch, tmp_path):
    _fresh(monkeypatch, tmp_path, HBMODEL_NO_CACHE="1")
    assert _cache.cache_dir() is None
    extinction_ratio("V", TEFF, rv=3.1, law="F99")
    assert not (tmp_path / "cache").exists()


def test_invalid_rv_is_refused_and_never_stored(monkeypatch, tmp_path):
    # F99 holds for R_V 2-6 (dust_extinction's Rv_range)
    _fresh(monkeypatch, tmp_path)
    with pytest.raises(ValueError, match="outside the valid range"):
        extinction_ratio("V", TEFF, rv=7.5, law="F99")
    stored = list((tmp_path / "cache").glob("*.npy")) if (tmp_path / "cache").exists() else []
    assert stored == []
    with pytest.raises(ValueError, match="unknown extinction law"):
        extinction_ratio("V", TEFF, rv=3.1, law="XYZ")


def test_damaged_entry_is_recomputed(monkeypatch, tmp_path):
    _fresh(monkeypatch, tmp_path)
    ref = _uncached("Ks", 3.1, "G23", monkeypatch)
    extinction_ratio("Ks", TEFF, rv=3.1, law="G23")
    (entry,) = (tmp_path / "cache").glob("extinction-ratio-*.npy")
    entry.write_bytes(b"\x93NUMPY garbage")
    _ratio_grid.cache_clear()
    np.testing.assert_array_equal(extinction_ratio("Ks", TEFF, rv=3.1, law="G23"), ref)


def test_cache_size_is_bounded(monkeypatch, tmp_path):
    _fresh(monkeypatch, tmp_path)
    limit = 40_000  # bytes: room for about four of the 8 kB entries below
    for i in range(12):
        arr = _cache.cached_array("test", ("entry", i), lambda i=i: np.full(1000, float(i)), limit=limit)
        assert arr[0] == i
    total = sum(p.stat().st_size for p in (tmp_path / "cache").iterdir())
    assert 0 < total <= limit
    # the most recent entry survives and reads back without recomputing
    again = _cache.cached_array("test", ("entry", 11), lambda: np.zeros(1000), limit=limit)
    assert again[0] == 11


def test_concurrent_writers_leave_one_valid_entry(tmp_path):
    # several processes computing the same entry at once: atomic renames, one readable file
    code = ("import numpy as np; from hbmodel.core.cache import cached_array; "
            "a = cached_array('race', ('same',), lambda: np.arange(200000.0)); print(float(a.sum()))")
    env = dict(os.environ, HBMODEL_CACHE_DIR=str(tmp_path / "cache"))
    env.pop("HBMODEL_NO_CACHE", None)
    procs = [subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True, env=env)
             for _ in range(4)]
    outs = [p.communicate(timeout=120)[0].strip() for p in procs]
    assert outs == [str(float(np.arange(200000.0).sum()))] * 4
    files = list((tmp_path / "cache").iterdir())
    assert len(files) == 1 and files[0].suffix == ".npy"
    np.testing.assert_array_equal(np.load(files[0]), np.arange(200000.0))


def test_rgb_mass_loss_grid_is_cached_and_is_the_integration(monkeypatch, tmp_path):
    # reference: the Runge-Kutta integration of the Reimers (1975) law itself (mass_loss.integrate_rgb_mass_loss);
    # the grid read back from the disk cache must be that integration to the bit, and a trial table block
    # (the calibration) never reads or fills the disk cache
    from hbmodel.core.tables import table_text, trial_tables
    from hbmodel.physics import mass_loss as ml
    _fresh(monkeypatch, tmp_path)
    args = (0.84, 0.488, -1.3, 0.0, 0.75, "reimers", 1.0)
    etas = np.linspace(0.0, 1.0, 241)
    mf, lost = ml.integrate_rgb_mass_loss(etas, 0.84, 0.488, -1.3, helium_excess=0.0, x_env=0.75)
    ml._eta_grid_cached.cache_clear()
    first = ml._eta_grid_cached(*args, "k")
    assert len(list((tmp_path / "cache").glob("rgb-mass-loss-*.npy"))) == 1
    ml._eta_grid_cached.cache_clear()
    monkeypatch.setattr(ml, "integrate_rgb_mass_loss", lambda *a, **k: 1 / 0)  # a cache miss would fail
    again = ml._eta_grid_cached(*args, "k")
    for got in (first, again):
        np.testing.assert_array_equal(got[0], etas)
        np.testing.assert_array_equal(got[1], 0.84 - mf)
        np.testing.assert_array_equal(got[2], lost)
    # eta = 0.5 takes ~0.2 Msun from a metal-poor giant (McDonald & Zijlstra 2015, MNRAS 448, 502: eta ~0.48
    # for globular clusters; from memory)
    assert 0.1 < again[1][120] < 0.35
    ml._eta_grid_cached.cache_clear()
    with trial_tables({"mass_loss_laws.csv": table_text("mass_loss_laws.csv")}):
        with pytest.raises(ZeroDivisionError):
            ml._eta_grid_cached(*args, "trial")
    ml._eta_grid_cached.cache_clear()
