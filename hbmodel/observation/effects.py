"""Mock observation of a synthetic population: errors, completeness, reddening, binaries, field.

Pure, vectorised functions on numpy arrays. Magnitudes travel as
``dict[band -> ndarray]`` (all arrays of one shape). Every random draw comes
from an explicit :class:`numpy.random.Generator` (an ``int`` seed is accepted
and turned into one); there is no hidden or global random state, so the same
generator state always gives the same output.

Size (690+ lines): six short, independent observing effects of one stage (errors, completeness, observation,
reddening, binaries, field), one marked section each.
"""
from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from hbmodel.core.randomness import as_generator
from hbmodel.core.validation import check_interval
from hbmodel.core.tables import read_table

__all__ = [
    "POGSON_SCALE_MAG",
    "ErrorLaw",
    "default_error_law",
    "survey_depth_5sigma",
    "Completeness",
    "observe_magnitudes",
    "ReddeningMap",
    "differential_reddening",
    "add_unresolved_binaries",
    "CMDBox",
    "uniform_contaminants",
    "resample_field",
]

#: 2.5 / ln 10 = 1.0857 mag: d(mag) = -POGSON_SCALE_MAG * dF/F (Pogson 1856, MNRAS 17, 12).
POGSON_SCALE_MAG = 2.5 / math.log(10.0)

_CHUNK = 1 << 13  # elements per chunk in the per-star loops (64 kB temporaries stay in cache)


# --------------------------------------------------------------------------- #
# input helpers
# --------------------------------------------------------------------------- #
def _count(n, name: str = "n") -> int:
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)):
        raise ValueError(f"{name} must be a positive integer, got {n!r}")
    if n <= 0:
        raise ValueError(f"{name} must be a positive integer, got {n}")
    return int(n)


def _fraction(x, name: str) -> float:
    try:
        v = float(x)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a number in [0, 1], got {x!r}") from None
    if not (0.0 <= v <= 1.0):
        raise ValueError(f"{name} = {v:g} is outside [0, 1]")
    return v


def _scalar(x, name: str, *, lo: float | None = None, strict: bool = False) -> float:
    try:
        v = float(x)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a number, got {x!r}") from None
    if not math.isfinite(v):
        raise ValueError(f"{name} must be finite, got {v}")
    if lo is not None and (v < lo or (strict and v == lo)):
        raise ValueError(f"{name} = {v:g} must be {'>' if strict else '>='} {lo:g}")
    return v


def _mag_dict(mag, name: str, *, allow_inf: bool = False) -> dict[str, np.ndarray]:
    if not isinstance(mag, Mapping) or not mag:
        raise ValueError(f"{name} must be a non-empty dict of band -> magnitude array")
    out, shape = {}, None
    for band, values in mag.items():
        try:
            arr = np.asarray(values, dtype=float)
        except (TypeError, ValueError):
            raise ValueError(f"{name}[{band!r}] is not numeric") from None
        total = np.sum(arr)  # cheap screen; the element-wise test only when something is off
        suspect = np.isnan(total) if allow_inf else not np.isfinite(total)
        bad = (np.isnan(arr) if allow_inf else ~np.isfinite(arr)) if suspect else None
        if bad is not None and bad.any():
            raise ValueError(f"{name}[{band!r}] has {int(bad.sum())} non-finite value(s)")
        if shape is None:
            shape = arr.shape
        elif arr.shape != shape:
            raise ValueError(f"{name}[{band!r}] has shape {arr.shape}, other bands {shape}")
        out[str(band)] = arr
    return out


def _interp_table(mag, values, what: str, *, positive: bool, hi: float | None):
    """Validated, sorted nodes for a monotone PCHIP interpolant."""
    m = np.asarray(mag, dtype=float).ravel()
    v = np.asarray(values, dtype=float).ravel()
    if m.size != v.size:
        raise ValueError(f"{what}: magnitude and value columns differ in length")
    if m.size < 2:
        raise ValueError(f"{what}: need at least 2 (mag, value) rows, got {m.size}")
    if not (np.all(np.isfinite(m)) and np.all(np.isfinite(v))):
        raise ValueError(f"{what}: table has NaN or infinite entries")
    order = np.argsort(m, kind="stable")
    m, v = m[order], v[order]
    if np.any(np.diff(m) <= 0):
        raise ValueError(f"{what}: table magnitudes must be distinct")
    if positive and np.any(v <= 0):
        raise ValueError(f"{what}: values must be > 0 (got minimum {v.min():g})")
    if not positive and np.any(v < 0):
        raise ValueError(f"{what}: values must be >= 0 (got minimum {v.min():g})")
    if hi is not None and np.any(v > hi):
        raise ValueError(f"{what}: values must be <= {hi:g}")
    return tuple(m.tolist()), tuple(v.tolist())


def _read_two_columns(path, mag_col: str, val_col: str):
    from hbmodel.io.catalogues import read_catalog

    t = read_catalog(path, required=(mag_col, val_col))
    return np.asarray(t[mag_col], dtype=float), np.asarray(t[val_col], dtype=float)


# --------------------------------------------------------------------------- #
# photometric error law
# --------------------------------------------------------------------------- #
@dataclass(frozen=True)
class ErrorLaw:
    """Photometric uncertainty as a function of magnitude.

    Analytic form (``table_mag`` is None)::

        sigma(m) = floor_mag + exp((m - m0_mag) / scale_mag)

    The exponential error-magnitude law is a widely used empirical form
    (common practice). With ``scale_mag = 2.5/ln 10`` it is exact for
    background-limited photometry, where SNR is proportional to flux and
    sigma = 1.0857/SNR (Pogson 1856, MNRAS 17, 12). Valid for any finite
    magnitude; far beyond the detection limit sigma grows without bound,
    as it should (such stars are removed by the completeness law).

    ``floor_mag``/``m0_mag``/``scale_mag`` are unused (0, 0, Pogson) in the
    tabulated form: ``ErrorLaw.from_table`` / ``from_arrays`` interpolate
    user (mag, sigma) pairs with the monotonicity-preserving PCHIP
    interpolant of scipy (Fritsch & Carlson 1980, SIAM J. Numer. Anal. 17, 238;
    Fritsch & Butland 1984, SIAM J. Sci. Stat. Comput. 5, 300),
    holding the end values constant outside the tabulated range.
    """

    floor_mag: float
    m0_mag: float
    scale_mag: float = POGSON_SCALE_MAG
    table_mag: tuple | None = None
    table_sigma: tuple | None = None
    _interp: object = field(default=None, init=False, repr=False, compare=False)

    def __post_init__(self):
        floor = _scalar(self.floor_mag, "ErrorLaw floor_mag", lo=0.0)
        m0 = _scalar(self.m0_mag, "ErrorLaw m0_mag")
        scale = _scalar(self.scale_mag, "ErrorLaw scale_mag", lo=0.0, strict=True)
        object.__setattr__(self, "floor_mag", floor)
        object.__setattr__(self, "m0_mag", m0)
        object.__setattr__(self, "scale_mag", scale)
        if (self.table_mag is None) != (self.table_sigma is None):
            raise ValueError("ErrorLaw needs both table_mag and table_sigma, or neither")
        if self.table_mag is not None:
            m, s = _interp_table(self.table_mag, self.table_sigma, "error-law table", positive=True, hi=None)
            from hbmodel.core.numerics import Pchip

            object.__setattr__(self, "table_mag", m)
            object.__setattr__(self, "table_sigma", s)
            object.__setattr__(self, "_interp", Pchip(np.array(m), np.array(s), extrapolate=False))

    @classmethod
    def from_arrays(cls, mag, sigma) -> "ErrorLaw":
        """Tabulated law from (mag, sigma) pairs; sigma must be > 0."""
        return cls(0.0, 0.0, table_mag=tuple(np.ravel(mag).tolist()),
                   table_sigma=tuple(np.ravel(sigma).tolist()))

    @classmethod
    def from_table(cls, path, *, mag_col: str = "mag", sigma_col: str = "sigma") -> "ErrorLaw":
        """Tabulated law read from a catalogue file (any format :func:`hbmodel.io.catalogues.read_catalog` reads)."""
        m, s = _read_two_columns(path, mag_col, sigma_col)
        return cls.from_arrays(m, s)

    @classmethod
    def from_depth(cls, depth_mag: float, *, snr_at_depth: float | None = None,
                   floor_mag: float | None = None) -> "ErrorLaw":
        """Background-limited law whose noise term is 1.0857/``snr_at_depth`` at ``depth_mag``.

        Defaults for ``snr_at_depth`` (5) and ``floor_mag`` (0.01 mag) come from
        ``tables/error_law_default.csv``.
        """
        tab = read_table("error_law_default.csv")
        snr_at_depth = float(tab["snr_at_depth"][0]) if snr_at_depth is None else snr_at_depth
        floor_mag = float(tab["floor_mag"][0]) if floor_mag is None else floor_mag
        depth = _scalar(depth_mag, "depth_mag")
        snr = _scalar(snr_at_depth, "snr_at_depth", lo=0.0, strict=True)
        # exp((depth - m0)/scale) = scale/snr  ->  m0 = depth - scale*ln(scale/snr)
        m0 = depth - POGSON_SCALE_MAG * math.log(POGSON_SCALE_MAG / snr)
        return cls(floor_mag=floor_mag, m0_mag=m0, scale_mag=POGSON_SCALE_MAG)

    def __call__(self, mag) -> np.ndarray:
        m = np.asarray(mag, dtype=float)
        if not np.isfinite(np.sum(m)):  # one pass: any NaN or infinity makes the sum non-finite
            raise ValueError("ErrorLaw: magnitudes must be finite")
        if self._interp is not None:
            lo, hi = self.table_mag[0], self.table_mag[-1]
            return np.asarray(self._interp(np.clip(m, lo, hi)), dtype=float)
        s = np.subtract(m, self.m0_mag, out=np.empty(m.shape))  # in place from here: mocks call this on 10^7 stars
        s *= 1.0 / self.scale_mag
        with np.errstate(over="ignore"):
            np.exp(s, out=s)
        s += self.floor_mag
        return s


def _survey_depths() -> dict:
    """Band -> (depth_mag, snr, survey) of ``tables/survey_depths.csv``."""
    import csv
    import io as _io

    from hbmodel.core.tables import table_text
    rows = [ln for ln in table_text("survey_depths.csv").splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    return {r["band"]: (float(r["depth_mag"]), float(r["snr"]), r["survey"])
            for r in csv.DictReader(_io.StringIO("\n".join(rows)))}


def survey_depth_5sigma(band: str) -> float:
    """Tabulated 5-sigma point-source limit of ``band``'s survey (``tables/survey_depths.csv``; a depth
    quoted at another S/N is converted in the background-limited regime, m5 = m + 2.5 log10(snr/5))."""
    from hbmodel.photometry.magnitudes import resolve_band
    name = resolve_band(band)
    tab = _survey_depths()
    if name not in tab:
        raise ValueError(f"no survey depth is tabulated for band {name} (tabulated: {', '.join(tab)}); "
                         f"give its 5-sigma limit with --depth {name}=MAG")
    depth, snr, _survey = tab[name]
    return depth + 2.5 * math.log10(snr / 5.0)


def default_error_law(band: str, depth_mag: float | None = None) -> ErrorLaw:
    """A realistic default error law for ``band``.

    ``depth_mag`` is the 5-sigma point-source limit (``snr_at_depth`` in
    ``tables/error_law_default.csv``). With the 0.01 mag floor this gives
    sigma = 0.227 mag at the limit and 0.10 mag about 0.96 mag brighter
    (background-limited scaling, see :class:`ErrorLaw`). Without
    ``depth_mag`` a tabulated survey depth is used where one exists
    (2MASS ``J``, ``H``, ``Ks``: Skrutskie et al. 2006, AJ 131, 1163, quoted
    at 10 sigma; the survey bands of ``tables/survey_depths.csv``: SDSS, Pan-STARRS1,
    DES/DECam, LSST, WISE); any other band needs ``depth_mag``.
    """
    tab = read_table("error_law_default.csv")
    floor = float(tab["floor_mag"][0])
    if depth_mag is not None:
        return ErrorLaw.from_depth(depth_mag, snr_at_depth=float(tab["snr_at_depth"][0]), floor_mag=floor)
    key = f"depth_{band}_mag"
    if key not in tab and band in _survey_depths():      # HST-era survey bands: tables/survey_depths.csv
        return ErrorLaw.from_depth(survey_depth_5sigma(band), snr_at_depth=5.0, floor_mag=floor)
    if key not in tab:
        known = sorted(k[len("depth_"):-len("_mag")] for k in tab if k.startswith("depth_"))
        raise ValueError(f"no default depth for band {band!r} (tabulated: {', '.join(known)}); "
                         f"give depth_mag, the 5-sigma limiting magnitude")
    return ErrorLaw.from_depth(float(tab[key][0]), snr_at_depth=float(tab["snr_2mass"][0]), floor_mag=floor)


# --------------------------------------------------------------------------- #
# completeness
# --------------------------------------------------------------------------- #
@dataclass(frozen=True)
class Completeness:
    """Detection probability as a function of (true) magnitude.

    Logistic form: ``p(m) = 1 / (1 + exp((m - m50_mag) / width_mag))`` -- 50 per
    cent at ``m50_mag``; the usual shape fitted to artificial-star tests
    (common practice). ``from_table`` interpolates a user table (e.g. from
    artificial-star tests) with monotone PCHIP, constant beyond the ends,
    values clipped to [0, 1]; ``m50_mag``/``width_mag`` are then unused (0, 1).
    """

    m50_mag: float
    width_mag: float
    table_mag: tuple | None = None
    table_p: tuple | None = None
    _interp: object = field(default=None, init=False, repr=False, compare=False)

    def __post_init__(self):
        object.__setattr__(self, "m50_mag", _scalar(self.m50_mag, "Completeness m50_mag"))
        object.__setattr__(self, "width_mag",
                           _scalar(self.width_mag, "Completeness width_mag", lo=0.0, strict=True))
        if (self.table_mag is None) != (self.table_p is None):
            raise ValueError("Completeness needs both table_mag and table_p, or neither")
        if self.table_mag is not None:
            m, p = _interp_table(self.table_mag, self.table_p, "completeness table", positive=False, hi=1.0)
            from hbmodel.core.numerics import Pchip

            object.__setattr__(self, "table_mag", m)
            object.__setattr__(self, "table_p", p)
            object.__setattr__(self, "_interp", Pchip(np.array(m), np.array(p), extrapolate=False))

    @classmethod
    def from_arrays(cls, mag, p) -> "Completeness":
        return cls(0.0, 1.0, table_mag=tuple(np.ravel(mag).tolist()), table_p=tuple(np.ravel(p).tolist()))

    @classmethod
    def from_table(cls, path, *, mag_col: str = "mag", p_col: str = "completeness") -> "Completeness":
        """Tabulated completeness read from a catalogue file (columns ``mag``, ``completeness``)."""
        m, p = _read_two_columns(path, mag_col, p_col)
        return cls.from_arrays(m, p)

    def __call__(self, mag) -> np.ndarray:
        m = np.asarray(mag, dtype=float)
        if not np.all(np.isfinite(m)):
            raise ValueError("Completeness: magnitudes must be finite")
        if self._interp is not None:
            lo, hi = self.table_mag[0], self.table_mag[-1]
            return np.clip(np.asarray(self._interp(np.clip(m, lo, hi)), dtype=float), 0.0, 1.0)
        from scipy.special import expit

        return expit(-(m - self.m50_mag) / self.width_mag)  # 1/(1+exp(z)), overflow-safe


# --------------------------------------------------------------------------- #
# errors + completeness
# --------------------------------------------------------------------------- #
def observe_magnitudes(true_mag: Mapping[str, np.ndarray], rng, *,
                       error_laws: Mapping[str, ErrorLaw],
                       completeness: Completeness | None = None,
                       completeness_band: str | None = None,
                       dtype=np.float64):
    """Turn true magnitudes into observed ones.

    For each band, sigma = ``error_laws[band](true)`` and
    ``observed = true + sigma * N(0, 1)`` (independent Gaussian errors,
    sigma evaluated at the *true* magnitude). If ``completeness`` is given, a
    star is detected when a uniform draw falls below p(true magnitude in
    ``completeness_band``) -- the way artificial-star tests define
    completeness, as a function of input magnitude (common practice).

    Bands are processed in the order of ``true_mag``; the same generator state
    gives the same output.  ``dtype`` is the type of ``observed`` and ``errors``
    (computed in float64 and rounded once, e.g. float32 for a compact catalogue).

    Returns
    -------
    observed : dict band -> ndarray
    errors : dict band -> ndarray (the sigma used)
    detected : bool ndarray (all True without ``completeness``)
    """
    rng = as_generator(rng)
    mags = _mag_dict(true_mag, "true_mag")
    if not isinstance(error_laws, Mapping):
        raise ValueError("error_laws must be a dict of band -> ErrorLaw")
    unknown = [b for b in error_laws if b not in mags]
    if unknown:
        raise ValueError(f"error_laws has band(s) not in true_mag: {', '.join(map(str, unknown))}")
    missing = [b for b in mags if b not in error_laws]
    if missing:
        raise ValueError(f"no error law for band(s): {', '.join(missing)}")
    for b, law in error_laws.items():
        if not callable(law):
            raise ValueError(f"error_laws[{b!r}] is not callable")

    observed, errors = {}, {}
    for band, m in mags.items():
        flat = m.ravel()
        sigma, obs = np.empty(flat.shape, dtype), np.empty(flat.shape, dtype)
        buf = np.empty(min(flat.size, _CHUNK))
        # cache-sized chunks; the normal deviates come out in the same order as one big draw
        for c0 in range(0, max(flat.size, 1), _CHUNK):
            sl = slice(c0, c0 + _CHUNK)
            s = np.asarray(error_laws[band](flat[sl]), dtype=float)
            if s.shape != flat[sl].shape or (s.size and not s.min() > 0):  # NaN fails the test too
                raise ValueError(f"error law for band {band!r} gave non-positive or NaN sigma")
            sigma[sl] = s
            o = buf[:s.size]
            rng.standard_normal(out=o)
            o *= s
            o += flat[sl]
            obs[sl] = o
        observed[band] = obs.reshape(m.shape)
        errors[band] = sigma.reshape(m.shape)

    shape = next(iter(mags.values())).shape
    if completeness is None:
        if completeness_band is not None:
            raise ValueError("completeness_band given without a completeness law")
        return observed, errors, np.ones(shape, dtype=bool)
    if completeness_band is None:
        if len(mags) != 1:
            raise ValueError("completeness_band is required when there is more than one band")
        completeness_band = next(iter(mags))
    if completeness_band not in mags:
        raise ValueError(f"completeness_band {completeness_band!r} is not in true_mag "
                         f"(bands: {', '.join(mags)})")
    if not callable(completeness):
        raise ValueError("completeness must be a Completeness (or a callable mag -> probability)")
    p = np.asarray(completeness(mags[completeness_band]), dtype=float)
    if p.shape != shape or np.isnan(p).any() or np.any((p < 0) | (p > 1)):
        raise ValueError("completeness law gave probabilities outside [0, 1]")
    detected = rng.random(shape) < p
    return observed, errors, detected


# --------------------------------------------------------------------------- #
# differential reddening
# --------------------------------------------------------------------------- #
@dataclass(frozen=True)
class ReddeningMap:
    """A differential-reddening map: offsets dE(B-V) on a regular grid.

    ``values[row, col]`` with rows along y and columns along x (as
    ``matplotlib.pyplot.imshow(values, origin="lower", extent=extent)``
    displays it); ``extent = (x_min, x_max, y_min, y_max)`` are the outer
    pixel edges. Values are *offsets* added to the mean E(B-V), the way
    differential-reddening maps are usually given (common practice).
    Looked up by bilinear interpolation between pixel centres (nearest
    value in the outer half-pixel); positions outside the extent are an error.
    """

    values: np.ndarray
    extent: tuple

    def __post_init__(self):
        v = np.array(self.values, dtype=float)
        if v.ndim != 2 or min(v.shape) < 1:
            raise ValueError(f"reddening map must be a 2-D array, got shape {v.shape}")
        if not np.all(np.isfinite(v)):
            raise ValueError("reddening map has NaN or infinite pixels")
        try:
            ext = tuple(float(e) for e in self.extent)
        except (TypeError, ValueError):
            raise ValueError("reddening map extent must be (x_min, x_max, y_min, y_max)") from None
        if len(ext) != 4 or not all(map(math.isfinite, ext)) or ext[1] <= ext[0] or ext[3] <= ext[2]:
            raise ValueError("reddening map extent must be (x_min, x_max, y_min, y_max) "
                             "with x_max > x_min and y_max > y_min")
        v.setflags(write=False)
        object.__setattr__(self, "values", v)
        object.__setattr__(self, "extent", ext)

    def __call__(self, x, y) -> np.ndarray:
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        x0, x1, y0, y1 = self.extent
        outside = ~((x >= x0) & (x <= x1) & (y >= y0) & (y <= y1))
        if outside.any():
            raise ValueError(f"{int(outside.sum())} position(s) lie outside the reddening map extent "
                             f"{self.extent}")
        ny, nx = self.values.shape
        # fractional pixel index measured from the first pixel centre
        fx = np.clip((x - x0) / (x1 - x0) * nx - 0.5, 0.0, nx - 1.0)
        fy = np.clip((y - y0) / (y1 - y0) * ny - 0.5, 0.0, ny - 1.0)
        ix = np.minimum(np.floor(fx).astype(int), max(nx - 2, 0))
        iy = np.minimum(np.floor(fy).astype(int), max(ny - 2, 0))
        tx = fx - ix if nx > 1 else np.zeros_like(fx)
        ty = fy - iy if ny > 1 else np.zeros_like(fy)
        jx = np.minimum(ix + 1, nx - 1)
        jy = np.minimum(iy + 1, ny - 1)
        v = self.values
        return ((1 - tx) * (1 - ty) * v[iy, ix] + tx * (1 - ty) * v[iy, jx]
                + (1 - tx) * ty * v[jy, ix] + tx * ty * v[jy, jx])


def differential_reddening(n: int, ebv: float, rng, *, sd: float = 0.0, ebv_map=None,
                           positions=None) -> np.ndarray:
    """Per-star E(B-V): mean ``ebv`` plus map offsets plus Gaussian scatter, never negative.

    Each star gets ``E = ebv + map(x, y) + N(0, sd)`` drawn from the normal
    distribution *truncated* at E = 0 (redrawn, not clipped, so no pile-up at
    zero; vectorised inverse-CDF sampling). With
    ``sd = 0`` and no map all stars get ``ebv``.

    ``ebv_map`` is a :class:`ReddeningMap` or a ``(values_2d, extent)`` pair;
    ``positions`` is an ``(n, 2)`` array of (x, y) in the map's units.
    """
    n = _count(n)
    rng = as_generator(rng)
    ebv = _scalar(ebv, "ebv (mean E(B-V))", lo=0.0)
    sd = _scalar(sd, "sd (E(B-V) scatter)", lo=0.0)
    loc = np.full(n, ebv)
    if ebv_map is not None:
        if not isinstance(ebv_map, ReddeningMap):
            try:
                values, extent = ebv_map
            except (TypeError, ValueError):
                raise ValueError("ebv_map must be a ReddeningMap or a (values_2d, extent) pair") from None
            ebv_map = ReddeningMap(values, extent)
        if positions is None:
            raise ValueError("ebv_map needs positions, an (n, 2) array of (x, y)")
        pos = np.asarray(positions, dtype=float)
        if pos.shape != (n, 2):
            raise ValueError(f"positions must have shape ({n}, 2), got {pos.shape}")
        if not np.all(np.isfinite(pos)):
            raise ValueError("positions must be finite")
        loc = loc + ebv_map(pos[:, 0], pos[:, 1])
    elif positions is not None:
        raise ValueError("positions given without an ebv_map")
    if sd == 0.0:
        if np.any(loc < 0):
            raise ValueError("mean E(B-V) plus map offset is negative for "
                             f"{int((loc < 0).sum())} star(s)")
        return loc
    from scipy.special import ndtr, ndtri

    # Inverse-CDF draw from N(loc, sd) truncated to [0, inf) (inversion method; Devroye 1986,
    # Non-Uniform Random Variate Generation, Springer; from memory). Working in the upper tail,
    # z = -Phi^-1(u * Phi(-a)) with a = -loc/sd, keeps full precision even far into the tail.
    a = -loc / sd
    tail = ndtr(-a)  # probability mass above the truncation point
    if np.any(tail <= 0):
        raise ValueError("E(B-V) scatter too small for a mean this far below zero (truncated mass is 0)")
    u = 1.0 - rng.random(n)  # (0, 1]
    z = -ndtri(u * tail)
    return np.maximum(loc + sd * z, 0.0)  # guard rounding at the boundary


# --------------------------------------------------------------------------- #
# unresolved binaries
# --------------------------------------------------------------------------- #
def add_unresolved_binaries(mag: Mapping[str, np.ndarray], companion_mag: Mapping[str, np.ndarray],
                            fraction: float, rng, *, return_mask: bool = False):
    """Add the light of a companion to a random ``fraction`` of stars.

    For the chosen stars (the same stars in every band),
    ``m = -2.5 log10(10**(-0.4 m1) + 10**(-0.4 m2))`` (flux addition, Pogson
    1856, MNRAS 17, 12). A companion magnitude of ``+inf`` means a dark
    companion (no light). Returns a new dict (and the binary mask if
    ``return_mask``).
    """
    rng = as_generator(rng)
    fraction = _fraction(fraction, "binary fraction")
    m1 = _mag_dict(mag, "mag")
    m2 = _mag_dict(companion_mag, "companion_mag", allow_inf=True)
    if set(m1) != set(m2):
        extra = sorted(set(m2) - set(m1))
        lack = sorted(set(m1) - set(m2))
        parts = ([f"unknown band(s) in companion_mag: {', '.join(extra)}"] if extra else []) + \
                ([f"companion_mag lacks band(s): {', '.join(lack)}"] if lack else [])
        raise ValueError("; ".join(parts))
    shape = next(iter(m1.values())).shape
    if next(iter(m2.values())).shape != shape:
        raise ValueError(f"companion_mag arrays have shape {next(iter(m2.values())).shape}, mag {shape}")
    if any(np.any(v == -np.inf) for v in m2.values()):
        raise ValueError("companion_mag has -inf values")
    is_binary = rng.random(shape) < fraction
    out = {}
    for band, a in m1.items():
        b = m2[band]
        # -2.5 log10(10^(-0.4 a) + 10^(-0.4 b)) via logaddexp: no overflow, b = +inf adds nothing
        combined = -POGSON_SCALE_MAG * np.logaddexp(-a / POGSON_SCALE_MAG, -b / POGSON_SCALE_MAG)
        out[band] = np.where(is_binary, combined, a)
    return (out, is_binary) if return_mask else out


# --------------------------------------------------------------------------- #
# field contamination
# --------------------------------------------------------------------------- #
@dataclass(frozen=True)
class CMDBox:
    """A box in a colour-magnitude diagram filled uniformly by contaminants.

    Stars are uniform in (``mag_band`` magnitude, colour ``b1 - b2``) within
    ``mag_range`` x ``colour_range``. ``mag_band`` must be one of the two
    colour bands; the other colour band follows from the colour. Any further
    band ``x`` listed in ``offsets`` is given ``m_x = m_{mag_band} + offsets[x]``
    -- a fixed offset, i.e. those bands carry no independent colour
    information (a deliberate simplification for a flat background).
    """

    mag_band: str
    colour: tuple
    mag_range: tuple
    colour_range: tuple
    offsets: Mapping[str, float] = field(default_factory=dict)

    def __post_init__(self):
        try:
            b1, b2 = (str(b) for b in self.colour)
        except (TypeError, ValueError):
            raise ValueError("CMDBox colour must be a pair of band names (b1, b2) for b1 - b2") from None
        if b1 == b2:
            raise ValueError("CMDBox colour bands must differ")
        if self.mag_band not in (b1, b2):
            raise ValueError(f"CMDBox mag_band {self.mag_band!r} must be one of the colour bands {b1}, {b2}")
        object.__setattr__(self, "colour", (b1, b2))
        for name in ("mag_range", "colour_range"):
            object.__setattr__(self, name, check_interval(getattr(self, name), f"CMDBox {name}"))
        offs = {}
        for band, off in dict(self.offsets).items():
            if band in (b1, b2):
                raise ValueError(f"CMDBox offsets must not include the colour band {band!r}")
            offs[str(band)] = _scalar(off, f"CMDBox offset for {band!r}")
        object.__setattr__(self, "offsets", offs)

    @property
    def bands(self) -> tuple:
        return self.colour + tuple(self.offsets)


def uniform_contaminants(n: int, rng, box) -> dict[str, np.ndarray]:
    """``n`` contaminant stars uniform in a CMD box.

    ``box`` is a :class:`CMDBox` (uniform in magnitude and colour; see its
    notes for further bands) or a dict ``band -> (lo, hi)``, which draws each
    band independently and uniformly (a box in magnitude space).
    """
    n = _count(n)
    rng = as_generator(rng)
    if isinstance(box, CMDBox):
        mag = rng.uniform(box.mag_range[0], box.mag_range[1], n)
        col = rng.uniform(box.colour_range[0], box.colour_range[1], n)
        b1, b2 = box.colour
        out = {b1: mag, b2: mag - col} if box.mag_band == b1 else {b1: mag + col, b2: mag}
        for band, off in box.offsets.items():
            out[band] = mag + off
        return out
    if isinstance(box, Mapping) and box:
        out = {}
        for band, lim in box.items():
            lo, hi = check_interval(lim, f"box[{band!r}]")
            out[str(band)] = rng.uniform(lo, hi, n)
        return out
    raise ValueError("box must be a CMDBox or a non-empty dict band -> (lo, hi)")


def resample_field(field_table, n: int, rng, bands: Sequence[str] | None = None) -> dict[str, np.ndarray]:
    """Draw ``n`` stars with replacement from a user field catalogue.

    ``field_table`` is an astropy Table (e.g. from :func:`hbmodel.io.catalogues.read_catalog`)
    or a dict of columns; ``bands`` selects the columns (default: all numeric
    columns). Rows with non-finite values in the selected bands are an error
    (select them away first, e.g. with :func:`hbmodel.io.catalogues.finite_rows`).
    """
    n = _count(n)
    rng = as_generator(rng)
    names = list(field_table.colnames) if hasattr(field_table, "colnames") else (
        list(field_table) if isinstance(field_table, Mapping) else None)
    if names is None:
        raise ValueError("field_table must be an astropy Table or a dict of columns")
    if bands is None:
        bands = [c for c in names if np.asarray(field_table[c]).dtype.kind in "iuf"
                 and np.asarray(field_table[c]).ndim == 1]
        if not bands:
            raise ValueError("field catalogue has no numeric columns")
    else:
        bands = [bands] if isinstance(bands, str) else list(bands)
        missing = [b for b in bands if b not in names]
        if missing:
            raise ValueError(f"field catalogue lacks band column(s): {', '.join(missing)}")
    cols = {}
    for b in bands:
        col = field_table[b]
        arr = np.array(np.ma.getdata(col), dtype=float) if np.asarray(col).dtype.kind in "iufb" else None
        if arr is None:
            raise ValueError(f"field catalogue column {b!r} is not numeric")
        if np.ma.isMaskedArray(col):
            arr[np.ma.getmaskarray(col)] = np.nan
        cols[b] = arr
    size = len(next(iter(cols.values())))
    if size == 0:
        raise ValueError("field catalogue is empty")
    bad = ~np.all([np.isfinite(v) for v in cols.values()], axis=0)
    if bad.any():
        raise ValueError(f"field catalogue has {int(bad.sum())} row(s) with non-finite values in "
                         f"{', '.join(bands)}; select finite rows first (hbmodel.io.catalogues.finite_rows)")
    idx = rng.integers(0, size, n)
    return {b: v[idx] for b, v in cols.items()}
