"""Rewrite the near-infrared giant colours of ``tables/colour_teff_giant.csv`` from a published relation.

V-J, V-H and V-Ks of the giant track (log g 2.5 node, [Fe/H] = 0) at the nodes 4250-6000 K are solved
from the 2MASS-native infrared-flux-method calibration of González Hernández & Bonifacio 2009, A&A 497,
497, Table 5 (giant stars):

    theta = 5040/Teff = b0 + b1 X + b2 X^2 + b3 X [Fe/H] + b4 [Fe/H] + b5 [Fe/H]^2

(coefficients read at http://aanda.edpsciences.org/articles/aa/full_html/2009/14/aa10904-08/table5.tex).
Their ranges (V-J 1.0-2.4, V-H 0.8-3.1, V-Ks 1.1-3.4 at [Fe/H] = 0) cover 4160-6050 K; at the
neighbouring nodes (4000 K and 6250 K) half of the change at the nearest end node is applied, so the
sequence joins the unchanged rows smoothly.  Other columns and rows are left as they are.

    python3 scripts/giant_ir_colours.py            # rewrite the table in place
    python3 scripts/giant_ir_colours.py --check    # exit 1 if the table differs from the relation
"""
from __future__ import annotations

import argparse
import io
import sys
from pathlib import Path

import numpy as np

TABLE = Path(__file__).resolve().parent.parent / "tables" / "colour_teff_giant.csv"

#: González Hernández & Bonifacio 2009, Table 5, giant stars: (b0, b1, b2, b3, b4, b5).
GHB09_GIANTS = {
    "J": (0.4629, 0.4124, -0.0417, -0.0012, 0.0094, 0.0013),
    "H": (0.5321, 0.2649, -0.0146, -0.0069, 0.0211, 0.0009),
    "Ks": (0.5293, 0.2489, -0.0119, -0.0042, 0.0135, 0.0010),
}
FULL_NODES_K = (4250, 4500, 4750, 5000, 5250, 5500, 5772, 6000)
EDGE_NODES_K = {4000: 4250, 6250: 6000}     # node -> nearest fully-covered node (half its change)


#: Colour ranges of the giant relations at [Fe/H] = 0 (the same Table 5).
GHB09_VALID = {"J": (1.0, 2.4), "H": (0.8, 3.1), "Ks": (1.1, 3.4)}


def v_minus(band: str, teff_k: float, feh: float = 0.0) -> float:
    """V - band of a giant at ``teff_k`` from the relation (the increasing-branch root used by
    :mod:`hbmodel.photometry.magnitudes`); ValueError outside the relation's published colour range."""
    from hbmodel.photometry.magnitudes import _theta_root
    x = float(_theta_root(GHB09_GIANTS[band], np.array([5040.0 / teff_k]), np.array([float(feh)]))[0])
    lo, hi = GHB09_VALID[band]
    if not lo <= x <= hi:
        raise ValueError(f"V-{band} = {x:.3f} at {teff_k:g} K lies outside the relation's range {lo}-{hi}")
    return x


def rewritten(text: str) -> str:
    lines = text.splitlines(keepends=True)
    start = next(i for i, ln in enumerate(lines) if ln.startswith("teff_k,"))
    cols = lines[start].strip().split(",")
    rows = {int(ln.split(",")[0]): ln.strip().split(",") for ln in lines[start + 1:] if ln.strip()}
    change = {}
    for t in FULL_NODES_K:
        for band in GHB09_GIANTS:
            j = cols.index("v_" + band)
            new = v_minus(band, t)
            change[(t, band)] = new - float(rows[t][j])
            rows[t][j] = f"{new:.3f}"
    for t, ref in EDGE_NODES_K.items():
        for band in GHB09_GIANTS:
            j = cols.index("v_" + band)
            rows[t][j] = f"{float(rows[t][j]) + 0.5 * change[(ref, band)]:.3f}"
    body = [",".join(rows[int(ln.split(",")[0])]) + "\n" for ln in lines[start + 1:] if ln.strip()]
    return "".join(lines[:start + 1] + body)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--check", action="store_true", help="only compare; exit 1 on a difference")
    args = p.parse_args(argv)
    old = TABLE.read_text()
    new = rewritten(old)
    if args.check:
        if new != old:
            print(f"{TABLE.name}: near-IR giant colours differ from González Hernández & Bonifacio 2009")
            return 1
        print(f"{TABLE.name}: near-IR giant colours match the relation")
        return 0
    tmp = TABLE.with_suffix(".csv.tmp")
    tmp.write_text(new)
    tmp.replace(TABLE)
    print(f"rewrote V-J, V-H, V-Ks of {len(FULL_NODES_K) + len(EDGE_NODES_K)} nodes in {TABLE.name}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
