"""Photometry: band registry, bolometric corrections, colours and absolute magnitudes.

Everything is a vectorised function of ``(teff_k, logg, feh)``, valid for
3,000 K <= Teff <= 50,000 K, -0.5 <= log g <= 6.5 and [Fe/H] within
``hbmodel.physics.composition.FEH_RANGE``; outside, a ``ValueError`` is raised.
All magnitudes are on the Vega system; coefficients live in ``tables/``.

Construction (each step names its published source; see the table headers):

1. **Bolometric correction in V** -- Flower 1996, ApJ 469, 355, with the corrected
   coefficients of Torres 2010, AJ 140, 1158 (three polynomials in log Teff; the
   segment joins at log Teff = 3.70 and 3.90 are blended over +-0.01 dex so that
   BC_V has no step).  Flower's relation has no gravity or metallicity term.  Below
   5,000 K the relation is that of giants; for cool dwarfs the bolometric
   correction in Ks (nearly gravity independent -- common practice) is carried
   over from the giant track, i.e. BC_V = BC_V(Flower) - s(Teff)[(V-Ks) - (V-Ks)_giant],
   with s = 1 below 4,000 K falling smoothly to 0 at 5,000 K.
2. **Solar-metallicity colours** ``V - X`` for X in U B R I J H Ks on two gravity
   tracks (dwarf node log g = 4.5, giant node log g = 2.5; linear in log g between,
   held constant outside):

   * dwarfs 4,500-7,500 K: Casagrande et al. 2010, A&A 512, A54 (B-V, V-I_C, V-Ks);
   * giants 3,750-7,500 K: Alonso, Arribas & Martinez-Roger 1999, A&AS 140, 261
     (B-V, V-K);
   * all other entries, including the hot stars 8,000-50,000 K (HB/sdB range):
     tabulated from memory of Bessell, Castelli & Plez 1998, A&A 333, 231,
     Worthey & Lee 2011, ApJS 193, 1 and Pecaut & Mamajek 2013, ApJS 208, 9
     (marked "from memory" in the tables).

   Nodes are joined by monotone cubic (PCHIP) interpolation in log Teff, so every
   ``V - X`` colour and B-V is monotonic in Teff at fixed log g: no step in a CMD.
3. **Metallicity** -- the same published relations used differentially,
   Delta X(Teff, [Fe/H]) = X(Teff, [Fe/H]) - X(Teff, 0), with smooth Teff windows
   inside their calibrated ranges (``tables/colour_feh_relations.csv``); U-B gets the
   ultraviolet-excess relation of Carney 1979, ApJ 233, 211; hotter than 6,000 K the
   metal-poor U-V is the solar U-V scaled by its ratio at 6,000 K (so the excess
   vanishes at A0 and U-V stays monotonic); V-R follows V-I
   (x 0.52); V-J and V-H follow V-Ks (near-IR colours taken metallicity-free).
4. **Gaia G, BP, RP** -- BP-RP from V-I_C (Evans et al. 2018, A&A 616, A4, valid
   -0.4 < V-I < 4), G-V from BP-RP (Riello et al. 2021, A&A 649, A3, valid
   -0.5 < BP-RP < 2.75, extrapolated beyond, i.e. for the coolest M stars), and the
   split of BP-RP into BP and RP from the expected flux-excess factor
   C* = (I_BP + I_RP)/I_G and the EDR3 Vega zero points (Riello et al. 2021).
5. **HST and survey bands** (``colour_source = relation`` in ``tables/bands.csv``): the magnitude
   comes from the band's published colour relation in ``tables/band_relations.csv``,
   ``m = m_base + c0 + c1 x + c2 x^2 (+ a tabulated sequence term)``, x a colour of bands computed
   before (or of the band's own system, solved by fixed-point iteration): SDSS from UBVRcIc (Jester et
   al. 2005, AJ 130, 873, Table 1), DECam from SDSS (DES DR2, Abbott et al. 2021), PS1 from SDSS (Tonry
   et al. 2012, ApJ 750, 99, Table 6; memory), WISE from the Pecaut & Mamajek 2013 dwarf sequence, HST
   ACS/WFC F435W/F606W/F814W from B, V, I by inverting the synthetic WFC->UBVRI transformations of Sirianni
   et al. 2005, PASP 117, 1049 (colour pieces, VEGAMAG), LSST griz from DECam griz (Rubin technical note
   RTN-099, Table 1).
   Each relation is applied only inside its published colour range (and Teff limit): outside, or for a
   band with no tabulated relation (WFC3, LSST u/y, PS1 y, DECam Y for now), a ``ValueError`` -- never an
   extrapolation.
   These bands are not in the default set ``BAND_NAMES``; ``ALL_BAND_NAMES`` lists every band.
6. **Solar reference** on the IAU 2015 bolometric scale (Resolution B2,
   Prsa et al. 2016, AJ 152, 41): ``M_BOL_SUN = 4.74``.

Limitations: U-B (Balmer jump) and G-V are *not* monotonic in Teff -- by physics,
so only colours whose bands straddle the V/G peak are; hot-star colours have no
gravity or metallicity term (except through U); Flower's BC_V has no [Fe/H] term.

Size (800+ lines): the band registry, the band relations and the colour engine read the same tables and resolve
bands through one lookup; each marked section is short.
"""
from __future__ import annotations

import csv
import difflib
import io
import math
import re
from dataclasses import dataclass

import numpy as np

from hbmodel.core.tables import _text, read_table, table_cache
from hbmodel.core.validation import as_float_array, check_range
from hbmodel.physics.composition import FEH_RANGE

__all__ = [
    "M_BOL_SUN", "BAND_NAMES", "ALL_BAND_NAMES", "Band", "BandRelation", "band_relations", "get_band", "resolve_band", "parse_bands", "parse_colour", "TEFF_RANGE_K", "LOGG_RANGE",
    "bolometric_correction", "absolute_magnitudes", "colour", "colours_v", "FixedMetallicityPhotometry",
]

#: Absolute bolometric magnitude of the Sun, IAU 2015 Resolution B2 (Prsa et al. 2016, AJ 152, 41).
M_BOL_SUN = 4.74

#: Validity range of the photometric calibration.
TEFF_RANGE_K = (3000.0, 50000.0)
LOGG_RANGE = (-0.5, 6.5)

_DWARF_LOGG = 4.5
_GIANT_LOGG = 2.5
_NFINE = 6001  # samples of the fine log-Teff grid (spacing ~2e-4 dex)


@dataclass(frozen=True)
class Band:
    """One photometric band of the registry (``tables/bands.csv``)."""

    name: str
    system: str
    zero_point: str
    lambda_eff_um: float
    lambda_lo_um: float
    lambda_hi_um: float
    shape: str
    colour_source: str
    aliases: tuple[str, ...] = ()
    passband: str = "approx"


@table_cache
def _registry() -> dict[str, Band]:
    text = _text("bands.csv")
    rows = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    out = {}
    for r in csv.DictReader(io.StringIO("\n".join(rows))):
        aliases = tuple(a.strip() for a in (r.get("aliases") or "").split(";") if a.strip())
        out[r["name"]] = Band(r["name"], r["system"], r["zero_point"], float(r["lambda_eff_um"]),
                              float(r["lambda_lo_um"]), float(r["lambda_hi_um"]), r["shape"],
                              r["colour_source"], aliases, (r.get("passband") or "approx").strip())
    return out


@table_cache
def _band_lookup() -> dict[str, str]:
    """Case-folded band name or alias -> canonical band name (a clash in ``bands.csv`` is an error)."""
    out: dict[str, str] = {}
    for band in _registry().values():
        for key in (band.name, *band.aliases):
            folded = key.casefold()
            if out.get(folded, band.name) != band.name:
                raise ValueError(f"bands.csv: {key!r} names both {out[folded]} and {band.name}")
            out[folded] = band.name
    return out


def _nearest_band(name: str) -> str:
    """The known band nearest to an unknown ``name``: by spelling, else (HST-style F606W names) by wavelength."""
    lookup = _band_lookup()
    m = re.search(r"F(\d{3,4})[WMNLPX]", name.upper())
    if m:  # HST convention: F606W = 606 nm; three-digit numbers below 200 are IR, F160W = 1.60 micron
        num = int(m.group(1))
        lam_um = num / 100.0 if num < 200 else num / 1000.0
        hst = [b for b in _registry().values() if b.system.startswith("HST")]
        same = [b for b in hst if name.upper().startswith(b.name.split("_")[0] + "_")]
        pool = same or hst or list(_registry().values())
        return min(pool, key=lambda b: abs(math.log(b.lambda_eff_um / lam_um))).name
    close = difflib.get_close_matches(name.casefold(), list(lookup), n=1, cutoff=0.6)
    if close:
        return lookup[close[0]]
    return lookup[difflib.get_close_matches(name.casefold(), list(lookup), n=1, cutoff=0.0)[0]]


def resolve_band(name, what: str | None = None) -> str:
    """Canonical name of band ``name`` (its name or an alias of ``tables/bands.csv``, any letter case).

    ``resolve_band("k") == "Ks"``.  An unknown name raises a one-line ``ValueError`` naming ``what``
    (e.g. the option) and the nearest known band."""
    prefix = f"{what}: " if what else ""
    if not isinstance(name, str) or not name.strip():
        raise ValueError(f"{prefix}a band name is empty or not a string ({name!r})")
    key = name.strip()
    hit = _band_lookup().get(key.casefold())
    if hit is None:
        raise ValueError(f"{prefix}unknown band {key!r} (nearest known band: {_nearest_band(key)}; "
                         f"known: {', '.join(_registry())})")
    return hit


def parse_bands(text, what: str | None = "--bands", n: int | None = None) -> tuple[str, ...]:
    """'V,i' (or a sequence) -> canonical band names ('V', 'I'); ``n`` = exact count wanted.

    Empty items, unknown bands and repeated bands are one-line ``ValueError``s naming ``what``."""
    label = what or "the bands"
    items = [str(x) for x in text] if isinstance(text, (list, tuple)) else str(text).replace(";", ",").split(",")
    names = [x.strip() for x in items]
    if not names or any(not x for x in names):
        raise ValueError(f"{label} must be comma-separated band names (got {text!r})")
    bands = tuple(resolve_band(x, what) for x in names)
    dup = sorted({b for b in bands if bands.count(b) > 1})
    if dup:
        raise ValueError(f"{label}: band {dup[0]} is given twice (got {text!r})")
    if n is not None and len(bands) != n:
        raise ValueError(f"{label} must be {n} band{'s' if n > 1 else ''} (got {text!r})")
    return bands


def parse_colour(text, what: str = "--colour") -> tuple[str, str]:
    """'J-Ks' (or 'j-k') -> ('J', 'Ks'): a colour index A-B of two different known bands."""
    parts = str(text).split("-")
    if len(parts) != 2 or not all(p.strip() for p in parts):
        raise ValueError(f"{what} must be two bands joined by '-', e.g. J-Ks (got {text!r})")
    a, b = (resolve_band(p, what) for p in parts)
    if a == b:
        raise ValueError(f"{what} must join two different bands (got {text!r})")
    return a, b


#: The eleven core bands (Johnson-Cousins, 2MASS, Gaia), in registry order: the default band set.
BAND_NAMES: tuple[str, ...] = tuple(n for n, b in _registry().items() if b.colour_source != "relation")

#: Every band of the registry: the core bands plus the HST and survey bands whose magnitudes come from
#: the published relations of ``tables/band_relations.csv`` (see :func:`relation_bands`).
ALL_BAND_NAMES: tuple[str, ...] = tuple(_registry())


def get_band(name: str) -> Band:
    """Return the :class:`Band` called ``name`` (or an alias, any case: see :func:`resolve_band`);
    unknown names raise ``ValueError``."""
    return _registry()[resolve_band(name)]


# --------------------------------------------------------------------------- relation bands
@dataclass(frozen=True)
class BandRelation:
    """A published colour relation of ``tables/band_relations.csv``:
    ``m_band = m_base + c0 + c1 x + c2 x^2`` with ``x = m_xa - m_xb``, valid where
    ``v_lo <= m_va - m_vb <= v_hi`` and ``Teff <= teff_max_k``.

    A relation published in colour pieces (e.g. Sirianni et al. 2005 for ACS/WFC, with separate
    coefficients blueward and redward of a colour) has one table row per piece; the band's relation is then
    the first piece with ``v_lo``/``v_hi`` spanning all of them and ``pieces`` holding each row, applied
    on ``v_lo <= m_va - m_vb < v_hi`` (the last piece closed)."""

    band: str
    base: str
    xa: str
    xb: str
    coef: tuple[float, float, float]
    va: str
    vb: str
    v_lo: float
    v_hi: float
    teff_max_k: float
    source: str
    location: str
    obtained: str
    sequence: tuple | None = None   # (x nodes, y nodes): piecewise-linear term in x (band_colour_sequences.csv)
    pieces: tuple = ()              # the rows of a relation published in colour pieces (else empty)

    def validity(self) -> str:
        hot = f", Teff <= {self.teff_max_k:,.0f} K" if self.teff_max_k < TEFF_RANGE_K[1] else ""
        return f"{self.va}-{self.vb} in [{self.v_lo:g}, {self.v_hi:g}] mag{hot}"

    def deps(self) -> tuple[str, ...]:
        """Every band the relation reads (all pieces)."""
        rows = self.pieces or (self,)
        return tuple(dict.fromkeys(b for r in rows for b in (r.base, r.xa, r.xb, r.va, r.vb)))

    def evaluate(self, m: dict):
        """``m_band`` from the magnitudes ``m`` (band -> array), each star by the piece its colour falls in."""
        if not self.pieces:
            x = m[self.xa] - m[self.xb]
            new = m[self.base] + self.coef[0] + x * (self.coef[1] + self.coef[2] * x)
            if self.sequence is not None:
                new = new + np.interp(x, *self.sequence)
            return new
        v = m[self.va] - m[self.vb]
        out = self.pieces[-1].evaluate(m)
        for p in self.pieces[-2::-1]:
            out = np.where(v < p.v_hi, p.evaluate(m), out)
        return out


@table_cache
def _sequences() -> dict[str, tuple]:
    text = _text("band_colour_sequences.csv")
    rows = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    seqs: dict[str, list] = {}
    for r in csv.DictReader(io.StringIO("\n".join(rows))):
        seqs.setdefault(r["sequence"].strip(), []).append((float(r["x"]), float(r["y"])))
    out = {}
    for name, pts in seqs.items():
        x, y = (np.array(v, dtype=float) for v in zip(*pts))
        if np.any(np.diff(x) <= 0):
            raise ValueError(f"band_colour_sequences.csv: sequence {name} is not increasing in x")
        x.setflags(write=False)
        y.setflags(write=False)
        out[name] = (x, y)
    return out


def _relation_row(r: dict, band: str, reg: dict) -> BandRelation:
    """One row of ``band_relations.csv`` as a :class:`BandRelation` in the form ``m_band = m_base + ...``.

    ``form = inverse`` rows hold a published transformation *to* the base band verbatim,
    ``m_base = m_band - zp + c0 + c1 x + c2 x^2`` (x a colour of the base system, zp the zero point that turns the
    band's VEGAMAG into the instrumental magnitude the coefficients refer to); they are inverted exactly here
    (x does not involve the band itself): ``m_band = m_base + (zp - c0) - c1 x - c2 x^2``."""
    names = [r[k].strip() for k in ("base", "xa", "xb", "va", "vb")]
    for n in names:
        if n not in reg:
            raise ValueError(f"band_relations.csv: relation of {band} uses unknown band {n!r}")
    seq_name = (r.get("sequence") or "").strip()
    seq = None
    if seq_name:
        if seq_name not in _sequences():
            raise ValueError(f"band_relations.csv: relation of {band} names unknown sequence {seq_name!r}")
        seq = _sequences()[seq_name]
    coef = tuple(float(r[f"c{k}"]) for k in range(3))
    form = (r.get("form") or "").strip() or "direct"
    if form == "inverse":
        if band in (names[1], names[2]) or seq is not None:
            raise ValueError(f"band_relations.csv: inverse relation of {band} must use a colour of the base system")
        coef = (float(r["zp"]) - coef[0], -coef[1], -coef[2])
    elif form != "direct":
        raise ValueError(f"band_relations.csv: relation of {band} has unknown form {form!r} (direct or inverse)")
    return BandRelation(band, names[0], names[1], names[2], coef, names[3], names[4],
                        float(r["v_lo"]), float(r["v_hi"]), float(r["teff_max_k"]),
                        r["source"].strip(), r["location"].strip(), r["obtained"].strip(), seq)


@table_cache
def _relations() -> dict[str, BandRelation]:
    text = _text("band_relations.csv")
    rows = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    reg = _registry()
    by_band: dict[str, list] = {}
    for r in csv.DictReader(io.StringIO("\n".join(rows))):
        band = r["band"].strip()
        if band not in reg or reg[band].colour_source != "relation":
            raise ValueError(f"band_relations.csv: {band!r} is not a relation band of bands.csv")
        by_band.setdefault(band, []).append(_relation_row(r, band, reg))
    out = {}
    for band, rels in by_band.items():
        if len(rels) == 1:
            out[band] = rels[0]
            continue
        rels.sort(key=lambda q: q.v_lo)
        first = rels[0]
        for a, b in zip(rels, rels[1:]):   # colour pieces: same selecting colour and Teff limit, contiguous
            if (b.va, b.vb, b.teff_max_k) != (first.va, first.vb, first.teff_max_k) or b.v_lo != a.v_hi:
                raise ValueError(f"band_relations.csv: the rows of {band} must be contiguous pieces in one colour "
                                 f"({first.va}-{first.vb}) with one Teff limit")
        out[band] = BandRelation(band, first.base, first.xa, first.xb, first.coef, first.va, first.vb,
                                 first.v_lo, rels[-1].v_hi, first.teff_max_k, first.source, first.location,
                                 first.obtained, first.sequence, tuple(rels))
    return out


def band_relations() -> dict[str, BandRelation]:
    """The published colour relations of the relation bands, band name -> :class:`BandRelation`."""
    return dict(_relations())


def _is_relation(name: str) -> bool:
    return _registry()[name].colour_source == "relation"


def _relation_closure(names) -> tuple[set, list]:
    """Core bands needed and relation bands to evaluate (dependencies first) for relation bands ``names``.

    A relation band without a tabulated relation is a one-line ``ValueError``."""
    rels = _relations()
    core, order, seen = set(), [], set()

    def visit(b):
        if b in seen:
            return
        seen.add(b)
        if not _is_relation(b):
            core.add(b)
            return
        r = rels.get(b)
        if r is None:
            band = _registry()[b]
            raise ValueError(f"band {b} ({band.system}): no published colour relation is tabulated for it yet "
                             f"(tables/band_relations.csv), so its magnitudes are not available; its passband "
                             f"and extinction are")
        for dep in r.deps():
            visit(dep)
        order.append(b)

    for b in names:
        visit(b)
    return core, order


def _apply_relations(m: dict, order: list, teff, check: bool) -> None:
    """Evaluate the relations ``order`` into ``m`` (band -> magnitude relative to V), in place.

    Self-referring colours (e.g. Pan-STARRS1 from SDSS in terms of (g-r)_P1) are solved by fixed-point
    iteration.  Stars outside a relation's validity raise a ``ValueError`` (``check``) or get NaN."""
    rels = _relations()
    for b in order:
        base = rels[b].base
        m[b] = np.array(m[base], dtype=float, copy=True) if base in m else np.zeros_like(teff)
    for _ in range(50):
        delta = 0.0
        for b in order:
            new = rels[b].evaluate(m)
            if new.size:
                delta = max(delta, float(np.nanmax(np.abs(new - m[b]), initial=0.0)))
            m[b] = new
        if delta < 1e-10:
            break
    for b in order:
        r = rels[b]
        v = m[r.va] - m[r.vb]
        bad = ~((v >= r.v_lo) & (v <= r.v_hi) & (teff <= r.teff_max_k))
        if not bad.any():
            continue
        if check:
            k = int(np.flatnonzero(bad)[0])
            hot = " (hot HB stars have no published relation in this band)" if teff[k] > r.teff_max_k else ""
            raise ValueError(f"band {b}: {int(bad.sum())} star(s) outside the published relation "
                             f"({r.source}, {r.location}: valid for {r.validity()}), e.g. Teff = {teff[k]:,.0f} K "
                             f"with {r.va}-{r.vb} = {v[k]:.2f}{hot}; not extrapolated")
        m[b] = np.where(bad, np.nan, m[b])


# --------------------------------------------------------------------------- tables
def _smoothstep(x):
    x = np.clip(x, 0.0, 1.0)
    return x * x * (3.0 - 2.0 * x)


def _window(teff, t0, t1, t2, t3):
    """Smooth weight: 0 below t0, 1 on [t1, t2], 0 above t3."""
    return _smoothstep((teff - t0) / (t1 - t0)) * (1.0 - _smoothstep((teff - t2) / (t3 - t2)))


def _flower_bc_v(logt):
    """BC_V of Flower 1996 (ApJ 469, 355) with Torres 2010 (AJ 140, 1158) coefficients."""
    t = read_table("bc_v_flower1996_torres2010.csv")
    coef = np.stack([t[f"c{i}"] for i in range(6)], axis=1)
    seg = [np.polynomial.polynomial.polyval(logt, c) for c in coef]
    edges = t["logt_hi"][:-1]
    out = seg[0]
    for k, e in enumerate(edges):
        w = _smoothstep((logt - (e - 0.01)) / 0.02)
        out = (1.0 - w) * out + w * seg[k + 1]
    return out


class _Uniform:
    """Linear interpolation on a uniform grid with precomputed slopes (fast, vectorised).

    Values outside the grid are held at the end values (callers validate ranges first).
    """

    def __init__(self, lo, hi, n, columns):
        self.lo, self.n = float(lo), int(n)
        self.step = (float(hi) - float(lo)) / (n - 1)
        self.val, self.slope = {}, {}
        for k, v in columns.items():
            v = np.ascontiguousarray(v, dtype=float)
            sl = np.append(np.diff(v), 0.0)
            v.setflags(write=False)
            sl.setflags(write=False)
            self.val[k], self.slope[k] = v, sl

    def locate(self, x):
        pos = np.clip((x - self.lo) / self.step, 0.0, self.n - 1.0)
        i = np.minimum(pos.astype(np.intp), self.n - 2)
        return i, pos - i

    def get(self, name, i, f, out=None):
        """Interpolated column ``name`` at located positions ``(i, f)`` (written into ``out`` if given)."""
        if out is None:
            return np.take(self.val[name], i, mode="clip") + f * np.take(self.slope[name], i, mode="clip")
        np.take(self.slope[name], i, out=out, mode="clip")
        out *= f
        out += np.take(self.val[name], i, mode="clip")
        return out


@table_cache
def _feh_relations():
    t = read_table("colour_feh_relations.csv")
    rows = []
    for i in range(len(t["track"])):
        rows.append((int(t["track"][i]), int(t["colour"][i]),
                     tuple(float(t[f"a{k}"][i]) for k in range(6)),
                     tuple(float(t[f"t{k}"][i]) for k in range(4))))
    return tuple(rows)


def _theta_root(c, theta, feh):
    """Colour X solving theta = a0 + a1 X + a2 X^2 + a3 X F + a4 F + a5 F^2 (increasing branch)."""
    a = c[2]
    b = c[1] + c[3] * feh
    cc = c[5] * feh + c[4]
    cc *= feh
    cc += c[0]
    cc -= theta
    disc = b * b
    disc -= (4.0 * a) * cc
    np.maximum(disc, 0.0, out=disc)
    np.sqrt(disc, out=disc)
    disc += b
    # root on the branch where d theta / dX > 0, written in the cancellation-free form
    cc *= -2.0
    cc /= disc
    return cc


def _uv_excess(feh):
    """UV excess delta(U-B)_0.6 for [Fe/H] (Carney 1979, ApJ 233, 211); see the table header."""
    u = read_table("uv_excess_carney1979.csv")
    c0, c1, c2 = float(u["c0"][0]), float(u["c1"][0]), float(u["c2"][0])
    q = c0 - np.asarray(feh, dtype=float)
    disc = np.sqrt(np.maximum(c1 * c1 - 4.0 * c2 * q, 0.0))
    return np.where(q >= 0.0, 2.0 * q / (-c1 + disc), q / (-c1))


_TRACK_TABLES = ("colour_teff_dwarf.csv", "colour_teff_giant.csv")


@table_cache
def _engine():
    """Precomputed grids: everything that depends on Teff only, on a fine log-Teff grid.

    Columns: ``"<track><band>"`` (solar V-X), ``"bcp"`` = BC_V(Flower) + s (V-Ks)_giant,
    ``"s"`` (dwarf BC_Ks weight), ``"w<r>"``/``"x0_<r>"`` (window and [Fe/H]=0 colour of
    metallicity relation r), ``"wu"`` (UV-excess weight).  Also the Gaia grid in V-I
    and the U-V ratio grid in [Fe/H].
    """
    lo, hi = np.log10(TEFF_RANGE_K[0]), np.log10(TEFF_RANGE_K[1])
    logt = np.linspace(lo, hi, _NFINE)
    teff = 10.0 ** logt
    from hbmodel.core.numerics import Pchip  # numpy PCHIP: scipy.interpolate costs ~0.5 s at start-up

    cols = {}
    bands = None
    for trk, name in enumerate(_TRACK_TABLES):
        t = read_table(name)
        bands = tuple(c[2:] for c in t if c.startswith("v_"))
        x = np.log10(t["teff_k"])
        for b in bands:
            cols[f"{trk}{b}"] = Pchip(x, t["v_" + b])(logt)
    s = 1.0 - _smoothstep((teff - 4000.0) / 1000.0)
    cols["s"] = s
    cols["bcp"] = _flower_bc_v(logt) + s * cols["1Ks"]
    theta = 5040.0 / teff
    for r, (_trk, _col, coef, win) in enumerate(_feh_relations()):
        cols[f"w{r}"] = _window(teff, *win)
        cols[f"x0_{r}"] = _theta_root(coef, theta, 0.0)
    u = read_table("uv_excess_carney1979.csv")
    t0, t1, t_ref = (float(u[k][0]) for k in ("t0", "t1", "t_ref"))
    cols["wu"] = _smoothstep((teff - t0) / (t1 - t0))
    tgrid = _Uniform(lo, hi, _NFINE, cols)

    # U-V ratio at t_ref as a function of [Fe/H], per track (see uv_excess_carney1979.csv)
    fgrid = np.linspace(FEH_RANGE[0], FEH_RANGE[1], 301)
    it, ft = tgrid.locate(np.full_like(fgrid, np.log10(t_ref)))
    ratios = {}
    duv = -tgrid.get("wu", it, ft) * (_uv_excess(fgrid) - _uv_excess(0.0))
    for trk in (0, 1):
        dbv = np.zeros_like(fgrid)
        for r, (rtrk, col, coef, _w) in enumerate(_feh_relations()):
            if rtrk == trk and col == 1:
                x = _theta_root(coef, 5040.0 / t_ref, fgrid) - tgrid.get(f"x0_{r}", it, ft)
                dbv = dbv + tgrid.get(f"w{r}", it, ft) * x
        uv0 = -tgrid.get(f"{trk}U", it, ft)
        ratios[f"r{trk}"] = (uv0 + dbv + duv) / uv0
    rgrid = _Uniform(FEH_RANGE[0], FEH_RANGE[1], fgrid.size, ratios)

    # Gaia V-G, V-BP, V-RP as functions of V-I_C
    vi = np.linspace(-1.0, 6.0, 7001)
    ggrid = _Uniform(vi[0], vi[-1], vi.size, _gaia_from_vi(vi))
    return tgrid, rgrid, ggrid, bands, t_ref


def _check_inputs(teff_k, logg, feh):
    teff = check_range(teff_k, "teff_k", *TEFF_RANGE_K, what="photometric calibration range (K)")
    logg = check_range(logg, "logg", *LOGG_RANGE, what="photometric calibration range")
    feh = check_range(feh, "[Fe/H]", *FEH_RANGE, what="photometric calibration range")
    try:
        return np.broadcast_arrays(teff, logg, feh)
    except ValueError:
        raise ValueError("teff_k, logg and feh must have broadcast-compatible shapes") from None


def colours_v(teff_k, logg, feh, only=None, check=True) -> dict[str, np.ndarray]:
    """Colours ``V - X`` for every core band X (``'V'`` is 0), plus ``'_bc_v'``; ``only`` selects bands,
    which may include relation bands (HST, surveys: ``tables/band_relations.csv``).

    This is the shared engine of :func:`bolometric_correction`,
    :func:`absolute_magnitudes` and :func:`colour`; see the module docstring for
    the published relations and their validity ranges.  A star outside the validity of a relation
    band's published relation is a ``ValueError`` (``check``) or NaN (``check=False``).
    """
    rel_order = []
    if only is not None:
        rel = [b for b in only if _is_relation(b)]
        if rel:
            core_need, rel_order = _relation_closure(rel)
            only = tuple((set(only) - set(rel_order)) | core_need)
    teff, logg, feh = _check_inputs(teff_k, logg, feh)
    shape = teff.shape
    teff, logg, feh = (np.ravel(a) for a in (teff, logg, feh))
    tg, rg, gg, bands, t_ref = _engine()
    i, f = tg.locate(np.log10(teff))
    wg = np.clip((_DWARF_LOGG - logg) * (1.0 / (_DWARF_LOGG - _GIANT_LOGG)), 0.0, 1.0)
    metal = bool(np.any(feh != 0.0))
    d = {}
    if metal:
        theta = 5040.0 / teff
        for r, (trk, col, coef, _w) in enumerate(_feh_relations()):
            x = _theta_root(coef, theta, feh)
            x -= tg.get(f"x0_{r}", i, f)
            x *= tg.get(f"w{r}", i, f)
            d[(trk, col)] = d[(trk, col)] + x if (trk, col) in d else x
        d_ub = -tg.get("wu", i, f) * (_uv_excess(feh) - _uv_excess(0.0))
        hot = teff > t_ref
        ifeh, ffeh = rg.locate(feh)
    gaia = ("G", "BP", "RP")
    if only is not None:  # compute just what is asked (Ks feeds BC_V, I feeds the Gaia bands)
        need = set(only) | {"Ks"} | ({"I"} if set(only) & set(gaia) else set())
        bands = [b for b in bands if b in need]
    out = {}
    for b in bands:
        vd = tg.get(f"0{b}", i, f)
        vg = tg.get(f"1{b}", i, f)
        if metal:
            for trk, v in ((0, vd), (1, vg)):
                if b == "B":
                    v -= d.get((trk, 1), 0.0)
                elif b == "U":
                    cool = v - d.get((trk, 1), 0.0) - d_ub
                    v[...] = np.where(hot, v * rg.get(f"r{trk}", ifeh, ffeh), cool)
                elif b in ("I", "R"):
                    v += (1.0 if b == "I" else 0.52) * d.get((trk, 2), 0.0)
                elif b in ("J", "H", "Ks"):
                    v += d.get((trk, 3), 0.0)
        vg -= vd
        vg *= wg
        vg += vd
        out[b] = vg
    out["V"] = np.zeros_like(teff)
    # BC_V = BC_V(Flower) - s [(V-Ks) - (V-Ks)_giant,solar]
    out["_bc_v"] = tg.get("bcp", i, f) - tg.get("s", i, f) * out["Ks"]
    if "I" in out and (only is None or set(only) & set(gaia)):
        ig, fg = gg.locate(out["I"])
        for b in gaia:
            out[b] = gg.get(b, ig, fg)
    if rel_order:
        m = {b: -v for b, v in out.items() if not b.startswith("_")}
        _apply_relations(m, rel_order, teff, check)
        for b in rel_order:
            out[b] = -m[b]
    return {k: v.reshape(shape) for k, v in out.items()}


@table_cache
def _gaia_coeffs():
    t = read_table("gaia_transformations.csv")
    rel = {int(r): i for i, r in enumerate(t["relation"])}

    def row(r):
        i = rel[r]
        return (float(t["x_lo"][i]), float(t["x_hi"][i]),
                np.array([t[f"c{k}"][i] for k in range(4)], dtype=float))
    return {r: row(r) for r in rel}


def _gaia_from_vi(vi):
    """V-G, V-BP, V-RP from V-I_C (Evans et al. 2018; Riello et al. 2021)."""
    cf = _gaia_coeffs()
    pv = np.polynomial.polynomial.polyval
    bprp = pv(vi, cf[1][2])
    g_v = pv(bprp, cf[2][2])
    cstar = np.select([bprp < cf[3][1], bprp < cf[4][1]],
                      [pv(bprp, cf[3][2]), pv(bprp, cf[4][2])], pv(bprp, cf[5][2]))
    zp_g, zp_bp, zp_rp = cf[6][2][:3]
    # I_BP + I_RP = C* I_G with I_RP/I_BP = 10**(0.4 (bprp + zp_rp - zp_bp))
    bp_g = (zp_bp - zp_g) - 2.5 * np.log10(cstar / (1.0 + 10.0 ** (0.4 * (bprp + zp_rp - zp_bp))))
    return {"G": -g_v, "BP": -g_v - bp_g, "RP": -g_v - bp_g + bprp}


def _bands_arg(bands):
    if isinstance(bands, str):
        bands = (bands,)
    return tuple(get_band(b).name for b in bands)


def bolometric_correction(band, teff_k, logg, feh) -> np.ndarray:
    """Bolometric correction BC_band (mag), with M_band = M_bol - BC_band.

    BC_V from Flower 1996 (ApJ 469, 355) / Torres 2010 (AJ 140, 1158); other bands as
    BC_X = BC_V + (V - X) with the colours described in the module docstring.
    Valid 3,000-50,000 K, log g -0.5...6.5, [Fe/H] in ``FEH_RANGE``.
    """
    name = get_band(band).name
    v = colours_v(teff_k, logg, feh, only=(name,))
    return v["_bc_v"] + v[name]


def absolute_magnitudes(teff_k, logg, feh, logl_lsun, bands=BAND_NAMES) -> dict[str, np.ndarray]:
    """Absolute magnitudes ``M_band = M_BOL_SUN - 2.5 log10(L/Lsun) - BC_band`` for ``bands``.

    ``M_BOL_SUN = 4.74`` (IAU 2015 Resolution B2).  Inputs broadcast together;
    returns a dict band -> ndarray.
    """
    names = _bands_arg(bands)
    logl = as_float_array(logl_lsun, "logl_lsun")
    v = colours_v(teff_k, logg, feh, only=names)
    mv = M_BOL_SUN - 2.5 * logl - v["_bc_v"]
    return {b: mv - v[b] for b in names}


def colour(band1, band2, teff_k, logg, feh) -> np.ndarray:
    """Colour index ``band1 - band2`` (mag), e.g. ``colour('B', 'V', 5772, 4.44, 0.0)``."""
    b1, b2 = get_band(band1).name, get_band(band2).name
    v = colours_v(teff_k, logg, feh, only=(b1, b2))
    return v[b2] - v[b1]


class FixedMetallicityPhotometry:
    """Absolute magnitudes of many stars of one [Fe/H], at the cost of a few table look-ups per star.

    The colour relations above are evaluated once, on the fine log-Teff grid, on the dwarf
    (log g = 4.5) and giant (log g = 2.5) tracks.  Every colour and BC_V is linear in the gravity
    blend weight between the tracks, so a star's bolometric correction is
    ``BC_dwarf + w_g (BC_giant - BC_dwarf)`` exactly; only the linear interpolation in log Teff on the
    6001-point grid (spacing 2e-4 dex) differs from :func:`absolute_magnitudes`, by < 1e-4 mag.  The
    Gaia bands, non-linear in V - I_C, are mapped from the blended V - I_C as in :func:`colours_v`, and
    the relation bands (HST, surveys; non-linear in colour) from the blended magnitudes of the bands their
    published relations read, with the same refusal outside a relation's validity.
    ``extra`` adds Teff-only columns (name -> function of Teff in K) on the same grid, e.g.
    extinction ratios, so they share one look-up.
    """

    _GAIA = ("G", "BP", "RP")

    def __init__(self, feh, bands, extra=None):
        self.feh = float(check_range(feh, "[Fe/H]", *FEH_RANGE, what="photometric calibration range"))
        self.bands = _bands_arg(bands)
        tg, _rg, _gg, _names, _t = _engine()
        logt = tg.lo + tg.step * np.arange(tg.n)
        teff = 10.0 ** logt
        # relation bands (HST, surveys) are not blended themselves: their published relations are non-linear in
        # colour (quadratic terms, colour pieces), so they are applied to the blended magnitudes of the bands
        # they read, exactly as in colours_v (a star outside a relation's validity is refused there)
        rel = [b for b in self.bands if _is_relation(b)]
        core_need, self._rel_order = _relation_closure(rel) if rel else (set(), [])
        self._core = tuple(dict.fromkeys([b for b in self.bands if not _is_relation(b)] + sorted(core_need)))
        need = set(self._core) | ({"I"} if set(self._core) & set(self._GAIA) else set())
        cols = {}
        for key, logg in (("d", _DWARF_LOGG), ("g", _GIANT_LOGG)):
            v = colours_v(teff, np.full_like(teff, logg), np.full_like(teff, self.feh), only=tuple(need))
            cols[f"bcv_{key}"] = v["_bc_v"]
            for b in need:
                if b not in self._GAIA:
                    cols[f"{b}_{key}"] = v["_bc_v"] + v[b]      # BC_b = BC_V + (V - b)
            if "I" in need:
                cols[f"vi_{key}"] = v["I"]
        for name, fn in (extra or {}).items():
            cols[name] = np.asarray(fn(teff), float)
        self.grid = _Uniform(tg.lo, tg.lo + tg.step * (tg.n - 1), tg.n, cols)

    def locate(self, logteff):
        """Grid positions of ``log10 Teff`` (valid 3,000-50,000 K; clipped to the grid)."""
        return self.grid.locate(np.asarray(logteff, float))

    def gravity_weight(self, logg):
        """Giant-track weight w_g of :func:`colours_v` (0 at log g >= 4.5, 1 at log g <= 2.5)."""
        w = np.subtract(_DWARF_LOGG, logg)
        w *= 1.0 / (_DWARF_LOGG - _GIANT_LOGG)
        return np.clip(w, 0.0, 1.0, out=w)

    def _bc(self, name, i, f, wg):
        d = self.grid.get(f"{name}_d", i, f)
        g = self.grid.get(f"{name}_g", i, f)
        g -= d
        g *= wg
        g += d
        return g

    def absolute_magnitudes(self, logteff, logg, logl, located=None) -> dict[str, np.ndarray]:
        """``M_band`` for every band; ``located`` may pass a precomputed ``locate(logteff)``.

        Valid for 3,000-50,000 K and log g -0.5...6.5 (ValueError outside), as :func:`absolute_magnitudes`."""
        check_range(logteff, "log Teff", np.log10(TEFF_RANGE_K[0]) - 1e-12, np.log10(TEFF_RANGE_K[1]) + 1e-12,
                    what="photometric calibration range")
        check_range(logg, "logg", *LOGG_RANGE, what="photometric calibration range")
        i, f = self.locate(logteff) if located is None else located
        wg = self.gravity_weight(logg)
        mbol = M_BOL_SUN - 2.5 * np.asarray(logl, float)
        out = {}
        if set(self._core) & set(self._GAIA):
            _tg, _rg, gg, _names, _t = _engine()
            ig, fg = gg.locate(self._bc("vi", i, f, wg))
            bcv = self._bc("bcv", i, f, wg)
        for b in self._core:
            if b in self._GAIA:
                out[b] = mbol - (bcv + gg.get(b, ig, fg))
            else:
                m = self._bc(b, i, f, wg)
                np.subtract(mbol, m, out=m)
                out[b] = m
        if self._rel_order:
            shape = np.shape(out[self._core[0]])
            flat = {b: np.ravel(v) for b, v in out.items()}
            _apply_relations(flat, self._rel_order, np.ravel(np.broadcast_to(10.0 ** np.asarray(logteff, float),
                                                                                shape)), True)
            out.update({b: flat[b].reshape(shape) for b in self._rel_order})
        return {b: out[b] for b in self.bands}
