"""Reader of the published calibration targets (``tables/targets/*.ecsv``).

One reader for every target file: the stage files (one row per published target) and the cluster
benchmark (``clusters.ecsv``, one row per cluster and quantity).  Each row carries its source
(author, year, journal and the table / equation read), how the value was obtained (``read``,
``memory`` or ``common practice``) and its role: ``fit`` rows may be used by the calibration,
``check`` rows never are.  The schema is documented in ``tables/targets/README.md``.
"""
from __future__ import annotations

import functools
from importlib import resources

import numpy as np
from astropy.table import Table, vstack

__all__ = ["read_targets", "read_clusters", "parse_conditions", "TargetError", "STAGES", "OBTAINED", "ROLES"]

STAGES = ("giant_branch", "ignition", "mass_loss", "zahb", "hb_evolution", "pulsation", "photometry",
          "clump", "bump", "counts")
OBTAINED = ("read", "memory", "common practice")
ROLES = ("fit", "check")
_STAGE_COLUMNS = ("id", "stage", "quantity", "feh", "alpha_fe", "age_gyr", "helium", "mass_msun", "band",
                  "conditions", "value", "uncertainty", "unit", "source", "location", "url", "obtained",
                  "role", "note")
_CLUSTER_COLUMNS = ("name", "kind", "quantity", "value", "uncertainty", "unit", "source", "location", "url",
                    "obtained", "role", "note")
_STR = ("id", "stage", "quantity", "band", "conditions", "unit", "source", "location", "url", "obtained",
        "role", "note", "name", "kind")


class TargetError(ValueError):
    """A target file does not follow the schema."""


def _files():
    root = resources.files("hbmodel.tables").joinpath("targets")
    return sorted((p for p in root.iterdir() if p.name.endswith(".ecsv")), key=lambda p: p.name)


def _clean(t: Table, name: str, columns) -> Table:
    missing = [c for c in columns if c not in t.colnames]
    if missing:
        raise TargetError(f"{name}: missing column(s) {', '.join(missing)}")
    extra = [c for c in t.colnames if c not in columns]
    if extra:
        raise TargetError(f"{name}: unknown column(s) {', '.join(extra)}")
    out = Table()
    for c in columns:
        col = t[c]
        if c in _STR:
            vals = [("" if (np.ma.is_masked(v) or v is None) else str(v)) for v in col]
            out[c] = np.array(vals, dtype=object)
        else:
            data = np.ma.filled(np.ma.asarray(col, dtype=float), np.nan)
            out[c] = data
            if col.unit is not None:
                out[c].unit = col.unit
    for r in out:
        if r["obtained"] not in OBTAINED:
            raise TargetError(f"{name}: row {r[columns[0]]!r}: obtained must be one of {OBTAINED}")
        if r["role"] not in ROLES:
            raise TargetError(f"{name}: row {r[columns[0]]!r}: role must be 'fit' or 'check'")
        if not r["source"]:
            raise TargetError(f"{name}: row {r[columns[0]]!r} names no source")
    return out


@functools.lru_cache(maxsize=None)
def _read_all() -> tuple[Table, Table]:
    stage_tabs, cluster_tabs = [], []
    for p in _files():
        t = Table.read(p.read_text(encoding="utf-8"), format="ascii.ecsv")
        if p.name == "clusters.ecsv":
            cluster_tabs.append(_clean(t, p.name, _CLUSTER_COLUMNS))
        else:
            t = _clean(t, p.name, _STAGE_COLUMNS)
            bad = [s for s in t["stage"] if s not in STAGES]
            if bad:
                raise TargetError(f"{p.name}: unknown stage {bad[0]!r}")
            t["file"] = np.array([p.name] * len(t), dtype=object)
            stage_tabs.append(t)
    stages = vstack(stage_tabs) if stage_tabs else Table(names=_STAGE_COLUMNS)
    ids = list(stages["id"])
    dup = {i for i in ids if ids.count(i) > 1}
    if dup:
        raise TargetError(f"duplicate target id(s): {', '.join(sorted(dup))}")
    clusters = vstack(cluster_tabs) if cluster_tabs else Table(names=_CLUSTER_COLUMNS)
    return stages, clusters


def read_targets(stage: str | None = None, role: str | None = None) -> Table:
    """All stage targets (a copy), optionally those of one ``stage`` and/or ``role``."""
    t = _read_all()[0]
    keep = np.ones(len(t), bool)
    if stage is not None:
        keep &= np.array([s == stage for s in t["stage"]], bool)
    if role is not None:
        if role not in ROLES:
            raise ValueError(f"role must be 'fit' or 'check', not {role!r}")
        keep &= np.array([r == role for r in t["role"]], bool)
    return t[keep].copy()


def read_clusters() -> Table:
    """The cluster benchmark in long format (one row per cluster and quantity), a copy."""
    return _read_all()[1].copy()


def parse_conditions(text: str) -> dict[str, str]:
    """``'key=value;key=value'`` -> dict (empty or ``'--'`` -> {})."""
    out = {}
    for part in (text or "").split(";"):
        part = part.strip()
        if not part or part == "--":
            continue
        k, sep, v = part.partition("=")
        out[k.strip()] = v.strip() if sep else ""
    return out
