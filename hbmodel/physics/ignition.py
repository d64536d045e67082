"""Core-helium ignition: the helium-core mass at ignition versus initial mass, Z and Y.

* Low-mass stars ignite helium in a degenerate core (the helium flash) at
  Mc ~ 0.46-0.50 Msun, lower at higher Z and higher Y (Sweigart & Gross 1978,
  ApJS 36, 405).
* Near the transition mass M_HeF (~1.7-2.2 Msun, increasing with Z; Sweigart,
  Greggio & Renzini 1990, ApJ 364, 527) the core mass at ignition drops to a
  minimum ~0.33 Msun and then rises with mass in non-degenerate ignition
  (Girardi 1999, MNRAS 308, 818: the origin of the secondary clump).

Coefficients: ``tables/giant_branch.csv`` (per-[M/H] flash core mass and
M_HeF) and ``tables/ignition.csv`` (shape of the transition).
"""
from __future__ import annotations


import numpy as np

from hbmodel.core.tables import read_table, table_cache
from hbmodel.core.validation import check_range
from hbmodel.physics.giant_branch import MH_RANGE, constants as gb_constants, mh_interp

__all__ = ["transition_mass_msun", "ignition_core_mass_msun", "is_degenerate_ignition"]


@table_cache
def _c() -> dict:
    return {k: float(v[0]) for k, v in read_table("ignition.csv").items()}


def _dy(mh, helium):
    if helium is None:
        return 0.0
    from hbmodel.physics.composition import z_from_mh
    return np.asarray(helium, float) - z_from_mh(mh, None)[1]


def transition_mass_msun(mh, helium=None):
    """Transition mass M_HeF between degenerate and non-degenerate helium ignition.

    Tabulated per [M/H] (from memory of Sweigart, Greggio & Renzini 1990 and Girardi 1999);
    lowered by helium (``dmhef_dy``, from memory)."""
    mh = check_range(mh, "[M/H]", *MH_RANGE)
    return mh_interp("giant_branch.csv", "m_hef_msun", mh) + _c()["dmhef_dy"] * _dy(mh, helium)


def is_degenerate_ignition(mass_msun, mh, helium=None):
    return np.asarray(mass_msun, float) < transition_mass_msun(mh, helium)


def ignition_core_mass_msun(mass_msun, mh, helium=None):
    """Helium-core mass (Msun) at helium ignition for initial mass ``mass_msun``.

    Degenerate branch (Sweigart & Gross 1978): ``Mc = Mc_tip([M/H]) + dMc/dM (M-1) + dMc/dY dY
    - A exp((M - M_HeF)/w)``, continuous at M_HeF with the non-degenerate branch
    ``Mc = Mc_min + dMc/dM_nd (M - M_HeF)`` (Girardi 1999).  Valid for 0.6-4 Msun.
    """
    c = _c()
    mass = check_range(mass_msun, "initial mass (Msun)", 0.5, 4.0)
    mh = check_range(mh, "[M/H]", *MH_RANGE)
    dy = _dy(mh, helium)
    m_hef = transition_mass_msun(mh, helium)
    base = mh_interp("giant_branch.csv", "mc_tip_msun", mh) + gb_constants()["dmc_dy"] * dy
    deg_smooth = base + c["dmc_dm"] * (mass - 1.0)
    amp = base + c["dmc_dm"] * (m_hef - 1.0) - c["mc_min_msun"]
    deg = deg_smooth - amp * np.exp(np.minimum(mass - m_hef, 0.0) / c["w_msun"])
    nondeg = c["mc_min_msun"] + c["dmc_dm_nondeg"] * (mass - m_hef)
    return np.where(mass < m_hef, deg, nondeg)
