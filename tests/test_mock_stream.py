"""The streamed Parquet mock (hbmodel.observation.mock.write_mock_parquet): it writes, a row group at a time
while the sampler is still computing, the very file that make_mock_arrays + write_parquet_columns write
(same rows, columns, metadata; the same bytes in one row group), its photometric errors follow the error
law (Pogson), it leaves the generator where the one-pass observation does, and it writes nothing on
failure."""
import numpy as np
import pyarrow.parquet as pq
import pytest

from hbmodel import MassLoss, Population
from hbmodel.io import catalogues
from hbmodel.io.catalogues import write_parquet_columns, write_parquet_groups
from hbmodel.observation.mock import (PHASE_NAMES, EmptyMockError, ObservationSpec, make_mock_arrays,
                                      mock_column_info, streams_to_parquet, write_mock_parquet)

POP = Population(-1.5, 12.5, alpha_fe=0.3, mass_loss=MassLoss.from_eta(0.45, 0.05))
OBS = ObservationSpec(distance_modulus=15.0, ebv=0.05, depth={"V": 22.0, "I": 21.5})
META = lambda meta: {"hbmodel_mock": {k: v for k, v in meta.items() if k != "n_field"}}  # noqa: E731


def _reference(tmp_path, n_hb, seed, obs=OBS, name="ref.parquet"):
    rng = np.random.default_rng(seed)
    data, meta = make_mock_arrays(POP, bands=("V", "I"), rng=rng, n_hb=n_hb, obs=obs)
    path = tmp_path / name
    write_parquet_columns(data, path, categories={"phase": PHASE_NAMES[:3]}, meta=META(meta),
                          column_info=mock_column_info(data))
    return path, data, rng


def test_one_row_group_is_the_same_file_to_the_byte(tmp_path):
    ref, data, rng_ref = _reference(tmp_path, 3000, 7)
    rng = np.random.default_rng(7)
    counts, _meta = write_mock_parquet(POP, bands=("V", "I"), rng=rng, path=tmp_path / "s.parquet", n_hb=3000,
                                       obs=OBS)
    assert (tmp_path / "s.parquet").read_bytes() == ref.read_bytes()
    np.testing.assert_array_equal(counts, np.bincount(data["phase"], minlength=len(PHASE_NAMES)))
    assert counts[PHASE_NAMES.index("hb")] == 3000  # every drawn HB star is in the catalogue (no cuts)
    # the generator ends where the one-pass observation leaves it (the last band's deviates drawn)
    assert rng.random() == rng_ref.random()


@pytest.mark.parametrize("window", [None, ("V", 15.5, 17.0)])
def test_many_row_groups_hold_the_same_rows(tmp_path, monkeypatch, window):
    monkeypatch.setattr(catalogues, "PARQUET_ROW_GROUP", 4096)  # several groups, the last one partial
    obs = ObservationSpec(distance_modulus=15.0, ebv=0.05, depth={"V": 22.0, "I": 21.5}, window=window)
    _ref, data, _ = _reference(tmp_path, 5000, 11, obs)
    out = tmp_path / "s.parquet"
    counts, meta = write_mock_parquet(POP, bands=("V", "I"), rng=np.random.default_rng(11), path=out, n_hb=5000,
                                      obs=obs)
    f = pq.ParquetFile(out)
    assert f.metadata.num_row_groups > 3
    got = f.read()
    assert got.column_names == list(data)
    for c in data:
        col = got[c].to_numpy() if c != "phase" else np.asarray(got[c].combine_chunks().indices)
        np.testing.assert_array_equal(col, data[c], err_msg=c)
    assert got.schema.metadata == pq.read_schema(_ref).metadata
    assert counts.sum() == len(data["phase"])
    if window is not None:
        assert np.all((data["V"] >= 15.5) & (data["V"] <= 17.0)) and 0 < len(data["V"]) < 20000


def test_streamed_photometric_errors_follow_the_error_law(tmp_path):
    # sigma = floor + exp((m - m0)/1.0857) with 1.0857/5 = 0.2171 mag at the 5-sigma depth (derivative of
    # Pogson's law, Pogson 1856, MNRAS 17, 12; floor 0.01 mag, tables/error_law_default.csv); the
    # residuals (observed - true)/sigma are standard normal
    out = tmp_path / "s.parquet"
    write_mock_parquet(POP, bands=("V", "I"), rng=np.random.default_rng(5), path=out, n_hb=20000, obs=OBS)
    t = pq.read_table(out)
    v, vt, ve = (t[c].to_numpy().astype(float) for c in ("V", "V_true", "V_err"))
    noise = ve - 0.01  # the background term, over more than a decade of the catalogue's magnitudes
    assert noise.max() > 10 * noise.min() > 0
    np.testing.assert_allclose(noise, 1.0857362 / 5.0 * np.exp((vt - 22.0) / 1.0857362), rtol=1e-3, atol=0)
    z = (v - vt) / ve
    assert abs(z.mean()) < 0.01 and abs(z.std() - 1.0) < 0.01  # ~1e5 stars: 0.003 standard error


def test_empty_window_or_failure_writes_nothing(tmp_path):
    obs = ObservationSpec(distance_modulus=15.0, ebv=0.05, depth={"V": 22.0, "I": 21.5}, window=("V", 2.0, 3.0))
    with pytest.raises(EmptyMockError):
        write_mock_parquet(POP, bands=("V", "I"), rng=np.random.default_rng(1), path=tmp_path / "e.parquet",
                           n_hb=500, obs=obs)
    assert list(tmp_path.iterdir()) == []

    def produce(emit):
        emit({"a": np.arange(10.0)})
        raise RuntimeError("stopped half-way")

    with pytest.raises(ValueError, match="stopped half-way"):
        write_parquet_groups(produce, tmp_path / "f.parquet")
    assert list(tmp_path.iterdir()) == []
    (tmp_path / "g.parquet").write_text("keep me")
    with pytest.raises(ValueError, match="exists"):
        write_parquet_groups(lambda emit: emit({"a": np.arange(3.0)}), tmp_path / "g.parquet")
    assert (tmp_path / "g.parquet").read_text() == "keep me"


def test_which_mocks_stream():
    assert streams_to_parquet(OBS, ("V", "I"))
    assert not streams_to_parquet(ObservationSpec(depth={"V": 22.0}), ("V", "I"))  # I's depth from the catalogue
    assert not streams_to_parquet(ObservationSpec(ebv_sd=0.02, depth={"V": 22.0, "I": 21.5}), ("V", "I"))
    assert not streams_to_parquet(ObservationSpec(completeness_m50=21.0, depth={"V": 22.0, "I": 21.5}), ("V", "I"))
    with pytest.raises(ValueError, match="whole catalogue"):
        write_mock_parquet(POP, bands=("V", "I"), rng=np.random.default_rng(1), path="x.parquet", n_hb=10,
                           obs=ObservationSpec(depth={"V": 22.0}))
