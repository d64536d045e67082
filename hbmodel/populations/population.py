"""Stellar populations: from (composition, age, helium, mass loss) to stars.

A :class:`Population` is one or several simple components (age, [Fe/H],
[alpha/Fe], weight) sharing a helium prescription (single Y or a two-component
mixture: a fraction of stars enriched by dY) and an RGB mass-loss prescription
(:class:`MassLoss`).  It produces *weighted star sets* (:class:`StarSet`):

* deterministic node sets (:meth:`Population.model_stars`) for predictions and
  likelihood surrogates: quantile nodes of the HB-mass distribution times
  uniform nodes in evolutionary phase, each weighted by the time it represents;
* random draws (:meth:`Population.sample`) for mock catalogues, with an explicit
  ``numpy.random.Generator``.

Star counts follow lifetimes (the fuel-consumption theorem, Renzini & Buzzoni
1986, in Spectral Evolution of Galaxies, Reidel, p. 195): per unit birth rate at
the RGB tip an RGB stretch holds ``t_RGB`` worth of stars, the HB ``t_HB`` and the
early AGB ``t_EAGB``, so the R-parameter N_HB/N_RGB is a prediction, not an input.

Size (620+ lines): the :class:`Population` value object and its companions (:class:`MassLoss`, :class:`StarSet`);
its methods are the package's main public API.
"""
from __future__ import annotations

import dataclasses

from dataclasses import dataclass, field

import numpy as np

from hbmodel.core.quantities import in_unit
from hbmodel.physics import giant_branch as gb
from hbmodel.physics import hb_evolution as hbe
from hbmodel.physics.composition import Composition
from hbmodel.physics.ignition import ignition_core_mass_msun
from hbmodel.physics.mass_loss import ETA_RANGE, check_law, eta_from_mass_loss, mass_loss_from_eta
from hbmodel.physics.pulsation import MODE_NONE, period_days, pulsation_mode
from hbmodel.physics.zahb import MENV_MIN_MSUN, zahb_state

__all__ = ["MassLoss", "Component", "Population", "StarSet", "SubPopulation", "PHASES"]

PHASES = ("rgb", "hb", "agb")
#: Ages of a constant-star-formation population (log-spaced); 8 moves the local clump's M_Ks by < 0.01 mag
#: against 16 (own test, tests/test_population.py).
CONSTANT_SFR_N_AGES = 8


# --------------------------------------------------------------------------- mass loss
@dataclass(frozen=True)
class MassLoss:
    """RGB mass-loss prescription with star-to-star scatter.

    ``kind`` is ``"eta"`` (efficiency of ``law``) or ``"delta_m"`` (integrated loss, Msun);
    ``components`` is a tuple of ``(weight, mean, sd)`` Gaussians (one for a single law, several for
    bimodal populations), truncated at zero.  ``kind="hb_mass"`` uses ``samples`` (a user HB-mass
    distribution given as draws) instead.
    """

    kind: str = "eta"
    components: tuple = ((1.0, 0.45, 0.0),)
    law: str = "reimers"
    samples: tuple | None = None

    def __post_init__(self):
        if self.kind not in ("eta", "delta_m", "hb_mass"):
            raise ValueError(f"unknown mass-loss kind {self.kind!r} (eta, delta_m or hb_mass)")
        check_law(self.law)
        if self.kind == "hb_mass":
            s = np.asarray(self.samples, float)
            if s.size < 1 or not np.all(np.isfinite(s)) or np.any(s <= 0.3) or np.any(s > 4.0):
                raise ValueError("user HB-mass distribution must hold finite masses in 0.3-4 Msun")
            return
        tot = 0.0
        for comp in self.components:
            if len(comp) != 3:
                raise ValueError("mass-loss components must be (weight, mean, sd) triples")
            w, mu, sd = (float(v) for v in comp)
            if not (np.isfinite(w) and np.isfinite(mu) and np.isfinite(sd)):
                raise ValueError("mass-loss parameters must be finite")
            if w < 0 or sd < 0:
                raise ValueError("mass-loss weights and spreads must be non-negative")
            if mu < 0:
                name = "eta" if self.kind == "eta" else "mass loss"
                raise ValueError(f"{name} must be non-negative (got {mu:g})")
            if self.kind == "eta" and mu > 3.0:
                raise ValueError(f"eta = {mu:g} is outside the calibrated range [0, 3]")
            if self.kind == "delta_m" and mu > 1.5:
                raise ValueError(f"mass loss {mu:g} Msun is outside the range [0, 1.5]")
            tot += w
        if tot <= 0:
            raise ValueError("mass-loss mixture weights sum to zero")

    @classmethod
    def from_eta(cls, eta, eta_sd=0.0, law="reimers"):
        return cls("eta", ((1.0, float(eta), float(eta_sd)),), law)

    @classmethod
    def from_delta_m(cls, delta_m, delta_m_sd=0.0, law="reimers"):
        return cls("delta_m", ((1.0, float(delta_m), float(delta_m_sd)),), law)

    @classmethod
    def from_hb_masses(cls, masses):
        return cls("hb_mass", (), "reimers", tuple(np.asarray(masses, float).ravel()))

    def quantiles(self, u):
        """Inverse CDF of the (zero-truncated) mixture at probabilities ``u`` in (0, 1)."""
        u = np.asarray(u, float)
        if self.kind == "hb_mass":
            s = np.sort(np.asarray(self.samples, float))
            return np.quantile(s, u)
        w = np.array([c[0] for c in self.components], float)
        mu = np.array([c[1] for c in self.components], float)
        sd = np.array([c[2] for c in self.components], float)
        w = w / w.sum()
        if np.all(sd == 0):
            cw = np.cumsum(w)
            return mu[np.minimum(np.searchsorted(cw, u, side="right"), len(mu) - 1)]
        from hbmodel.core.numerics import normal_cdf as ndtr  # no scipy.special import (~0.3 s) at start-up
        lo = max(0.0, float(np.min(mu - 7 * np.maximum(sd, 1e-6))))
        hi = float(np.max(mu + 7 * np.maximum(sd, 1e-6)))
        x = np.linspace(lo, hi, 4001)
        cdf = np.zeros_like(x)
        for wi, mi, si in zip(w, mu, sd):
            if si == 0:
                cdf += wi * (x >= mi)
            else:  # truncated at zero
                a = ndtr((0.0 - mi) / si)
                cdf += wi * np.clip((ndtr((x - mi) / si) - a) / (1 - a), 0, 1)
        cdf = np.maximum.accumulate(cdf)
        cdf = (cdf - cdf[0]) / (cdf[-1] - cdf[0])
        return np.interp(u, cdf, x)

    def describe(self) -> str:
        if self.kind == "hb_mass":
            return f"user HB-mass distribution ({len(self.samples)} values)"
        parts = [f"{w:g}×N({m:g}, {s:g})" for w, m, s in self.components]
        unit = f"eta ({self.law})" if self.kind == "eta" else "ΔM [Msun]"
        return f"{unit}: " + " + ".join(parts)


@dataclass(frozen=True)
class Component:
    """One simple stellar population: age, [Fe/H], [alpha/Fe] and a number weight."""

    age_gyr: float
    feh: float
    alpha_fe: float = 0.0
    weight: float = 1.0


@dataclass(frozen=True)
class SubPopulation:
    """A component at one helium value, with its derived giant-branch quantities."""

    composition: Composition
    age_gyr: float
    weight: float
    tip_mass_msun: float
    core_mass_msun: float
    helium_excess: float
    mc_rgb_lo_msun: float
    t_rgb_myr: float

    @property
    def mh(self):
        return self.composition.mh


# --------------------------------------------------------------------------- star sets
@dataclass
class StarSet:
    """Stars (or weighted nodes) with their physical properties; all arrays have equal length."""

    phase: np.ndarray        # "rgb" / "hb" / "agb"
    mass_msun: np.ndarray
    core_mass_msun: np.ndarray
    logl: np.ndarray
    logteff: np.ndarray
    feh: np.ndarray
    weight: np.ndarray       # Myr represented per unit birth rate (nodes) or 1 (random draws)
    sub: np.ndarray          # index of the sub-population
    zahb_logteff: np.ndarray = field(default=None)
    tau: np.ndarray = field(default=None)

    def __post_init__(self):
        n = len(self.phase)
        if self.zahb_logteff is None:
            self.zahb_logteff = np.full(n, np.nan)
        if self.tau is None:
            self.tau = np.full(n, np.nan)

    def __len__(self):
        return len(self.phase)

    @property
    def teff_k(self):
        return 10.0 ** self.logteff

    @property
    def logg(self):
        return gb.log_g(self.mass_msun, self.logl, self.logteff)

    @property
    def rr_mode(self):
        m = np.full(len(self), MODE_NONE, np.int8)
        hb = self.phase == "hb"
        if hb.any():
            # direction of evolution on the track sets the mode in the either-or zone (hysteresis)
            t0, tau, logl = self.zahb_logteff[hb], self.tau[hb], self.logl[hb]
            known = np.isfinite(t0) & np.isfinite(tau)
            dl = hbe.hb_track(1.65, np.where(known, np.clip(t0, 3.55, 4.70), 3.8), np.where(known, tau, 0.0))[0] - 1.65
            track = (np.where(known, logl - dl, np.nan), t0, tau) if known.all() else None
            m[hb] = pulsation_mode(self.logteff[hb], logl, self.mass_msun[hb], track)
        return m

    @property
    def is_rr(self):
        return self.rr_mode != MODE_NONE

    @property
    def period_days(self):
        return period_days(self.logl, self.mass_msun, self.logteff, self.rr_mode)

    def select(self, mask) -> "StarSet":
        return StarSet(**{k: getattr(self, k)[mask] for k in
                          ("phase", "mass_msun", "core_mass_msun", "logl", "logteff", "feh", "weight", "sub",
                           "zahb_logteff", "tau")})

    @staticmethod
    def concatenate(sets) -> "StarSet":
        sets = [s for s in sets if s is not None and len(s)]
        keys = ("phase", "mass_msun", "core_mass_msun", "logl", "logteff", "feh", "weight", "sub",
                "zahb_logteff", "tau")
        if not sets:
            return StarSet(**{k: np.array([], dtype="<U3" if k == "phase" else float) for k in keys})
        return StarSet(**{k: np.concatenate([getattr(s, k) for s in sets]) for k in keys})

    def absolute_magnitudes(self, bands):
        from hbmodel.photometry.magnitudes import absolute_magnitudes
        logt = np.clip(self.logteff, np.log10(3000.0), np.log10(50000.0))
        logg = np.clip(self.logg, -0.5, 6.5)
        return absolute_magnitudes(10.0 ** logt, logg, self.feh, self.logl, bands)


# --------------------------------------------------------------------------- population
class Population:
    """A stellar population whose HB, clump, RGB and early AGB hbmodel can predict and sample.

    Parameters
    ----------
    feh, age_gyr, alpha_fe : float
        A simple population (ignored when ``components`` is given).
    helium : float or None
        Initial helium Y of the (first-generation) stars; ``None`` follows the enrichment law.
    mass_loss : MassLoss
        RGB mass loss and its star-to-star scatter (default Reimers eta = 0.45, no spread).
    components : sequence of Component, optional
        Composite population (a simple star-formation / chemical-enrichment history).
    helium_enriched_fraction, helium_delta_y : float
        A fraction of stars enriched in helium by ``helium_delta_y`` (multiple populations).
    logl_rgb_min : float
        Faintest RGB luminosity (log L/Lsun) included in star sets (default 0.8, near the RGB base).
    """

    #: Attributes that define the population (the constructor's arguments).  A population is an
    #: immutable value: assigning any public attribute after construction raises ``AttributeError``;
    #: :meth:`replace` returns a changed copy.  Derived caches (private ``_*`` attributes: sampler
    #: tables, eta maps, HB lifetimes) therefore always belong to the values they were computed for.
    _DEFINING_FIELDS = ("components", "helium", "mass_loss", "helium_enriched_fraction", "helium_delta_y",
                        "logl_rgb_min")

    def __setattr__(self, name, value):
        if not name.startswith("_") and "subpopulations" in self.__dict__:
            raise AttributeError(f"Population is immutable: use pop.replace({name}=...) for a changed copy")
        object.__setattr__(self, name, value)

    def __delattr__(self, name):
        if not name.startswith("_"):
            raise AttributeError("Population is immutable")
        object.__delattr__(self, name)

    # value semantics: two populations with the same defining values are equal (and hash alike); copying
    # an immutable value returns it (so scikit-learn's clone() of an estimator shares it, as it may)
    def _value(self) -> tuple:
        return tuple(getattr(self, k) for k in self._DEFINING_FIELDS)

    def __eq__(self, other):
        if not isinstance(other, Population):
            return NotImplemented
        return type(self) is type(other) and self._value() == other._value()

    def __hash__(self):
        return hash((type(self).__name__,) + self._value())

    def __copy__(self):
        return self

    def __deepcopy__(self, memo):
        return self

    def to_dict(self) -> dict:
        """The defining values as plain Python (JSON/YAML-ready): written into the metadata of mocks."""
        ml = self.mass_loss
        mass_loss = {"kind": ml.kind, "law": ml.law, "components": [list(map(float, c)) for c in ml.components]}
        if ml.samples is not None:
            mass_loss["n_samples"] = len(ml.samples)
        return {"components": [{"age_gyr": float(c.age_gyr), "feh": float(c.feh), "alpha_fe": float(c.alpha_fe),
                                "weight": float(c.weight)} for c in self.components],
                "helium": None if self.helium is None else float(self.helium), "mass_loss": mass_loss,
                "helium_enriched_fraction": self.helium_enriched_fraction, "helium_delta_y": self.helium_delta_y,
                "logl_rgb_min": self.logl_rgb_min}

    def __repr__(self):
        comps = self.components
        if len(comps) == 1:
            c = comps[0]
            head = f"feh={c.feh:g}, age_gyr={c.age_gyr:g}, alpha_fe={c.alpha_fe:g}"
        else:
            head = f"components=<{len(comps)} components>"
        extra = "".join(f", {k}={getattr(self, k)!r}" for k, d in
                        (("helium", None), ("helium_enriched_fraction", 0.0), ("helium_delta_y", 0.0),
                         ("logl_rgb_min", 0.8)) if getattr(self, k) != d)
        return f"Population({head}, mass_loss={self.mass_loss!r}{extra})"

    def replace(self, **changes) -> "Population":
        """A copy with some defining values changed, e.g. ``pop.replace(mass_loss=MassLoss.from_eta(0.6))``.

        Accepts the constructor's keyword arguments; ``feh``, ``age_gyr`` and ``alpha_fe`` change every
        component of the population (a simple population has one)."""
        allowed = set(self._DEFINING_FIELDS) | {"feh", "age_gyr", "alpha_fe"}
        unknown = sorted(set(changes) - allowed)
        if unknown:
            raise TypeError(f"Population.replace() got unknown field(s): {', '.join(unknown)}")
        kw = {k: getattr(self, k) for k in self._DEFINING_FIELDS}
        comp = changes.pop("components", kw["components"])
        simple = {k: float(changes.pop(k)) for k in ("age_gyr", "feh", "alpha_fe") if k in changes}
        if simple:
            comp = tuple(dataclasses.replace(c, **simple) for c in comp)
        kw.update(changes, components=comp)
        return type(self)(**kw)

    def __init__(self, feh=None, age_gyr=None, *, alpha_fe=0.0, helium=None, mass_loss=None,
                 components=None, helium_enriched_fraction=0.0, helium_delta_y=0.0, logl_rgb_min=0.8):
        if components is None:
            if feh is None or age_gyr is None:
                raise ValueError("give feh and age_gyr, or a list of components")
            components = (Component(in_unit(age_gyr, "Gyr", "age"), float(feh), float(alpha_fe), 1.0),)
        components = tuple(c if isinstance(c, Component) else Component(*c) for c in components)
        if not components:
            raise ValueError("a composite population needs at least one component")
        for c in components:
            if not np.isfinite(c.age_gyr) or c.age_gyr <= 0:
                raise ValueError(f"age must be positive (got {c.age_gyr:g} Gyr)")
            if c.weight < 0:
                raise ValueError("component weights must be non-negative")
        if sum(c.weight for c in components) <= 0:
            raise ValueError("component weights sum to zero")
        if not 0.0 <= helium_enriched_fraction <= 1.0:
            raise ValueError("helium_enriched_fraction must lie in [0, 1]")
        if helium_delta_y < 0:
            raise ValueError("helium_delta_y must be non-negative")
        self.components = components
        self.helium = helium
        self.mass_loss = mass_loss if mass_loss is not None else MassLoss.from_eta(0.45)
        self.helium_enriched_fraction = float(helium_enriched_fraction)
        self.helium_delta_y = float(helium_delta_y)
        self.logl_rgb_min = float(logl_rgb_min)
        self.subpopulations = self._build_subpopulations()

    @classmethod
    def from_history(cls, ages_gyr, sfr_weights, feh, *, alpha_fe=0.0, feh_weights=None, **kwargs):
        """Composite population from a star-formation history.

        ``sfr_weights[i]`` is the stellar mass formed in age bin ``ages_gyr[i]`` (any units);
        ``feh`` may be a list of metallicities with ``feh_weights`` (a metallicity distribution applied
        to every age).  Each component's weight is the number of stars reaching the RGB tip per unit
        time, ``SFR xi(m_tip) |dm_tip/dt|`` (Kroupa 2001 IMF), so younger, faster-evolving components
        contribute more giants per unit mass formed, as they should.
        """
        from hbmodel.physics.composition import Composition
        from hbmodel.physics.imf import tip_birth_rate
        if hasattr(ages_gyr, "unit") and hasattr(ages_gyr, "to_value"):  # an astropy Quantity (any time unit)
            try:
                ages_gyr = ages_gyr.to_value("Gyr")
            except Exception:
                raise ValueError(f"ages must be in units of time (got {ages_gyr.unit})") from None
        ages = np.atleast_1d(np.asarray(ages_gyr, float))
        sfr = np.atleast_1d(np.asarray(sfr_weights, float))
        fehs = np.atleast_1d(np.asarray(feh, float))
        fw = np.ones_like(fehs) if feh_weights is None else np.atleast_1d(np.asarray(feh_weights, float))
        if ages.shape != sfr.shape or fehs.shape != fw.shape:
            raise ValueError("ages/sfr_weights and feh/feh_weights must have matching lengths")
        if np.any(sfr < 0) or np.any(fw < 0) or sfr.sum() <= 0 or fw.sum() <= 0:
            raise ValueError("star-formation and metallicity weights must be non-negative, not all zero")
        comps = []
        for a, s in zip(ages, sfr):
            for f, w in zip(fehs, fw):
                if s * w <= 0:
                    continue
                rate = tip_birth_rate(a, Composition(f, alpha_fe).mh)
                comps.append(Component(float(a), float(f), float(alpha_fe), float(s * w * rate)))
        return cls(components=comps, **kwargs)

    @classmethod
    def constant_star_formation(cls, age_min_gyr, age_max_gyr, feh, *, n_ages=CONSTANT_SFR_N_AGES, **kwargs):
        """Constant star formation between ``age_min_gyr`` and ``age_max_gyr``: :meth:`from_history` on
        ``n_ages`` ages spaced evenly in log age (denser at young ages, where the clump changes fastest),
        each weighted by the width of its age bin.  ``feh``, ``feh_weights``, ``alpha_fe`` and the other
        keywords as in :meth:`from_history`."""
        lo, hi = in_unit(age_min_gyr, "Gyr", "age_min"), in_unit(age_max_gyr, "Gyr", "age_max")
        if not (0 < lo < hi):
            raise ValueError(f"constant star formation needs 0 < age_min < age_max, got {lo:g}, {hi:g} Gyr")
        ages = np.geomspace(lo, hi, int(n_ages))
        return cls.from_history(ages, np.gradient(ages), feh, **kwargs)

    # -- derived giant-branch quantities per (component, helium) -------------------------
    def _build_subpopulations(self):
        subs = []
        wsum = sum(c.weight for c in self.components)
        he_parts = [(1.0 - self.helium_enriched_fraction, 0.0)]
        if self.helium_enriched_fraction > 0 and self.helium_delta_y > 0:
            he_parts.append((self.helium_enriched_fraction, self.helium_delta_y))
        else:
            he_parts = [(1.0, 0.0)]
        for c in self.components:
            base = Composition(c.feh, c.alpha_fe, self.helium)
            for frac, dy in he_parts:
                if frac <= 0:
                    continue
                y = base.y + dy
                comp = base.with_helium(round(y, 6)) if (dy or self.helium is not None) else base
                mh = comp.mh
                y_arg = comp.y if (dy or self.helium is not None) else None
                m_tip = float(gb.tip_mass_msun(c.age_gyr, mh, y_arg))
                mc = float(ignition_core_mass_msun(m_tip, mh, y_arg))
                dy_std = comp.y - comp.y_standard
                mc_lo = float(gb.rgb_core_from_logl(self.logl_rgb_min, mh))
                # RGB time: core growth plus the pause at the bump (giant_branch.rgb_duration_myr)
                t_rgb = gb.rgb_duration_myr(mc_lo, mc, mh, c.age_gyr, comp.x)
                subs.append(SubPopulation(comp, c.age_gyr, c.weight / wsum * frac, m_tip, mc, dy_std,
                                          mc_lo, t_rgb))
        return tuple(subs)

    # -- HB masses ---------------------------------------------------------------------
    def hb_masses(self, sub: SubPopulation, u):
        """HB masses (and a 'lost envelope' flag) at mass-loss quantiles ``u`` for one sub-population."""
        ml = self.mass_loss
        q = ml.quantiles(u)
        if ml.kind == "hb_mass":
            m = np.minimum(q, sub.tip_mass_msun)
            return m, m <= sub.core_mass_msun + 1e-4
        if ml.kind == "eta":
            etas, dms, first_lost = self._eta_map(sub, float(np.max(q)) if q.size else 1.0)
            dm = np.interp(q, etas, dms)
            lost = q >= first_lost
        else:
            dm = q
            lost = dm >= sub.tip_mass_msun - sub.core_mass_msun
        m = sub.tip_mass_msun - dm
        lost = lost | (m <= sub.core_mass_msun)
        return np.where(lost, sub.core_mass_msun, m), lost

    def _eta_map(self, sub: SubPopulation, eta_max: float):
        """eta -> integrated loss on a dense grid, integrated once per sub-population (cached on the instance)."""
        cache = self.__dict__.setdefault("_eta_cache", {})
        key = (id(sub), self.mass_loss.law)
        hit = cache.get(key)
        if hit is None or hit[0][-1] < eta_max:
            top = min(max(eta_max * 1.0001, 1.0, 0.0 if hit is None else hit[0][-1] * 2), ETA_RANGE[1])
            etas = np.linspace(0.0, top, 481)
            dm, lost = mass_loss_from_eta(etas, sub.tip_mass_msun, sub.core_mass_msun, sub.mh,
                                          helium_excess=sub.helium_excess, x_env=sub.composition.x,
                                          law=self.mass_loss.law)
            first_lost = etas[np.argmax(lost)] if lost.any() else np.inf
            hit = cache[key] = (etas, dm, first_lost)
        return hit

    def mean_eta(self, sub: SubPopulation | None = None):
        """Mean Reimers-type efficiency equivalent to the mean integrated mass loss."""
        sub = sub or self.subpopulations[0]
        dm = self.mean_mass_loss(sub)
        return float(eta_from_mass_loss(dm, sub.tip_mass_msun, sub.core_mass_msun, sub.mh,
                                        helium_excess=sub.helium_excess, x_env=sub.composition.x,
                                        law=self.mass_loss.law))

    def mean_mass_loss(self, sub: SubPopulation | None = None, n=512):
        sub = sub or self.subpopulations[0]
        u = (np.arange(n) + 0.5) / n
        m, lost = self.hb_masses(sub, u)
        return float(np.mean(sub.tip_mass_msun - m))

    # -- star sets ---------------------------------------------------------------------
    def _hb_set(self, isub, sub, u_mass, tau, w_mass, agb_s=None, w_time=None):
        """HB (and AGB) stars for mass quantiles u_mass (1-D) crossed with phases tau (1-D)
        -- or paired element-wise when ``w_time`` is None and shapes match (random draws)."""
        m, lost = self.hb_masses(sub, u_mass)
        keep = ~lost
        m, w_mass = m[keep], w_mass[keep]
        if m.size == 0:
            return None, None
        mc = np.full_like(m, sub.core_mass_msun)
        z = zahb_state(np.maximum(m, mc + MENV_MIN_MSUN), mc, sub.mh, sub.helium_excess)
        t_hb = hbe.hb_lifetime_myr(mc, z.logteff, sub.helium_excess)
        t_agb = hbe.agb_lifetime_myr(mc, z.logteff, sub.helium_excess)
        return (m, mc, z, t_hb, t_agb, w_mass), keep

    def model_stars(self, n_mass=192, n_tau=96, n_agb=48, n_rgb=256, phases=PHASES) -> StarSet:
        """Deterministic weighted nodes (no Monte Carlo): weights are Myr per unit birth rate."""
        sets = []
        u = (np.arange(n_mass) + 0.5) / n_mass
        tau = (np.arange(n_tau) + 0.5) / n_tau
        s = (np.arange(n_agb) + 0.5) / n_agb
        for i, sub in enumerate(self.subpopulations):
            res, _ = self._hb_set(i, sub, u, tau, np.full(n_mass, 1.0 / n_mass))
            if "rgb" in phases:
                sets.append(self._rgb_nodes(i, sub, (np.arange(n_rgb) + 0.5) / n_rgb))
            if res is None:
                continue
            m, mc, z, t_hb, t_agb, w_m = res
            if "hb" in phases:
                mm = np.repeat(m, n_tau)
                tt = np.tile(tau, m.size)
                l0, t0 = np.repeat(z.logl, n_tau), np.repeat(z.logteff, n_tau)
                logl, logt = hbe.hb_track(l0, t0, tt)
                # the redward end of the HB never crosses the RGB (it joins the AGB, bluer than the RGB)
                logt = gb.clip_blue_of_rgb(logl, logt, sub.mh, sub.tip_mass_msun, sub.helium_excess)
                w = np.repeat(w_m * t_hb / n_tau, n_tau) * sub.weight
                sets.append(self._mk("hb", i, sub, mm, logl, logt, w, t0, tt))
            if "agb" in phases and np.any(t_agb > 0):
                ok = t_agb > 0
                mm = np.repeat(m[ok], n_agb)
                ss = np.tile(s, ok.sum())
                l0, t0 = np.repeat(z.logl[ok], n_agb), np.repeat(z.logteff[ok], n_agb)
                logl, logt = hbe.agb_track(l0, t0, ss, mm, sub.mh, sub.helium_excess, sub.tip_mass_msun)
                w = np.repeat(w_m[ok] * t_agb[ok] / n_agb, n_agb) * sub.weight
                sets.append(self._mk("agb", i, sub, mm, logl, logt, w, t0, ss))
        return StarSet.concatenate(sets)

    def _mk(self, phase, i, sub, mass, logl, logt, w, zt=None, tau=None):
        n = len(mass)
        return StarSet(np.full(n, phase), np.asarray(mass, float), np.full(n, sub.core_mass_msun),
                       np.asarray(logl, float), np.asarray(logt, float), np.full(n, sub.composition.feh),
                       np.asarray(w, float), np.full(n, i), None if zt is None else np.asarray(zt, float),
                       None if tau is None else np.asarray(tau, float))

    def _rgb_nodes(self, i, sub, v, weight=None):
        """RGB stars at fractional RGB ages ``v`` (uniform in time), with the RGB bump."""
        if sub.t_rgb_myr <= 0:
            return None
        mh, x = sub.mh, sub.composition.x
        # core growth with the pause at the bump (the star lingers there: giant_branch.rgb_state_from_time)
        mc, logl = gb.rgb_state_from_time(np.asarray(v, float) * sub.t_rgb_myr, sub.mc_rgb_lo_msun,
                                          sub.core_mass_msun, mh, sub.age_gyr, x)
        # mass along the RGB: linear in core growth between initial mass and the HB mass (mean loss)
        dm = self.mean_mass_loss(sub, n=128)
        frac = np.clip((mc - sub.mc_rgb_lo_msun) / (sub.core_mass_msun - sub.mc_rgb_lo_msun), 0, 1) ** 6
        mass = sub.tip_mass_msun - dm * frac
        logt = gb.rgb_logteff(np.clip(logl, 0.3, 3.7), mh, mass, sub.helium_excess)
        w = (np.full(v.size, sub.t_rgb_myr / v.size) if weight is None else weight) * sub.weight
        return self._mk("rgb", i, sub, mass, logl, logt, w, None, v)

    def sample(self, n_hb, rng: np.random.Generator, phases=PHASES, rgb_logl_range=None) -> StarSet:
        """Random stars: ``n_hb`` HB stars (expected count) plus the RGB and early-AGB stars that go with
        them in lifetime proportion.  Unit weights.

        ``rgb_logl_range=(lo, hi)`` draws RGB stars only between those luminosities (in the right number
        for that stretch), so a magnitude window costs no wasted RGB draws."""
        from hbmodel.core.randomness import as_generator
        rng = as_generator(rng)
        n_hb = int(n_hb)
        if n_hb <= 0:
            raise ValueError("the number of HB stars must be positive")
        sets = []
        for i, ph, n, (v_lo, v_hi) in self.phase_counts(n_hb, rng, phases, rgb_logl_range):
            sub = self.subpopulations[i]
            if ph == "rgb":
                v = v_lo + (v_hi - v_lo) * rng.random(n)
                sets.append(self._rgb_nodes(i, sub, v, np.ones(n) / sub.weight))
            else:
                sets.append(self._sample_hb_agb(i, sub, ph, n, rng))
        out = StarSet.concatenate(sets)
        out.weight = np.ones(len(out))
        return out

    def phase_counts(self, n_hb, rng, phases=PHASES, rgb_logl_range=None, rates=None):
        """Random star counts per (sub-population, phase) for ``n_hb`` expected HB stars.

        Expected counts follow the time spent in each phase (:meth:`phase_times`, or ``rates`` if already
        computed); each is rounded down and gets one more star with probability equal to its fractional
        part, so counts are unbiased.  The HB counts of the sub-populations are rounded together
        (systematic sampling of the fractional parts with one uniform number: each still has the right
        probability) so that they add up to exactly ``n_hb``.  RGB counts cover only the stretch of
        ``rgb_logl_range``.  Returns a list of ``(sub_index, phase, n, (v_lo, v_hi))`` with ``n > 0``;
        ``(v_lo, v_hi)`` is the interval of fractional RGB age to draw from (``(0, 1)`` for the HB and AGB)."""
        rates = self.phase_times() if rates is None else rates
        tot_hb = rates["hb"].sum()
        if tot_hb <= 0:
            raise ValueError("no star of this population reaches the HB (all envelopes lost on the RGB)")
        phases = tuple(phases)
        u = rng.random((len(self.subpopulations), len(phases)))  # one number per count, in this order
        hb_counts = None
        if "hb" in phases:
            mean_hb = rates["hb"] / tot_hb * n_hb
            frac = mean_hb % 1
            cum = np.cumsum(frac)
            u0 = u[0, phases.index("hb")]
            hb_counts = np.floor(mean_hb).astype(int) + np.diff(np.floor(np.concatenate([[0.0], cum]) + u0)).astype(int)
            short = int(round(float(n_hb))) - int(hb_counts.sum()) if float(n_hb) % 1 == 0 else 0
            if short:  # floating-point rounding of the fractional parts: put the star where most is missing
                hb_counts[int(np.argmax(frac if short > 0 else -frac))] += short
        out = []
        for i, sub in enumerate(self.subpopulations):
            for k, ph in enumerate(phases):
                mean = rates[ph][i] / tot_hb * n_hb
                win = self._rgb_time_window(sub, rgb_logl_range) if ph == "rgb" else (0.0, 1.0)
                mean *= win[1] - win[0]
                n = int(hb_counts[i]) if ph == "hb" else int(np.floor(mean)) + int(u[i, k] < mean % 1)
                if n > 0 and mean > 0:
                    out.append((i, ph, n, win))
        return out

    def _rgb_time_window(self, sub, logl_range):
        """Fractional RGB-age interval covering RGB luminosities ``logl_range`` (bump included)."""
        if logl_range is None or sub.t_rgb_myr <= 0:
            return 0.0, 1.0
        lo, hi = (float(x) for x in logl_range)
        d = gb.constants()["bump_dlogl"]
        t = gb.rgb_time_at_logl(np.array([lo - d, hi + d]), sub.mc_rgb_lo_msun, sub.core_mass_msun, sub.mh,
                                sub.age_gyr, sub.composition.x) / sub.t_rgb_myr
        return float(np.clip(t[0], 0, 1)), float(np.clip(t[1], 0, 1))

    def _sample_hb_agb(self, i, sub, ph, n, rng):
        # draw masses in proportion to the time each mass spends in the phase: rejection on t/t_max
        got = []
        need = n
        while need > 0:
            k = int(need * 1.6) + 16
            u = rng.random(k)
            res, keep = self._hb_set(i, sub, u, None, np.ones(k))
            if res is None:
                raise ValueError("no star of this population reaches the HB")
            m, mc, z, t_hb, t_agb, _ = res
            t = t_hb if ph == "hb" else t_agb
            tmax = self._tmax(sub, ph)
            acc = rng.random(m.size) * tmax < t
            idx = np.flatnonzero(acc)[:need]
            if idx.size:
                got.append((m[idx], z.logl[idx], z.logteff[idx]))
                need -= idx.size
        m = np.concatenate([g[0] for g in got])
        l0 = np.concatenate([g[1] for g in got])
        t0 = np.concatenate([g[2] for g in got])
        ph_t = rng.random(m.size)
        if ph == "hb":
            logl, logt = hbe.hb_track(l0, t0, ph_t)
            # the redward end of the HB never crosses the RGB (it joins the AGB, bluer than the RGB)
            logt = gb.clip_blue_of_rgb(logl, logt, sub.mh, sub.tip_mass_msun, sub.helium_excess)
        else:
            logl, logt = hbe.agb_track(l0, t0, ph_t, m, sub.mh, sub.helium_excess, sub.tip_mass_msun)
        return self._mk(ph, i, sub, m, logl, logt, np.ones(m.size), t0, ph_t)

    def _tmax(self, sub, ph):
        cache = self.__dict__.setdefault("_tmax_cache", {})
        key = (id(sub), ph)
        if key not in cache:
            cache[key] = self._tmax_compute(sub, ph)
        return cache[key]

    def _tmax_compute(self, sub, ph):
        u = (np.arange(256) + 0.5) / 256
        res, _ = self._hb_set(0, sub, u, None, np.ones(256))
        m, mc, z, t_hb, t_agb, _ = res
        return 1.0001 * float(np.max(t_hb if ph == "hb" else t_agb)) + 1e-12

    def phase_times(self, n_mass=256):
        """Time (Myr per unit birth rate, times the sub-population weight) spent in each phase."""
        out = {ph: np.zeros(len(self.subpopulations)) for ph in PHASES}
        u = (np.arange(n_mass) + 0.5) / n_mass
        for i, sub in enumerate(self.subpopulations):
            out["rgb"][i] = sub.t_rgb_myr * sub.weight
            res, keep = self._hb_set(i, sub, u, None, np.full(n_mass, 1.0 / n_mass))
            if res is None:
                continue
            m, mc, z, t_hb, t_agb, w = res
            out["hb"][i] = np.sum(w * t_hb) * sub.weight
            out["agb"][i] = np.sum(w * t_agb) * sub.weight
        return out

    def predict(self, bands=None) -> dict:
        """Deterministic predictions (see :func:`hbmodel.populations.morphology.predict_summary`)."""
        from hbmodel.populations.morphology import predict_summary
        return predict_summary(self, bands=bands)
