"""Surrogate of an HB/clump CMD: smooth, deterministic basis images of one population.

The *surrogate*: for one population (per helium node) the forward model
(:func:`hbmodel.physics.zahb.zahb_state`, :func:`hbmodel.physics.hb_evolution.hb_track`,
:func:`~hbmodel.physics.hb_evolution.hb_lifetime_myr`, :func:`~hbmodel.physics.hb_evolution.agb_track`, and the RGB nodes of
:meth:`hbmodel.populations.population.Population.model_stars`) is evaluated once on a dense grid of HB mass x evolutionary
phase.  Each HB-mass node becomes a *basis image*: the density, on the intrinsic plane
(colour_0, M_0) = (first - second band, first band), of the HB and early-AGB stars of that mass per unit birth
rate (nodes weighted by the time they represent), convolved with the photometric errors (a correlated 2-D
Gaussian per node: sigma_mag = s1, sigma_colour^2 = s1^2 + s2^2, cov = s1^2 with s1, s2 the catalogue's median
error-magnitude relation) and a small smoothing floor.  The RGB gets one image per helium node.

For a parameter set the model image is a weighted sum of basis images; the weights are the HB-mass
distribution (Gaussian in the integrated loss, HB mass = M_tip(age) - dM) integrated against linear "hat"
functions on the mass grid (exact in closed form, smooth in mean and spread, and still smooth as the spread
goes to zero).  Distance, reddening and zero-point offsets shift the *stars* (observed -> intrinsic); the
density is read at the shifted positions by bilinear interpolation and normalised over the shifted fitted
region with a summed-area table, so the likelihood is continuous in every parameter and free of Monte-Carlo
noise.

The likelihood that reads these images at the stars: :mod:`hbmodel.inference.likelihood`.
"""
from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
from scipy.special import ndtr

from hbmodel.physics import giant_branch as gb
from hbmodel.physics import hb_evolution as hbe
from hbmodel.core.tables import read_table
from hbmodel.populations.population import Population, StarSet
from hbmodel.physics.zahb import MENV_MIN_MSUN, zahb_state

__all__ = ["HBSurrogate", "hat_gaussian_weights", "build_surrogate", "pixel_for_errors", "population_extent",
           "fit_constants"]

_SQ2PI = np.sqrt(2.0 * np.pi)


@functools.lru_cache(maxsize=None)
def fit_constants() -> dict:
    """Numerical settings of the surrogate (``tables/fit_settings.csv``)."""
    return {k: float(v[0]) for k, v in read_table("fit_settings.csv").items()}


# --------------------------------------------------------------------------- weights
def _g(x, mu, sd):
    """Second antiderivative of the normal pdf: int_{-inf}^{x} Phi((t-mu)/sd) dt."""
    z = (x - mu) / sd
    return (x - mu) * ndtr(z) + sd * np.exp(-0.5 * z * z) / _SQ2PI


def hat_gaussian_weights(grid, h, mu, sd):
    """Weights w_k = E[hat_k(m)] for m ~ N(mu, sd) on a uniform grid (spacing ``h``) of hat functions.

    ``mu``, ``sd`` of shape (n,) -> (n, K).  Exact: w_k = [G(m_k+h) - 2G(m_k) + G(m_k-h)] / h with
    G(x) = (x-mu) Phi(z) + sd phi(z); smooth in mu and sd, tends to linear interpolation as sd -> 0.
    Weights sum to the probability mass inside the grid (mass off the grid is lost -- e.g. stars whose
    envelope is gone before ignition)."""
    mu = np.atleast_1d(np.asarray(mu, float))[:, None]
    sd = np.maximum(np.atleast_1d(np.asarray(sd, float))[:, None], 1e-3 * h)
    g = grid[None, :]
    w = (_g(g + h, mu, sd) - 2.0 * _g(g, mu, sd) + _g(g - h, mu, sd)) / h
    return np.clip(w, 0.0, None)


# --------------------------------------------------------------------------- surrogate
@dataclass
class HBSurrogate:
    """Basis images of one population on the intrinsic plane (see the module docstring).

    ``hb_images[j]`` (K, n_mag, n_col) float32 for helium node ``delta_y_nodes[j]``; ``rgb_images[j]``
    (n_mag, n_col).  Images are star densities per unit birth rate (Myr mag^-2).
    """

    bands: tuple
    col_edges: np.ndarray
    mag_edges: np.ndarray
    mass_grid: np.ndarray
    mass_step: float
    delta_y_nodes: np.ndarray
    hb_images: list
    rgb_images: list
    age_grid: np.ndarray
    tip_mass: np.ndarray        # (n_dy, n_age) tip mass at each age
    core_mass: np.ndarray       # (n_dy,)
    mh: float
    helium_excess: np.ndarray   # (n_dy,)
    x_env: np.ndarray
    teff_ref_k: float
    hb_nodes: dict              # intrinsic positions of HB nodes (for the default region / plots)

    @property
    def shape(self):
        return len(self.mag_edges) - 1, len(self.col_edges) - 1

    @property
    def dc(self):
        return float(self.col_edges[1] - self.col_edges[0])

    @property
    def dm(self):
        return float(self.mag_edges[1] - self.mag_edges[0])

    def tip_mass_at(self, age_gyr, j=0):
        return np.interp(age_gyr, self.age_grid, self.tip_mass[j])

    def blocks(self, mass_loss, mass_loss_sd, age_gyr, helium_fraction=None, delta_y=None):
        """Weights of the basis images: list of (helium node j, first node a, weights (n, b-a), rgb amp (n,))."""
        mu = np.atleast_1d(np.asarray(mass_loss, float))
        n = mu.size
        sd = np.broadcast_to(np.asarray(mass_loss_sd, float), (n,))
        age = np.broadcast_to(np.asarray(age_gyr, float), (n,))
        parts = [(0, np.ones(n))]
        if helium_fraction is not None and len(self.delta_y_nodes) > 1:
            fhe = np.broadcast_to(np.asarray(helium_fraction, float), (n,))
            dy = np.broadcast_to(np.asarray(delta_y, float), (n,))
            nodes = self.delta_y_nodes
            u = np.clip(np.interp(dy, nodes, np.arange(len(nodes))), 0, len(nodes) - 1 - 1e-12)
            j0 = np.floor(u).astype(int)
            t = u - j0
            parts = [(0, 1.0 - fhe)]
            for j in range(len(nodes)):
                a = np.where(j0 == j, 1.0 - t, 0.0) + np.where(j0 + 1 == j, t, 0.0)
                parts.append((j, fhe * a))
        out = []
        for j, amp in parts:
            if not np.any(amp > 0):
                continue
            m_hb = self.tip_mass_at(age, j) - mu
            w = hat_gaussian_weights(self.mass_grid, self.mass_step, m_hb, sd) * amp[:, None]
            keep = np.flatnonzero(w.max(axis=0) > 1e-9 * max(w.max(), 1e-300))
            if keep.size:  # a contiguous slice of nodes: a view of the basis, no copy
                a, b = int(keep[0]), int(keep[-1]) + 1
                out.append((j, a, w[:, a:b], amp))
            else:
                out.append((j, 0, w[:, :0], amp))
        return out

    def images(self, mass_loss, mass_loss_sd, age_gyr, helium_fraction=None, delta_y=None, blocks=None):
        """Model images (n, n_mag, n_col) for parameter arrays of length n (vectorised over walkers)."""
        if blocks is None:
            blocks = self.blocks(mass_loss, mass_loss_sd, age_gyr, helium_fraction, delta_y)
        n = blocks[0][2].shape[0]
        nm, nc = self.shape
        out = np.zeros((n, nm * nc), np.float32)
        for j, a, w, amp in blocks:
            if w.shape[1]:
                out += np.ascontiguousarray(w, np.float32) @ self.hb_images[j][a:a + w.shape[1]]
            out += amp[:, None].astype(np.float32) * self.rgb_images[j][None, :]
        return out.reshape(n, nm, nc)


def _intrinsic_nodes(sub_pop, sub, masses, bands, n_tau, n_agb):
    """HB + early-AGB nodes (colour, mag, weight, mass index) for HB masses ``masses`` of one sub-population."""
    mc = sub.core_mass_msun
    ok = masses >= mc + MENV_MIN_MSUN
    idx = np.flatnonzero(ok)
    if idx.size == 0:
        return None
    m = masses[idx]
    z = zahb_state(m, np.full(m.size, mc), sub.mh, sub.helium_excess)
    t_hb = hbe.hb_lifetime_myr(np.full(m.size, mc), z.logteff, sub.helium_excess)
    t_agb = hbe.agb_lifetime_myr(np.full(m.size, mc), z.logteff, sub.helium_excess)
    tau = (np.arange(n_tau) + 0.5) / n_tau
    s = (np.arange(n_agb) + 0.5) / n_agb
    l0 = np.repeat(z.logl, n_tau)
    t0 = np.repeat(z.logteff, n_tau)
    logl_h, logt_h = hbe.hb_track(l0, t0, np.tile(tau, m.size))
    # the same physics as Population.model_stars and the mock sampler: the redward end of the HB never
    # crosses the RGB, and the early AGB is placed against the RGB of the population's tip mass
    logt_h = gb.clip_blue_of_rgb(logl_h, logt_h, sub.mh, sub.tip_mass_msun, sub.helium_excess)
    l0a = np.repeat(z.logl, n_agb)
    t0a = np.repeat(z.logteff, n_agb)
    ma = np.repeat(m, n_agb)
    logl_a, logt_a = hbe.agb_track(l0a, t0a, np.tile(s, m.size), ma, sub.mh, sub.helium_excess,
                                   sub.tip_mass_msun)
    mass = np.concatenate([np.repeat(m, n_tau), ma])
    logl = np.concatenate([logl_h, logl_a])
    logt = np.concatenate([logt_h, logt_a])
    w = np.concatenate([np.repeat(t_hb / n_tau, n_tau), np.repeat(t_agb / n_agb, n_agb)])
    kidx = np.concatenate([np.repeat(idx, n_tau), np.repeat(idx, n_agb)])
    is_hb = np.concatenate([np.ones(m.size * n_tau, bool), np.zeros(m.size * n_agb, bool)])
    n = mass.size
    st = StarSet(np.where(is_hb, "hb", "agb"), mass, np.full(n, mc), logl, logt,
                 np.full(n, sub.composition.feh), w, np.zeros(n, int))
    mags = st.absolute_magnitudes(bands)
    keep = w > 0
    return (mags[bands[0]][keep] - mags[bands[1]][keep], mags[bands[0]][keep], w[keep], kidx[keep],
            10.0 ** logt[keep], is_hb[keep])


def _rgb_nodes(pop, bands, n_rgb):
    st = pop.model_stars(phases=("rgb",), n_rgb=n_rgb)
    if len(st) == 0:
        return np.zeros(0), np.zeros(0), np.zeros(0), np.zeros(0)
    mags = st.absolute_magnitudes(bands)
    return mags[bands[0]] - mags[bands[1]], mags[bands[0]], st.weight, st.teff_k


def _extinction_offsets(teff_k, bands, extinction):
    """(colour, magnitude) offsets of nodes of temperature ``teff_k`` from the temperature dependence of the
    extinction: ``extinction = (ebv, rv, law, r1, r2)`` with r1, r2 the reference ratios A/E(B-V) of the two
    bands that the fit's shifts use.  A star of temperature T is reddened by E (R1(T) - R2(T)) and dimmed by
    E R1(T) (as the mock draws it); the shifts apply E (r1 - r2) and E r1, so the nodes carry the rest at the
    prior mean E.  Broad bands need it: A_G/E(B-V) falls from 2.37 at 5,000 K to 2.24 at 4,200 K (blackbody-
    weighted law, :func:`hbmodel.photometry.extinction.extinction_ratio`), a 0.01 mag colour difference between the
    clump and the upper RGB at E(B-V) = 0.1, against 0.01 mag photometric errors."""
    if extinction is None or not extinction[0] > 0 or np.size(teff_k) == 0:
        return 0.0, 0.0
    from hbmodel.photometry.extinction import extinction_ratio
    ebv, rv, law, r1, r2 = extinction
    t = np.clip(np.asarray(teff_k, float), 3000.0, 50000.0)
    a1 = extinction_ratio(bands[0], t, rv, law)
    a2 = extinction_ratio(bands[1], t, rv, law)
    return ebv * ((a1 - a2) - (r1 - r2)), ebv * (a1 - r1)


def _deposit(col, mag, w, kidx, n_img, col_edges, mag_edges, err_model, bands, shift_c, shift_m, floor):
    """Sum correlated Gaussian kernels (photometric errors) of nodes into ``n_img`` images."""
    nm, nc = len(mag_edges) - 1, len(col_edges) - 1
    dc, dm = col_edges[1] - col_edges[0], mag_edges[1] - mag_edges[0]
    out = np.zeros(n_img * nm * nc)
    if col.size == 0:
        return out.reshape(n_img, nm * nc)
    m1 = mag + shift_m
    m2 = m1 - (col + shift_c)
    s1 = err_model(bands[0], m1)
    s2 = err_model(bands[1], m2)
    sm2 = s1 ** 2 + floor ** 2
    sc2 = s1 ** 2 + s2 ** 2 + floor ** 2
    cov = s1 ** 2
    hw_c = int(np.ceil(4.0 * np.sqrt(sc2.max()) / dc)) + 1
    hw_m = int(np.ceil(4.0 * np.sqrt(sm2.max()) / dm)) + 1
    hw_c, hw_m = min(hw_c, 40), min(hw_m, 40)
    oc = np.arange(-hw_c, hw_c + 1)
    om = np.arange(-hw_m, hw_m + 1)
    # nodes far outside the image cannot contribute
    inside = ((col > col_edges[0] - (hw_c + 1) * dc) & (col < col_edges[-1] + (hw_c + 1) * dc)
              & (mag > mag_edges[0] - (hw_m + 1) * dm) & (mag < mag_edges[-1] + (hw_m + 1) * dm))
    col, mag, w, kidx, sm2, sc2, cov = (a[inside] for a in (col, mag, w, kidx, sm2, sc2, cov))
    ic = np.floor((col - col_edges[0]) / dc).astype(int)
    im = np.floor((mag - mag_edges[0]) / dm).astype(int)
    chunk = max(1, int(4e6 // (oc.size * om.size)))
    for a in range(0, col.size, chunk):  # chunks of nodes (memory), vectorised inside
        sl = slice(a, a + chunk)
        jc = ic[sl, None, None] + oc[None, None, :]
        jm = im[sl, None, None] + om[None, :, None]
        x = col_edges[0] + (jc + 0.5) * dc - col[sl, None, None]
        y = mag_edges[0] + (jm + 0.5) * dm - mag[sl, None, None]
        det = sc2[sl] * sm2[sl] - cov[sl] ** 2
        q = (sm2[sl, None, None] * x * x - 2 * cov[sl, None, None] * x * y + sc2[sl, None, None] * y * y) \
            / det[:, None, None]
        k = np.exp(-0.5 * q)
        k /= k.sum(axis=(1, 2), keepdims=True) * (dc * dm)
        k *= w[sl, None, None]
        ok = (jc >= 0) & (jc < nc) & (jm >= 0) & (jm < nm)
        flat = (kidx[sl, None, None] * (nm * nc) + jm * nc + jc)
        out += np.bincount(flat[ok], weights=k[ok], minlength=out.size)
    return out.reshape(n_img, nm * nc)


_CACHE: dict = {}


def pixel_for_errors(colour_err) -> float:
    """Basis-image pixel (mag) matched to the sharpest data: half the 10th-percentile colour error,
    within [pixel_min_mag, pixel_mag] of ``tables/fit_settings.csv``.  A surrogate coarser than the
    photometric errors smooths away structure the data resolve (a red clump measured to 0.01 mag) and
    biases the parameters that move that structure."""
    c = fit_constants()
    e = np.asarray(colour_err, float)
    e = e[np.isfinite(e) & (e > 0)]
    if e.size == 0:
        return float(c["pixel_mag"])
    return float(np.clip(0.5 * np.percentile(e, 10), c["pixel_min_mag"], c["pixel_mag"]))


def build_surrogate(*, feh, alpha_fe, age_gyr, helium, bands, err_model, col_range, mag_range,
                    shift_c, shift_m, age_sd_gyr=0.0, delta_y_max=0.0, pixel=None, teff_ref_k=None,
                    extinction=None, cache=True) -> HBSurrogate:
    """Build (or fetch from the in-process cache) the basis images of a population.

    ``col_range``/``mag_range`` are intrinsic (absolute) ranges the images cover; ``shift_c``/``shift_m``
    the nominal observed-minus-intrinsic shifts used to look up the photometric errors.  ``extinction`` =
    (ebv, rv, law, r1, r2) moves every node by the temperature-dependent part of its extinction
    (:func:`_extinction_offsets`); None = one extinction ratio per band for all stars.
    """
    c = fit_constants()
    bands = tuple(bands)
    key = (float(feh), float(alpha_fe), float(age_gyr), helium, bands, err_model.key(),
           tuple(np.round(col_range, 4)), tuple(np.round(mag_range, 4)), round(shift_c, 4), round(shift_m, 4),
           round(float(age_sd_gyr), 4), round(float(delta_y_max), 4), pixel,
           None if extinction is None else tuple(extinction))
    if cache and key in _CACHE:
        return _CACHE[key]
    if pixel is None:
        pixel = c["pixel_mag"]
    nc = max(8, int(np.ceil((col_range[1] - col_range[0]) / pixel)))
    nm = max(8, int(np.ceil((mag_range[1] - mag_range[0]) / pixel)))
    scale = max(1.0, np.sqrt(nc * nm / c["max_pixels"]))
    nc, nm = int(np.ceil(nc / scale)), int(np.ceil(nm / scale))
    col_edges = np.linspace(col_range[0], col_range[1], nc + 1)
    mag_edges = np.linspace(mag_range[0], mag_range[1], nm + 1)
    # smoothing floor tied to the pixel actually used: the kernels stay resolved by the pixels, and the
    # model is never smoother than the image resolution requires
    floor = c["smooth_floor_per_pixel"] * max(col_edges[1] - col_edges[0], mag_edges[1] - mag_edges[0])
    # helium nodes
    if delta_y_max > 0:
        n_dy = int(np.ceil(delta_y_max / c["delta_y_step"])) + 1
        dys = np.linspace(0.0, delta_y_max, n_dy)
    else:
        dys = np.array([0.0])
    pops = [Population(feh, age_gyr, alpha_fe=alpha_fe, helium=helium,
                       helium_enriched_fraction=1.0 if dy > 0 else 0.0, helium_delta_y=float(dy)) for dy in dys]
    subs = [p.subpopulations[0] for p in pops]
    lo_age, hi_age = gb.AGE_RANGE_GYR
    if age_sd_gyr > 0:
        a0 = max(lo_age, age_gyr - 5 * age_sd_gyr)
        a1 = min(hi_age, age_gyr + 5 * age_sd_gyr)
        age_grid = np.linspace(a0, a1, 41)
    else:
        age_grid = np.array([age_gyr - 1e-6, age_gyr + 1e-6])
    tips = []
    for sub, p in zip(subs, pops):
        y_arg = sub.composition.y if (sub.helium_excess != 0 or helium is not None
                                       or p.helium_delta_y > 0) else None
        if p.helium_delta_y == 0 and helium is None:
            y_arg = None
        tips.append(np.asarray(gb.tip_mass_msun(np.clip(age_grid, lo_age, hi_age), sub.mh, y_arg), float))
    tips = np.array(tips)
    h = c["mass_step_msun"]
    m_lo = min(s.core_mass_msun for s in subs) + MENV_MIN_MSUN
    m_hi = float(tips.max()) + 2 * h
    mass_grid = np.arange(m_lo, m_hi + h, h)
    hb_images, rgb_images = [], []
    teffs, nodes_c, nodes_m, nodes_w = [], [], [], []
    for j, (sub, p) in enumerate(zip(subs, pops)):
        res = _intrinsic_nodes(p, sub, mass_grid, bands, int(c["n_tau"]), int(c["n_agb"]))
        if res is None:
            img = np.zeros((mass_grid.size, nm * nc))
        else:
            col, mag, w, kidx, teff, is_hb = res
            oc, om = _extinction_offsets(teff, bands, extinction)
            col, mag = col + oc, mag + om
            if j == 0:
                teffs.append(teff[is_hb])
                nodes_c.append(col[is_hb]); nodes_m.append(mag[is_hb]); nodes_w.append(kidx[is_hb])
            img = _deposit(col, mag, w, kidx, mass_grid.size, col_edges, mag_edges, err_model, bands,
                           shift_c, shift_m, floor)
        hb_images.append(np.ascontiguousarray(img, np.float32))
        rc, rm, rw, rt = _rgb_nodes(p, bands, int(c["n_rgb"]))
        oc, om = _extinction_offsets(rt, bands, extinction)
        rc, rm = rc + oc, rm + om
        rimg = _deposit(rc, rm, rw, np.zeros(rc.size, int), 1, col_edges, mag_edges, err_model, bands,
                        shift_c, shift_m, floor)[0]
        rgb_images.append(rimg.astype(np.float32))
    if teff_ref_k is None:
        teff_ref_k = float(np.median(np.concatenate(teffs))) if teffs else 5000.0
    hb_nodes = {"colour": np.concatenate(nodes_c) if nodes_c else np.zeros(0),
                "mag": np.concatenate(nodes_m) if nodes_m else np.zeros(0),
                "mass_index": np.concatenate(nodes_w) if nodes_w else np.zeros(0, int)}
    s = HBSurrogate(bands, col_edges, mag_edges, mass_grid, h, dys, hb_images, rgb_images, age_grid, tips,
                    np.array([sb.core_mass_msun for sb in subs]), subs[0].mh,
                    np.array([sb.helium_excess for sb in subs]), np.array([sb.composition.x for sb in subs]),
                    teff_ref_k, hb_nodes)
    if cache:
        if len(_CACHE) > 8:
            _CACHE.pop(next(iter(_CACHE)))
        _CACHE[key] = s
    return s


def population_extent(*, feh, alpha_fe, age_gyr, helium, bands):
    """Intrinsic (colour, mag) extent of the HB + early AGB over all HB masses, the RGB-base magnitude, and a
    reference temperature for the reddening vector: that of the RGB at the median HB magnitude (own choice:
    the giants and the clump that fill a fitted region lie near it; 5,000 K when there is no RGB)."""
    pop = Population(feh, age_gyr, alpha_fe=alpha_fe, helium=helium)
    sub = pop.subpopulations[0]
    masses = np.linspace(sub.core_mass_msun + 0.01, sub.tip_mass_msun, 60)
    col, mag, w, kidx, teff, is_hb = _intrinsic_nodes(pop, sub, masses, bands, 24, 12)
    # the RGB base modelled (log L = logl_rgb_min) sets the faintest usable magnitude
    rc, rm, rw, rt = _rgb_nodes(pop, bands, 512)
    teff_ref = 5000.0
    if rm.size and np.any(is_hb):
        order = np.argsort(rm)
        teff_ref = float(np.interp(np.median(mag[is_hb]), rm[order], rt[order]))
    return col, mag, (float(np.max(rm)) if rm.size else np.inf), teff_ref
