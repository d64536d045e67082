#!/usr/bin/env python3
"""Benchmark: the README's commands timed as whole processes, each as a ratio to a numpy floor.

The floor is a fresh Python process that imports numpy and draws 20 x 10^6 normal deviates (what a
mock of 10^6 HB stars must at least cost: ~20 random numbers per HB star).  Every command is run
``--repeat`` times (after one untimed warm-up run that also fills the on-disk cache), in turn with
the floor, so a drift of the machine's speed affects both; the table gives the median wall and CPU
(user + system, of the process and its children) seconds and their ratios to the floor's medians.

Commands (inputs are made first, untimed, in a temporary directory):

* ``mock``: ``hbmodel mock ... --n-hb 1000000 --bands V,I --out big.parquet`` (a 12.5 Gyr metal-poor
  cluster, 5.0 x 10^6 stars in all); its file size and bytes per star are printed too;
* ``fit``: ``hbmodel fit`` of a mock with about 1,750 stars in the fitted region (emcee, no model
  comparison: the fit of ``scripts/bench_fit.py``);
* ``distance``: the README's clump distance of Tern-South;
* ``batch``: ``hbmodel batch --task distance`` of 10 disc fields, ``--jobs 2``.

Usage: ``python scripts/bench_cli.py [--repeat R] [--only mock,fit,...] [--keep DIR]``.
"""
import argparse
import os
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

PY = sys.executable
HB = [PY, "-m", "hbmodel"]
FLOOR = [PY, "-c", "import numpy as np; np.random.default_rng(0).standard_normal(20_000_000)"]


def _run(cmd, cwd):
    """Wall and CPU seconds (the process and its children) of one run of ``cmd``."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, cwd=cwd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if proc.returncode != 0:
        raise SystemExit(f"command failed ({proc.returncode}): {' '.join(cmd)}\n{proc.stderr.strip()}")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu


def _setup(work: Path):
    """Inputs of the timed commands (untimed)."""
    def hb(*args):
        subprocess.run(HB + list(args), cwd=work, check=True, stdout=subprocess.DEVNULL)

    hb("mock", "--feh", "-1.6", "--alpha-fe", "0.3", "--age", "12.5", "--eta", "0.45", "--eta-sd", "0.03",
       "--n-hb", "400", "--bands", "V,I", "--distance-modulus", "15.0", "--ebv", "0.05", "--depth", "V=22.5,I=21.8",
       "--seed", "1", "--out", "gc.ecsv")
    rows = ["name,catalog,band,feh,age,ebv,ebv_sd"]
    for i in range(10):
        feh, age, dm = -0.3 + 0.06 * i, 3.0 + 0.5 * i, 13.0 + 0.1 * i
        hb("mock", "--feh", f"{feh:.2f}", "--age", f"{age:g}", "--eta", "0.3", "--eta-sd", "0.03", "--n-hb", "1200",
           "--bands", "I,V", "--distance-modulus", f"{dm:g}", "--ebv", "0.4", "--ebv-sd", "0.04",
           "--depth", "I=19.5,V=20.5", "--window", f"I:{dm - 1.6:g}:{dm + 3.4:g}", "--seed", str(5 + i),
           "--out", f"field{i}.ecsv")
        rows.append(f"Field-{i},field{i}.ecsv,I,{feh:.2f},{age:g},0.4,0.02")
    (work / "fields.csv").write_text("\n".join(rows) + "\n")


def _commands():
    return {
        "mock": HB + ["mock", "--feh", "-1.5", "--alpha-fe", "0.3", "--age", "12.5", "--eta", "0.45",
                      "--eta-sd", "0.05", "--n-hb", "1000000", "--bands", "V,I", "--distance-modulus", "15",
                      "--ebv", "0.05", "--depth", "V=22,I=21.5", "--seed", "3", "--out", "big.parquet", "--force"],
        "fit": HB + ["fit", "gc.ecsv", "--bands", "V,I", "--feh", "-1.6", "--alpha-fe", "0.3", "--age", "12.5",
                     "--distance-modulus", "15.0", "--dm-sd", "0.05", "--ebv", "0.05", "--ebv-sd", "0.01",
                     "--no-compare"],
        "distance": HB + ["distance", "field0.ecsv", "--band", "I", "--colour", "V-I", "--reddening-from-colour",
                          "--feh", "-0.3", "--feh-sd", "0.1", "--age", "3", "--age-sd", "2"],
        "batch": HB + ["batch", "fields.csv", "--task", "distance", "--out", "fields_out", "--jobs", "2",
                       "--force"],
    }


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3, help="timed runs of each command (median quoted)")
    ap.add_argument("--only", default=None, help="comma-separated subset of: mock,fit,distance,batch")
    ap.add_argument("--keep", default=None, help="work in this directory (kept) instead of a temporary one")
    a = ap.parse_args()
    cmds = _commands()
    names = [n.strip() for n in a.only.split(",")] if a.only else list(cmds)
    unknown = sorted(set(names) - set(cmds))
    if unknown:
        raise SystemExit(f"unknown command(s): {', '.join(unknown)} (choose from {', '.join(cmds)})")
    work = Path(a.keep) if a.keep else Path(tempfile.mkdtemp(prefix="hbmodel_bench_"))
    work.mkdir(parents=True, exist_ok=True)
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    try:
        if set(names) - {"mock"}:
            _setup(work)
        floor = {"wall": [], "cpu": []}
        rows = []
        for name in names:
            _run(cmds[name], work)  # warm-up: page cache, on-disk table cache
            _run(FLOOR, work)
            wall, cpu = [], []
            for _ in range(a.repeat):
                w, c = _run(cmds[name], work)
                wall.append(w)
                cpu.append(c)
                w, c = _run(FLOOR, work)
                floor["wall"].append(w)
                floor["cpu"].append(c)
            rows.append((name, statistics.median(wall), statistics.median(cpu)))
        fw, fc = statistics.median(floor["wall"]), statistics.median(floor["cpu"])
        print(f"numpy floor (fresh process, 20e6 normal deviates): wall {fw:.2f} s, cpu {fc:.2f} s "
              f"(median of {len(floor['wall'])})")
        print(f"| command | wall s | cpu s | wall / floor | cpu / floor |")
        print(f"| --- | ---: | ---: | ---: | ---: |")
        for name, w, c in rows:
            print(f"| {name} | {w:.2f} | {c:.2f} | {w / fw:.1f} | {c / fc:.1f} |")
        if "mock" in names:
            size = (work / "big.parquet").stat().st_size
            import pyarrow.parquet as pq
            n = pq.ParquetFile(work / "big.parquet").metadata.num_rows
            print(f"mock file: {size / 2**20:.0f} MiB, {n:,} stars, {size / n:.1f} bytes per star")
    finally:
        if not a.keep:
            shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
