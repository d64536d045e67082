"""`hbmodel batch` wired to the real distance task: results, failure isolation, resume."""
import subprocess
import sys

import numpy as np
from astropy.table import Table

from hbmodel.mock import ObservationSpec, make_mock
from hbmodel.population import MassLoss, Population


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


def test_batch_bad_jobs_table(tmp_path):
    (tmp_path / "jobs.csv").write_text("name,catalog\na,x.ecsv\na,y.ecsv\n")
    proc = subprocess.run([sys.executable, "-m", "hbmodel", "batch", str(tmp_path / "jobs.csv"), "--out",
                           str(tmp_path / "o")], capture_output=True, text=True)
    assert proc.returncode == 2 and "duplicate" in proc.stderr.lower() and "Traceback" not in proc.stderr
