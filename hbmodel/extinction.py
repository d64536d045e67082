"""Interstellar extinction by band, dependent on the star's effective temperature.

Extinction curves come from the ``dust_extinction`` package (no hand-typed
coefficients): ``"F99"`` Fitzpatrick 1999, PASP 111, 63; ``"CCM89"`` Cardelli,
Clayton & Mathis 1989, ApJ 345, 245; ``"G23"`` Gordon et al. 2023, ApJ 950, 86.
Each gives the monochromatic ratio k(lambda) = A_lambda / A_V, with A_V the
extinction at the V reference wavelength (0.549 micron) and R_V = A_V / E(B-V).

Broad-band ratios.  A broad band reddens a hot star differently from a cool one,
because the stellar spectrum weights the passband.  For each band we integrate
an approximate spectrum -- a blackbody of the star's Teff -- through an
approximate passband built from the band registry (``tables/bands.csv``: Gaussian
of FWHM = lambda_hi - lambda_lo, or a top-hat of that width, placed so that its
photon-weighted mean wavelength for a 9,550 K blackbody is the registry's effective
wavelength; see :func:`passband`), photon counting (weight F_lambda * lambda *
S(lambda)), in the low-extinction limit::

    A_band / E(B-V) = R_V * < k >_band,   < k > = int k F_lambda lambda S dlambda / int F_lambda lambda S dlambda

Normalisation choice: E(B-V) is the **nominal** colour excess, E(B-V) = A_V / R_V
with A_V monochromatic at 0.549 micron, i.e. the parameter of the extinction law --
not the band-integrated B-V excess of a particular star (which, for the same dust,
is a few per cent smaller for cool stars than for hot ones).  The ratios are
precomputed on a grid of 2001 Teff values (3,000-50,000 K, uniform in log Teff)
per (band, law, R_V) and linearly interpolated, so the functions are vectorised.

Limitations: blackbody spectra (no line blanketing or Balmer jump), approximate
passbands, and the linear (small A_V) limit -- the band-integrated ratio of a broad
band decreases slightly with the amount of extinction, by ~1-2 % per magnitude of
A_V in G (not modelled).
"""
from __future__ import annotations

import functools
import sys

import numpy as np

from ._validate import as_float_array, check_range
from .photometry import TEFF_RANGE_K, _Uniform, get_band

__all__ = ["LAWS", "extinction_ratio", "extinction_mag", "apparent_magnitudes",
           "law_curve", "passband"]

#: Accepted extinction-law names (``dust_extinction.parameter_averages`` models).
LAWS = ("F99", "CCM89", "G23")

_NGRID = 2001
_NLAM = 600
# second radiation constant h c / k in micron K (CODATA 2018: 14387.7688 um K)
_C2_UM_K = 14387.7688


def _check_law(law: str) -> None:
    if law not in LAWS:
        raise ValueError(f"unknown extinction law {law!r}; valid laws: {', '.join(LAWS)}")


def _law_model(law: str, rv: float):
    _check_law(law)
    from dust_extinction import parameter_averages as pa

    cls = getattr(pa, law)
    lo, hi = cls.Rv_range
    if not (lo <= rv <= hi):
        raise ValueError(f"rv = {rv:g} is outside the valid range [{lo:g}, {hi:g}] of law {law}")
    return cls(Rv=rv)


def law_curve(law: str, rv: float, wavelength_um) -> np.ndarray:
    """A_lambda / A_V of ``law`` at ``wavelength_um`` (the dust_extinction model itself)."""
    import astropy.units as u

    model = _law_model(law, _check_rv(rv))
    lam = as_float_array(wavelength_um, "wavelength_um")
    x = 1.0 / lam
    xlo, xhi = model.x_range
    if np.any(x < xlo) or np.any(x > xhi):
        raise ValueError(f"wavelength outside the range {1 / xhi:.3g}-{1 / xlo:.3g} micron of law {law}")
    return np.asarray(model(x / u.micron), dtype=float)


def _planck_photons(lam_um, teff_k):
    """Blackbody photon flux per unit wavelength, up to a constant: lambda^-4 / (exp(c2/lambda T) - 1)."""
    return lam_um ** -4 / np.expm1(_C2_UM_K / (lam_um * teff_k))


def passband(band) -> tuple[np.ndarray, np.ndarray]:
    """Approximate passband of ``band``: wavelength grid (micron) and relative response.

    Shape and width from the registry (Gaussian of FWHM = lambda_hi - lambda_lo, or a
    top-hat of that width); the band is then placed so that its photon-weighted mean
    wavelength for a 9,550 K (A0 V, Vega-like) blackbody equals the registry's
    effective wavelength ``lambda_eff_um``.
    """
    b = get_band(band) if isinstance(band, str) else band
    lo, hi = b.lambda_lo_um, b.lambda_hi_um
    if b.shape == "gaussian":
        sigma = (hi - lo) / (2.0 * np.sqrt(2.0 * np.log(2.0)))
        u = np.linspace(-3.0, 3.0, _NLAM)
        resp = np.exp(-0.5 * u * u)
        offsets = sigma * u
    elif b.shape == "tophat":
        offsets = np.linspace(-0.5, 0.5, _NLAM) * (hi - lo)
        resp = np.ones(_NLAM)
    else:
        raise ValueError(f"band {b.name!r} has unknown passband shape {b.shape!r}")
    centre = 0.5 * (lo + hi)
    for _ in range(20):  # fixed-point iteration on the centre (converges in a few steps)
        lam = centre + offsets
        w = resp * _planck_photons(lam, 9550.0)
        shift = b.lambda_eff_um - float((w * lam).sum() / w.sum())
        centre += shift
        if abs(shift) < 1e-7:
            break
    return centre + offsets, resp


def _check_rv(rv) -> float:
    rv_arr = as_float_array(rv, "rv")
    if rv_arr.ndim != 0:
        raise ValueError("rv must be a scalar")
    return float(rv_arr)


@functools.lru_cache(maxsize=256)
def _ratio_grid(band_name: str, law: str, rv: float) -> _Uniform:
    """The ratio on the Teff grid; also kept in the on-disk cache (:mod:`hbmodel._cache`), keyed by the
    band's passband parameters, the law, R_V, this module's source and the dust_extinction version, so
    a fresh process needs neither dust_extinction nor astropy (an invalid R_V is never stored)."""
    from importlib.metadata import version

    from ._cache import cached_array, source_digest
    band = get_band(band_name)
    lo, hi = np.log10(TEFF_RANGE_K[0]), np.log10(TEFF_RANGE_K[1])

    def compute():
        lam, resp = passband(band)
        k = law_curve(law, rv, lam)
        teff = np.logspace(lo, hi, _NGRID)
        # photon-counting weight F_lambda * lambda * S(lambda), blackbody F_lambda
        w = resp * _planck_photons(lam[None, :], teff[:, None])
        return rv * (w * k).sum(axis=1) / w.sum(axis=1)

    try:
        dust_version = version("dust_extinction")
    except Exception:  # metadata missing: no disk cache for this entry
        return _Uniform(lo, hi, _NGRID, {"r": compute()})
    passband_key = (band.name, band.shape, band.lambda_lo_um, band.lambda_hi_um, band.lambda_eff_um)
    key = (passband_key, law, float(rv), _NGRID, _NLAM, tuple(TEFF_RANGE_K), dust_version,
           source_digest(sys.modules[__name__]))
    ratio = cached_array("extinction-ratio", key, compute)
    if ratio.shape != (_NGRID,) or not np.all(np.isfinite(ratio)):
        ratio = compute()
    return _Uniform(lo, hi, _NGRID, {"r": ratio})


def extinction_ratio(band, teff_k, rv=3.1, law="F99") -> np.ndarray:
    """A_band / E(B-V) for a star of effective temperature ``teff_k`` (K).

    Blackbody-weighted mean of the ``dust_extinction`` law over the approximate
    passband (see module docstring); E(B-V) is the nominal colour excess A_V/R_V.
    Valid 3,000-50,000 K and for the law's own R_V range (F99, CCM89: 2-6; G23: 2.3-5.6).
    """
    name = get_band(band).name
    rv = _check_rv(rv)
    _check_law(law)
    grid = _ratio_grid(name, law, rv)  # checks R_V against the law's range when the grid is computed
    teff = check_range(teff_k, "teff_k", *TEFF_RANGE_K, what="extinction calibration range (K)")
    flat = np.log10(np.ravel(teff))
    i, f = grid.locate(flat)
    return grid.get("r", i, f).reshape(teff.shape)


def _check_ebv(ebv) -> np.ndarray:
    ebv = as_float_array(ebv, "ebv")
    if ebv.size and ebv.min() < 0.0:
        raise ValueError(f"ebv = {ebv.min():g} is negative; E(B-V) must be >= 0")
    return ebv


def extinction_mag(band, ebv, teff_k, rv=3.1, law="F99") -> np.ndarray:
    """Extinction A_band (mag) = E(B-V) * A_band/E(B-V)(Teff); ``ebv`` scalar or array, >= 0."""
    ebv = _check_ebv(ebv)
    return ebv * extinction_ratio(band, teff_k, rv=rv, law=law)


def apparent_magnitudes(absmag: dict, distance_modulus, ebv, teff_k, rv=3.1, law="F99") -> dict:
    """Apparent magnitudes m = M + (m - M)_0 + A_band for every band in ``absmag``.

    ``absmag`` maps band name -> absolute magnitudes (e.g. from
    ``hbmodel.photometry.absolute_magnitudes``); ``distance_modulus`` and ``ebv``
    broadcast against them.
    """
    if not isinstance(absmag, dict) or not absmag:
        raise ValueError("absmag must be a non-empty dict of band name -> absolute magnitudes")
    mu = as_float_array(distance_modulus, "distance_modulus")
    ebv = _check_ebv(ebv)
    out = {}
    for band, m_abs in absmag.items():
        m_abs = as_float_array(m_abs, f"absolute magnitude in {band}")
        out[band] = m_abs + mu + extinction_mag(band, ebv, teff_k, rv=rv, law=law)
    return out
