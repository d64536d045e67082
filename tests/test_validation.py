"""Every row of scripts/validate.py is asserted here (the same registry, hbmodel.validation.CHECKS).

Each row names its external source (published relation, catalogue value, "common practice" or
"from memory") beside the reference value and tolerance.
"""
import pytest

from hbmodel.validation import CHECKS


@pytest.mark.parametrize("check", CHECKS, ids=[c.quantity for c in CHECKS])
def test_external_check(check):
    value, ok = check.evaluate()
    assert ok, (f"{check.quantity}: model {value:.4g} vs reference {check.reference:.4g} "
                f"± {check.tolerance:.3g} ({check.source})")
