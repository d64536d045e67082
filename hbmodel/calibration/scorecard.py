"""Judge the model on target rows: value, reference, uncertainty, pull, pass/fail, reason.

A row passes when ``|model - value| <= 2 sqrt(sigma_target**2 + sigma_model**2)``: ``sigma_model``
is the surrogate's stated accuracy for that quantity (``tables/targets/model_accuracy.csv``, set
before any comparison and never tuned).  Rows the model cannot evaluate stay visible as failures
with the reason.
"""
from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from hbmodel.core.tables import table_text
from hbmodel.calibration.evaluators import NotModelled, evaluate_row

__all__ = ["Score", "score_rows", "sigma_model", "PASS_SIGMA"]

PASS_SIGMA = 2.0


@dataclass(frozen=True)
class Score:
    id: str
    stage: str
    quantity: str
    role: str
    model: float
    value: float
    uncertainty: float
    sigma_total: float
    pull: float
    passed: bool
    reason: str
    source: str
    location: str
    obtained: str


@functools.lru_cache(maxsize=4)
def _accuracy_table(text: str) -> dict:
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.startswith("#")][1:]
    return {q: float(s) for q, s in (ln.split(",") for ln in lines)}


def sigma_model(quantity: str) -> float:
    """The surrogate's stated accuracy for ``quantity`` (``tables/targets/model_accuracy.csv``; 0 if unlisted)."""
    return _accuracy_table(table_text("targets/model_accuracy.csv")).get(quantity, 0.0)


def score_rows(rows) -> list[Score]:
    out = []
    for r in rows:
        unc = float(r["uncertainty"]) if np.isfinite(float(r["uncertainty"])) else 0.0
        sig = float(np.hypot(unc, sigma_model(r["quantity"])))
        reason = ""
        try:
            model = evaluate_row(r)
        except NotModelled as exc:
            model, reason = np.nan, str(exc)
        if np.isfinite(model) and sig > 0:
            pull = (model - float(r["value"])) / sig
            passed = abs(pull) <= PASS_SIGMA
            if not passed:
                reason = f"model {model:.4g} is {abs(pull):.1f} sigma from the target"
        else:
            pull, passed = np.nan, False
            reason = reason or "no uncertainty: cannot be judged"
        out.append(Score(r["id"], r["stage"], r["quantity"], r["role"], model, float(r["value"]), unc, sig, pull,
                         passed, reason, r["source"], r["location"], r["obtained"]))
    return out


