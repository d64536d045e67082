#!/usr/bin/env python3
"""Print one row per external check: quantity, model value, reference, tolerance, source."""
import sys

from hbmodel.validation import run_checks


def main():
    rows = run_checks(sys.argv[1] if len(sys.argv) > 1 else None)
    w = max(len(r[0]) for r in rows)
    print(f"{'quantity':<{w}}  {'model':>10}  {'reference':>10}  {'tol':>8}  ok   source")
    for q, v, ref, tol, src, ok in rows:
        print(f"{q:<{w}}  {v:10.4g}  {ref:10.4g}  {tol:8.3g}  {'yes' if ok else 'NO '}  {src}")
    n_bad = sum(not r[5] for r in rows)
    print(f"\n{len(rows) - n_bad} of {len(rows)} checks within tolerance")
    return 1 if n_bad else 0


if __name__ == "__main__":
    sys.exit(main())
