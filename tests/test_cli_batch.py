"""`hbmodel batch` wired to the real distance task: results, failure isolation, resume."""
import os
import subprocess
import sys

import numpy as np
import pytest
from astropy.table import Table

from hbmodel.observation.mock import ObservationSpec, make_mock
from hbmodel.populations.population import MassLoss, Population


def test_batch_distance_jobs(tmp_path):
    pop = Population(0.0, 4.0, mass_loss=MassLoss.from_eta(0.3, 0.03))
    for i, dm in enumerate((13.9, 14.3)):
        obs = ObservationSpec(distance_modulus=dm, ebv=0.1, depth={"Ks": 19.0}, window=("Ks", 11.0, 15.0))
        make_mock(pop, bands=("Ks",), rng=np.random.default_rng(i), n_hb=700, obs=obs).write(tmp_path / f"f{i}.ecsv")
    (tmp_path / "jobs.csv").write_text("name,catalog,band,feh,age,ebv\n"
                                       "near,f0.ecsv,Ks,0,4,0.1\nfar,f1.ecsv,Ks,0,4,0.1\nbroken,none.ecsv,Ks,0,4,0.1\n")
    cmd = [sys.executable, "-m", "hbmodel", "batch", str(tmp_path / "jobs.csv"), "--task", "distance",
           "--out", str(tmp_path / "out"), "--jobs", "2"]
    proc = subprocess.run(cmd, capture_output=True, text=True)
    assert proc.returncode == 1 and "broken" in proc.stdout  # the failing job is reported, others done
    s = Table.read(tmp_path / "out" / "summary.ecsv")
    got = {r["name"]: r for r in s}
    assert str(got["broken"]["status"]) == "failed"
    assert abs(got["near"]["distance_modulus"] - 13.9) < 0.06 and abs(got["far"]["distance_modulus"] - 14.3) < 0.06
    mtime = (tmp_path / "out" / "near" / "result.json").stat().st_mtime_ns
    subprocess.run(cmd, capture_output=True, text=True)  # resume: finished jobs are not redone
    assert (tmp_path / "out" / "near" / "result.json").stat().st_mtime_ns == mtime
    # issue 16: a replaced catalogue (same name, other content) re-runs its job, no stale answer
    (tmp_path / "f0.ecsv").write_bytes((tmp_path / "f1.ecsv").read_bytes())
    subprocess.run(cmd, capture_output=True, text=True)
    s = Table.read(tmp_path / "out" / "summary.ecsv")
    got = {r["name"]: r for r in s}
    assert str(got["near"]["status"]) == "done" and str(got["far"]["status"]) == "skipped-done"
    assert abs(got["near"]["distance_modulus"] - 14.3) < 0.06


def test_batch_bad_jobs_table(tmp_path):
    (tmp_path / "jobs.csv").write_text("name,catalog\na,x.ecsv\na,y.ecsv\n")
    proc = subprocess.run([sys.executable, "-m", "hbmodel", "batch", str(tmp_path / "jobs.csv"), "--out",
                           str(tmp_path / "o")], capture_output=True, text=True)
    assert proc.returncode == 2 and "duplicate" in proc.stderr.lower() and "Traceback" not in proc.stderr


def _batch(tmp_path, text, task="distance"):
    from hbmodel.cli.main import main
    (tmp_path / "j.csv").write_text(text)
    return main(["batch", str(tmp_path / "j.csv"), "--task", task, "--out", str(tmp_path / "o")])


@pytest.mark.parametrize("text,task,needles", [
    # the case: a 'fe_h' column ran with feh = 0.0, exit 0
    ("name,catalog,band,fe_h,age,ebv\nF1,f1.ecsv,I,-0.5,5,0.3\n", "distance",
     ["unknown column 'fe_h'", "did you mean 'feh'"]),
    # no 'age' column ran at 4 Gyr
    ("name,catalog,band,feh,ebv\nF1,f1.ecsv,I,-0.5,0.3\n", "distance", ["row 1 (job 'F1')", "age or age_min+age_max"]),
    ("name,catalog,band,feh,age\nF1,f1.ecsv,I,-0.5,5\n", "distance", ["required column 'ebv' is missing"]),
    ("name,catalog,band,feh,age,ebv\nF1,f1.ecsv,I,-0.5,5,0.3\nF2,f1.ecsv,I,minus one,5,0.3\n", "distance",
     ["row 2 (job 'F2'), column 'feh'", "'minus one'"]),
    ("name,catalog,band,feh,age,ebv,seed\nF1,f1.ecsv,I,-0.5,5,0.3,10.7\n", "distance",
     ["column 'seed'", "expected an integer, got 10.7"]),
    ("name,catalog,band,feh,age,ebv\nF1,f1.ecsv,ACS_F625W,-0.5,5,0.3\n", "distance",
     ["column 'band'", "nearest known band: ACS_F606W"]),
    ("name,catalog,bands,feh,age,distance_modulus,model\nC,c.ecsv,\"V,I\",-1,12,15,spred\n", "fit",
     ["column 'model'", "'spred' is not one of spread"]),
    ("name,catalog,bands,feh,age\nC,c.ecsv,\"V,I\",-1,12\n", "fit", ["required column 'distance_modulus'"]),
])
def test_batch_jobs_table_is_validated_like_a_config_file(tmp_path, capsys, text, task, needles):
    assert _batch(tmp_path, text, task) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "Traceback" not in err
    for n in needles:
        assert n in err, (n, err)
    assert not (tmp_path / "o").exists()  # refused before any job ran


def test_batch_band_alias_is_stored_canonical(tmp_path):
    from hbmodel.io.jobs import read_jobs
    from hbmodel.batch.tasks import JOB_SCHEMAS
    (tmp_path / "j.csv").write_text("name,catalog,band,feh,age_min,age_max,ebv\nF,f.ecsv,k,0,1,10,0.1\n")
    t = read_jobs(tmp_path / "j.csv", schema=JOB_SCHEMAS["distance"])
    assert list(t["band"]) == ["Ks"] and float(t["age_max"][0]) == 10.0


def test_batch_output_problems_are_refused_before_any_job_runs(tmp_path, capsys):
    # Every output path is checked before any work (behaviour): a job directory taken by a file, a summary
    # name taken by a directory, an unwritable directory -- one-line error, exit 2, no job run.
    from hbmodel.cli.main import main
    (tmp_path / "j.csv").write_text("name,catalog,band,feh,age,ebv\nF1,nothere.ecsv,I,0,4,0.1\n")
    out = tmp_path / "o"
    out.mkdir()
    (out / ".hbmodel-batch").write_text("hbmodel batch output directory\n")
    (out / "F1").write_text("a file where the job's directory goes")
    args = ["batch", str(tmp_path / "j.csv"), "--task", "distance", "--out", str(out)]
    assert main(args) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "F1" in err and "not a directory" in err
    assert not (out / "summary.ecsv").exists()
    (out / "F1").unlink()
    (out / "summary.png").mkdir()
    assert main(args) == 2
    assert "summary.png" in capsys.readouterr().err and not (out / "F1").exists()
    (out / "summary.png").rmdir()
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o555)
    try:
        if not os.access(ro, os.W_OK):  # (root may write anyway)
            assert main(["batch", str(tmp_path / "j.csv"), "--task", "distance", "--out", str(ro / "x")]) == 2
            assert "not writable" in capsys.readouterr().err
    finally:
        ro.chmod(0o755)


def test_batch_summary_files_are_written_together(tmp_path, monkeypatch):
    # all-or-nothing: a failure while making the summary figure leaves no summary file at all
    import hbmodel.io.jobs as hb
    from astropy.table import Table as T

    def task(job, job_dir):
        return {"distance_modulus": 14.0}
    monkeypatch.setattr(hb, "summary_figure", lambda *a, **k: (_ for _ in ()).throw(RuntimeError("figure broke")))
    jobs = T({"name": ["a", "b"]})
    with pytest.raises(RuntimeError, match="figure broke"):
        hb.run_batch(jobs, task, tmp_path / "o")
    left = sorted(p.name for p in (tmp_path / "o").iterdir())
    assert not any(n.startswith("summary") or n.startswith(".summary") for n in left), left
