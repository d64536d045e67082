"""Mass loss on the red giant branch, integrated up the branch.

Laws (coefficients in ``tables/mass_loss_laws.csv``):

* Reimers 1975 (Mem. Soc. R. Sci. Liège 8, 369): ``dM/dt = 4e-13 eta L R / M``.
* Schröder & Cuntz 2005 (ApJ 630, L73):
  ``dM/dt = 8e-14 eta L R / M (Teff/4000 K)**3.5 (1 + g_sun/(4300 g))``
  (eta = 1 is their calibration).

The star's mass changes as it loses mass, so the loss is integrated as an ODE
in the core mass, which is the RGB's clock: with ``dMc/dt = L/(X E_H)``
(:mod:`hbmodel.physics.giant_branch`), ``dM/dMc = (dM/dt) X E_H / L``.  The ODE is
solved with a fixed-step fourth-order Runge-Kutta scheme in ln Mc, vectorised
over stars, from the base of the RGB to the ignition core mass.  A star whose
mass reaches its core mass before ignition has lost its whole envelope: it is
flagged (``lost``), never given a negative envelope.
"""
from __future__ import annotations

import functools

import numpy as np

from hbmodel.core.tables import read_table
from hbmodel.core.validation import check_range
from hbmodel.physics.giant_branch import (L_SUN_ERG_S, M_SUN_G, YEAR_S, cml_log_d, constants as gb_constants,
                           radius_rsun, rgb_core_from_logl, rgb_logteff)

__all__ = ["LAWS", "check_law", "integrate_rgb_mass_loss", "mass_loss_from_eta", "eta_from_mass_loss", "ETA_RANGE"]

#: Accepted efficiency range (every law).
ETA_RANGE = (0.0, 3.0)


@functools.lru_cache(maxsize=None)
def _raw_lines(name):
    from importlib import resources
    text = resources.files("hbmodel.tables").joinpath(name).read_text(encoding="utf-8")
    return [ln for ln in text.splitlines() if ln.strip() and not ln.startswith("#")]


#: The mass-loss laws, by name: the rows of tables/mass_loss_laws.csv (a new law of the same form is one row).
LAWS = tuple(ln.split(",")[0].strip() for ln in _raw_lines("mass_loss_laws.csv")[1:])


def check_law(law: str) -> str:
    """``law`` if it names a row of the mass-loss-law table, else a one-line ValueError listing the names."""
    if law not in LAWS:
        raise ValueError(f"unknown mass-loss law {law!r}; choose one of {', '.join(LAWS)}")
    return law


@functools.lru_cache(maxsize=None)
def _law(law: str) -> dict:
    t = read_table("mass_loss_laws.csv")
    i = LAWS.index(check_law(law))  # the law column is text: its position is the row's in the file
    return {k: float(v[i]) for k, v in t.items() if k != "law"}


def integrate_rgb_mass_loss(eta, m_init_msun, mc_ign_msun, mh, *, helium_excess=0.0, x_env=0.7,
                            law="reimers", n_steps=160):
    """Integrate RGB mass loss from the base of the RGB to helium ignition.

    Parameters
    ----------
    eta : array_like
        Mass-loss efficiency (>= 0) of the chosen law.
    m_init_msun : array_like
        Mass at the base of the RGB (initial mass; main-sequence loss neglected).
    mc_ign_msun : array_like
        Core mass at helium ignition (:func:`hbmodel.physics.ignition.ignition_core_mass_msun`).
    mh, helium_excess, x_env : float
        [M/H], helium excess over the standard law (RGB locus), envelope hydrogen.

    Returns
    -------
    m_final_msun, lost : ndarray, ndarray of bool
        Mass at ignition (clipped at the core mass) and whether the envelope was exhausted first.
    """
    coef = _law(law)
    eta = check_range(eta, "mass-loss efficiency eta", *ETA_RANGE)
    m0 = np.asarray(m_init_msun, float)
    mc_ign = np.asarray(mc_ign_msun, float)
    eta, m0, mc_ign = np.broadcast_arrays(eta, m0, mc_ign)
    c = gb_constants()
    mc0 = rgb_core_from_logl(c["logl_rgb_base"], mh)
    mc0 = np.minimum(mc0, 0.999 * mc_ign)
    k = L_SUN_ERG_S * YEAR_S / (c["e_h_erg_g"] * M_SUN_G)  # dMc/dt = k L / X

    # L = D Mc^p (rgb_logl_from_core) with log D evaluated once: [M/H] is fixed along the integration
    log_d, p_cml = float(cml_log_d(mh)), c["cml_exponent"]

    def rhs(lnmc, m):
        mc = np.exp(lnmc)
        logl = log_d + p_cml * np.log10(np.clip(mc, 0.1, 0.7))
        logt = rgb_logteff(np.clip(logl, 0.3, 3.7), mh, np.maximum(m, 0.1), helium_excess)
        r = radius_rsun(logl, logt)
        mm = np.maximum(m, mc)
        fac = coef["coef"] * eta * r / mm * x_env / k  # (dM/dt)/L * X/k
        if coef["teff_exp"]:
            fac = fac * (10.0 ** logt / coef["teff_ref_k"]) ** coef["teff_exp"]
        if coef["g_ratio"]:
            g_rel = mm / r**2  # g / g_sun
            fac = fac * (1.0 + 1.0 / (coef["g_ratio"] * g_rel))
        return -fac * mc  # dM/dlnMc

    lnmc = np.log(mc0)
    h = (np.log(mc_ign) - lnmc) / n_steps
    m = m0.copy()
    lost = np.zeros(m.shape, bool)
    for _ in range(n_steps):  # loop over integration steps (vectorised over stars)
        k1 = rhs(lnmc, m)
        k2 = rhs(lnmc + 0.5 * h, m + 0.5 * h * k1)
        k3 = rhs(lnmc + 0.5 * h, m + 0.5 * h * k2)
        k4 = rhs(lnmc + h, m + h * k3)
        m = m + h / 6.0 * (k1 + 2 * k2 + 2 * k3 + k4)
        lnmc = lnmc + h
        mc_now = np.exp(lnmc)
        gone = m <= mc_now
        lost |= gone
        m = np.where(lost, np.maximum(m, mc_now), m)
    m = np.where(lost, mc_ign, m)
    return m, lost


#: tables the RGB mass-loss integration depends on (the cache below is keyed by their texts)
_INPUT_TABLES = ("giant_branch.csv", "giant_branch_constants.csv", "mass_loss_laws.csv")


def _eta_grid(m_init, mc_ign, mh, helium_excess, x_env, law, eta_max):
    from hbmodel.core.tables import table_text
    key = tuple(hash(table_text(n)) for n in _INPUT_TABLES)
    return _eta_grid_cached(float(m_init), float(mc_ign), float(mh), float(helium_excess), float(x_env), law,
                            float(eta_max), key)


@functools.lru_cache(maxsize=4096)
def _eta_grid_cached(m_init, mc_ign, mh, helium_excess, x_env, law, eta_max, key):
    """One integration per (initial mass, core mass, composition, law, eta range, input tables): the
    results are read-only arrays, so sharing them between populations is safe.  With the shipped tables
    the integration (~0.1 s: 640 right-hand sides) is also kept in the on-disk cache
    (:mod:`hbmodel.core.cache`), keyed by the inputs, the input tables' texts and this module's and the
    giant branch's sources."""
    import hashlib
    import sys

    from hbmodel.core.cache import cached_array, source_digest
    from hbmodel.core.tables import shipped_tables, table_text
    etas = np.linspace(0.0, eta_max, 241)

    def compute():
        mf, lost = integrate_rgb_mass_loss(etas, m_init, mc_ign, mh, helium_excess=helium_excess,
                                           x_env=x_env, law=law)
        return np.stack([m_init - mf, lost.astype(float)])

    if shipped_tables():
        texts = hashlib.sha256("\0".join(table_text(n) for n in _INPUT_TABLES).encode("utf-8")).hexdigest()
        disk_key = (m_init, mc_ign, mh, helium_excess, x_env, law, eta_max, etas.size, texts,
                    source_digest(sys.modules[__name__], sys.modules[rgb_logteff.__module__]))
        grid = cached_array("rgb-mass-loss", disk_key, compute)
        if grid.shape != (2, etas.size) or not np.all(np.isfinite(grid)):
            grid = compute()
    else:
        grid = compute()
    out = (etas, np.array(grid[0]), grid[1] > 0.5)
    for a in out:
        a.setflags(write=False)
    return out


def mass_loss_from_eta(eta, m_init_msun, mc_ign_msun, mh, *, helium_excess=0.0, x_env=0.7, law="reimers"):
    """Integrated RGB mass loss (Msun) for efficiencies ``eta`` (array) of a single initial mass.

    Evaluates the ODE on a dense grid of eta and interpolates (the map is smooth and monotone), so that
    millions of stars cost one integration.  Returns ``(delta_m, lost)``.
    """
    eta = check_range(eta, "mass-loss efficiency eta", *ETA_RANGE)
    etas, dm, lost = _eta_grid(float(m_init_msun), float(mc_ign_msun), mh, helium_excess, x_env, law,
                               min(max(float(np.max(eta)) if eta.size else 1.0, 0.1) * 1.0001, ETA_RANGE[1]))
    out = np.interp(eta, etas, dm)
    first_lost = etas[np.argmax(lost)] if lost.any() else np.inf
    return out, eta >= first_lost


def eta_from_mass_loss(delta_m_msun, m_init_msun, mc_ign_msun, mh, *, helium_excess=0.0, x_env=0.7,
                       law="reimers"):
    """Inverse of :func:`mass_loss_from_eta`: the efficiency giving integrated loss ``delta_m_msun``."""
    dm = check_range(delta_m_msun, "integrated RGB mass loss (Msun)", 0.0, float(m_init_msun))
    etas, dms, lost = _eta_grid(float(m_init_msun), float(mc_ign_msun), mh, helium_excess, x_env, law,
                                ETA_RANGE[1])
    ok = ~lost
    if np.any(dm > dms[ok].max()):
        raise ValueError(f"mass loss {np.max(dm):.3f} Msun would remove the whole envelope before ignition")
    return np.interp(dm, dms[ok], etas[ok])
