"""Throughput of the mock-observation layer and catalogue I/O (prints figures; not a test)."""
from __future__ import annotations

import tempfile
import time
from pathlib import Path

import numpy as np

from hbmodel.io import catalogues as hio
from hbmodel.observation import effects as ob
def _t(label, fn, n):
    t0 = time.perf_counter()
    out = fn()
    dt = time.perf_counter() - t0
    print(f"{label:38s} {dt * 1e3:9.1f} ms   {n / dt / 1e6:8.2f} M stars/s")
    return out


def main(n: int = 1_000_000) -> None:
    rng = np.random.default_rng(0)
    v = rng.uniform(14, 25, n)
    true = {"B": v + 0.8, "V": v, "I": v - 1.0}
    laws = {b: ob.default_error_law(b, 24.5) for b in true}
    comp = ob.Completeness(24.0, 0.3)
    obs, err, det = _t("observe_magnitudes (3 bands)", lambda: ob.observe_magnitudes(
        true, rng, error_laws=laws, completeness=comp, completeness_band="V"), n)
    _t("differential_reddening (sd > 0)", lambda: ob.differential_reddening(n, 0.1, rng, sd=0.03), n)
    _t("add_unresolved_binaries (3 bands)", lambda: ob.add_unresolved_binaries(true, true, 0.3, rng), n)
    box = ob.CMDBox("V", ("B", "V"), (14, 25), (0, 2), offsets={"I": -1.0})
    _t("uniform_contaminants", lambda: ob.uniform_contaminants(n, rng, box), n)
    table = {**{b: obs[b] for b in obs}, **{f"{b}_err": err[b] for b in err}}
    with tempfile.TemporaryDirectory() as d:
        for ext in ("parquet", "fits", "ecsv"):
            p = Path(d) / f"cat.{ext}"
            _t(f"write_table .{ext}", lambda: hio.write_table(table, p), n)
            _t(f"read_catalog .{ext}", lambda: hio.read_catalog(p, required=["V", "V_err"]), n)


if __name__ == "__main__":
    main()
