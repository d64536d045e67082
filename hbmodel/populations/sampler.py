"""Fast random stars for mock catalogues: each phase of a population tabulated once, then looked up.

:meth:`hbmodel.populations.population.Population.sample` runs the stage-by-stage physics for every star; it is the
reference.  A survey-size mock (10^6-10^7 stars) draws the same stars from dense tables built once per
(population, bands, extinction law), so the per-star cost is a few table look-ups:

* **RGB** -- for one sub-population the RGB is a one-parameter sequence in fractional RGB age ``v``
  (uniform in time, RGB bump included).  Mass, log L, Teff, log g, the absolute magnitudes and the
  extinction ratios A_band/E(B-V) are tabulated on ``N_RGB_NODES`` equally spaced ``v`` and
  interpolated linearly.
* **HB and early AGB** -- HB masses are drawn from the lifetime-weighted mass distribution (counts
  follow time spent in the phase; Renzini & Buzzoni 1986) through its inverse CDF, tabulated on
  ``N_MASS_NODES`` quantiles with the ZAHB position of each; a discrete mass-loss mixture (no spread)
  is drawn exactly.  The HB or early-AGB track (:mod:`hbmodel.physics.hb_evolution`) and the RR Lyrae mode
  and period (:mod:`hbmodel.physics.pulsation`) are evaluated per star; photometry comes from
  :class:`hbmodel.photometry.magnitudes.FixedMetallicityPhotometry`.

The tables reproduce the reference physics to < 1e-3 mag and < 1e-4 dex (``tests/test_sampler.py``);
the counts per phase are those of :meth:`Population.sample` (same expected numbers).  Every random number
comes from the caller's ``numpy.random.Generator``.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from hbmodel.core.randomness import as_generator
from hbmodel.physics import hb_evolution as hbe
from hbmodel.photometry.extinction import extinction_ratio
from hbmodel.physics.giant_branch import clip_blue_of_rgb, log_g_from_logs
from hbmodel.photometry.magnitudes import FixedMetallicityPhotometry, _Uniform, get_band
from hbmodel.populations.population import PHASES, Population
from hbmodel.physics.pulsation import period_days, pulsation_mode
from hbmodel.physics.zahb import MENV_MIN_MSUN, zahb_state

__all__ = ["StarSampler", "PHASE_CODES", "N_RGB_NODES", "N_MASS_NODES"]

#: Integer codes of the phases in sampler output (index into ``hbmodel.populations.population.PHASES``).
PHASE_CODES = {ph: k for k, ph in enumerate(PHASES)}
N_RGB_NODES = 16385
N_MASS_NODES = 4097
_CHUNK = 1 << 13      # stars per chunk of random numbers (fixes the order the stream is read in)
_WORK = 1 << 15       # stars per stretch of physics (measured fastest: per-call overheads vs cache)


def _threads(n_threads, n_work) -> int:
    """Worker threads of a draw: ``n_threads`` if given, else up to 2 when the machine has the cores
    (more gain little: the look-ups are memory-bound); never more than the stretches of work."""
    import os
    if n_threads is None:
        n_threads = min(2, os.cpu_count() or 1)
    return max(1, min(int(n_threads), n_work))
_N_U = 8192           # mass-loss quantile cells used to build the lifetime-weighted mass distribution


@dataclass
class _SubTables:
    rgb: _Uniform | None          # over fractional RGB age v in [0, 1]
    mass: dict                    # phase -> _Uniform over lifetime-weighted quantile p, or discrete arrays
    phot: FixedMetallicityPhotometry


class StarSampler:
    """Tabulated random draws of ``population``'s RGB, HB and early-AGB stars.

    Parameters
    ----------
    population : Population
    bands : sequence of str
        Bands whose absolute magnitudes (and extinction ratios, for ``rv`` and ``law``) are tabulated.
    rv, law : float, str
        Extinction curve for the ratios A_band/E(B-V)(Teff) (see :mod:`hbmodel.photometry.extinction`).
    """

    def __init__(self, population: Population, bands, rv=3.1, law="F99"):
        if not isinstance(population, Population):
            raise ValueError("StarSampler needs a hbmodel Population")
        self.population = population
        self.bands = tuple(get_band(b).name for b in bands)
        self.rv, self.law = float(rv), str(law)
        for b in self.bands:  # validates rv and law once, with the usual messages
            extinction_ratio(b, 5000.0, self.rv, self.law)
        self._tables = [self._build(i, sub) for i, sub in enumerate(population.subpopulations)]
        self._composed = {}   # (sub, distance modulus, E(B-V)) -> RGB table of true apparent magnitudes
        self._rates = population.phase_times()

    # ------------------------------------------------------------------ tables
    def _ratio_columns(self):
        return {f"R_{b}": (lambda t, b=b: extinction_ratio(b, t, self.rv, self.law)) for b in self.bands}

    def _build(self, i, sub):
        pop = self.population
        phot = FixedMetallicityPhotometry(sub.composition.feh, self.bands, extra=self._ratio_columns())
        rgb = None
        if sub.t_rgb_myr > 0:
            st = pop._rgb_nodes(i, sub, np.linspace(0.0, 1.0, N_RGB_NODES))
            mags = st.absolute_magnitudes(self.bands)
            teff = np.clip(st.teff_k, 3000.0, 50000.0)
            cols = {"mass": st.mass_msun, "logl": st.logl, "teff": teff, "logg": st.logg}
            for b in self.bands:
                cols[f"M_{b}"] = mags[b]
                cols[f"R_{b}"] = extinction_ratio(b, teff, self.rv, self.law)
            rgb = _Uniform(0.0, 1.0, N_RGB_NODES, cols)
        mass = {ph: self._mass_table(sub, ph) for ph in ("hb", "agb")}
        return _SubTables(rgb, mass, phot)

    def _mass_table(self, sub, ph):
        """Lifetime-weighted HB-mass distribution of one sub-population for phase ``ph``.

        Returns ``("discrete", p_cum, mass, zahb_logl, zahb_logteff)`` for a mixture without spread,
        ``("table", _Uniform over p)`` otherwise, or None if no star reaches the phase."""
        pop = self.population
        ml = pop.mass_loss
        mc = sub.core_mass_msun
        discrete = ml.kind != "hb_mass" and all(float(c[2]) == 0.0 for c in ml.components)
        if discrete:
            w = np.array([float(c[0]) for c in ml.components])
            cw = np.cumsum(w / w.sum())
            u = cw - 0.5 * np.diff(np.concatenate([[0.0], cw]))      # inside each component's quantile range
        else:
            u = (np.arange(_N_U) + 0.5) / _N_U
        # masses, ZAHB states and lifetimes exactly as Population.sample sees them; lost envelopes weigh 0
        res, keep = pop._hb_set(0, sub, u, None, np.ones(u.size))
        if res is None:
            return None
        m_k, _mc, z, t_hb, t_agb, _w = res
        t = np.zeros(u.size)
        t[keep] = t_hb if ph == "hb" else t_agb
        m = np.full(u.size, mc + MENV_MIN_MSUN)
        m[keep] = m_k
        l0, t0 = np.zeros(u.size), np.zeros(u.size)
        l0[keep], t0[keep] = z.logl, z.logteff
        if discrete:
            prob = np.diff(np.concatenate([[0.0], cw])) * t
            if prob.sum() <= 0:
                return None
            return ("discrete", np.cumsum(prob) / prob.sum(), m, l0, t0)
        if t.sum() <= 0:
            return None
        # CDF over the quantile cells, inverted on equally spaced p nodes
        edges = np.arange(_N_U + 1) / _N_U
        cdf = np.concatenate([[0.0], np.cumsum(t)]) / t.sum()
        rising = np.concatenate([[True], np.diff(cdf) > 0])
        p = np.linspace(0.0, 1.0, N_MASS_NODES)
        u_p = np.clip(np.interp(p, cdf[rising], edges[rising]), 0.5 / _N_U, 1 - 0.5 / _N_U)
        m_p, _lost = pop.hb_masses(sub, u_p)
        m_p = np.maximum(m_p, mc + MENV_MIN_MSUN)
        zp = zahb_state(m_p, np.full_like(m_p, mc), sub.mh, sub.helium_excess)
        return ("table", _Uniform(0.0, 1.0, N_MASS_NODES,
                                  {"mass": m_p, "log_mass": np.log10(m_p), "l0": zp.logl, "t0": zp.logteff}))

    # ------------------------------------------------------------------ counts
    def counts(self, n_hb, rng, rgb_logl_range=None):
        """Star counts per (sub-population, phase): :meth:`Population.phase_counts`."""
        return self.population.phase_counts(n_hb, rng, PHASES, rgb_logl_range, rates=self._rates)

    # ------------------------------------------------------------------ draws
    def draw(self, n_hb, rng: np.random.Generator, *, rgb_logl_range=None, distance_modulus=0.0, ebv=None,
             star_dtype=np.float64, n_threads=None, on_rows=None):
        """Random stars: ``n_hb`` HB stars (expected) plus their RGB and early-AGB stars.

        Returns a dict of equal-length arrays: ``phase`` (int codes, :data:`PHASE_CODES`), ``sub``
        (sub-population index), ``mass``,
        ``teff``, ``logg``, ``logl``, ``rr_mode``, ``period_days``, and per band either the true
        apparent magnitude ``<band>_true`` = M + ``distance_modulus`` + ``ebv`` A/E(B-V) (scalar
        ``ebv``) or, with ``ebv=None``, ``M_<band>`` and ``R_<band>`` (absolute magnitude and
        A_band/E(B-V)) for per-star reddening.  ``star_dtype`` is the type of ``mass``, ``teff``, ``logg``,
        ``logl`` and ``period_days`` (computed in float64 and rounded once on storing, e.g. float32 for
        a compact catalogue); magnitudes and ratios are float64.  ``n_threads`` (default: up to 2) share
        the per-star physics; the random numbers are drawn first, in one thread, so the stars do not
        depend on it.  ``on_rows(out, stop)``, if given, is called in the calling thread each time the
        physics of rows ``[0, stop)`` of ``out`` (the dict returned) is complete, ``stop`` rising to the
        number of rows, after every random number of the draw has been taken from ``rng``: a caller can
        process finished rows while the rest are computed.
        """
        rng = as_generator(rng)
        n_hb = int(n_hb)
        if n_hb <= 0:
            raise ValueError("the number of HB stars must be positive")
        blocks = self.counts(n_hb, rng, rgb_logl_range)
        n = sum(b[2] for b in blocks)
        per_star = ebv is None
        out = {k: np.empty(n, star_dtype) for k in ("mass", "teff", "logg", "logl", "period_days")}
        names = ([f"M_{b}" for b in self.bands] + [f"R_{b}" for b in self.bands] if per_star
                 else [f"{b}_true" for b in self.bands])
        out.update({k: np.empty(n) for k in names})
        sizes = [b[2] for b in blocks]
        out["phase"] = np.repeat(np.array([PHASE_CODES[b[1]] for b in blocks], np.int8), sizes)
        out["sub"] = np.repeat(np.array([b[0] for b in blocks], np.int16), sizes)
        out["rr_mode"] = np.zeros(n, np.int8)
        if ebv is not None:  # the RGB tables of true apparent magnitudes, made before any worker runs
            for i in {b[0] for b in blocks if b[1] == "rgb"}:
                self._composed_rgb(i, distance_modulus, ebv)
        work = []  # (method, arguments): the physics of each stretch of stars, once its random numbers are drawn
        a = 0
        for i, ph, k, win in blocks:
            # The random numbers come first, in the order the stream has always been read (chunks of _CHUNK
            # stars: RGB one uniform a star; HB/AGB a chunk's mass quantiles, then its track phases), so a
            # seed gives the same stars whatever the work size or the number of threads.
            if ph == "rgb":
                r = (rng.random(k),)
            else:
                u = rng.random(2 * k)
                full = k // _CHUNK * _CHUNK
                head = u[:2 * full].reshape(-1, 2, _CHUNK)
                r = tuple(np.concatenate([head[:, j].ravel(), u[2 * full + j * (k - full):2 * full + (j + 1) * (k - full)]])
                          for j in (0, 1))
            for c0 in range(0, k, _WORK):
                c1 = min(c0 + _WORK, k)
                view = {key: arr[a + c0:a + c1] for key, arr in out.items()}
                rand = tuple(x[c0:c1] for x in r)
                if ph == "rgb":
                    work.append((self._fill_rgb, (i, win, *rand, view, distance_modulus, ebv), a + c1))
                else:
                    work.append((self._fill_hb, (i, ph, *rand, view, distance_modulus, ebv), a + c1))
            a += k
        def done(stop):
            if on_rows is not None:
                on_rows(out, stop)

        threads = _threads(n_threads, len(work))
        if threads > 1:  # numpy releases the GIL in the element-wise work; stretches are disjoint
            from concurrent.futures import ThreadPoolExecutor
            with ThreadPoolExecutor(threads) as pool:
                futures = [(pool.submit(fn, *args), stop) for fn, args, stop in work]
                del work
                try:
                    for f, stop in futures:  # in row order: the finished rows form a growing prefix
                        f.result()
                        done(stop)
                except BaseException:
                    for f, _stop in futures:
                        f.cancel()
                    raise
        else:
            for fn, args, stop in work:
                fn(*args)
                done(stop)
        if n == 0:
            done(0)
        return out

    def _composed_rgb(self, i, dm, ebv):
        """The RGB table of sub-population ``i`` in true apparent magnitudes (a function of the
        fractional age alone: composed at the nodes, looked up once per star)."""
        key = (i, float(dm), float(ebv))
        comp = self._composed.get(key)
        if comp is None:
            if len(self._composed) > 64:
                self._composed.clear()
            tab = self._tables[i].rgb
            comp = self._composed[key] = _Uniform(0.0, 1.0, tab.n, {
                b: tab.val[f"M_{b}"] + dm + ebv * tab.val[f"R_{b}"] for b in self.bands})
        return comp

    def _fill_rgb(self, i, win, v, out, dm, ebv):
        tab = self._tables[i].rgb
        v = v * (win[1] - win[0])
        v += win[0]
        loc = tab.locate(v)
        for key in ("mass", "teff", "logg", "logl"):
            if out[key].dtype == np.float64:
                tab.get(key, *loc, out=out[key])
            else:  # interpolated in float64, rounded once
                out[key][...] = tab.get(key, *loc)
        out["period_days"][...] = np.nan
        if ebv is None:
            for b in self.bands:
                tab.get(f"M_{b}", *loc, out=out[f"M_{b}"])
                tab.get(f"R_{b}", *loc, out=out[f"R_{b}"])
        else:
            # the true apparent magnitude is itself a function of v: compose at the nodes, look up once
            comp = self._composed_rgb(i, dm, ebv)
            for b in self.bands:
                comp.get(b, *loc, out=out[f"{b}_true"])

    def _fill_hb(self, i, ph, p, s, out, dm, ebv):
        sub = self.population.subpopulations[i]
        tabs = self._tables[i]
        kind, *mt = tabs.mass[ph]
        if kind == "discrete":
            cum, m, l0, t0 = mt
            j = np.minimum(np.searchsorted(cum, p, side="right"), len(cum) - 1)
            mass, log_mass, l0, t0 = m[j], np.log10(m)[j], l0[j], t0[j]
        else:
            tab = mt[0]
            loc = tab.locate(p)
            mass, log_mass, l0, t0 = (tab.get(c, *loc) for c in ("mass", "log_mass", "l0", "t0"))
        if ph == "hb":
            logl, logt = hbe.hb_track(l0, t0, s)
            # the redward end of the HB never crosses the RGB (it joins the AGB, bluer than the RGB)
            logt = clip_blue_of_rgb(logl, logt, sub.mh, sub.tip_mass_msun, sub.helium_excess)
        else:
            logl, logt = hbe.agb_track(l0, t0, s, mass, sub.mh, sub.helium_excess, sub.tip_mass_msun)
        np.clip(logt, np.log10(3000.0), np.log10(50000.0), out=logt)
        out["mass"][...] = mass
        out["logl"][...] = logl
        np.power(10.0, logt, out=out["teff"])
        logg = log_g_from_logs(log_mass, logl, logt)
        out["logg"][...] = logg
        if ph == "hb":
            mode = pulsation_mode(logt, logl, mass, (l0, t0, s))
            out["rr_mode"][...] = mode
            out["period_days"][...] = period_days(logl, mass, logt, mode)
        else:
            out["period_days"][...] = np.nan
        phot = tabs.phot
        loc = phot.locate(logt)
        mags = phot.absolute_magnitudes(logt, np.clip(logg, -0.5, 6.5), logl, located=loc)
        for b in self.bands:
            if ebv is None:
                out[f"M_{b}"][...] = mags[b]
                phot.grid.get(f"R_{b}", *loc, out=out[f"R_{b}"])
            else:
                r = phot.grid.get(f"R_{b}", *loc)
                r *= ebv
                r += dm
                np.add(mags[b], r, out=out[f"{b}_true"])
