"""Regression tests for the confirmed bugs of issue 14 (each failed on the code before its fix)."""
import os
import subprocess
import sys

import numpy as np
import pytest

from hbmodel.mock import make_mock
from hbmodel.population import MassLoss, Population


def _median_hb_mass(pop, seed, n_hb=3000):
    mock = make_mock(pop, bands=("V", "I"), rng=np.random.default_rng(seed), n_hb=n_hb)
    return float(np.median(mock["mass"][mock["phase"] == "hb"]))


def test_bug1_stale_mocks_after_mass_loss_reassignment():
    # Bug 1 (stale mocks): the sampler cached on population.__dict__ survived `pop.mass_loss = ...`,
    # so mocks kept the HB masses of the old mass loss while `predict` used the new one.
    pop = Population(-1.5, 12.0, mass_loss=MassLoss.from_eta(0.3, 0.03))
    before = _median_hb_mass(pop, 1)
    pop.mass_loss = MassLoss.from_eta(0.6, 0.03)
    after = _median_hb_mass(pop, 2)
    fresh = _median_hb_mass(Population(-1.5, 12.0, mass_loss=MassLoss.from_eta(0.6, 0.03)), 3)
    # MC error of a median of 3000 draws: ~1.25 sd / sqrt(n); the HB-mass spread here is < 0.05 Msun
    assert abs(after - fresh) < 0.005
    assert before - after > 0.05  # more mass loss -> lighter HB stars (the change is far above the MC error)


def test_bug1_other_defining_fields_rebuild_the_population():
    # Bug 1 (stale caches), same mechanism: assigning a defining field after construction must
    # give the same predictions as a fresh population built with that value.
    pop = Population(-1.5, 12.0)
    _median_hb_mass(pop, 1, n_hb=200)  # fill the caches
    pop.helium = 0.30
    fresh = Population(-1.5, 12.0, helium=0.30)
    assert pop.subpopulations[0].tip_mass_msun == pytest.approx(fresh.subpopulations[0].tip_mass_msun, rel=1e-12)
    assert _median_hb_mass(pop, 5) == pytest.approx(_median_hb_mass(fresh, 5), abs=1e-9)


@pytest.mark.parametrize("name, value, valid", [
    ("helium_fraction", (0.0, 2.0), "[0, 1]"),   # bug 2: accepted before (operator precedence)
    ("helium_fraction", (-0.5, 0.5), "[0, 1]"),
    ("field_fraction", (0.0, 1.0), "[0, 1)"),
    ("delta_y", (0.0, 0.3), "[0, 0.15]"),
    ("mass_loss", (-0.1, 0.2), "[0, inf)"),
    ("mass_loss_sd", (-0.1, 0.2), "[0, inf)"),
])
def test_bug2_priors_out_of_range_are_rejected_with_the_valid_range(name, value, valid):
    # Bug 2: `not 0 <= lo and hi <= 1` parsed as `(not 0 <= lo) and hi <= 1`, so
    # Priors(helium_fraction=(0, 2)) was accepted.  Every bounded range must name itself and its bounds.
    from hbmodel.fit import Priors
    with pytest.raises(ValueError) as err:
        Priors(**{name: value})
    assert name in str(err.value) and valid in str(err.value)


def test_bug2_priors_at_the_edges_are_accepted():
    # Bug 2, the other side: the widest valid ranges stay valid.
    from hbmodel.fit import Priors
    p = Priors(helium_fraction=(0.0, 1.0), delta_y=(0.0, 0.15), field_fraction=(0.0, 0.99), mass_loss=(0.0, 0.4))
    assert p.helium_fraction == (0.0, 1.0) and p.delta_y == (0.0, 0.15)
