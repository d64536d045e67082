"""Tests of the generic batch engine (hbmodel.io.jobs).

The engine is exercised with a small real computation of our own: a maximum-
likelihood fit of a Gaussian to a catalogue's magnitude column, checked against
the closed-form normal-distribution MLE (sample mean, ddof=0 standard
deviation) and its Fisher-information errors sigma/sqrt(n), sigma/sqrt(2n)
(textbook results, e.g. Fisher 1922, Phil. Trans. R. Soc. A 222, 309).
"""
from __future__ import annotations

import hashlib
import json
import os
import pathlib
import socket
import subprocess
import sys
import textwrap
import zlib

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from astropy.table import Table
from scipy import optimize

from hbmodel.io.jobs import flatten_result, job_seed, read_jobs, run_batch, run_chunked


# --------------------------------------------------------------------------- test task
def gauss_mag_task(job: dict, job_dir: pathlib.Path) -> dict:
    """ML Gaussian fit of the ``mag`` column by numerical optimisation (deterministic)."""
    cat = Table.read(job["catalog"])
    mag = np.asarray(cat[job.get("column", "mag")], dtype=float)
    if mag.size < 3:
        raise ValueError(f"need at least 3 stars, got {mag.size}")

    def nll(p):
        mu, log_s = p
        return np.sum(log_s + 0.5 * ((mag - mu) / np.exp(log_s)) ** 2)

    start = np.array([np.median(mag), np.log(np.subtract(*np.percentile(mag, [84, 16])) / 2)])
    res = optimize.minimize(nll, start, method="Nelder-Mead",
                            options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 4000})
    mu, s = float(res.x[0]), float(np.exp(res.x[1]))
    e_mu, e_s = s / np.sqrt(mag.size), s / np.sqrt(2 * mag.size)
    # a per-job random quantity, seeded from the job name: must be identical everywhere
    rng = np.random.default_rng(job["seed"])
    boot = float(np.mean(rng.choice(mag, size=mag.size)))
    return {"mag_mean": {"median": mu, "lo": mu - e_mu, "hi": mu + e_mu},
            "mag_sigma": {"median": s, "lo": s - e_s, "hi": s + e_s},
            "n_stars": int(mag.size), "boot_mean": boot, "feh_echo": job.get("feh")}


def counting_task(job: dict, job_dir: pathlib.Path) -> dict:
    """gauss_mag_task that also appends the job name to a calls log (for resume tests)."""
    with open(job["calls_log"], "a") as fh:
        fh.write(job["name"] + "\n")
    return gauss_mag_task(job, job_dir)


def bad_return_task(job, job_dir):
    return {"values": [1, 2, 3]}  # a list is not a flat result


@pytest.fixture
def jobs_file(tmp_path):
    cats = tmp_path / "cats"
    cats.mkdir()
    rng = np.random.default_rng(20240601)
    rows = ["name,catalog,feh"]
    for i in range(5):
        mag = rng.normal(14.0 + 0.5 * i, 0.1 + 0.02 * i, 300)
        Table({"mag": mag}).write(cats / f"field{i}.ecsv")
        rows.append(f"Vela-{i},cats/field{i}.ecsv,{-1.5 + 0.25 * i}")
    path = tmp_path / "jobs.csv"
    path.write_text("\n".join(rows) + "\n")
    return path


def _results(out_dir: pathlib.Path) -> dict:
    return {p.parent.name: json.loads(p.read_text())["result"] for p in out_dir.glob("*/result.json")}


def _same_summary(a: Table, b: Table) -> None:
    assert a.colnames == b.colnames
    for c in a.colnames:
        if c == "status":
            continue
        # masked cells (failed jobs; ECSV reads empty strings back as masked) compare as None
        assert [None if np.ma.is_masked(v) or v == "" else v for v in a[c]] == \
            [None if np.ma.is_masked(v) or v == "" else v for v in b[c]], c


# --------------------------------------------------------------------------- the test task
def test_task_matches_closed_form_mle(jobs_file, tmp_path):
    # closed-form Gaussian MLE: mean and ddof=0 std; Fisher errors s/sqrt(n), s/sqrt(2n) (Fisher 1922)
    job = {c: v for c, v in zip(("name", "catalog", "feh"), ("x", str(tmp_path / "cats/field2.ecsv"), 0))}
    job["seed"] = job_seed("x")
    out = gauss_mag_task(job, tmp_path)
    mag = np.asarray(Table.read(job["catalog"])["mag"])
    assert out["mag_mean"]["median"] == pytest.approx(mag.mean(), abs=1e-7)
    assert out["mag_sigma"]["median"] == pytest.approx(mag.std(ddof=0), rel=1e-6)
    assert out["mag_mean"]["hi"] - out["mag_mean"]["median"] == pytest.approx(mag.std() / np.sqrt(300), rel=1e-5)
    assert out["mag_sigma"]["hi"] - out["mag_sigma"]["median"] == pytest.approx(mag.std() / np.sqrt(600), rel=1e-5)


def test_job_seed_is_crc32_of_name():
    # stable hash independent of PYTHONHASHSEED (zlib.crc32, RFC 1952 CRC-32); check value from memory
    assert job_seed("Vela-0") == zlib.crc32(b"Vela-0")
    assert zlib.crc32(b"hello") == 907060870  # CRC-32 of "hello", from memory


# --------------------------------------------------------------------------- read_jobs
def test_read_jobs_resolves_relative_catalog(jobs_file, tmp_path, monkeypatch):
    monkeypatch.chdir("/")
    t = read_jobs(jobs_file)
    assert list(t["name"]) == [f"Vela-{i}" for i in range(5)]
    assert t["catalog"][3] == str(tmp_path.resolve() / "cats" / "field3.ecsv")
    assert t["feh"][0] == pytest.approx(-1.5)


def test_read_jobs_ecsv(tmp_path):
    Table({"name": ["a", "b"], "age": [10.0, 12.0], "catalog": ["/abs/x.csv", "rel.csv"]}).write(
        tmp_path / "jobs.ecsv")
    t = read_jobs(tmp_path / "jobs.ecsv")
    assert list(t["age"]) == [10.0, 12.0]
    assert t["catalog"][0] == "/abs/x.csv" and t["catalog"][1] == str(tmp_path.resolve() / "rel.csv")


def test_read_jobs_comments_quotes_and_blank_cells(tmp_path):
    (tmp_path / "jobs.csv").write_text('# invented fields\nname,bands,age\nA,"G,BP,RP",10\nB,G,\n')
    t = read_jobs(tmp_path / "jobs.csv")
    assert list(t["bands"]) == ["G,BP,RP", "G"]
    s = run_batch(t, _echo_task, tmp_path / "out")
    # a blank cell means "option not given": the task does not see the key at all
    assert list(s["has_age"]) == [True, False]
    assert list(s["seed"]) == [zlib.crc32(b"A"), zlib.crc32(b"B")]


def _echo_task(job, job_dir):
    return {"has_age": "age" in job, "seed": job["seed"]}


@pytest.mark.parametrize("content, match", [
    ("name,feh\nA,1\nB,2\nA,3\nB,4\nC,5\n", "duplicate job name.*A, B"),
    ("cluster,feh\nA,1\n", "no 'name' column"),
    ("name,feh\n", "no jobs"),
    ("name,feh\nA,1,2,3\nB\n", "cannot read jobs file"),
    ("name,feh\nx/y,1\n", "unsafe"),
    ("name,feh\n..,1\n", "unsafe"),
    ("name,feh\n,1\nB,2\n", "empty"),
    ("name,feh\nAbc,1\nabc,2\n", "letter case"),
])
def test_read_jobs_errors(tmp_path, content, match):
    p = tmp_path / "jobs.csv"
    p.write_text(content)
    with pytest.raises(ValueError, match=match) as info:
        read_jobs(p)
    assert "\n" not in str(info.value)


def test_read_jobs_missing_and_binary_file(tmp_path):
    with pytest.raises(ValueError, match="not found"):
        read_jobs(tmp_path / "nope.csv")
    (tmp_path / "junk.csv").write_bytes(bytes(range(256)) * 4)
    with pytest.raises(ValueError, match="not a text"):
        read_jobs(tmp_path / "junk.csv")


# --------------------------------------------------------------------------- run_batch
def test_batch_n1_n2_identical_and_outputs(jobs_file, tmp_path):
    s1 = run_batch(read_jobs(jobs_file), gauss_mag_task, tmp_path / "o1", n_jobs=1)
    s2 = run_batch(jobs_file, gauss_mag_task, tmp_path / "o2", n_jobs=2)
    assert list(s1["status"]) == ["done"] * 5 and list(s2["status"]) == ["done"] * 5
    _same_summary(s1, s2)
    assert _results(tmp_path / "o1") == _results(tmp_path / "o2")
    for c in ("mag_mean", "mag_mean_lo", "mag_mean_hi", "mag_sigma", "n_stars", "boot_mean", "feh_echo"):
        assert c in s1.colnames
    # the fitted means follow the generating values 14.0 + 0.5 i (to within 5 sigma)
    err = (s1["mag_mean_hi"] - s1["mag_mean"])
    assert np.all(np.abs(s1["mag_mean"] - (14.0 + 0.5 * np.arange(5))) < 5 * err)
    back = Table.read(tmp_path / "o1" / "summary.ecsv")
    _same_summary(s1, back)
    assert Table.read(tmp_path / "o1" / "summary.csv", format="ascii.csv")["name"][0] == "Vela-0"
    assert (tmp_path / "o1" / "summary.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    # a re-run skips everything and reproduces the same summary
    s3 = run_batch(jobs_file, gauss_mag_task, tmp_path / "o1", n_jobs=2)
    assert list(s3["status"]) == ["skipped-done"] * 5
    _same_summary(s1, s3)


def test_failing_job_isolated_and_retried(jobs_file, tmp_path):
    text = jobs_file.read_text() + "Lost-1,cats/missing.ecsv,0.0\n"
    jobs_file.write_text(text)
    out = tmp_path / "out"
    s = run_batch(jobs_file, gauss_mag_task, out, n_jobs=2)
    row = s[list(s["name"]).index("Lost-1")]
    assert row["status"] == "failed"
    assert "missing.ecsv" in row["reason"] and "\n" not in row["reason"]
    assert np.ma.is_masked(row["mag_mean"])
    assert list(s["status"]).count("done") == 5
    err = json.loads((out / "Lost-1" / "error.json").read_text())
    assert err["status"] == "failed" and "Traceback" in err["traceback"]
    assert not (out / "Lost-1" / "result.json").exists()
    assert "failed" in Table.read(out / "summary.ecsv")["status"]
    # provide the catalogue: the re-run retries only the failed job
    Table({"mag": np.random.default_rng(3).normal(16, 0.1, 50)}).write(tmp_path / "cats" / "missing.ecsv")
    s = run_batch(jobs_file, gauss_mag_task, out, n_jobs=1)
    assert list(s["status"]) == ["skipped-done"] * 5 + ["done"]
    assert not (out / "Lost-1" / "error.json").exists()


def test_bad_result_shape_is_a_failed_job(jobs_file, tmp_path):
    s = run_batch(jobs_file, bad_return_task, tmp_path / "out")
    assert set(s["status"]) == {"failed"}
    assert "must be a number, string or interval" in s["reason"][0]
    with pytest.raises(ValueError, match="not an interval"):
        flatten_result({"x": {"median": 1.0, "lo": 0.5}})
    assert flatten_result({"x": {"median": 1, "lo": 0, "hi": 2}, "k": 3}) == \
        {"x": 1.0, "x_lo": 0.0, "x_hi": 2.0, "k": 3}


def test_changed_options_and_force_rerun(jobs_file, tmp_path):
    out = tmp_path / "out"
    run_batch(jobs_file, gauss_mag_task, out)
    t = read_jobs(jobs_file)
    t["feh"][1] = -2.0
    s = run_batch(t, gauss_mag_task, out)
    assert list(s["status"]) == ["skipped-done", "done"] + ["skipped-done"] * 3
    assert s["feh_echo"][1] == -2.0
    s = run_batch(t, gauss_mag_task, out, force=True)
    assert list(s["status"]) == ["done"] * 5


def test_replaced_catalogue_reruns_the_job(jobs_file, tmp_path):
    # issue 16: replacing a job's catalogue by a different file was "skipped-done" with the stale answer;
    # resume now also compares the SHA-256 of the catalogue bytes stored with the result
    out = tmp_path / "out"
    s = run_batch(jobs_file, gauss_mag_task, out)
    stale = float(s["mag_mean"][2])
    assert stale == pytest.approx(15.0, abs=0.05)  # field2 was drawn around 14 + 0.5 * 2
    rec = json.loads((out / "Vela-2" / "result.json").read_text())
    cat = tmp_path / "cats" / "field2.ecsv"
    assert rec["inputs"]["catalog"] == "sha256:" + hashlib.sha256(cat.read_bytes()).hexdigest()
    Table({"mag": np.random.default_rng(5).normal(17.0, 0.1, 300)}).write(cat, overwrite=True)
    s = run_batch(jobs_file, gauss_mag_task, out)
    assert list(s["status"]) == ["skipped-done"] * 2 + ["done"] + ["skipped-done"] * 2
    assert float(s["mag_mean"][2]) == pytest.approx(17.0, abs=0.05)
    # the same bytes rewritten (new mtime) are the same input: skipped
    cat.write_bytes(cat.read_bytes())
    s = run_batch(jobs_file, gauss_mag_task, out)
    assert list(s["status"]) == ["skipped-done"] * 5


def test_jobs_schema_checks_columns_rows_and_types(tmp_path):
    from hbmodel.io.jobs import JobColumn, JobSchema, as_float, as_int, as_text
    schema = JobSchema({"catalog": JobColumn(as_text, True), "feh": JobColumn(as_float, True),
                        "n": JobColumn(as_int), "age": JobColumn(as_float), "age_lo": JobColumn(as_float),
                        "age_hi": JobColumn(as_float)}, alternatives=((("age",), ("age_lo", "age_hi")),))
    cases = [("name,catalog,fe_h,age\nA,x,1,2\n", r"unknown column 'fe_h' \(did you mean 'feh'\?"),
             ("name,catalog,age\nA,x,2\n", "required column 'feh' is missing"),
             ("name,catalog,feh,age\nA,x,1,2\nB,x,,2\n", r"row 2 \(job 'B'\), column 'feh': empty"),
             ("name,catalog,feh,age\nA,x,1,2\nB,x,minus one,2\n", r"row 2 \(job 'B'\), column 'feh': "
                                                                  "expected a number, got 'minus one'"),
             ("name,catalog,feh,age,n\nA,x,1,2,10.7\n", "column 'n': expected an integer, got 10.7"),
             ("name,catalog,feh,age,age_lo,age_hi\nA,x,1,2,1,3\n", "exactly one of age or age_lo"),
             ("name,catalog,feh,age_lo\nA,x,1,1\n", "exactly one of age or age_lo")]
    for text, match in cases:
        (tmp_path / "j.csv").write_text(text)
        with pytest.raises(ValueError, match=match):
            read_jobs(tmp_path / "j.csv", schema=schema)
    (tmp_path / "j.csv").write_text("name,catalog,feh,age,age_lo,age_hi,n\nA,x,-1,5,,,3.0\nB,x,0,,1,3,\n")
    t = read_jobs(tmp_path / "j.csv", schema=schema)
    assert list(t["feh"]) == [-1.0, 0.0] and int(t["n"][0]) == 3 and np.ma.is_masked(t["age"][1])


def test_refuses_foreign_nonempty_out_dir(jobs_file, tmp_path):
    out = tmp_path / "mine"
    out.mkdir()
    (out / "thesis.tex").write_text("precious")
    with pytest.raises(ValueError, match="not empty"):
        run_batch(jobs_file, gauss_mag_task, out)
    assert (out / "thesis.tex").read_text() == "precious"


def test_kill_and_resume(jobs_file, tmp_path):
    out = tmp_path / "out"
    log = tmp_path / "calls.log"
    script = tmp_path / "killer.py"
    # the run dies abruptly (os._exit: no cleanup, like SIGKILL) when it reaches job 3
    script.write_text(textwrap.dedent(f"""
        import os, sys
        sys.path.insert(0, {str(pathlib.Path(__file__).parent)!r})
        from test_batch import counting_task
        from hbmodel.io.jobs import read_jobs, run_batch
        def dying_task(job, job_dir):
            if job["name"] == "Vela-3":
                os._exit(17)
            return counting_task(job, job_dir)
        t = read_jobs({str(jobs_file)!r})
        t["calls_log"] = {str(log)!r}
        run_batch(t, dying_task, {str(out)!r}, n_jobs=1)
    """))
    proc = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 17, proc.stderr
    assert log.read_text().split() == ["Vela-0", "Vela-1", "Vela-2"]
    assert not (out / "summary.ecsv").exists()
    mtimes = {n: (out / n / "result.json").stat().st_mtime_ns for n in ("Vela-0", "Vela-1", "Vela-2")}
    assert not list(out.glob("**/*.tmp"))  # no half-written files left behind
    # resume: only the unfinished jobs run, nothing finished is redone or lost
    t = read_jobs(jobs_file)
    t["calls_log"] = str(log)
    s = run_batch(t, counting_task, out, n_jobs=2)
    assert list(s["status"]) == ["skipped-done"] * 3 + ["done"] * 2
    assert sorted(log.read_text().split()) == sorted(f"Vela-{i}" for i in range(5))
    assert {n: (out / n / "result.json").stat().st_mtime_ns for n in mtimes} == mtimes
    # and the resumed results equal an uninterrupted run
    ref = run_batch(t, gauss_mag_task, tmp_path / "ref")
    _same_summary(ref, s)


def slow_counting_task(job, job_dir):
    import time
    time.sleep(0.3)
    return counting_task(job, job_dir)


def test_sigkill_parallel_run_and_resume(jobs_file, tmp_path):
    import signal
    import time

    out, log = tmp_path / "out", tmp_path / "calls.log"
    script = tmp_path / "victim.py"
    script.write_text(textwrap.dedent(f"""
        import sys
        sys.path.insert(0, {str(pathlib.Path(__file__).parent)!r})
        from test_batch import slow_counting_task
        from hbmodel.io.jobs import read_jobs, run_batch
        t = read_jobs({str(jobs_file)!r})
        t["calls_log"] = {str(log)!r}
        run_batch(t, slow_counting_task, {str(out)!r}, n_jobs=2)
    """))
    proc = subprocess.Popen([sys.executable, str(script)], start_new_session=True,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 90
        while len(list(out.glob("*/result.json"))) < 2 and time.monotonic() < deadline \
                and proc.poll() is None:
            time.sleep(0.05)
    finally:
        os.killpg(proc.pid, signal.SIGKILL)  # the run and its workers die without cleanup
        proc.wait()
    done_before = {p.parent.name: p.stat().st_mtime_ns for p in out.glob("*/result.json")}
    assert 2 <= len(done_before) <= 5
    t = read_jobs(jobs_file)
    t["calls_log"] = str(log)
    s = run_batch(t, counting_task, out, n_jobs=2)
    assert list(s["status"]).count("skipped-done") == len(done_before)
    assert set(s["status"]) <= {"done", "skipped-done"}
    assert {n: (out / n / "result.json").stat().st_mtime_ns for n in done_before} == done_before
    ref = run_batch(t, gauss_mag_task, tmp_path / "ref")
    _same_summary(ref, s)


def test_progress_bar_forced(jobs_file, tmp_path, capsys):
    run_batch(jobs_file, gauss_mag_task, tmp_path / "out", progress=True)
    assert "5/5" in capsys.readouterr().err
    run_batch(jobs_file, gauss_mag_task, tmp_path / "o2", progress=None)  # stderr is not a tty here
    assert "hbmodel batch" not in capsys.readouterr().err


def test_bad_arguments(jobs_file, tmp_path):
    with pytest.raises(ValueError, match="n_jobs"):
        run_batch(jobs_file, gauss_mag_task, tmp_path / "o", n_jobs=0)
    with pytest.raises(ValueError, match="callable"):
        run_batch(jobs_file, "fit", tmp_path / "o")
    with pytest.raises(ValueError, match="duplicate"):
        run_batch([{"name": "a"}, {"name": "a"}], gauss_mag_task, tmp_path / "o")


# --------------------------------------------------------------------------- Dask
def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_unreachable_scheduler(jobs_file, tmp_path):
    port = _free_port()  # nothing listens there any more
    with pytest.raises(ValueError, match=f"cannot reach Dask scheduler at tcp://127.0.0.1:{port}"):
        run_batch(jobs_file, gauss_mag_task, tmp_path / "o", scheduler=f"tcp://127.0.0.1:{port}")
    with pytest.raises(ValueError, match="cannot reach Dask scheduler"):
        run_chunked(10, 5, _normal_chunk, tmp_path / "c", scheduler=f"tcp://127.0.0.1:{port}")


@pytest.fixture(scope="module")
def dask_cluster():
    distributed = pytest.importorskip("distributed")
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       host="127.0.0.1", dashboard_address=None)
    yield cluster
    cluster.close()


def test_dask_matches_local(jobs_file, tmp_path, dask_cluster):
    local = run_batch(jobs_file, gauss_mag_task, tmp_path / "local", n_jobs=1)
    remote = run_batch(jobs_file, gauss_mag_task, tmp_path / "dask",
                       scheduler=dask_cluster.scheduler_address)
    assert list(remote["status"]) == ["done"] * 5
    _same_summary(local, remote)
    assert _results(tmp_path / "local") == _results(tmp_path / "dask")
    # chunked generation through the same cluster gives the same bytes of data
    # (here through an existing distributed.Client instead of an address)
    import distributed
    with distributed.Client(dask_cluster.scheduler_address, set_as_default=False) as client:
        p_dask = run_chunked(1000, 300, _normal_chunk, tmp_path / "cd", scheduler=client)
    p_loc = run_chunked(1000, 300, _normal_chunk, tmp_path / "cl", n_jobs=1)
    assert all(pq.read_table(a).equals(pq.read_table(b)) for a, b in zip(p_dask, p_loc))


# --------------------------------------------------------------------------- run_chunked
def _normal_chunk(index, n, child):
    rng = np.random.default_rng(child)
    return pa.table({"index": np.full(n, index, dtype=np.int32), "x": rng.normal(size=n),
                     "u": rng.uniform(size=n)})


def test_chunked_reproducible_and_complete(tmp_path):
    p1 = run_chunked(2503, 500, _normal_chunk, tmp_path / "a", n_jobs=1, seed=7)
    p2 = run_chunked(2503, 500, _normal_chunk, tmp_path / "b", n_jobs=2, seed=7)
    assert [p.name for p in p1] == [f"part-{i:05d}.parquet" for i in range(6)]
    t1 = pa.concat_tables([pq.read_table(p) for p in p1])
    t2 = pa.concat_tables([pq.read_table(p) for p in p2])
    assert t1.num_rows == 2503 and t1.equals(t2)
    assert pq.read_table(p1[-1]).num_rows == 3
    # chunk i uses SeedSequence(seed).spawn(n_chunks)[i] (numpy documented SeedSequence.spawn)
    child = np.random.SeedSequence(7).spawn(6)[4]
    assert pq.read_table(p1[4]).equals(_normal_chunk(4, 500, child))
    # another seed gives different data
    p3 = run_chunked(2503, 500, _normal_chunk, tmp_path / "c", seed=8)
    assert not pq.read_table(p3[0]).equals(pq.read_table(p1[0]))


def test_chunked_resume_and_guards(tmp_path):
    out = tmp_path / "a"
    paths = run_chunked(1000, 250, _normal_chunk, out)
    paths[2].unlink()
    before = {p: p.stat().st_mtime_ns for p in paths if p.exists()}
    again = run_chunked(1000, 250, _normal_chunk, out, n_jobs=2)
    assert again == paths and paths[2].exists()
    assert {p: p.stat().st_mtime_ns for p in before} == before
    with pytest.raises(ValueError, match="holds chunks made with"):
        run_chunked(1000, 100, _normal_chunk, out)
    fresh = run_chunked(500, 100, _normal_chunk, out, force=True)
    assert sorted(out.glob("part-*.parquet")) == fresh
    with pytest.raises(ValueError, match="returned 3 rows"):
        run_chunked(10, 5, lambda i, n, c: _normal_chunk(i, 3, c), tmp_path / "b")
    with pytest.raises(ValueError, match="positive integer"):
        run_chunked(0, 5, _normal_chunk, tmp_path / "c")


@pytest.mark.parametrize("umask", [0o022, 0o027])
def test_outputs_follow_umask(jobs_file, tmp_path, umask):
    # case (issue 16): batch outputs and chunked Parquet partitions were written 0600 (mkstemp's mode),
    # unreadable to the group on the shared file system of a Dask cluster
    old = os.umask(umask)
    try:
        run_batch(jobs_file, gauss_mag_task, tmp_path / "out", n_jobs=1)
        parts = run_chunked(100, 40, _normal_chunk, tmp_path / "c")
    finally:
        os.umask(old)
    files = [tmp_path / "out" / n for n in ("summary.ecsv", "summary.csv", "summary.png", ".hbmodel-batch")]
    files += [tmp_path / "out" / "Vela-0" / "result.json", tmp_path / "c" / ".hbmodel-chunks.json", *parts]
    assert {f.name: oct(f.stat().st_mode & 0o777) for f in files} == {f.name: oct(0o666 & ~umask) for f in files}
    for d in (tmp_path / "out", tmp_path / "out" / "Vela-0", tmp_path / "c"):
        assert d.stat().st_mode & 0o777 == 0o777 & ~umask


def test_chunked_progress_bar(tmp_path, capsys):
    # case: a bar over the partitions when asked (ending at n/n); none by default when stderr is not a terminal
    run_chunked(1000, 250, _normal_chunk, tmp_path / "p", progress=True)
    assert "4/4" in capsys.readouterr().err
    run_chunked(1000, 250, _normal_chunk, tmp_path / "q")
    assert "partitions" not in capsys.readouterr().err
