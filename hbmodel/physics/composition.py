"""Composition: [Fe/H], [alpha/Fe] and helium -> X, Y, Z and [M/H].

Solar mixture from Asplund et al. 2009 (ARA&A 47, 481); alpha-enhancement folded
into a global metallicity with the scaling of Salaris, Chieffi & Straniero 1993
(ApJ 414, 580); helium either given explicitly or from a primordial value (Aver et
al. 2015, JCAP 07, 011) plus a linear enrichment law dY/dZ.  Constants live in
``tables/solar_mixture.csv``.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from hbmodel.core.tables import read_table
from hbmodel.core.validation import check_range

__all__ = ["Composition", "metallicity_mh", "z_from_mh", "FEH_RANGE", "Y_RANGE", "ALPHA_RANGE"]

#: Calibrated range of the surrogate in [Fe/H], helium mass fraction and [alpha/Fe].
FEH_RANGE = (-2.5, 0.5)
Y_RANGE = (0.23, 0.40)
ALPHA_RANGE = (-0.2, 0.6)


def _solar() -> dict:
    t = read_table("solar_mixture.csv")
    return {k: float(v[0]) for k, v in t.items()}


def metallicity_mh(feh, alpha_fe=0.0):
    """Global metallicity [M/H] of an alpha-enhanced mixture.

    Salaris, Chieffi & Straniero 1993, ApJ 414, 580, eq. 3:
    ``[M/H] = [Fe/H] + log10(a f + b)`` with ``f = 10**[alpha/Fe]``,
    a = 0.638, b = 0.362.  Valid for [alpha/Fe] in -0.2...+0.6.
    """
    s = _solar()
    feh = check_range(feh, "[Fe/H]", *FEH_RANGE)
    alpha_fe = check_range(alpha_fe, "[alpha/Fe]", *ALPHA_RANGE)
    f = 10.0 ** alpha_fe
    return feh + np.log10(s["alpha_a"] * f + s["alpha_b"])


def z_from_mh(mh, helium=None):
    """Heavy-element mass fraction Z (and Y) for a global metallicity [M/H].

    ``Z/X = (Z/X)_sun 10**[M/H]`` (Asplund et al. 2009).  With ``helium=None`` the
    helium fraction follows ``Y = Yp + (dY/dZ) Z`` (Aver et al. 2015 for Yp),
    solved exactly: ``Z = (1 - Yp) / (1/(Z/X) + 1 + dY/dZ)``.  Returns ``(z, y)``.
    """
    s = _solar()
    zx = s["zx_sun"] * 10.0 ** np.asarray(mh, dtype=float)
    if helium is None:
        z = (1.0 - s["y_primordial"]) / (1.0 / zx + 1.0 + s["dy_dz"])
        y = s["y_primordial"] + s["dy_dz"] * z
    else:
        y = check_range(helium, "helium mass fraction Y", *Y_RANGE)
        z = (1.0 - y) * zx / (1.0 + zx)
    return z, y


@dataclass(frozen=True)
class Composition:
    """Chemical composition of a stellar population.

    Parameters
    ----------
    feh : float
        Iron abundance [Fe/H] (dex), calibrated -2.5 ... +0.5.
    alpha_fe : float
        [alpha/Fe] (dex), -0.2 ... +0.6.
    helium : float or None
        Initial helium mass fraction Y (0.23 ... 0.40); ``None`` uses the
        enrichment law Y = Yp + dY/dZ Z.
    """

    feh: float
    alpha_fe: float = 0.0
    helium: float | None = None

    def __post_init__(self):
        check_range(self.feh, "[Fe/H]", *FEH_RANGE)
        check_range(self.alpha_fe, "[alpha/Fe]", *ALPHA_RANGE)
        if self.helium is not None:
            check_range(self.helium, "helium mass fraction Y", *Y_RANGE)
        if self.y < Y_RANGE[0] - 1e-9 or self.y > Y_RANGE[1]:
            raise ValueError(f"helium Y = {self.y:.3f} from the enrichment law is outside {Y_RANGE}")

    @property
    def mh(self) -> float:
        """Global metallicity [M/H] (Salaris et al. 1993 scaling)."""
        return float(metallicity_mh(self.feh, self.alpha_fe))

    @property
    def z(self) -> float:
        return float(z_from_mh(self.mh, self.helium)[0])

    @property
    def y(self) -> float:
        return float(z_from_mh(self.mh, self.helium)[1])

    @property
    def x(self) -> float:
        return 1.0 - self.y - self.z

    @property
    def y_standard(self) -> float:
        """Helium the enrichment law would give at this Z (the reference for helium offsets)."""
        return float(z_from_mh(self.mh, None)[1])

    def with_helium(self, helium: float) -> "Composition":
        return Composition(self.feh, self.alpha_fe, helium)
