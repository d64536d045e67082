"""External checks: the model against published relations and facts of the trade.

Each :class:`Check` computes one model quantity and compares it with a
reference value and tolerance from outside the project, naming the source (or
"common practice" for a fact of the trade with no single source, "from memory"
for values recalled rather than looked up).  ``scripts/validate.py`` prints
every row; ``tests/test_validation.py`` asserts every row, so the table and the
test suite can never disagree.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

__all__ = ["Check", "CHECKS", "run_checks"]


@dataclass(frozen=True)
class Check:
    quantity: str
    compute: Callable[[], float]
    reference: float
    tolerance: float
    source: str
    group: str = "physics"

    def evaluate(self):
        value = float(self.compute())
        return value, bool(np.isfinite(value) and abs(value - self.reference) <= self.tolerance)


# ----------------------------------------------------------------------------- helpers
def _pop(feh, age, eta=0.45, eta_sd=0.0, alpha=0.0, helium=None, law="reimers"):
    from .population import MassLoss, Population
    return Population(feh, age, alpha_fe=alpha, helium=helium, mass_loss=MassLoss.from_eta(eta, eta_sd, law))


def _sub(feh, age, alpha=0.0, helium=None):
    return _pop(feh, age, alpha=alpha, helium=helium).subpopulations[0]


def _ms_sun():
    from .giant_branch import ms_lifetime_gyr
    return float(ms_lifetime_gyr(1.0, 0.0))


def _tip_mass(feh, age, alpha):
    return _sub(feh, age, alpha).tip_mass_msun


def _core(feh, age, alpha=0.0):
    return _sub(feh, age, alpha).core_mass_msun


def _min_core_solar():
    from .ignition import ignition_core_mass_msun
    m = np.linspace(1.0, 3.0, 801)
    return float(ignition_core_mass_msun(m, 0.0).min())


def _mass_at_min_core():
    from .ignition import ignition_core_mass_msun
    m = np.linspace(1.0, 3.0, 801)
    return float(m[np.argmin(ignition_core_mass_msun(m, 0.0))])


def _delta_m(feh, age, eta, alpha, law="reimers"):
    return _pop(feh, age, eta, 0.0, alpha, law=law).mean_mass_loss()


def _zahb_mv(feh):
    return _pop(feh, 12.5, 0.45, 0.03, 0.3).predict(bands=("V",))["zahb_mv_rr"]


def _clump(feh, age, band):
    return _pop(feh, age, 0.3, 0.03).predict(bands=(band,))["clump_absmag"][band]


def _local_clump(band, solar):
    from .population import MassLoss, Population
    ages = np.array([1.0, 1.5, 2.0, 3.0, 4.0, 5.0, 6.0, 8.0, 10.0])
    sfr = np.gradient(ages)  # constant star-formation rate per Gyr
    if solar:
        feh, fw = [0.0], [1.0]
    else:  # a solar-neighbourhood metallicity distribution (common practice: mean ~ -0.1, sd ~ 0.2 dex)
        feh, fw = [-0.6, -0.4, -0.2, 0.0, 0.2, 0.4], [0.5, 1.0, 1.5, 1.5, 1.0, 0.5]
    pop = Population.from_history(ages, sfr, feh, feh_weights=fw, mass_loss=MassLoss.from_eta(0.3, 0.03))
    return pop.predict(bands=(band,))["clump_absmag"][band]


def _eta_for_hb_type_zero(feh=-1.3, age=12.5):
    """Reimers eta that puts the HB type of an old cluster at 0 (bisection on the deterministic prediction)."""
    lo, hi = 0.2, 0.8
    for _ in range(12):
        mid = 0.5 * (lo + hi)
        if _pred("hb_type", feh, age, mid, 0.06) < 0.0:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def _pred(key, feh, age, eta, eta_sd, alpha=0.3, helium=None):
    return _pop(feh, age, eta, eta_sd, alpha, helium=helium).predict(bands=("V",))[key]


def _ehb(quantity):
    from .zahb import zahb_state
    s = zahb_state(np.array([0.475 + 0.01]), np.array([0.475]), -1.5)  # Menv = 0.01 Msun
    return float(s.teff_k[0] if quantity == "teff" else s.logg[0])


def _clump_teff_solar():
    from .zahb import zahb_state
    return float(zahb_state(1.2, 0.47, 0.0).teff_k)


def _two_msun_vs_clump():
    """log L (ZAHB) of a 2.0 Msun core-He burner minus that of a 1.2 Msun clump star, solar Z."""
    from .ignition import ignition_core_mass_msun
    from .zahb import zahb_state
    a = zahb_state(2.0, ignition_core_mass_msun(2.0, 0.0), 0.0).logl
    b = zahb_state(1.2, ignition_core_mass_msun(1.2, 0.0), 0.0).logl
    return float(a - b)


def _hb_lifetime(feh, age, alpha=0.3):
    return _pop(feh, age, 0.45, 0.02, alpha).predict()["hb_lifetime_myr"]


CHECKS = [
    Check("main-sequence lifetime of the Sun [Gyr]", _ms_sun, 10.0, 1.0,
          "common practice (~10 Gyr)"),
    Check("RGB-tip mass, [Fe/H]=-2.0 [a/Fe]=+0.3, 12.5 Gyr [Msun]", lambda: _tip_mass(-2.0, 12.5, 0.3), 0.81, 0.03,
          "common practice (globular-cluster giants ~0.8 Msun)"),
    Check("RGB-tip mass, solar, 4 Gyr [Msun]", lambda: _tip_mass(0.0, 4.0, 0.0), 1.36, 0.08,
          "asteroseismic giant masses of a ~4 Gyr solar-metallicity open cluster (Stello et al. 2016, ApJ 832, 133; from memory)"),
    Check("RGB-tip mass, solar, 1 Gyr [Msun]", lambda: _tip_mass(0.0, 1.0, 0.0), 2.1, 0.2,
          "common practice (~2 Msun at 1 Gyr)"),
    Check("flash core mass, [Fe/H]=-2.0 [Msun]", lambda: _core(-2.0, 12.5, 0.3), 0.495, 0.01,
          "Sweigart & Gross 1978, ApJS 36, 405 (from memory); common practice 'just under 0.5'"),
    Check("flash core mass, solar, 8 Gyr [Msun]", lambda: _core(0.0, 8.0), 0.475, 0.012,
          "Sweigart & Gross 1978 trend with Z (from memory)"),
    Check("minimum ignition core mass near M_HeF, solar [Msun]", _min_core_solar, 0.33, 0.03,
          "Girardi 1999, MNRAS 308, 818 (from memory)"),
    Check("mass at the minimum ignition core mass, solar [Msun]", _mass_at_min_core, 2.0, 0.25,
          "Girardi 1999, MNRAS 308, 818; common practice (~2 Msun)"),
    Check("Reimers eta=0.477 integrated RGB loss, [Fe/H]=-1.5 12.5 Gyr [Msun]",
          lambda: _delta_m(-1.5, 12.5, 0.477, 0.3), 0.21, 0.05,
          "McDonald & Zijlstra 2015, MNRAS 448, 502 (eta = 0.477 for globular clusters; ~0.2 Msun lost; from memory)"),
    Check("Schroeder-Cuntz eta=1 integrated RGB loss, [Fe/H]=-1.5 [Msun]",
          lambda: _delta_m(-1.5, 12.5, 1.0, 0.3, "schroeder_cuntz"), 0.20, 0.05,
          "Schroeder & Cuntz 2005, ApJ 630, L73 (calibrated on globular-cluster HB masses; from memory)"),
    Check("Reimers loss, [Fe/H]=+0.3 8.3 Gyr, eta=0.25 [Msun]", lambda: _delta_m(0.3, 8.3, 0.25, 0.0), 0.09, 0.04,
          "Miglio et al. 2012, MNRAS 419, 2077 (RGB minus clump asteroseismic mass, old metal-rich cluster: 0.09 Msun; eta 0.1-0.3; from memory)"),
    Check("extreme-HB Teff at Menv=0.01 Msun [K]", lambda: _ehb("teff"), 30000.0, 8000.0,
          "Heber 2016, PASP 128, 082001 (sdB stars 20-40 kK)"),
    Check("extreme-HB log g at Menv=0.01 Msun", lambda: _ehb("logg"), 5.6, 0.4,
          "Heber 2016, PASP 128, 082001 (sdB log g 5.0-6.0)"),
    Check("red-clump ZAHB Teff, solar, 1.2 Msun [K]", _clump_teff_solar, 4800.0, 300.0,
          "common practice (clump near 4700-5000 K)"),
    Check("log L(2.0 Msun core-He burner) - log L(1.2 Msun clump), solar", _two_msun_vs_clump, -0.1, 0.2,
          "common practice; Girardi 1999, MNRAS 308, 818 (secondary clump within ~0.4 mag of the main clump)"),
    Check("ZAHB M_V at the centre of the RR Lyrae strip, [Fe/H]=-1.5", lambda: _zahb_mv(-1.5), 0.665, 0.08,
          "M_V(RR) = 0.23[Fe/H] + 0.93 (Chaboyer 1999, Post-Hipparcos Cosmic Candles; from memory) "
          "+ ~0.08 mag from mean RR Lyrae to ZAHB (common practice)", "photometry"),
    Check("dM_V(ZAHB, strip)/d[Fe/H], [Fe/H] -2.0 to -1.0 [mag/dex]", lambda: _zahb_mv(-1.0) - _zahb_mv(-2.0),
          0.22, 0.07, "Clementini et al. 2003, AJ 125, 1309 (0.214); Chaboyer 1999 (0.23); from memory", "photometry"),
    Check("HB lifetime, [Fe/H]=-1.5 [Myr]", lambda: _hb_lifetime(-1.5, 12.5), 100.0, 20.0,
          "common practice (~100 Myr; Sweigart 1987, ApJS 65, 95)"),
    # --- photometry: the red clump (issue "Photometry")
    Check("red-clump M_I, solar-neighbourhood mix ([Fe/H]=0, constant SFR 1-10 Gyr)",
          lambda: _local_clump("I", solar=True), -0.22, 0.15,
          "common practice (Hipparcos clump M_I ~ -0.22; e.g. Stanek & Garnavich 1998, ApJ 503, L131)", "photometry"),
    Check("red-clump M_Ks, solar-neighbourhood mix ([Fe/H]=0, constant SFR 1-10 Gyr)",
          lambda: _local_clump("Ks", solar=True), -1.54, 0.15,
          "common practice (e.g. Groenewegen 2008, A&A 488, 935: M_Ks = -1.54)", "photometry"),
    Check("red-clump M_V, solar-neighbourhood mix ([Fe/H] -0.6...+0.4, constant SFR 1-10 Gyr)",
          lambda: _local_clump("V", solar=False), 0.81, 0.15,
          "common practice (local clump M_V ~ +0.81 for [Fe/H] -0.6...+0.4)", "photometry"),
    Check("clump M_I population correction, 10 Gyr minus 2 Gyr, solar",
          lambda: _clump(0.0, 10.0, "I") - _clump(0.0, 2.0, "I"), 0.2, 0.15,
          "Girardi & Salaris 2001, MNRAS 323, 109: clump fainter in I with age past ~2 Gyr (from memory)", "photometry"),
    Check("Reimers eta giving HB type 0 at [Fe/H]=-1.3 (old-halo locus), 12.5 Gyr", _eta_for_hb_type_zero, 0.477,
          0.07, "McDonald & Zijlstra 2015, MNRAS 448, 502: eta = 0.477 +- 0.070 for globular clusters; the old-halo "
          "HB-type locus crosses 0 near [Fe/H] = -1.3 (Lee, Demarque & Zinn 1994; from memory)", "population"),
    Check("secondary clump: M_I(1 Gyr) - M_I(2 Gyr), solar", lambda: _clump(0.0, 1.0, "I") - _clump(0.0, 2.0, "I"),
          0.3, 0.15, "Girardi 1999, MNRAS 308, 818: the clump of stars just above the helium-flash transition "
          "mass is ~0.3-0.4 mag fainter (from memory)", "photometry"),
    # --- populations (issue "Populations")
    Check("HB type, [Fe/H]=-2.2, 12.5 Gyr, eta 0.45", lambda: _pred("hb_type", -2.2, 12.5, 0.45, 0.03), 0.85, 0.15,
          "Galactic globular clusters: metal-poor old halo HBs are blue, HB type ~+0.7..+1 "
          "(Lee, Demarque & Zinn 1994, ApJ 423, 248; Harris 1996 catalogue; from memory)", "population"),
    Check("HB type, [Fe/H]=-0.7, 12.0 Gyr, eta 0.45", lambda: _pred("hb_type", -0.7, 12.0, 0.45, 0.03), -1.0, 0.1,
          "47 Tuc-like metal-rich clusters have purely red HBs, HB type -1 (Harris 1996 catalogue; from memory)",
          "population"),
    Check("R-parameter N_HB/N_RGB, [Fe/H]=-1.5, Y from enrichment law", lambda: _pred("r_parameter", -1.5, 12.5, 0.45, 0.03),
          1.39, 0.20, "Salaris et al. 2004, A&A 420, 911 (mean R = 1.39 for Galactic GCs, Y ~ 0.25; from memory)",
          "population"),
    Check("d log R / dY", lambda: (np.log10(_pred("r_parameter", -1.5, 12.5, 0.45, 0.03, helium=0.30))
                                   - np.log10(_pred("r_parameter", -1.5, 12.5, 0.45, 0.03))) / (0.30 - 0.2460),
          2.63, 0.8, "Cassisi, Salaris & Irwin 2003, ApJ 588, 862: Y = 0.380 log R + 0.176 (from memory)", "population"),
    Check("mean RRab period, Oosterhoff I-like ([Fe/H]=-1.5, intermediate HB) [d]",
          lambda: _pred("rrab_period_mean", -1.5, 12.5, 0.45, 0.06), 0.55, 0.05,
          "Oosterhoff 1939, Observatory 62, 104; Catelan 2009, Ap&SS 320, 261 (Oo I <Pab> ~0.55 d)", "population"),
    Check("mean RRab period, Oosterhoff II-like ([Fe/H]=-2.2, HB type ~0.3) [d]",
          lambda: _pred("rrab_period_mean", -2.2, 12.5, 0.35, 0.10), 0.64, 0.05,
          "Oosterhoff 1939; Catelan 2009, Ap&SS 320, 261 (Oo II <Pab> ~0.64 d)", "population"),
]


def run_checks(group: str | None = None):
    """Evaluate the checks; returns rows (quantity, model, reference, tolerance, source, passed)."""
    rows = []
    for c in CHECKS:
        if group and c.group != group:
            continue
        value, ok = c.evaluate()
        rows.append((c.quantity, value, c.reference, c.tolerance, c.source, ok))
    return rows
