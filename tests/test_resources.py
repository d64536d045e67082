"""Resource budgets (issue 16): every command sizes its run from its arguments and refuses, in one line
naming the estimate and the limit, what exceeds the machine -- before any heavy work.

The subprocess timeouts below are guards against a regression that runs away, not timing assertions."""
import glob
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pyarrow.parquet as pq
import pytest

from hbmodel.core import limits as resources
from hbmodel.cli.main import main
from hbmodel.observation.mock import ObservationSpec, make_mock, mock_estimate, plan_chunked_mock, write_chunked_mock
from hbmodel.populations.population import MassLoss, Population
from hbmodel.core.limits import ResourceError, parse_size

POP_ARGS = ["--feh", "-1.6", "--age", "12.5", "--eta", "0.45"]
GUARD_S = 60  # a run that is refused takes about a second; this only stops a runaway


def _hbmodel(args, cwd, timeout=GUARD_S):
    return subprocess.run([sys.executable, "-m", "hbmodel", *args], cwd=cwd, capture_output=True, text=True,
                          timeout=timeout)


def _one_line_error(proc):
    """The stderr of a refused run: exactly one line, ``hbmodel: error: ...``, and no traceback."""
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1, proc.stderr
    assert lines[0].startswith("hbmodel: error: ") and "Traceback" not in proc.stderr
    return lines[0]


def _pop():
    return Population(-1.6, 12.5, mass_loss=MassLoss.from_eta(0.45, 0.0))


# --------------------------------------------------------------------------- sizes
@pytest.mark.parametrize("text, n", [("4G", 4 * 2**30), ("500M", 500 * 2**20), ("1.5T", int(1.5 * 2**40)),
                                     ("2048", 2048), ("4GiB", 4 * 2**30), ("4gb", 4 * 2**30), ("12k", 12288)])
def test_parse_size(text, n):
    assert parse_size(text) == n


@pytest.mark.parametrize("text", ["4Q", "-1G", "0", "G", "", "1e400G", "four"])
def test_parse_size_rejects(text):
    with pytest.raises(ValueError, match="size"):
        parse_size(text)


def test_bad_size_option_is_a_usage_error(tmp_path):
    # case: --max-memory with an unreadable size is an argparse usage error (exit 2), naming the option
    proc = _hbmodel(["predict", *POP_ARGS, "--max-memory", "4Q"], tmp_path)
    assert proc.returncode == 2 and "--max-memory" in proc.stderr and "Traceback" not in proc.stderr


# --------------------------------------------------------------------------- the four cases of the issue
def test_mock_billion_hb_stars_refused(tmp_path):
    # case: `mock --n-hb 1000000000` (was: internal error MemoryError, exit 1)
    proc = _hbmodel(["mock", *POP_ARGS, "--n-hb", "1000000000", "--bands", "V,I", "--out", "big.ecsv"], tmp_path)
    assert proc.returncode == 2
    msg = _one_line_error(proc)
    assert "needs about" in msg and "TiB of memory" in msg and "limit" in msg and "--max-memory" in msg
    assert "5.12e+09 stars" in msg  # ~5.1 RGB + HB + AGB stars per HB star at [Fe/H] = -1.6, 12.5 Gyr
    assert os.listdir(tmp_path) == []


def test_chunked_billion_refused_before_writing(tmp_path):
    # case: `--n-hb 1000000000 --chunk-size 250000` (was: 24,984 partitions planned, 21 GB written)
    proc = _hbmodel(["mock", *POP_ARGS, "--n-hb", "1000000000", "--bands", "V,I", "--chunk-size", "250000",
                     "--out", "big.parquet"], tmp_path)
    assert proc.returncode == 2
    msg = _one_line_error(proc)
    assert "of disk" in msg and "partitions" in msg and "--max-disk" in msg
    n_parts = int(msg.split(" partitions")[0].split("(")[-1].replace(",", ""))
    assert 15_000 < n_parts < 30_000
    assert not (tmp_path / "big.parquet").exists()


def test_total_mass_refused(tmp_path):
    # case: `--total-mass 1e12` (was: grew to 23.7 GB and was killed by the kernel)
    proc = _hbmodel(["mock", *POP_ARGS, "--total-mass", "1e12", "--bands", "V,I", "--out", "m.fits"], tmp_path)
    assert proc.returncode == 2
    msg = _one_line_error(proc)
    assert "of memory" in msg and "stars" in msg
    assert os.listdir(tmp_path) == []


def test_predict_grid_model_count_refused(tmp_path):
    # case: `predict --grid feh=-2.3:0.5:0.000001` (was: still running after 300 s)
    proc = _hbmodel(["predict", *POP_ARGS, "--grid", "feh=-2.3:0.5:0.000001", "--out", "g"], tmp_path)
    assert proc.returncode == 2
    msg = _one_line_error(proc)
    assert "2,800,001 models" in msg and "days" in msg and "--max-models" in msg
    assert not (tmp_path / "g").exists()
    # an absurd step is counted, not materialised
    proc = _hbmodel(["predict", *POP_ARGS, "--grid", "feh=-2.3:0.5:1e-300", "--out", "g"], tmp_path)
    assert proc.returncode == 2 and "2.8e+300 models" in _one_line_error(proc)


def test_grid_counts_series_and_max_models(tmp_path, capsys):
    # case: the model count is grid x series, and --max-models lowers or raises the limit
    argv = ["predict", *POP_ARGS, "--grid", "feh=-2.0:-1.0:0.25", "--series", "age=11,12,13", "--out",
            str(tmp_path / "g")]
    assert main(argv + ["--max-models", "14"]) == 2
    assert "15 models" in capsys.readouterr().err and not (tmp_path / "g").exists()
    assert main(argv + ["--max-models", "15"]) == 0
    assert "(15 models)" in capsys.readouterr().out
    assert main(["predict", *POP_ARGS, "--clump-grid", "age=1:12:0.001,feh=-1:0.4:0.2", "--out",
                 str(tmp_path / "c")]) == 2
    assert "88,008 models" in capsys.readouterr().err


# --------------------------------------------------------------------------- overrides and other commands
def test_max_memory_overrides_the_machine(tmp_path, monkeypatch, capsys):
    # case: the default limit is 80 % of the available memory; --max-memory replaces it
    monkeypatch.setattr(resources, "available_memory_bytes", lambda: 100 * 2**20)
    argv = ["mock", *POP_ARGS, "--n-hb", "50", "--bands", "V,I", "--out", str(tmp_path / "m.ecsv")]
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert "of memory" in err and "80% of the 100 MiB available" in err
    assert not (tmp_path / "m.ecsv").exists()
    assert main(argv + ["--max-memory", "2G"]) == 0
    assert (tmp_path / "m.ecsv").exists()


def test_max_disk(tmp_path, capsys):
    # case: --max-disk below the estimated output refuses before writing, naming the limit
    argv = ["mock", *POP_ARGS, "--n-hb", "200", "--bands", "V,I", "--out", str(tmp_path / "m.csv")]
    assert main(argv + ["--max-disk", "10K"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "the --max-disk limit of 10.0 KiB" in err
    assert not (tmp_path / "m.csv").exists()
    assert main(argv + ["--max-disk", "10M"]) == 0


@pytest.fixture(scope="module")
def small_catalog(tmp_path_factory):
    d = tmp_path_factory.mktemp("cat")
    t = make_mock(_pop(), bands=("V", "I"), rng=np.random.default_rng(3), n_hb=150,
                  obs=ObservationSpec(distance_modulus=15.0))
    t.write(d / "c.ecsv")
    return d / "c.ecsv"


@pytest.mark.parametrize("argv, what", [
    (["fit", "{cat}", "--bands", "V,I", "--feh", "-1.6", "--age", "12.5", "--distance-modulus", "15",
      "--max-steps", "1000000000"], "this fit needs about"),
    (["distance", "{cat}", "--band", "I", "--feh", "-1.6", "--age", "12.5", "--out", "{tmp}/d",
      "--max-memory", "1M"], "this distance run needs about"),
    (["classify", "{cat}", "--feh", "-1.6", "--age", "12.5", "--out", "{tmp}/p.fits", "--max-disk", "1K"],
     "this classify run needs about"),
    (["demo", "--out", "{tmp}/demo", "--max-disk", "1M"], "the demo needs about"),
])
def test_other_commands_refuse(argv, what, small_catalog, tmp_path, capsys):
    # case: fit (a billion-step chain), distance, classify and demo size themselves first
    argv = [a.format(cat=small_catalog, tmp=tmp_path) for a in argv]
    assert main(argv) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and what in err and "limit" in err
    assert os.listdir(tmp_path) == []


def test_batch_refuses_memory(tmp_path, small_catalog, capsys):
    # case: a batch sizes its parallel jobs before starting them
    (tmp_path / "jobs.csv").write_text(f"name,catalog,band,feh,age,ebv\nA,{small_catalog},I,-1.6,12.5,0\n")
    assert main(["batch", str(tmp_path / "jobs.csv"), "--task", "distance", "--out", str(tmp_path / "o"),
                 "--max-memory", "10M"]) == 2
    assert "this batch of 1 distance jobs needs about" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()


# --------------------------------------------------------------------------- estimates against real sizes
@pytest.mark.parametrize("ext", ["parquet", "fits", "ecsv", "csv", "vot"])
def test_disk_estimate_matches_real_file(tmp_path, ext):
    # case: the estimated bytes per star are within a factor 2 of the real file
    pop, obs = _pop(), ObservationSpec(distance_modulus=15.0, depth={"V": 22.0, "I": 21.0})
    out = tmp_path / f"m.{ext}"
    assert main(["mock", *POP_ARGS, "--n-hb", "1000", "--bands", "V,I", "--distance-modulus", "15",
                 "--depth", "V=22,I=21", "--out", str(out)]) == 0
    est = mock_estimate(pop, bands=("V", "I"), obs=obs, out=out, n_hb=1000)
    real = out.stat().st_size
    assert 0.5 < est.disk_bytes / real < 2.0, (est.disk_bytes, real)


def test_chunked_disk_estimate_matches_partitions(tmp_path):
    # case: the disk estimate of a chunked mock (all partitions, before any is written) within a factor 2
    pop, obs = _pop(), ObservationSpec(distance_modulus=15.0)
    plan = plan_chunked_mock(pop, bands=("V", "I"), obs=obs, seed=1, chunk_size=4000, n_hb=3000)
    write_chunked_mock(pop, bands=("V", "I"), obs=obs, seed=1, out_dir=tmp_path / "s.parquet",
                       chunk_size=4000, n_hb=3000)
    real = sum(os.path.getsize(p) for p in glob.glob(str(tmp_path / "s.parquet" / "part-*.parquet")))
    assert 0.5 < plan.estimate(("V", "I")).disk_bytes / real < 2.0


def test_memory_estimate_bounds_the_real_peak(tmp_path):
    # case: the memory estimate of a mock is an upper bound of the measured peak, and not a wild one
    # VmHWM: the peak resident size of this process image (ru_maxrss would carry the forking parent's)
    code = ("import sys; from hbmodel.cli.main import main; "
            "rc = main(sys.argv[1:]); "
            "print([int(l.split()[1]) * 1024 for l in open('/proc/self/status') if l.startswith('VmHWM')][0])")
    args = [*POP_ARGS, "--n-hb", "60000", "--bands", "V,I", "--out", "m.parquet"]
    proc = subprocess.run([sys.executable, "-c", code, "mock", *args], cwd=tmp_path, capture_output=True,
                          text=True, timeout=120)
    peak = int(proc.stdout.strip().splitlines()[-1])
    est = mock_estimate(_pop(), bands=("V", "I"), out=tmp_path / "m.parquet", n_hb=60000)
    need = est.memory_bytes + resources.BASE_MEMORY_BYTES
    assert peak < need < 3 * peak, (peak, need)


# --------------------------------------------------------------------------- exact HB counts
def _parts(out):
    return [pq.read_table(p) for p in sorted(glob.glob(str(out / "part-*.parquet")))]


def _same_bytes(paths_a, paths_b):
    return len(paths_a) == len(paths_b) and all(open(a, "rb").read() == open(b, "rb").read()
                                                for a, b in zip(paths_a, paths_b))


def _hb(tables):
    return sum(int(np.sum(np.asarray(t["phase"]) == "hb")) for t in tables)


@pytest.mark.parametrize("chunk", [100, 1000, 250000])
def test_chunked_mock_has_exactly_n_hb(tmp_path, chunk, capsys):
    # case: chunked mocks honour --n-hb (400 became 404 or 381 depending on the chunk size)
    out = tmp_path / "s.parquet"
    assert main(["mock", *POP_ARGS, "--n-hb", "400", "--bands", "V,I", "--chunk-size", str(chunk),
                 "--field-n", "37", "--field-box", "0,2,14,20", "--out", str(out)]) == 0
    parts = _parts(out)
    assert _hb(parts) == 400
    assert sum(int(np.sum(np.asarray(t["phase"]) == "field")) for t in parts) == 37
    rows = [t.num_rows for t in parts]
    assert max(rows) <= 1.1 * chunk + 40  # partitions of about --chunk-size stars
    if chunk == 100:
        assert len(parts) >= 18


def test_chunked_survey_example_exact_and_deterministic(tmp_path):
    # case: the README survey mock (200,000 HB stars became 199,580); same seed -> same bytes, any --jobs
    pop = Population(0.0, 4.0, mass_loss=MassLoss.from_eta(0.3, 0.0))
    obs = ObservationSpec(distance_modulus=12.0, ebv=0.2)
    kw = dict(bands=("Ks", "J"), obs=obs, chunk_size=250000, n_hb=200000)
    a = write_chunked_mock(pop, seed=1, out_dir=tmp_path / "a.parquet", n_jobs=2, **kw)
    b = write_chunked_mock(pop, seed=1, out_dir=tmp_path / "b.parquet", n_jobs=1, **kw)
    ta, tb = _parts(tmp_path / "a.parquet"), _parts(tmp_path / "b.parquet")
    assert _hb(ta) == 200000 and len(a) == 4 and _hb(tb) == 200000
    assert _same_bytes(a, b)
    c = write_chunked_mock(pop, seed=2, out_dir=tmp_path / "c.parquet", **dict(kw, n_hb=20000, chunk_size=30000))
    d = write_chunked_mock(pop, seed=1, out_dir=tmp_path / "d.parquet", **dict(kw, n_hb=20000, chunk_size=30000))
    assert _hb(_parts(tmp_path / "c.parquet")) == _hb(_parts(tmp_path / "d.parquet")) == 20000
    assert not _same_bytes(c, d)


def test_chunk_plan_splits_exactly():
    # case: the HB counts of the partitions differ by at most one and sum to the request
    plan = plan_chunked_mock(_pop(), bands=("V", "I"), obs=ObservationSpec(n_field=10, field_box=(0, 2, 14, 20)),
                             seed=0, chunk_size=1000, n_hb=1234)
    assert plan.n_hb == 1234 and sum(plan.field_sizes) == 10
    assert max(plan.hb_sizes) - min(plan.hb_sizes) <= 1 and len(plan.hb_sizes) == len(plan.field_sizes)


# --------------------------------------------------------------------------- disk running short mid-run
def test_partition_disk_check_stops_cleanly(tmp_path, monkeypatch, capsys):
    # case: chunked runs check free disk before each partition and stop cleanly, leaving no partial file
    out = tmp_path / "s.parquet"
    real_free = resources.free_disk_bytes

    def filling_disk(path):  # plenty of room until two partitions are on disk, then 1 kB
        return 1000 if len(glob.glob(str(out / "part-*.parquet"))) >= 2 else real_free(path)

    monkeypatch.setattr(resources, "free_disk_bytes", filling_disk)
    argv = ["mock", *POP_ARGS, "--n-hb", "400", "--bands", "V,I", "--chunk-size", "200", "--seed", "4",
            "--out", str(out)]
    assert main(argv) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert "partition part-00002.parquet needs about" in err and "stopped with 2 of" in err and "resume" in err
    assert sorted(os.listdir(out)) == [".hbmodel-chunks.json", "part-00000.parquet", "part-00001.parquet"]
    # space again: the same command resumes, and the result is that of an uninterrupted run
    monkeypatch.setattr(resources, "free_disk_bytes", real_free)
    assert main(argv) == 0
    assert main(argv[:-1] + [str(tmp_path / "fresh.parquet")]) == 0
    assert _same_bytes(sorted(glob.glob(str(out / "part-*.parquet"))),
                       sorted(glob.glob(str(tmp_path / "fresh.parquet" / "part-*.parquet"))))


# --------------------------------------------------------------------------- Ctrl-C
def _interrupt(args, cwd, ready):
    """Start hbmodel in its own process group, wait for ``ready()``, Ctrl-C the group (as a terminal
    does); return (exit status, stderr)."""
    proc = subprocess.Popen([sys.executable, "-m", "hbmodel", *args], cwd=cwd, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, start_new_session=True,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    try:
        t0 = time.monotonic()
        while not ready() and proc.poll() is None and time.monotonic() - t0 < GUARD_S:
            time.sleep(0.05)
        os.killpg(proc.pid, signal.SIGINT)
        _out, err = proc.communicate(timeout=GUARD_S)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.communicate()
    return proc.returncode, err


@pytest.mark.parametrize("stage", ["workers starting", "partitions written"])
def test_interrupted_chunked_mock_prints_one_line(tmp_path, stage):
    # case: Ctrl-C during a parallel chunked mock: one line, exit 130, no partial partition
    out = tmp_path / "s.parquet"
    if stage == "workers starting":
        ready = (out / ".hbmodel-chunks.json").exists
    else:
        def ready():
            return len(glob.glob(str(out / "part-*.parquet"))) >= 2
    rc, err = _interrupt(["mock", *POP_ARGS, "--n-hb", "2000000", "--bands", "V,I", "--chunk-size", "100000",
                          "--jobs", "2", "--out", str(out)], tmp_path, ready)
    assert rc == 130 and err.strip() == "hbmodel: interrupted", err
    assert not glob.glob(str(out / ".part-*"))


def test_interrupted_batch_prints_one_line(tmp_path, small_catalog):
    # case: Ctrl-C during a parallel batch: one line, exit 130
    rows = "".join(f"F{i},{small_catalog},I,-1.6,12.5,0\n" for i in range(6))
    (tmp_path / "jobs.csv").write_text("name,catalog,band,feh,age,ebv\n" + rows)
    out = tmp_path / "o"
    rc, err = _interrupt(["batch", "jobs.csv", "--task", "distance", "--out", str(out), "--jobs", "2"], tmp_path,
                         lambda: (out / "F0").exists())
    assert rc == 130 and err.strip() == "hbmodel: interrupted", err


_SWALLOWED_INTERRUPT = """
import os, signal, sys, time
import hbmodel.cli.predict as command
def run(args):  # the interrupt is lost, as inside a compiled module's initialisation during an import
    try:
        os.kill(os.getpid(), signal.SIGINT)
        time.sleep(5)
    except KeyboardInterrupt:
        pass
    return 0
command.run = run
from hbmodel.cli.main import main
sys.argv = ["hbmodel", "predict", "--feh", "-1.6", "--age", "12.5"]
sys.exit(main())
"""


def test_interrupt_lost_inside_the_run_still_reports_it(tmp_path):
    # case: a Ctrl-C whose KeyboardInterrupt is swallowed by library code still ends with one line and exit 130
    proc = subprocess.run([sys.executable, "-c", _SWALLOWED_INTERRUPT], cwd=tmp_path, capture_output=True, text=True,
                          timeout=GUARD_S)
    assert proc.returncode == 130 and proc.stderr.strip() == "hbmodel: interrupted", proc.stderr


def test_check_free_disk_message(tmp_path, monkeypatch):
    monkeypatch.setattr(resources, "free_disk_bytes", lambda p: 10 * 2**20)
    with pytest.raises(ResourceError, match="needs about 100 MiB of disk but only 10.0 MiB is free"):
        resources.check_free_disk(tmp_path, 100 * 2**20, "this")


def test_chunked_multiple_populations_exact(tmp_path, capsys):
    # case: with a helium-enriched second generation the partitions' HB counts used to be rounded per
    # sub-population (400 became 404 with 100-star partitions)
    out = tmp_path / "he.parquet"
    assert main(["mock", *POP_ARGS, "--helium-enriched-fraction", "0.4", "--delta-y", "0.04", "--n-hb", "400",
                 "--bands", "V,I", "--chunk-size", "100", "--out", str(out)]) == 0
    assert _hb(_parts(out)) == 400


def test_hb_counts_of_subpopulations_exact_and_unbiased():
    # case: HB counts over sub-populations sum to n_hb exactly, and each keeps its expected mean
    # (systematic sampling: every count is floor(mean) or floor(mean) + 1, with P(+1) = fractional part)
    ages = np.geomspace(1.0, 10.0, 8)
    pop = Population.from_history(ages, np.gradient(ages), 0.0, mass_loss=MassLoss.from_eta(0.3, 0.03))
    rates = pop.phase_times()
    expected = rates["hb"] / rates["hb"].sum() * 37
    rng = np.random.default_rng(9)
    counts = np.zeros((4000, len(ages)), int)
    for k in range(counts.shape[0]):
        for i, ph, n, _win in pop.phase_counts(37, rng, rates=rates):
            if ph == "hb":
                counts[k, i] = n
    assert np.all(counts.sum(axis=1) == 37)
    assert np.all((counts >= np.floor(expected)) & (counts <= np.floor(expected) + 1))
    # binomial error of each mean: sqrt(p (1 - p) / 4000) <= 0.008
    assert np.max(np.abs(counts.mean(axis=0) - expected)) < 0.035


def test_single_prediction_honours_max_memory(capsys):
    # case: --max-memory is never silently ignored, even where the run is small
    assert main(["predict", *POP_ARGS, "--max-memory", "1M"]) == 2
    assert "this prediction needs about" in capsys.readouterr().err
    assert main(["predict", *POP_ARGS, "--json"]) == 0


def test_closed_output_pipe_stops_quietly():
    # case: `hbmodel predict --json | head -c 1`: the reader has gone; no traceback and no error line, exit 141
    # (128 + SIGPIPE, as shells report it; Python documentation, "Note on SIGPIPE")
    proc = subprocess.Popen([sys.executable, "-m", "hbmodel", "predict", *POP_ARGS, "--json"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    proc.stdout.close()
    err = proc.stderr.read().decode()
    proc.stderr.close()
    assert proc.wait(timeout=GUARD_S) == 141 and err == ""
