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

from hbmodel.core.tables import pchip_rows, read_table, table_cache
from hbmodel.core.validation import as_float_array, check_range

__all__ = [
    "MH_RANGE", "AGE_RANGE_GYR", "tip_age_gyr", "tip_mass_msun", "ms_lifetime_gyr",
    "rgb_tip_logl", "cml_log_d", "rgb_logl_from_core", "rgb_core_from_logl", "core_growth_time_myr",
    "core_from_time", "rgb_logteff", "agb_logteff", "clip_blue_of_rgb", "radius_rsun", "log_g", "log_g_from_logs", "bump_logl", "bump_pause_myr",
    "rgb_duration_myr", "rgb_state_from_time", "rgb_time_at_logl", "constants",
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
#: IAU 2015 Resolution B3 nominal solar effective temperature (K; Prsa et al. 2016, AJ 152, 41).
TEFF_SUN_K = 5772.0


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
    from hbmodel.physics.composition import z_from_mh
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


def clip_blue_of_rgb(logl, logteff, mh, rgb_mass_msun, helium_excess=0.0):
    """``log Teff`` limited to the AGB locus (:func:`agb_logteff`) at the star's luminosity.

    Core-helium burners that evolve redward at the end of the HB (red clump, red HB) approach the AGB,
    which lies on the blue side of the RGB of the same population at the same luminosity; they never
    cross the RGB (common practice; e.g. Sweigart 1987, ApJS 65, 95 tracks).  ``rgb_mass_msun`` is the
    mass of the population's RGB stars (the RGB-tip mass)."""
    lim = agb_logteff(np.clip(logl, 0.3, 3.7), mh, rgb_mass_msun, helium_excess)
    return np.maximum(logteff, lim)


def radius_rsun(logl, logteff):
    """Stefan-Boltzmann radius in Rsun with the IAU 2015 nominal Teff_sun = 5772 K."""
    return 10.0 ** (0.5 * np.asarray(logl, float) - 2.0 * (np.asarray(logteff, float) - np.log10(TEFF_SUN_K)))


def log_g(mass_msun, logl, logteff):
    """Surface gravity log10 g [cgs] from mass, luminosity and Teff (IAU 2015 nominal solar values)."""
    return log_g_from_logs(np.log10(np.asarray(mass_msun, float)), logl, logteff)


def log_g_from_logs(log_mass, logl, logteff, out=None):
    """``log g = log g_sun + log M - log L + 4 (log Teff - log Teff_sun)`` (g = GM/R^2 with the
    Stefan-Boltzmann radius; IAU 2015 nominal solar values), from logarithms only: no power or log per star.
    ``out`` receives the result (in place) if given."""
    out = np.subtract(logteff, np.log10(TEFF_SUN_K), out=out)
    out *= 4.0
    out += log_mass
    out -= logl
    out += LOG_G_SUN
    return out


def bump_logl(mh, age_gyr):
    """log10 L/Lsun of the RGB bump (the peak of its luminosity-function excess).

    A smooth function of [M/H] and age, ``log L = l0 + l1 x + l2 x^2 + a log10(age/12 Gyr)`` with
    ``x = [M/H]`` (coefficients ``bump_l0, bump_l1, bump_l2, bump_dlogl_dlogage`` in
    ``tables/giant_branch_constants.csv``).  Calibrated on the bump--ZAHB offset of Galactic globular
    clusters, Delta V = 0.87 [M/H] + 0.98 (Ferraro et al. 1999, AJ 118, 1738; coefficients from
    memory, see the table header) at [M/H] = -2.0 and -1.0, and on the Galactic-bulge bump 0.71 mag
    below the red clump in I (Nataf et al. 2011, ApJ 730, 118, arXiv:1011.4293, abstract) at [M/H] = 0, 10 Gyr.
    Younger populations have brighter bumps (``bump_dlogl_dlogage``, from memory of published models).
    """
    c = constants()
    age = check_range(age_gyr, "age (Gyr)", *AGE_RANGE_GYR)
    x = check_range(mh, "[M/H]", *MH_RANGE)
    return (c["bump_l0"] + x * (c["bump_l1"] + c["bump_l2"] * x)
            + c["bump_dlogl_dlogage"] * np.log10(age / 12.0))


def bump_pause_myr(mh, age_gyr, x_env):
    """Extra time (Myr) an RGB star spends at the bump.

    When the hydrogen-burning shell reaches the composition discontinuity left by the first dredge-up,
    the luminosity drops by ``bump_dlogl`` and climbs back: the star crosses that luminosity interval
    three times and lingers there (Thomas 1967; Iben 1968; e.g. Salaris & Cassisi 2005, textbook).
    The pause is ``bump_ew_dex`` times ``dt/dlogL`` of the RGB at the bump luminosity (an equivalent
    width in log L of the luminosity-function excess), calibrated so that a bulge-like population
    ([Fe/H] = 0, 10 Gyr) has N_bump / N_clump = 0.20 (Nataf et al. 2013, ApJ 769, 88; see the table).
    """
    c = constants()
    p = c["cml_exponent"]
    mc = rgb_core_from_logl(bump_logl(mh, age_gyr), mh)
    # t = coef (mc0^(1-p) - mc^(1-p))  ->  dt/dlogL = coef (p-1) mc^(1-p) ln10 / p
    dt_dlogl = _growth_coefficient(mh, x_env) * (p - 1.0) * mc ** (1.0 - p) * np.log(10.0) / p
    return c["bump_ew_dex"] * dt_dlogl


def _bump_geometry(mc_lo, mc_tip, mh, age_gyr, x_env):
    """(lb, d, mc_b, t_b, t_pause) of one RGB: bump LF peak, drop, core mass and growth time at the
    discontinuity, and the pause (0 when the bump lies outside the RGB stretch mc_lo...mc_tip)."""
    c = constants()
    lb = float(bump_logl(mh, age_gyr))
    d = c["bump_dlogl"]
    mc_b = float(rgb_core_from_logl(lb + 0.5 * d, mh))
    if not (mc_lo < mc_b < mc_tip):
        return lb, d, mc_b, 0.0, 0.0
    t_b = float(core_growth_time_myr(mc_lo, mc_b, mh, x_env))
    return lb, d, mc_b, t_b, float(bump_pause_myr(mh, age_gyr, x_env))


def rgb_duration_myr(mc_lo, mc_tip, mh, age_gyr, x_env):
    """RGB time (Myr) from core mass ``mc_lo`` to the flash at ``mc_tip``: core growth plus the bump pause."""
    if mc_tip <= mc_lo:
        return 0.0
    t_p = _bump_geometry(mc_lo, mc_tip, mh, age_gyr, x_env)[4]
    return float(core_growth_time_myr(mc_lo, mc_tip, mh, x_env)) + t_p


def rgb_state_from_time(t_myr, mc_lo, mc_tip, mh, age_gyr, x_env):
    """Core mass and log L of an RGB star ``t_myr`` after it had core mass ``mc_lo``, with the bump.

    Before the discontinuity: core growth on the Mc--L relation.  At it (core mass ``mc_b``, log L
    ``lb + d/2``) the star pauses for :func:`bump_pause_myr`: log L drops quickly (``bump_drop_frac``
    of the pause) by ``d = bump_dlogl`` and climbs back slowly, so the pause fills log L
    ``lb +- d/2`` and the luminosity function has its excess at ``lb``.  Then growth resumes.
    """
    t = np.asarray(t_myr, float)
    lb, d, mc_b, t_b, t_p = _bump_geometry(mc_lo, mc_tip, mh, age_gyr, x_env)
    if t_p <= 0:
        mc = core_from_time(mc_lo, t, mh, x_env)
        return mc, rgb_logl_from_core(np.clip(mc, 0.1, 0.7), mh)
    after = t >= t_b + t_p
    pause = (t >= t_b) & ~after
    mc = core_from_time(mc_lo, np.where(after, t - t_p, np.minimum(t, t_b)), mh, x_env)
    logl = rgb_logl_from_core(np.clip(mc, 0.1, 0.7), mh)
    if np.any(pause):
        fd = constants()["bump_drop_frac"]
        f = (t[pause] - t_b) / t_p
        depth = np.where(f < fd, f / fd, (1.0 - f) / (1.0 - fd))
        logl = np.array(logl, float, copy=True)
        logl[pause] = lb + 0.5 * d - d * depth
        mc = np.array(mc, float, copy=True)
        mc[pause] = mc_b
    return mc, logl


def rgb_time_at_logl(logl, mc_lo, mc_tip, mh, age_gyr, x_env):
    """Earliest RGB time (Myr after core mass ``mc_lo``) at which log L first reaches ``logl``;
    luminosities above the bump include its pause.  Clipped to the RGB stretch."""
    lb, d, mc_b, t_b, t_p = _bump_geometry(mc_lo, mc_tip, mh, age_gyr, x_env)
    mc = np.clip(rgb_core_from_logl(np.clip(np.asarray(logl, float), -0.5, 3.7), mh), mc_lo, mc_tip)
    t = core_growth_time_myr(mc_lo, mc, mh, x_env)
    return t + np.where(mc > mc_b, t_p, 0.0)
