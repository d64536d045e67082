#!/usr/bin/env python3
"""Fit hbmodel's free coefficients to the published 'fit' targets, stage by stage.

    python3 scripts/calibrate.py            # fit, print residuals and pulls, rewrite the coefficient tables
    python3 scripts/calibrate.py --check    # refit and prove the shipped tables are what the fit produces

The targets are tables/targets/*.ecsv (rows with role 'fit'; 'check' rows are never read here).  The
stages, their free coefficient cells and the coefficients no target constrains are listed in
hbmodel/calibration/stages.py.  --check exits 1 when a shipped coefficient differs from its refitted
value by more than 0.1 of its fitted uncertainty (a hand edit), or when a table's calibration header
does not name the targets the fit used.
"""
import argparse
import sys
from importlib import resources
from pathlib import Path

import numpy as np

from hbmodel.core.tables import _shipped_text
from hbmodel.calibration.coefficients import MARK
from hbmodel.calibration.stages import STAGES, run_all
from hbmodel.io.catalogues import atomic_write_text

CHECK_FRACTION = 0.1   # a shipped value may differ from the refit by this fraction of its uncertainty


def _block(text):
    return [ln for ln in text.splitlines() if ln.startswith(MARK)]


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--check", action="store_true", help="refit and compare with the shipped tables; write nothing")
    ap.add_argument("--skip", action="append", default=[], metavar="STAGE",
                    help="leave out a stage (development only; not allowed with --check)")
    args = ap.parse_args(argv)
    if args.check and args.skip:
        ap.error("--check refits every stage; --skip is not allowed with it")
    unknown = [s for s in args.skip if s not in {st.name for st in STAGES}]
    if unknown:
        ap.error(f"unknown stage(s): {', '.join(unknown)}")
    stages = [st for st in STAGES if st.name not in args.skip]
    results = run_all(stages, progress=lambda st: print(f"== stage: {st.name} ({st.description})", flush=True))
    bad = []
    for r in results:
        print(f"\nstage '{r.stage.name}': chi2 = {r.chi2:.3g} on {len(r.rows)} target(s)"
              f"{'' if r.success else '  (FIT FAILED)'}")
        for name, x0, x, s in zip(r.names, r.start, r.values, r.sigma):
            moved = abs(x - x0)
            flag = ""
            if args.check and moved > CHECK_FRACTION * (s if np.isfinite(s) and s > 0 else 1e-6 * abs(x0)):
                flag = "  <- differs from the shipped value"
                bad.append(name)
            print(f"  {name:<60} shipped {x0:12.7g}  fitted {x:12.7g} +- {s:.3g}{flag}")
        for rid, m, v, s, pull in r.rows:
            print(f"    {rid:<40} model {m:10.5g}  target {v:10.5g} +- {s:8.3g}  pull {pull:+6.2f}")
        for rid, why in r.skipped:
            print(f"    {rid:<40} not used: {why}")
        if not r.success:
            bad.append(r.stage.name)
    final = results[-1].texts if results else {}
    for name, text in sorted(final.items()):
        if args.check:
            if _block(text) != _block(_shipped_text(name)):
                print(f"{name}: calibration header differs from what the fit writes")
                bad.append(name)
        else:
            path = Path(str(resources.files("hbmodel.tables").joinpath(name)))
            atomic_write_text(path, text, force=True)
            print(f"wrote {path}")
    if args.check:
        print(f"\n{'OK: the shipped coefficient tables are the calibration output' if not bad else 'FAILED: ' + ', '.join(bad)}")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
