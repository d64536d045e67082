"""Giant branch: turn-off/tip masses, the RGB core-mass--luminosity relation,
core growth, the RGB temperature locus and the RGB bump.

Relations (each cites its source; coefficients in ``tables/``):

* Age at the RGB tip versus initial mass, [M/H] and Y: hbmodel's own
  calibration table ``tip_age.csv`` (from memory of published grids, see its
  header), interpolated monotonically in log mass and linearly in [M/H];
  helium-rich stars evolve faster (homology, Salaris & Cassisi 2005).
* Core-mass--luminosity relation ``L = D(Z) Mc**6`` (Refsdal & Weigert 1970,
  A&A 6, 426; the exponent used by Hurley, Pols & Tout 2000, MNRAS 315, 543),
  normalised so that the flash core mass gives the tabulated tip luminosity.
* Core growth ``dMc/dt = L / (X E_H)`` with E_H the energy per gram of
  hydrogen burnt (Kippenhahn, Weigert & Weiss 2012).  With the Mc--L relation
  the time to grow from Mc1 to Mc2 is analytic:
  ``t = X E_H / (5 D) (Mc1**-5 - Mc2**-5)`` (for p = 6), which makes the RGB
  luminosity function ``dN/dlogL ~ L**(-5/6)``.
"""
from __future__ import annotations


import numpy as np

from ._tables import pchip_rows, read_table, table_cache
from ._validate import as_float_array, check_range

__all__ = [
    "MH_RANGE", "AGE_RANGE_GYR", "tip_age_gyr", "tip_mass_msun", "ms_lifetime_gyr",
    "rgb_tip_logl", "cml_log_d", "rgb_logl_from_core", "rgb_core_from_logl", "core_growth_time_myr",
    "core_from_time", "rgb_logteff", "agb_logteff", "radius_rsun", "log_g", "log_g_from_logs", "bump_logl", "constants",
    "mh_interp", "L_SUN_ERG_S", "M_SUN_G", "YEAR_S", "LOG_G_SUN",
]

#: [M/H] range over which the giant-branch calibration is defined (table -2.3..+0.4, extrapolated 0.3 dex).
MH_RANGE = (-2.65, 0.75)
#: Ages for which tip masses are calibrated.
AGE_RANGE_GYR = (0.5, 14.0)

# IAU 2015 Resolution B3 nominal solar values and the Julian year (constants, not calibration).
L_SUN_ERG_S = 3.828e33
M_SUN_G = 1.98847e33
YEAR_S = 3.15576e7
#: log10 of the nominal solar surface gravity in cgs (GM_sun / R_sun^2 = 27400 cm s^-2, IAU 2015 B3).
LOG_G_SUN = 4.438


@table_cache
def constants() -> dict:
    t = read_table("giant_branch_constants.csv")
    return {k: float(v[0]) for k, v in t.items()}


def mh_interp(table: str, column: str, mh):
    """Linear interpolation of a per-[M/H] table column, linearly extrapolated at the ends (at most
    0.35 dex beyond the tabulated rows: ValueError outside MH_RANGE)."""
    t = read_table(table)
    x, y = t["mh"], t[column]
    mh = check_range(mh, "[M/H]", *MH_RANGE)
    out = np.interp(mh, x, y)
    lo = mh < x[0]
    hi = mh > x[-1]
    if np.any(lo):
        out = np.where(lo, y[0] + (mh - x[0]) * (y[1] - y[0]) / (x[1] - x[0]), out)
    if np.any(hi):
        out = np.where(hi, y[-1] + (mh - x[-1]) * (y[-1] - y[-2]) / (x[-1] - x[-2]), out)
    return out


def _tip_age_rows():
    return pchip_rows("tip_age.csv", "mass_msun", "age_tip_gyr", True, True)


def _y_std(mh):
    from .composition import z_from_mh
    return z_from_mh(mh, None)[1]


def tip_age_gyr(mass_msun, mh, helium=None):
    """Age (Gyr) at which a star of initial mass ``mass_msun`` reaches the RGB tip / helium ignition.

    Own calibration (``tables/tip_age.csv``, from memory of published grids), valid for
    0.70-3.5 Msun and [M/H] in MH_RANGE.  Helium: ``log t`` shifts by ``dlogage_dy (Y - Y_std)``
    (homology scaling t ~ X M / L with L ~ mu^4; Salaris & Cassisi 2005).
    """
    mhs, rows, mlo, mhi = _tip_age_rows()
    mass = check_range(mass_msun, "initial mass (Msun)", mlo, mhi)
    mh = check_range(mh, "[M/H]", *MH_RANGE)
    lm = np.log10(mass)
    vals = np.stack([r(lm) for r in rows])  # (n_mh, ...)
    mh_b = np.broadcast_to(mh, lm.shape) if lm.ndim else mh
    # linear in mh (with linear extrapolation at the ends)
    i = np.clip(np.searchsorted(mhs, mh_b) - 1, 0, len(mhs) - 2)
    w = (mh_b - mhs[i]) / (mhs[i + 1] - mhs[i])
    if vals.ndim == 1:
        logt = vals[i] * (1 - w) + vals[i + 1] * w
    else:
        idx = np.arange(lm.size).reshape(lm.shape)
        flat = vals.reshape(len(mhs), -1)
        logt = (flat[i.ravel(), idx.ravel()] * (1 - w.ravel()) + flat[i.ravel() + 1, idx.ravel()] * w.ravel()).reshape(lm.shape)
    if helium is not None:
        dy = np.asarray(helium, float) - _y_std(mh)
        logt = logt + constants()["dlogage_dy"] * dy
    return 10.0 ** logt


def tip_mass_msun(age_gyr, mh, helium=None):
    """Initial mass of the stars now at the RGB tip for a population of age ``age_gyr``.

    Inverse of :func:`tip_age_gyr` (monotone).  Raises ``ValueError`` if the age lies outside
    0.5-14 Gyr or no calibrated mass reaches the tip at that age.
    """
    age = check_range(age_gyr, "age (Gyr)", *AGE_RANGE_GYR)
    mh = float(check_range(mh, "[M/H]", *MH_RANGE))
    _, _, mlo, mhi = _tip_age_rows()
    grid = np.geomspace(mlo, mhi, 600)
    ages = tip_age_gyr(grid, mh, helium)
    la = np.log10(ages)[::-1]
    if np.any(np.log10(age) > la[-1]) or np.any(np.log10(age) < la[0]):
        raise ValueError(f"age {np.atleast_1d(age)[0]:g} Gyr: no star of the calibrated mass range "
                         f"({mlo:g}-{mhi:g} Msun) is at the RGB tip for this composition")
    return 10.0 ** np.interp(np.log10(age), la, np.log10(grid)[::-1])


def ms_lifetime_gyr(mass_msun, mh, helium=None):
    """Main-sequence lifetime (Gyr): a mass-dependent fraction of the tip age.

    The fraction rises from ~0.82 (low-mass stars, which spend ~18% of their hydrogen-burning life
    as subgiants and giants) to ~0.90 at 3 Msun (common practice, from memory of published tracks).
    """
    mass = as_float_array(mass_msun, "mass")
    frac = np.interp(np.log10(mass), [np.log10(1.2), np.log10(3.0)], [0.82, 0.90])
    return frac * tip_age_gyr(mass, mh, helium)


def rgb_tip_logl(mh):
    """log10 L/Lsun at the RGB tip at standard helium (``tables/giant_branch.csv``)."""
    return mh_interp("giant_branch.csv", "logl_tip", mh)


def cml_log_d(mh):
    """log10 of the coefficient D in ``L = D Mc**p`` (Refsdal & Weigert 1970), fixed by the
    tabulated tip luminosity at the tabulated flash core mass."""
    p = constants()["cml_exponent"]
    return rgb_tip_logl(mh) - p * np.log10(mh_interp("giant_branch.csv", "mc_tip_msun", mh))


def rgb_logl_from_core(mc_msun, mh):
    """RGB luminosity from the helium-core mass, ``log L = log D + p log Mc`` (Refsdal & Weigert 1970)."""
    mc = check_range(mc_msun, "core mass (Msun)", 0.1, 0.7)
    return cml_log_d(mh) + constants()["cml_exponent"] * np.log10(mc)


def rgb_core_from_logl(logl, mh):
    """Inverse of :func:`rgb_logl_from_core` (RGB log L -0.5...3.7)."""
    logl = check_range(logl, "RGB log L", -0.5, 3.7)
    return 10.0 ** ((logl - cml_log_d(mh)) / constants()["cml_exponent"])


def _growth_coefficient(mh, x_env):
    """X E_H / (D (p-1)) in Myr Msun^(p-1): t = coef (Mc1^(1-p) - Mc2^(1-p))."""
    c = constants()
    d = 10.0 ** cml_log_d(mh)
    # dMc/dt [Msun/yr] = L[Lsun] * L_sun * yr / (X E_H M_sun)
    k = L_SUN_ERG_S * YEAR_S / (c["e_h_erg_g"] * M_SUN_G)
    return x_env / (k * d * (c["cml_exponent"] - 1.0)) / 1e6


def core_growth_time_myr(mc1, mc2, mh, x_env):
    """Time (Myr) for the helium core to grow from ``mc1`` to ``mc2`` on the RGB.

    Integral of ``dMc/dt = L/(X E_H)`` with ``L = D Mc**p``: ``t = X E_H/((p-1) D) (mc1**(1-p) - mc2**(1-p))``.
    """
    p = constants()["cml_exponent"]
    coef = _growth_coefficient(mh, x_env)
    return coef * (np.asarray(mc1, float) ** (1 - p) - np.asarray(mc2, float) ** (1 - p))


def core_from_time(mc1, t_myr, mh, x_env):
    """Core mass after ``t_myr`` of growth starting from ``mc1`` (inverse of :func:`core_growth_time_myr`)."""
    p = constants()["cml_exponent"]
    coef = _growth_coefficient(mh, x_env)
    return (np.asarray(mc1, float) ** (1 - p) - np.asarray(t_myr, float) / coef) ** (1.0 / (1 - p))


def rgb_logteff(logl, mh, mass_msun=1.0, helium_excess=0.0):
    """Effective temperature of the RGB at luminosity ``logl``.

    Own calibration (``tables/giant_branch_constants.csv``; from memory of cluster giant branches):
    ``log Teff = t0 + t1 x + t2 x^2 + mh (tm0 + tm1 x) + tlogm log M + ty dY`` with ``x = logL - 2``.
    Metal-poor giants are hotter; the locus cools up the branch.  Valid for log L 0.5-3.6.
    """
    c = constants()
    logl = check_range(logl, "RGB log L", 0.3, 3.7)
    x = logl - 2.0
    mh = np.asarray(mh, float)
    return (c["t0"] + c["t1"] * x + c["t2"] * x * x + mh * (c["tm0"] + c["tm1"] * x)
            + c["tlogm"] * np.log10(np.asarray(mass_msun, float)) + c["ty"] * np.asarray(helium_excess, float))


def agb_logteff(logl, mh, mass_msun=1.0, helium_excess=0.0):
    """AGB locus: hotter than the RGB at the same luminosity by ``agb_dlogt`` (common practice)."""
    return rgb_logteff(logl, mh, mass_msun, helium_excess) + constants()["agb_dlogt"]


def radius_rsun(logl, logteff):
    """Stefan-Boltzmann radius in Rsun with the IAU 2015 nominal Teff_sun = 5772 K."""
    return 10.0 ** (0.5 * np.asarray(logl, float) - 2.0 * (np.asarray(logteff, float) - np.log10(5772.0)))


def log_g(mass_msun, logl, logteff):
    """Surface gravity log10 g [cgs] from mass, luminosity and Teff (IAU 2015 nominal solar values)."""
    return log_g_from_logs(np.log10(np.asarray(mass_msun, float)), logl, logteff)


def log_g_from_logs(log_mass, logl, logteff, out=None):
    """``log g = log g_sun + log M - log L + 4 (log Teff - log Teff_sun)`` (g = GM/R^2 with the
    Stefan-Boltzmann radius; IAU 2015 nominal solar values), from logarithms only: no power or log per star.
    ``out`` receives the result (in place) if given."""
    out = np.subtract(logteff, np.log10(5772.0), out=out)
    out *= 4.0
    out += log_mass
    out -= logl
    out += LOG_G_SUN
    return out


def bump_logl(mh, age_gyr):
    """log10 L of the RGB bump: tabulated at 12 Gyr (``giant_branch.csv``; consistent with Ferraro et al.
    1999, AJ 118, 1738), brighter in younger populations by ``bump_dlogl_dlogage`` per dex of age
    (from memory of published models)."""
    c = constants()
    age = check_range(age_gyr, "age (Gyr)", *AGE_RANGE_GYR)
    return mh_interp("giant_branch.csv", "logl_bump12", mh) + c["bump_dlogl_dlogage"] * np.log10(age / 12.0)
