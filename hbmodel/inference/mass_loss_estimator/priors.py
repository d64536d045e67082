"""Priors of the mass-loss fit: :class:`Priors` (Gaussian ``(mean, sd)`` or uniform ``(lo, hi)`` per
parameter) and the valid ranges it checks."""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

__all__ = ["Priors", "EBV_SPREAD_MAX"]


def _pos_width(name, v):
    v = float(v)
    if not np.isfinite(v) or v <= 0:
        raise ValueError(f"prior width of {name} must be positive (got {v:g})")
    return v


def _interval(name, lo_hi):
    lo, hi = (float(x) for x in lo_hi)
    if not (np.isfinite(lo) and np.isfinite(hi)) or hi <= lo:
        raise ValueError(f"prior range of {name} must have positive width (got [{lo:g}, {hi:g}])")
    return lo, hi


#: Largest star-to-star E(B-V) spread (mag) a fit may explore (own choice: larger differential reddening
#: smears the clump into the RGB and is better corrected with a reddening map first).
EBV_SPREAD_MAX = 0.25

#: Valid bounds ``(lo, hi, hi included)`` of the uniform prior ranges: fractions lie in [0, 1] (the field
#: fraction below 1, a catalogue of field stars only has no population to fit); the helium enrichment
#: is modelled up to 0.15.
_UNIFORM_BOUNDS = {"mass_loss": (0.0, np.inf, False), "mass_loss_sd": (0.0, np.inf, False),
                   "helium_fraction": (0.0, 1.0, True), "delta_y": (0.0, 0.15, True),
                   "field_fraction": (0.0, 1.0, False), "rgb_mass_sd": (0.0, np.inf, False),
                   "ebv_spread": (0.0, EBV_SPREAD_MAX, True)}


@dataclass(frozen=True)
class Priors:
    """Priors.  Gaussians are ``(mean, sd)``, uniforms ``(lo, hi)``; ``None`` = default.

    ``distance_modulus`` is needed for a CMD fit (the model must be placed); ``ebv`` defaults to N(0, 0.02);
    ``age_sd_gyr`` None fixes the age at the population's; ``mass_loss`` defaults to [0, envelope mass];
    zero-point widths default to 0.02 / 0.03 mag (``zero_points=False`` in :class:`MassLossFit` fixes them).

    Differential reddening: ``ebv_spread`` = (lo, hi) is the range of the star-to-star E(B-V) spread (sd,
    mag), a nuisance parameter of the CMD fit; ``ebv_spread_sd`` makes its prior half-normal of that scale
    (uniform in the range when None).  ``ebv_spread=None`` (default) assumes no differential reddening.
    :meth:`with_ebv_spread` builds the usual choices.
    """

    distance_modulus: tuple | None = None
    ebv: tuple = (0.0, 0.02)
    age_sd_gyr: float | None = None
    mass_loss: tuple | None = None
    mass_loss_sd: tuple = (0.0, 0.08)
    helium_fraction: tuple = (0.0, 1.0)
    delta_y: tuple = (0.0, 0.10)
    field_fraction: tuple = (0.0, 0.5)
    colour_offset_sd: float | None = None
    mag_offset_sd: float | None = None
    rgb_mass_sd: tuple = (0.0, 0.1)
    ebv_spread: tuple | None = None
    ebv_spread_sd: float | None = None

    def with_ebv_spread(self, mode):
        """These priors with a differential-reddening spread: ``"prior"`` -- half-normal of scale the E(B-V)
        prior width (the mean's uncertainty sets the scale of the star-to-star scatter too), up to four times
        it; a positive number -- half-normal of that scale, up to four times it; ``"free"`` -- uniform on
        [0, EBV_SPREAD_MAX]; ``"none"`` or None -- no differential reddening."""
        if mode is None or mode == "none":
            return dataclasses.replace(self, ebv_spread=None, ebv_spread_sd=None)
        if mode == "free":
            return dataclasses.replace(self, ebv_spread=(0.0, EBV_SPREAD_MAX), ebv_spread_sd=None)
        scale = float(self.ebv[1]) if mode == "prior" else _pos_width("ebv_spread", mode)
        return dataclasses.replace(self, ebv_spread=(0.0, min(4.0 * scale, EBV_SPREAD_MAX)), ebv_spread_sd=scale)

    def __post_init__(self):
        if self.distance_modulus is not None:
            dm, sd = self.distance_modulus
            if not np.isfinite(float(dm)):
                raise ValueError("distance modulus prior mean must be finite")
            _pos_width("distance_modulus", sd)
        e, esd = self.ebv
        if not np.isfinite(float(e)) or float(e) < 0:
            raise ValueError(f"E(B-V) prior mean must be non-negative (got {float(e):g})")
        _pos_width("ebv", esd)
        if self.age_sd_gyr is not None:
            _pos_width("age", self.age_sd_gyr)
        for name, (lo_ok, hi_ok, closed) in _UNIFORM_BOUNDS.items():
            if getattr(self, name) is None:
                continue
            lo, hi = _interval(name, getattr(self, name))
            if lo < lo_ok or hi > hi_ok or (hi == hi_ok and not closed):
                valid = f"[{lo_ok:g}, {hi_ok:g}{']' if closed else ')'}"
                raise ValueError(f"prior range of {name} [{lo:g}, {hi:g}] must lie within {valid}")
        for name in ("colour_offset_sd", "mag_offset_sd", "ebv_spread_sd"):
            if getattr(self, name) is not None:
                _pos_width(name, getattr(self, name))
