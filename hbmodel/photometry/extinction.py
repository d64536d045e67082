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

Real passbands and the curvature in A_V.  The HST and survey bands of the registry
(``passband`` column of ``tables/bands.csv``) use their real response curves: survey curves
shipped with the ``speclite`` package (read from its installed data, no download), HST curves
tabulated in ``tables/passbands_hst.csv``.  For these bands the band-integrated extinction is
computed exactly for the amount of dust,

    A_band = -2.5 log10( int F_lambda lambda S 10^(-0.4 A_V k) dlambda / int F_lambda lambda S dlambda ),

tabulated on a (Teff, A_V) grid (A_V = R_V E(B-V) from 0 to 30 mag, step 0.5; bilinear), so the ratio
A_band/E(B-V) falls with A_V as the passband's blue side is extinguished first (~1-2 % per
magnitude of A_V for a broad optical band): :func:`extinction_ratio` with ``ebv`` and
:func:`extinction_mag` include it.  Without ``ebv`` the low-extinction limit is returned.

Limitations: blackbody spectra (no line blanketing or Balmer jump); the eleven core bands keep their
approximate passbands and the linear (small A_V) limit, so that their numbers are unchanged (their
curvature, ~1-2 % per magnitude of A_V in G, is not modelled); WISE W1/W2 lie beyond 3.3 micron, outside
F99 and CCM89: use ``G23``.
"""
from __future__ import annotations

import functools
import sys

import numpy as np

from hbmodel.core.validation import as_float_array, check_range
from hbmodel.photometry.magnitudes import TEFF_RANGE_K, _Uniform, get_band

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


@functools.lru_cache(maxsize=64)
def _curve(source: str, name: str) -> tuple[np.ndarray, np.ndarray]:
    """Real response curve (micron, response) of a registry band: ``speclite:<filter>`` or ``table``."""
    if source.startswith("speclite:"):
        try:
            import speclite.filters as sf
        except ImportError:
            raise ValueError(f"band {name} needs the speclite package for its passband (pip install speclite)") from None
        f = sf.load_filter(source.split(":", 1)[1])
        lam, resp = np.asarray(f.wavelength, float) / 1e4, np.asarray(f.response, float)
    elif source == "table":
        from hbmodel.core.tables import _text
        lam, resp = [], []
        for ln in _text("passbands_hst.csv").splitlines():
            parts = ln.split(",")
            if len(parts) == 3 and parts[0] == name:
                lam.append(float(parts[1]))
                resp.append(float(parts[2]))
        if not lam:
            raise ValueError(f"band {name}: no curve in passbands_hst.csv")
        lam, resp = np.array(lam), np.array(resp)
    else:
        raise ValueError(f"band {name} has unknown passband source {source!r}")
    keep = np.flatnonzero(resp > 0)
    lo, hi = lam[max(keep[0] - 1, 0)], lam[min(keep[-1] + 1, lam.size - 1)]
    grid = np.linspace(lo, hi, _NLAM)
    return grid, np.interp(grid, lam, resp)


def passband(band) -> tuple[np.ndarray, np.ndarray]:
    """Passband of ``band``: wavelength grid (micron) and relative response.

    Bands with a real curve (``passband`` column of ``bands.csv``) return it, resampled onto
    600 equally spaced wavelengths; the eleven core bands return the approximate shape below.

    Shape and width from the registry (Gaussian of FWHM = lambda_hi - lambda_lo, or a
    top-hat of that width); the band is then placed so that its photon-weighted mean
    wavelength for a 9,550 K (A0 V, Vega-like) blackbody equals the registry's
    effective wavelength ``lambda_eff_um``.
    """
    b = get_band(band) if isinstance(band, str) else band
    if b.passband != "approx":
        return _curve(b.passband, b.name)
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
    """The ratio on the Teff grid; also kept in the on-disk cache (:mod:`hbmodel.core.cache`), keyed by the
    band's passband parameters, the law, R_V, this module's source and the dust_extinction version, so
    a fresh process needs neither dust_extinction nor astropy (an invalid R_V is never stored)."""
    from importlib.metadata import version

    from hbmodel.core.cache import cached_array, source_digest
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


#: A_V nodes of the curvature grid (mag) and its Teff resolution.
AV_MAX = 30.0
_AV_STEP = 0.5
_NGRID_AV = 401


@functools.lru_cache(maxsize=128)
def _curved_grid(band_name: str, law: str, rv: float):
    """A_band/E(B-V) on a (log Teff, A_V) grid for a real-passband band: exact band integral of the
    attenuated spectrum (see module docstring).  Returns (log Teff grid, A_V grid, ratio[nt, nav])."""
    band = get_band(band_name)
    lam, resp = passband(band)
    try:
        k = law_curve(law, rv, lam)
    except ValueError as exc:
        if "wavelength" not in str(exc):  # e.g. R_V outside the law's range: no passband hint applies
            raise
        raise ValueError(f"band {band_name} ({lam[0]:.2f}-{lam[-1]:.2f} micron): {exc}; use the G23 law "
                         f"(--extinction-law G23), which reaches 32 micron") from None
    logt = np.linspace(np.log10(TEFF_RANGE_K[0]), np.log10(TEFF_RANGE_K[1]), _NGRID_AV)
    av = np.arange(0.0, AV_MAX + 0.5 * _AV_STEP, _AV_STEP)
    w = resp * _planck_photons(lam[None, :], 10.0 ** logt[:, None])
    w /= w.sum(axis=1, keepdims=True)
    ratio = np.empty((logt.size, av.size))
    ratio[:, 0] = rv * (w * k).sum(axis=1)
    for j in range(1, av.size):
        a_band = -2.5 * np.log10((w * 10.0 ** (-0.4 * av[j] * k)).sum(axis=1))
        ratio[:, j] = a_band * rv / av[j]
    ratio.setflags(write=False)
    return logt, av, ratio


def extinction_ratio(band, teff_k, rv=3.1, law="F99", ebv=None) -> np.ndarray:
    """A_band / E(B-V) for a star of effective temperature ``teff_k`` (K).

    Blackbody-weighted mean of the ``dust_extinction`` law over the band's passband
    (see module docstring); E(B-V) is the nominal colour excess A_V/R_V.  With ``ebv``
    (scalar or array broadcasting against ``teff_k``), bands with a real passband give the
    ratio at that amount of dust (curvature in A_V, valid to A_V = R_V E(B-V) <= 30 mag);
    the eleven core bands always give the low-extinction limit.
    Valid 3,000-50,000 K and for the law's own R_V range (F99, CCM89: 2-6; G23: 2.3-5.6).
    """
    b = get_band(band)
    name = b.name
    rv = _check_rv(rv)
    _check_law(law)
    if b.passband == "approx":
        grid = _ratio_grid(name, law, rv)  # checks R_V against the law's range when the grid is computed
    teff = check_range(teff_k, "teff_k", *TEFF_RANGE_K, what="extinction calibration range (K)")
    if b.passband != "approx":
        av = np.zeros(()) if ebv is None else _check_ebv(ebv) * rv
        if av.size and av.max() > AV_MAX:
            raise ValueError(f"A_V = {av.max():g} mag (E(B-V) x R_V) is beyond the {AV_MAX:g} mag the "
                             f"extinction of band {name} is tabulated for")
        logt, avg, ratio = _curved_grid(name, law, rv)
        lt, a = np.broadcast_arrays(np.log10(teff), av)
        return _bilinear(logt, avg, ratio, lt, a)
    flat = np.log10(np.ravel(teff))
    i, f = grid.locate(flat)
    return grid.get("r", i, f).reshape(teff.shape)


def _bilinear(x, y, z, xq, yq):
    """Bilinear interpolation of z[len(x), len(y)] on uniform grids x, y at (xq, yq)."""
    fx = np.clip((xq - x[0]) / (x[1] - x[0]), 0.0, x.size - 1.0)
    fy = np.clip((yq - y[0]) / (y[1] - y[0]), 0.0, y.size - 1.0)
    i = np.minimum(fx.astype(np.intp), x.size - 2)
    j = np.minimum(fy.astype(np.intp), y.size - 2)
    u, v = fx - i, fy - j
    return ((1 - u) * (1 - v) * z[i, j] + u * (1 - v) * z[i + 1, j]
            + (1 - u) * v * z[i, j + 1] + u * v * z[i + 1, j + 1])


def _check_ebv(ebv) -> np.ndarray:
    ebv = as_float_array(ebv, "ebv")
    if ebv.size and ebv.min() < 0.0:
        raise ValueError(f"ebv = {ebv.min():g} is negative; E(B-V) must be >= 0")
    return ebv


def extinction_mag(band, ebv, teff_k, rv=3.1, law="F99") -> np.ndarray:
    """Extinction A_band (mag) = E(B-V) * A_band/E(B-V)(Teff, A_V); ``ebv`` scalar or array, >= 0.

    Bands with a real passband include the curvature in A_V; the core bands are linear in E(B-V)."""
    ebv = _check_ebv(ebv)
    return ebv * extinction_ratio(band, teff_k, rv=rv, law=law, ebv=ebv)


def apparent_magnitudes(absmag: dict, distance_modulus, ebv, teff_k, rv=3.1, law="F99") -> dict:
    """Apparent magnitudes m = M + (m - M)_0 + A_band for every band in ``absmag``.

    ``absmag`` maps band name -> absolute magnitudes (e.g. from
    ``hbmodel.photometry.magnitudes.absolute_magnitudes``); ``distance_modulus`` and ``ebv``
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
