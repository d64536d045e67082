"""Initial mass function: star counts per unit mass formed (Kroupa 2001, MNRAS 322, 231)."""
from __future__ import annotations

import numpy as np

from hbmodel.core.tables import read_table

__all__ = ["imf_number_density", "tip_birth_rate"]


def imf_number_density(m):
    """Kroupa (2001, MNRAS 322, 231) IMF: number of stars per Msun formed per unit mass interval.
    Valid for 0.01-100 Msun (ValueError outside)."""
    from hbmodel.core.validation import check_range
    t = read_table("imf_kroupa2001.csv")
    m = check_range(m, "stellar mass (Msun)", float(t["m_lo"][0]), float(t["m_hi"][-1]))
    # continuity constants and normalisation to 1 Msun formed
    k = [1.0]
    for i in range(1, len(t["alpha"])):
        k.append(k[-1] * t["m_lo"][i] ** (t["alpha"][i] - t["alpha"][i - 1]))
    mass_int = 0.0
    for ki, lo, hi, a in zip(k, t["m_lo"], t["m_hi"], t["alpha"]):
        mass_int += ki * (hi ** (2 - a) - lo ** (2 - a)) / (2 - a)
    out = np.zeros_like(m)
    for ki, lo, hi, a in zip(k, t["m_lo"], t["m_hi"], t["alpha"]):
        sel = (m >= lo) & (m < hi)
        out[sel] = ki * m[sel] ** (-a)
    return out / mass_int


def tip_birth_rate(age_gyr, mh, helium=None):
    """Stars reaching the RGB tip per Myr per Msun formed at ``age_gyr`` ago:
    ``xi(m_tip) |dm_tip/dt|`` (Kroupa 2001 IMF; tip masses from :mod:`hbmodel.physics.giant_branch`)."""
    from hbmodel.physics import giant_branch as gb
    a = float(age_gyr)
    da = 0.01 * a
    lo, hi = max(a - da, gb.AGE_RANGE_GYR[0]), min(a + da, gb.AGE_RANGE_GYR[1])
    dmdt = abs(float(gb.tip_mass_msun(hi, mh, helium) - gb.tip_mass_msun(lo, mh, helium))) / ((hi - lo) * 1e3)
    return float(imf_number_density(gb.tip_mass_msun(a, mh, helium))) * dmdt
