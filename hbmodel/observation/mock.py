"""Mock catalogues: a population's stars observed as a survey or cluster study would see them.

Pipeline: :class:`hbmodel.populations.sampler.StarSampler` (RGB, HB and early-AGB stars in
lifetime proportion, with absolute magnitudes, from tables built once per
population) -> optional
unresolved companions -> distance and (differential) extinction
(:mod:`hbmodel.photometry.extinction`) -> photometric errors and completeness
(:mod:`hbmodel.observation.effects`) -> optional field contamination.  Everything random
comes from one explicit ``numpy.random.Generator``.

Star counts can be set by the number of HB stars or by the population's total
initial mass, via the Kroupa (2001, MNRAS 322, 231) IMF: the rate at which stars
reach the RGB tip is ``M_tot xi(m_tip) |dm_tip/dt|``.

Size (410+ lines): one stage (mock catalogues in memory and chunked to disk), just over 400 lines.
"""
from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from hbmodel.physics.imf import imf_number_density
from hbmodel.populations.population import Population

__all__ = ["ObservationSpec", "make_mock", "make_mock_arrays", "mock_table", "column_info", "mock_column_info", "STAR_COLUMNS", "PHASE_NAMES", "star_sampler", "expected_hb_count", "imf_number_density",
           "stars_per_hb_star", "mock_estimate", "ChunkPlan", "plan_chunked_mock", "write_chunked_mock",
           "write_mock_parquet", "streams_to_parquet", "EmptyMockError"]


@dataclass(frozen=True)
class ObservationSpec:
    """How the mock is observed.  ``depth`` maps band -> 5-sigma limiting magnitude (error law);
    ``completeness_m50`` the 50%-completeness magnitude in ``completeness_band`` (logistic of width
    ``completeness_width``)."""

    distance_modulus: float = 0.0
    ebv: float = 0.0
    rv: float = 3.1
    law: str = "F99"
    ebv_sd: float = 0.0
    depth: dict | None = None
    completeness_m50: float | None = None
    completeness_width: float = 0.15
    completeness_band: str | None = None
    binary_fraction: float = 0.0
    n_field: int = 0
    field_box: tuple | None = None      # (colour_min, colour_max, mag_bright, mag_faint)
    field_table: object = None           # astropy Table of field stars to resample
    window: tuple | None = None          # (band, bright, faint): keep only stars inside
    field_colour: tuple | None = None    # (A, B): colour A - B of field_box (default: bands[0] - bands[1])

    def __post_init__(self):
        from hbmodel.core.quantities import in_unit
        for key in ("distance_modulus", "ebv", "ebv_sd"):  # astropy Quantities in mag at the API edge
            if hasattr(getattr(self, key), "unit"):
                object.__setattr__(self, key, in_unit(getattr(self, key), "mag", key))
        if not np.isfinite(self.distance_modulus):
            raise ValueError("distance modulus must be finite")
        if self.ebv < 0:
            raise ValueError(f"E(B-V) must be non-negative (got {self.ebv:g})")
        if self.ebv_sd < 0:
            raise ValueError("the differential-reddening spread must be non-negative")
        if not 0.0 <= self.binary_fraction <= 1.0:
            raise ValueError("binary fraction must lie in [0, 1]")
        if self.n_field < 0:
            raise ValueError("the number of field stars must be non-negative")


def expected_hb_count(population: Population, total_mass_msun: float) -> float:
    """Expected number of HB stars in a population of initial mass ``total_mass_msun`` (Kroupa IMF)."""
    if not (np.isfinite(total_mass_msun) and total_mass_msun > 0):
        raise ValueError("total mass must be positive")
    times = population.phase_times()
    # rate of stars reaching the tip per unit mass formed, for each sub-population (weights are number
    # fractions of giants, so the rate of the first component fixes the normalisation)
    from hbmodel.physics.imf import tip_birth_rate
    n = 0.0
    wsum = 0.0
    for i, sub in enumerate(population.subpopulations):
        y = sub.composition.y if (population.helium is not None or sub.helium_excess) else None
        rate = total_mass_msun * tip_birth_rate(sub.age_gyr, sub.mh, y)  # stars per Myr
        n += rate * times["hb"][i]
        wsum += sub.weight
    return n


def _companions(mass_msun, feh, rng, bands):
    """Main-sequence companions with mass ratio q ~ U(0.1, 1) of the primary's initial mass.

    Main-sequence L ~ M^4, R ~ M^0.8 (common practice, textbook homology scalings)."""
    from hbmodel.photometry.magnitudes import absolute_magnitudes
    from hbmodel.physics.giant_branch import LOG_G_SUN, TEFF_SUN_K
    q = rng.uniform(0.1, 1.0, len(mass_msun))
    m = np.clip(q * np.minimum(mass_msun, 1.0), 0.1, None)
    logl = 4.0 * np.log10(m)
    logr = 0.8 * np.log10(m)
    logt = np.log10(TEFF_SUN_K) + 0.25 * logl - 0.5 * logr
    logt = np.clip(logt, np.log10(3000.0), np.log10(50000.0))
    logg = np.clip(LOG_G_SUN + np.log10(m) - 2 * logr, -0.5, 6.5)
    return absolute_magnitudes(10 ** logt, logg, feh, logl, bands)


def star_sampler(population: Population, bands, rv=3.1, law="F99"):
    """The :class:`hbmodel.populations.sampler.StarSampler` of ``population`` for these bands and extinction law
    (built once and kept on the population, so repeated mocks reuse the tables; assigning a defining
    attribute of the population drops the cache, see ``Population._DEFINING_FIELDS``)."""
    from hbmodel.populations.sampler import StarSampler
    cache = population.__dict__.setdefault("_sampler_cache", {})
    key = (tuple(bands), float(rv), str(law))
    if key not in cache:
        if len(cache) > 8:
            cache.clear()
        cache[key] = StarSampler(population, bands, rv, law)
    return cache[key]


#: Names of the phase codes of :func:`make_mock_arrays` (index = code): RGB, HB, early AGB, field star.
PHASE_NAMES = ("rgb", "hb", "agb", "field")
#: Columns of a mock kept in float32 (7 significant digits: 1e-6 mag, 0.001 K, 1e-7 Msun; far below
#: any model or observational error); computed in float64 and rounded once, on storing.
COMPACT_DTYPE = np.float32


#: Unit (astropy unit string; "" for none) and description of each star column of a mock.
STAR_COLUMNS = {
    "phase": ("", "evolutionary phase: rgb (red giant branch), hb (core-helium burning: horizontal branch or "
                  "red clump), agb (early asymptotic giant branch), field (contaminant)"),
    "mass_msun": ("solMass", "present stellar mass"),
    "teff_k": ("K", "effective temperature"),
    "logg": ("", "log10 of the surface gravity in cm s-2"),
    "logl": ("", "log10 of the luminosity in solar luminosities"),
    "is_rr": ("", "inside the RR Lyrae instability strip"),
    "rr_mode": ("", "RR Lyrae pulsation mode: 0 none, 1 fundamental (RRab), 2 first overtone (RRc)"),
    "period_days": ("d", "pulsation period of an RR Lyrae star (NaN for other stars)"),
    "ebv": ("mag", "colour excess E(B-V) in front of the star"),
}


def column_info(name: str) -> tuple[str, str]:
    """``(unit, description)`` of a mock catalogue column (a star column or ``<band>``, ``<band>_err``,
    ``<band>_true``)."""
    if name in STAR_COLUMNS:
        return STAR_COLUMNS[name]
    if name.endswith("_err"):
        return "mag", f"1-sigma photometric error of {name[:-4]}"
    if name.endswith("_true"):
        return "mag", f"true apparent {name[:-5]} magnitude (distance and extinction, before the errors)"
    return "mag", f"observed apparent {name} magnitude (with its photometric error)"


def make_mock(population: Population, *, bands, rng: np.random.Generator, n_hb=None, total_mass_msun=None,
              obs: ObservationSpec = ObservationSpec()):
    """Generate a mock catalogue (astropy Table) of RGB, HB and early-AGB stars (and field stars).

    Stars come from the population's tabulated sampler (:mod:`hbmodel.populations.sampler`).  Columns: ``phase``
    (rgb/hb/agb/field), ``mass_msun``, ``teff_k``, ``logg`` [cgs], ``logl`` [Lsun], ``is_rr``,
    ``rr_mode`` (0 none, 1 RRab, 2 RRc), ``period_days``, ``ebv``, and per band ``<band>`` (observed
    apparent magnitude), ``<band>_err``, ``<band>_true``; each column carries its unit and description
    (:func:`column_info`), the table's metadata (``hbmodel_mock``) the population, observation and version
    that made it.  Real-valued columns are float32 (:data:`COMPACT_DTYPE`); the arrays themselves:
    :func:`make_mock_arrays`.
    """
    data, meta = make_mock_arrays(population, bands=bands, rng=rng, n_hb=n_hb, total_mass_msun=total_mass_msun,
                                  obs=obs)
    return mock_table(data, meta)


def mock_table(data: dict, meta: dict):
    """The astropy Table of :func:`make_mock_arrays`' output (phase codes turned into names)."""
    from astropy.table import Table
    data = dict(data)
    width = "<U5" if np.any(data["phase"] == PHASE_NAMES.index("field")) or meta.get("n_field") else "<U3"
    data["phase"] = np.array(PHASE_NAMES, dtype=width)[data["phase"]]
    t = Table(data, copy=False)
    for name in t.colnames:
        unit, description = column_info(name)
        if unit:
            t[name].unit = unit
        t[name].description = description
    t.meta["hbmodel_mock"] = {k: v for k, v in meta.items() if k != "n_field"}
    return t


def mock_column_info(names) -> dict:
    """``{column: [unit, description]}`` of the mock columns ``names`` (stored with Parquet mocks)."""
    return {n: list(column_info(n)) for n in names}


def make_mock_arrays(population: Population, *, bands, rng: np.random.Generator, n_hb=None,
                     total_mass_msun=None, obs: ObservationSpec = ObservationSpec()):
    """The columns of :func:`make_mock` as numpy arrays, and its metadata: ``(data, meta)``.

    ``data["phase"]`` holds int8 codes into :data:`PHASE_NAMES`; every other column is as in
    :func:`make_mock`.  Writers that store categories (Parquet) take the codes as they are.
    """
    from hbmodel.observation.effects import (CMDBox, Completeness, add_unresolved_binaries, default_error_law,
                          differential_reddening, observe_magnitudes, resample_field, uniform_contaminants)
    from hbmodel.photometry.magnitudes import get_band

    bands, n_hb, rng = _mock_inputs(population, bands, rng, n_hb, total_mass_msun, obs)
    rgb_range = _rgb_logl_range(obs)
    sampler = star_sampler(population, bands, obs.rv, obs.law)
    per_star = obs.ebv_sd > 0 or obs.binary_fraction > 0
    # companions are drawn from the primaries' masses: those stay float64 until then
    d = sampler.draw(int(n_hb), rng, rgb_logl_range=rgb_range, distance_modulus=obs.distance_modulus,
                     ebv=None if per_star else obs.ebv,
                     star_dtype=np.float64 if obs.binary_fraction > 0 else COMPACT_DTYPE)
    n = len(d["phase"])
    if per_star:
        absmag = {b: d[f"M_{b}"] for b in bands}
        if obs.binary_fraction > 0:
            feh = np.array([s.composition.feh for s in population.subpopulations])[d["sub"]]
            comp = _companions(d["mass"], feh, rng, bands)
            absmag = add_unresolved_binaries(absmag, comp, obs.binary_fraction, rng)
            d = {k: (v.astype(COMPACT_DTYPE) if k in ("mass", "teff", "logg", "logl", "period_days") else v)
                 for k, v in d.items()}
        ebv_star = differential_reddening(n, obs.ebv, rng, sd=obs.ebv_sd) if n else np.zeros(0)
        true = {b: absmag[b] + obs.distance_modulus + ebv_star * d[f"R_{b}"] for b in bands}
        ebv_star = ebv_star.astype(COMPACT_DTYPE)
    else:
        ebv_star = np.full(n, obs.ebv, COMPACT_DTYPE)
        true = {b: d[f"{b}_true"] for b in bands}
    cols = _star_columns(d, ebv_star)
    # field contamination
    if obs.n_field > 0:
        if obs.field_table is not None:
            field = resample_field(obs.field_table, obs.n_field, rng, bands)
        else:
            if obs.field_box is None or len(bands) < 2:
                raise ValueError("uniform field contamination needs two bands and a box "
                                 "(colour_min, colour_max, mag_bright, mag_faint)")
            cmin, cmax, mb, mf = obs.field_box
            fcol = tuple(get_band(b).name for b in obs.field_colour) if obs.field_colour else bands[:2]
            box = CMDBox(bands[0], fcol, (mb, mf), (cmin, cmax))
            field = uniform_contaminants(obs.n_field, rng, box)
            field = {b: field[b] if b in field else field[bands[0]] for b in bands}
        nf = obs.n_field
        true = {b: np.concatenate([true[b], np.asarray(field[b], float)]) for b in bands}
        fill = {"phase": PHASE_NAMES.index("field"), "is_rr": False, "rr_mode": 0}
        cols = {k: np.concatenate([v, np.full(nf, fill.get(k, np.nan), dtype=v.dtype)]) for k, v in cols.items()}
    laws = {}
    for b in bands:
        if obs.depth and b in obs.depth:
            laws[b] = default_error_law(b, depth_mag=float(obs.depth[b]))
        else:
            # no depth given: a bright, high signal-to-noise catalogue (5-sigma limit 6 mag below the HB)
            laws[b] = default_error_law(b, depth_mag=float(np.nanmedian(true[b])) + 6.0 if len(true[b]) else 25.0)
    completeness = None
    cband = obs.completeness_band or bands[0]
    if obs.completeness_m50 is not None:
        completeness = Completeness(obs.completeness_m50, obs.completeness_width)
    observed, errors, detected = observe_magnitudes(true, rng, error_laws=laws, completeness=completeness,
                                                    completeness_band=cband if completeness else None,
                                                    dtype=COMPACT_DTYPE)
    return _catalogue(cols, true, observed, errors, detected, obs, bands), _mock_meta(n_hb, obs, bands, population)


def _mock_inputs(population, bands, rng, n_hb, total_mass_msun, obs):
    """Checked inputs of a mock: canonical band names, the number of HB stars to draw and the Generator."""
    from hbmodel.core.randomness import as_generator
    from hbmodel.photometry.magnitudes import get_band
    rng = as_generator(rng)
    bands = tuple(get_band(b).name for b in bands)  # canonical names (aliases such as K -> Ks)
    if not bands:
        raise ValueError("give at least one band")
    if (n_hb is None) == (total_mass_msun is None):
        raise ValueError("give exactly one of n_hb and total_mass_msun")
    if n_hb is None:
        n_hb = expected_hb_count(population, total_mass_msun)
        n_hb = int(rng.poisson(n_hb))
        if n_hb <= 0:
            raise ValueError(f"a population of {total_mass_msun:g} Msun holds no HB star")
    if int(n_hb) <= 0:
        raise ValueError("the number of HB stars must be positive")
    if obs.window is not None and obs.window[0] not in bands:
        raise ValueError(f"window band {obs.window[0]} is not among the mock's bands")
    return bands, int(n_hb), rng


def _mock_meta(n_hb, obs, bands, population):
    from hbmodel.core.version import __version__
    return {"n_hb_drawn": int(n_hb), "distance_modulus": obs.distance_modulus,
            "ebv": obs.ebv, "rv": obs.rv, "law": obs.law, "bands": list(bands), "n_field": int(obs.n_field),
            "population": population.to_dict(), "hbmodel_version": __version__}


def _star_columns(d, ebv_star, rows=slice(None)):
    """The catalogue's star columns (before the photometry) of the sampler's output ``d``, rows ``rows``."""
    from hbmodel.physics.pulsation import MODE_NONE
    mode = d["rr_mode"][rows]
    return {"phase": d["phase"][rows], "mass_msun": d["mass"][rows], "teff_k": d["teff"][rows], "logg": d["logg"][rows],
            "logl": d["logl"][rows], "is_rr": mode != MODE_NONE, "rr_mode": mode.astype(np.int16),
            "period_days": d["period_days"][rows], "ebv": ebv_star}


def _catalogue(cols, true, observed, errors, detected, obs, bands):
    """The catalogue's columns: the detected stars inside the window, photometry as float32."""
    keep = np.asarray(detected, bool)
    if obs.window is not None:
        wband, bright, faint = obs.window
        keep &= (observed[wband] >= bright) & (observed[wband] <= faint)
    sel = (lambda v: v) if keep.all() else (lambda v: v[keep])
    data = {k: sel(v) for k, v in cols.items()}
    for b in bands:
        data[b] = sel(observed[b])
        data[f"{b}_err"] = sel(errors[b])
        data[f"{b}_true"] = sel(true[b]).astype(COMPACT_DTYPE)
    return data


class EmptyMockError(ValueError):
    """No star of a mock survives its completeness limit or magnitude window."""


def streams_to_parquet(obs: ObservationSpec, bands) -> bool:
    """True when :func:`write_mock_parquet` can write this mock: its observation takes no random number
    between the stars and their photometric errors and needs no statistic of the whole catalogue (no
    per-star reddening or binaries, no field stars, no completeness law, a depth for every band)."""
    from hbmodel.photometry.magnitudes import get_band
    return (obs.ebv_sd == 0 and obs.binary_fraction == 0 and obs.n_field == 0 and obs.completeness_m50 is None
            and bool(obs.depth) and all(get_band(b).name in obs.depth for b in bands))


def _band_generators(rng: np.random.Generator, n_bands: int, n: int):
    """One generator per band whose normal deviates continue where the one-pass draw of
    :func:`hbmodel.observation.effects.observe_magnitudes` (``n`` deviates of the first band, then ``n``
    of the next, ...) starts that band.  The last band's is ``rng`` itself, moved past the others'
    deviates, so that ``rng`` ends where the one-pass draw leaves it."""
    gens = []
    for _k in range(n_bands - 1):
        g = np.random.Generator(type(rng.bit_generator)())
        g.bit_generator.state = rng.bit_generator.state
        gens.append(g)
        buf = np.empty(min(n, 1 << 16))
        for c0 in range(0, n, buf.size):  # skip this band's deviates (the stream is read in order)
            rng.standard_normal(out=buf[:min(buf.size, n - c0)])
    return gens + [rng]


def write_mock_parquet(population: Population, *, bands, rng: np.random.Generator, path, n_hb=None,
                       total_mass_msun=None, obs: ObservationSpec = ObservationSpec(), force=False, meta_extra=None):
    """:func:`make_mock_arrays` written straight to a Parquet file (as :func:`hbmodel.io.catalogues.write_parquet_columns`
    would write it: the same rows, columns and metadata) without holding the catalogue: rows are observed
    and written, a row group at a time in a background thread, while the sampler computes the next.

    For the mocks of :func:`streams_to_parquet` only (ValueError otherwise).  Returns ``(counts, meta)``:
    the number of stars written per phase code (:data:`PHASE_NAMES`) and the metadata stored with them.
    Raises :class:`EmptyMockError` (and writes nothing) if no star survives the window."""
    from hbmodel.io.catalogues import PARQUET_ROW_GROUP, write_parquet_groups
    from hbmodel.observation.effects import default_error_law, observe_magnitudes

    bands, n_hb, rng = _mock_inputs(population, bands, rng, n_hb, total_mass_msun, obs)
    if not streams_to_parquet(obs, bands):
        raise ValueError("write_mock_parquet: this mock needs the whole catalogue at once (use make_mock_arrays)")
    laws = {b: default_error_law(b, depth_mag=float(obs.depth[b])) for b in bands}
    sampler = star_sampler(population, bands, obs.rv, obs.law)
    meta = {**_mock_meta(n_hb, obs, bands, population), **(meta_extra or {})}
    counts = np.zeros(len(PHASE_NAMES), np.int64)

    def produce(emit):
        state = {"next": 0, "gens": None}

        def rows(d, r0, r1):
            if state["gens"] is None:  # every random number of the stars has been drawn by now
                state["gens"] = _band_generators(rng, len(bands), len(d["phase"]))
            part = slice(r0, r1)
            true = {b: d[f"{b}_true"][part] for b in bands}
            observed, errors = {}, {}
            for b, g in zip(bands, state["gens"]):
                o, e, _ = observe_magnitudes({b: true[b]}, g, error_laws={b: laws[b]}, dtype=COMPACT_DTYPE)
                observed[b], errors[b] = o[b], e[b]
            cols = _star_columns(d, np.full(r1 - r0, obs.ebv, COMPACT_DTYPE), part)
            data = _catalogue(cols, true, observed, errors, np.ones(r1 - r0, bool), obs, bands)
            counts[:] += np.bincount(data["phase"], minlength=len(PHASE_NAMES))
            if len(data["phase"]):
                emit(data)

        def on_rows(d, stop):
            n = len(d["phase"])
            while state["next"] < n and (stop - state["next"] >= PARQUET_ROW_GROUP or stop == n):
                r0 = state["next"]
                state["next"] = min(r0 + PARQUET_ROW_GROUP, n)
                rows(d, r0, state["next"])

        sampler.draw(n_hb, rng, rgb_logl_range=_rgb_logl_range(obs), distance_modulus=obs.distance_modulus,
                     ebv=obs.ebv, star_dtype=COMPACT_DTYPE, on_rows=on_rows)
        if counts.sum() == 0:
            raise EmptyMockError("no star survives the window: the mock would be empty (nothing written)")

    names = list(STAR_COLUMNS) + [f"{b}{s}" for b in bands for s in ("", "_err", "_true")]
    write_parquet_groups(produce, path, force=force, categories={"phase": PHASE_NAMES[:3]},
                         meta={"hbmodel_mock": {k: v for k, v in meta.items() if k != "n_field"}},
                         column_info=mock_column_info(names))
    return counts, meta


def _rgb_logl_range(obs: ObservationSpec):
    """RGB luminosities that can land in the magnitude window of ``obs`` (None: the whole RGB), with a
    generous bolometric-correction margin."""
    if obs.window is None:
        return None
    from hbmodel.photometry.magnitudes import M_BOL_SUN
    _wband, bright, faint = obs.window
    abs_b, abs_f = bright - obs.distance_modulus - 0.5, faint - obs.distance_modulus + 3.0
    return (M_BOL_SUN - abs_f) / 2.5, (M_BOL_SUN - abs_b) / 2.5 + 0.6


def stars_per_hb_star(population: Population, obs: ObservationSpec = ObservationSpec()) -> float:
    """Expected number of drawn RGB + HB + early-AGB stars per HB star (RGB restricted to the stretch a
    magnitude window can see), i.e. the catalogue rows before completeness and window cuts."""
    rates = population.phase_times()
    tot_hb = float(rates["hb"].sum())
    if tot_hb <= 0:
        raise ValueError("no star of this population reaches the HB (all envelopes lost on the RGB)")
    rgb_range = _rgb_logl_range(obs)
    n = 0.0
    for i, sub in enumerate(population.subpopulations):
        lo, hi = population._rgb_time_window(sub, rgb_range)
        n += rates["rgb"][i] * (hi - lo) + rates["hb"][i] + rates["agb"][i]
    return n / tot_hb


def mock_columns(bands) -> int:
    """Number of columns of a mock catalogue: 9 star columns plus 3 per band (observed, error, true)."""
    return 9 + 3 * len(tuple(bands))


#: Memory of a CMD plot per plotted star (measured ~140 bytes with 5x10^5 stars), rounded up.
PLOT_BYTES_PER_STAR = 200.0


def mock_estimate(population: Population, *, bands, obs: ObservationSpec = ObservationSpec(), out=None,
                  n_hb=None, total_mass_msun=None, plot=False):
    """:class:`hbmodel.core.limits.Estimate` of :func:`make_mock` and of writing its table to ``out`` (none:
    the table stays in memory) and, with ``plot``, of its CMD plot, from the expected number of stars (a
    total mass counts through :func:`expected_hb_count`)."""
    from pathlib import Path

    from hbmodel.core.limits import Estimate, table_disk_bytes, table_memory_bytes
    if n_hb is None:
        n_hb = expected_hb_count(population, total_mass_msun)
    rows = float(n_hb) * stars_per_hb_star(population, obs) + obs.n_field
    cols = mock_columns(bands)
    plot_bytes = PLOT_BYTES_PER_STAR * rows if plot else 0.0
    if out is None:
        return Estimate("this mock", memory_bytes=table_memory_bytes(rows, cols) + plot_bytes,
                        detail=f"about {rows:.3g} stars")
    return Estimate("this mock", memory_bytes=table_memory_bytes(rows, cols, out) + plot_bytes,
                    disk_bytes=table_disk_bytes(rows, cols, out, float32=True), disk_path=Path(out).parent,
                    detail=f"about {rows:.3g} stars")


def _split(total: int, n_parts: int) -> list[int]:
    """``total`` split into ``n_parts`` integers that differ by at most one and sum to ``total``."""
    base, extra = divmod(int(total), int(n_parts))
    return [base + (i < extra) for i in range(int(n_parts))]


class _MockChunk:
    """Picklable partition builder for :func:`hbmodel.io.jobs.run_chunked`: partition ``index`` holds the stars
    of exactly ``n`` drawn HB stars and ``field_sizes[index]`` field stars."""

    def __init__(self, population, bands, obs, field_sizes):
        self.population, self.bands, self.obs = population, tuple(bands), obs
        self.field_sizes = tuple(field_sizes)

    def __call__(self, index, n, seed_sequence):
        from hbmodel.io.catalogues import _arrow_table
        rng = np.random.default_rng(seed_sequence)
        obs = replace(self.obs, n_field=self.field_sizes[index])
        data, meta = make_mock_arrays(self.population, bands=self.bands, rng=rng, n_hb=int(n), obs=obs)
        meta = {k: v for k, v in meta.items() if k != "n_field"}
        return _arrow_table(data, {"hbmodel_mock": {**meta, "partition": int(index)}}, {"phase": PHASE_NAMES},
                            "mock partition", mock_column_info(data))


@dataclass(frozen=True)
class ChunkPlan:
    """Partitions of a chunked mock: ``hb_sizes[i]`` HB stars (drawn, before cuts) and ``field_sizes[i]``
    field stars in partition ``i``; ``rows_per_hb`` expected catalogue rows per HB star."""

    hb_sizes: tuple
    field_sizes: tuple
    rows_per_hb: float

    @property
    def n_hb(self) -> int:
        return int(sum(self.hb_sizes))

    @property
    def n_rows(self) -> float:
        return self.n_hb * self.rows_per_hb + sum(self.field_sizes)

    def estimate(self, bands, *, out_dir=None, n_jobs=1, scheduler=None):
        """:class:`hbmodel.core.limits.Estimate`: disk of all partitions; memory of the partitions made at
        once by local workers (one each, plus a Python process each beyond the first; a Dask cluster's
        workers manage their own memory)."""
        import os

        from hbmodel.core.limits import BASE_MEMORY_BYTES, Estimate, table_disk_bytes, table_memory_bytes
        n_parts = len(self.hb_sizes)
        rows_part = max(self.hb_sizes) * self.rows_per_hb + max(self.field_sizes)
        cols = mock_columns(bands)
        if scheduler is not None:
            workers = 0
        else:
            workers = min(n_parts, (os.cpu_count() or 1) if n_jobs == -1 else max(int(n_jobs), 1))
        mem = workers * table_memory_bytes(rows_part, cols) + max(workers - 1, 0) * BASE_MEMORY_BYTES
        return Estimate("this chunked mock", memory_bytes=mem,
                        disk_bytes=table_disk_bytes(self.n_rows, cols, "x.parquet", float32=True), disk_path=out_dir,
                        detail=f"{n_parts:,} partitions of about {rows_part:,.0f} stars, "
                               f"{self.n_rows:.3g} stars in all")


def plan_chunked_mock(population, *, bands, obs, seed, chunk_size, n_hb=None, total_mass_msun=None) -> ChunkPlan:
    """The partition plan of :func:`write_chunked_mock`.

    The HB stars (``n_hb``, or a Poisson draw of :func:`expected_hb_count` seeded by ``seed``) are split
    into partitions of about ``chunk_size`` catalogue stars each, the HB counts differing by at most one
    and summing to ``n_hb`` exactly, and so are the ``obs.n_field`` field stars; the rows per HB star
    count the completeness and window cuts (from a pilot draw when either is set)."""
    if (n_hb is None) == (total_mass_msun is None):
        raise ValueError("give exactly one of n_hb and total_mass_msun")
    if int(chunk_size) < 1:
        raise ValueError(f"the chunk size must be a positive number of stars (got {chunk_size})")
    if n_hb is None:
        mean = expected_hb_count(population, total_mass_msun)
        n_hb = int(np.random.default_rng(seed).poisson(mean)) if mean < 1e15 else int(mean)
        if n_hb <= 0:
            raise ValueError(f"a population of {total_mass_msun:g} Msun holds no HB star")
    n_hb = int(n_hb)
    if n_hb <= 0:
        raise ValueError("the number of HB stars must be positive")
    rows_per_hb = stars_per_hb_star(population, obs)
    if obs.window is not None or obs.completeness_m50 is not None:
        # the kept fraction from a small pilot draw
        pilot = make_mock(population, bands=bands, rng=np.random.default_rng(seed), n_hb=500,
                          obs=replace(obs, n_field=0))
        if len(pilot) == 0:  # the partitions could never be filled
            raise ValueError("no star of a 500-HB-star pilot mock survives the window / completeness limit: "
                             "the mock would be empty")
        rows_per_hb = max(len(pilot) / 500.0, 1e-3)
    hb_per_part = max(1, int(round(int(chunk_size) / rows_per_hb)))
    n_parts = -(-n_hb // hb_per_part)
    return ChunkPlan(tuple(_split(n_hb, n_parts)), tuple(_split(obs.n_field, n_parts)), float(rows_per_hb))


def write_chunked_mock(population, *, bands, obs, seed, out_dir, chunk_size, n_hb=None, total_mass_msun=None,
                       n_jobs=1, scheduler=None, force=False, max_memory=None, max_disk=None):
    """Survey-size mock in bounded memory: Parquet partitions under ``out_dir`` (see
    :func:`hbmodel.io.jobs.run_chunked`).

    The size is set by ``n_hb`` or ``total_mass_msun``.  The partitions hold about ``chunk_size`` stars
    each; their HB counts sum to ``n_hb`` exactly (HB stars drawn, before completeness and window cuts,
    as in :func:`make_mock`) and the ``obs.n_field`` field stars are split over them
    (:func:`plan_chunked_mock`).  Before anything is written, the memory of the parallel partitions and
    the disk of all of them are checked against the limits (:func:`hbmodel.core.limits.check_budget`;
    ``max_memory``/``max_disk`` override the machine's); each partition checks the free disk again before
    it is written.  The output depends only on the arguments and ``seed`` (not on ``n_jobs`` or the
    scheduler)."""
    from hbmodel.io.jobs import run_chunked
    from hbmodel.core.limits import check_budget
    plan = plan_chunked_mock(population, bands=bands, obs=obs, seed=seed, chunk_size=chunk_size, n_hb=n_hb,
                             total_mass_msun=total_mass_msun)
    check_budget(plan.estimate(bands, out_dir=out_dir, n_jobs=n_jobs, scheduler=scheduler),
                 max_memory=max_memory, max_disk=max_disk)
    return run_chunked(plan.n_hb, plan.hb_sizes[0], _MockChunk(population, bands, obs, plan.field_sizes), out_dir,
                       n_jobs=n_jobs, scheduler=scheduler, force=force, seed=int(seed), balanced=True,
                       exact_rows=False)
