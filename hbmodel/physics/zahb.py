"""Zero-age horizontal branch: (Mc, Menv, [M/H], Y) -> L, Teff, R, log g.

Physically motivated form calibrated to published ZAHB model sequences
(Sweigart 1987, ApJS 65, 95; Dorman 1992, ApJS 81, 221; Dorman, Rood &
O'Connell 1993, ApJ 419, 596; Girardi 1999, MNRAS 308, 818 for core-helium
burning in intermediate-mass stars):

* luminosity = helium-burning core (steep in Mc) + hydrogen shell (grows with
  envelope mass and saturates -- but keeps rising on the red HB of metal-rich
  populations; brighter for helium-rich envelopes) + a shell term for
  intermediate-mass stars (``tables/zahb_luminosity.csv``, ``tables/zahb_shell.csv``).
  The shell normalisation is a quadratic in [M/H] (:func:`shell_normalisation`; the
  form of the ZAHB / RR Lyrae M_V--metallicity relations of Catelan, Pritzl & Smith
  2004, ApJS 154, 633 and Caputo et al. 2000, MNRAS 316, 819) and its rise with
  envelope mass a logistic in [M/H] (:func:`shell_tilt`), so that the ZAHB and the
  clump vary smoothly with metallicity; their few coefficients are the free
  parameters fitted by :mod:`hbmodel.calibration`;
* Teff falls monotonically with envelope mass, from ~32-33 kK at the hot end of the
  canonical extreme HB (blue-hook stars, hotter than ~35 kK, are not canonical: Brown
  et al. 2010, arXiv:1006.1591; Moehler et al. 2004, A&A 415, 313)
  to a saturation value on the red HB / clump that is much cooler at high Z
  (``tables/zahb_teff.csv``, PCHIP in log Menv, linear in [M/H]).  The radius
  then follows from Stefan-Boltzmann: ``R = sqrt(L) (5772/Teff)^2``.

Validity: Mc 0.30-0.55 Msun, Menv 0-3.2 Msun, [M/H] -2.65...+0.75.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from hbmodel.core.tables import pchip_rows, read_table, table_cache
from hbmodel.core.validation import as_float_array, check_range
from hbmodel.physics.giant_branch import MH_RANGE, log_g, radius_rsun

__all__ = ["ZAHBState", "zahb_state", "zahb_logl", "zahb_logteff", "envelope_for_logteff", "shell_normalisation",
           "shell_tilt", "MENV_MIN_MSUN"]

#: Smallest envelope the ZAHB relations are evaluated at (bare helium-burning core limit).
MENV_MIN_MSUN = 0.002


@table_cache
def _lum() -> dict:
    return {k: float(v[0]) for k, v in read_table("zahb_luminosity.csv").items()}


def _teff_rows():
    return pchip_rows("zahb_teff.csv", "menv_msun", "log_teff", True, False)


@dataclass(frozen=True)
class ZAHBState:
    """Zero-age HB properties of a set of stars (arrays)."""

    mass_msun: np.ndarray
    core_mass_msun: np.ndarray
    logl: np.ndarray
    logteff: np.ndarray

    @property
    def teff_k(self):
        return 10.0 ** self.logteff

    @property
    def radius_rsun(self):
        return radius_rsun(self.logl, self.logteff)

    @property
    def logg(self):
        return log_g(self.mass_msun, self.logl, self.logteff)


@table_cache
def _shell() -> dict:
    return {k: float(v[0]) for k, v in read_table("zahb_shell.csv").items()}


def shell_normalisation(mh):
    """Hydrogen-shell normalisation h_l0([M/H]) (Lsun): ``log10 h_l0 = c0 + c1 u + c2 u^2``, ``u = [M/H] + 1``.

    A quadratic in metallicity, the form of the ZAHB / RR Lyrae M_V--metallicity relations of Catelan,
    Pritzl & Smith 2004, ApJS 154, 633 (abstract) and Caputo et al. 2000, MNRAS 316, 819; coefficients in
    ``tables/zahb_shell.csv`` (fitted by the calibration)."""
    s = _shell()
    u = np.asarray(mh, float) + 1.0
    return 10.0 ** (s["h_logl0_c0"] + s["h_logl0_c1"] * u + s["h_logl0_c2"] * u * u)


def shell_tilt(mh):
    """Amplitude of the rise of the shell luminosity with envelope mass (red HB / clump): a logistic
    ``tilt_amp / (1 + exp(-([M/H] - tilt_mh0)/tilt_width_dex))`` (``tables/zahb_shell.csv``)."""
    s = _shell()
    z = (np.asarray(mh, float) - s["tilt_mh0"]) / s["tilt_width_dex"]
    return s["tilt_amp"] / (1.0 + np.exp(-np.clip(z, -60.0, 60.0)))


def zahb_logl(mc_msun, menv_msun, mh, helium_excess=0.0):
    """ZAHB log10 L/Lsun (see module docstring for the form and sources)."""
    c = _lum()
    s = _shell()
    mc = check_range(mc_msun, "HB core mass (Msun)", 0.30, 0.55)
    menv = check_range(menv_msun, "HB envelope mass (Msun)", 0.0, 3.2)
    mh = check_range(mh, "[M/H]", *MH_RANGE)
    dy = as_float_array(helium_excess, "helium excess")
    l_he = 10.0 ** (c["he_logl0"] + c["he_dlogl_dmc"] * (mc - 0.49))
    lx = np.log10(np.maximum(menv, 1e-6) / s["tilt_menv0_msun"])
    tilt = 1.0 + shell_tilt(mh) * (np.clip(lx, 0.0, c["tilt_cap_dex"])
                                   + s["tilt_big_ratio"] * np.maximum(lx - c["tilt_cap_dex"], 0.0))
    l_h = (shell_normalisation(mh) * (mc / 0.49) ** c["h_mc_exp"]
           * menv / (menv + c["h_menv_half"]) * tilt * 10.0 ** (c["h_dy"] * dy))
    m_tot = mc + menv
    l_im = c["im_l0"] * (np.maximum(m_tot - c["im_m0"], 0.0) / (2.0 - c["im_m0"])) ** c["im_exp"]
    return np.log10(l_he + l_h + l_im)


def zahb_logteff(mc_msun, menv_msun, mh, helium_excess=0.0):
    """ZAHB log10 Teff from the tabulated Teff--envelope-mass relation ``tables/zahb_teff.csv``.

    Nodes from memory of published ZAHB sequences (Sweigart 1987, ApJS 65, 95; Dorman 1992, ApJS 81, 221),
    PCHIP in log Menv (monotone: more envelope, cooler) and linear in [M/H].  Around the RR Lyrae strip the
    shape at [M/H] <= -1.3 is fitted, not read: the strip (log Teff 3.78-3.87) spans ~0.05 Msun of envelope
    and the ZAHB mass at its centre falls with metallicity (0.70 Msun at [Fe/H] -2.1, 0.65 at -1.5, 0.56 at
    -0.5), so that the evolved blue-HB crossers of Oosterhoff II clusters are heavier than before (Lee,
    Demarque & Zinn 1990, ApJ 350, 155; details and what was read in the table header)."""
    c = _lum()
    mhs, rows, mlo, mhi = _teff_rows()
    mc = check_range(mc_msun, "HB core mass (Msun)", 0.30, 0.55)
    menv = check_range(menv_msun, "HB envelope mass (Msun)", 0.0, 3.2)
    mh = check_range(mh, "[M/H]", *MH_RANGE)
    dy = as_float_array(helium_excess, "helium excess")
    menv_eff = np.clip(menv * 10.0 ** (-c["teff_dy"] * dy), mlo, mhi)
    lm = np.log10(menv_eff)
    mh_b = np.broadcast_to(mh, np.broadcast(lm, mh).shape)
    lm_b = np.broadcast_to(lm, mh_b.shape)
    i = np.clip(np.searchsorted(mhs, mh_b) - 1, 0, len(mhs) - 2)
    w = (mh_b - mhs[i]) / (mhs[i + 1] - mhs[i])
    vals = np.stack([r(lm_b) for r in rows])  # (n_mh, ...)
    lo = np.take_along_axis(vals, i[None], 0)[0]
    hi = np.take_along_axis(vals, (i + 1)[None], 0)[0]
    logt = lo * (1 - w) + hi * w
    return logt + c["teff_dmc"] * (mc - 0.47)


def zahb_state(mass_msun, core_mass_msun, mh, helium_excess=0.0) -> ZAHBState:
    """ZAHB state of stars of total mass ``mass_msun`` with helium cores ``core_mass_msun``."""
    mass = as_float_array(mass_msun, "HB mass")
    mc = as_float_array(core_mass_msun, "HB core mass")
    if np.any(mass < mc):
        raise ValueError("HB mass below its core mass: a star cannot have a negative envelope")
    menv = np.maximum(mass - mc, MENV_MIN_MSUN)
    logl = zahb_logl(mc, menv, mh, helium_excess)
    logt = zahb_logteff(mc, menv, mh, helium_excess)
    mass, mc, logl, logt = np.broadcast_arrays(mass, mc, logl, logt)
    return ZAHBState(mass, mc, logl, logt)


def envelope_for_logteff(logteff, mc_msun, mh, helium_excess=0.0):
    """Envelope mass at which the ZAHB reaches ``logteff`` (inverse of :func:`zahb_logteff`, monotone)."""
    grid = np.geomspace(MENV_MIN_MSUN, 3.2, 2000)
    lt = zahb_logteff(mc_msun, grid, mh, helium_excess)
    return np.interp(-np.asarray(logteff, float), -lt, grid)
