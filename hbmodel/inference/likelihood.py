"""Likelihood of the stars of an HB/clump CMD region under the smooth surrogate density of
:mod:`hbmodel.inference.surrogate` (basis images; the photometric errors: :mod:`hbmodel.inference.error_model`).

The likelihood is the unbinned mixture likelihood (Dolphin 2002, MNRAS 332, 91 discusses it with the binned
Poisson form it approximates): p_i = (1 - f) c(m_i) rho(x_i - s) / Z(s) + f / A, with f the field fraction
(uniform over the region of area A), c the completeness and Z the normalisation over the region.  A binned
Poisson Hess-diagram statistic (Dolphin 2002, eq. 10) is provided for the residual plot and a goodness-of-fit
figure.

Differential reddening: each star's E(B-V) scatters about the mean by a Gaussian of sd ``ebv_spread`` (a
nuisance parameter), which moves it along the reddening vector v = (E(colour)/E(B-V), A_first/E(B-V)).  The
model density is then the walker's image convolved with that 1-D Gaussian along v: done exactly (for the
pixelised image) by a Fourier multiplier exp(-2 pi^2 sd^2 (u . f)^2), u = v in pixels, on a zero-padded image
(no wrap-around).  Its normalisation over the region is the average of the plain one over shifts along v
(9-node Gauss-Hermite quadrature on the shift tables, which then reach that far).  The convolution is linear,
so it commutes with the weighted sum of basis images and is applied once per walker.

Validity: two bands; a simple population (one age and composition); the region must lie brighter than the
faint end of the modelled RGB (log L/Lsun = 0.8): fainter stars (sub-giants, main sequence) are not modelled.

Size (580+ lines): :class:`CMDLikelihood` is one class whose fast paths (pixel views, pre-convolved spread
levels, normalisation tables) share its cached state; the surrogate and the error model are modules of their own.
"""
from __future__ import annotations

import numpy as np
from scipy import fft as sfft

from hbmodel.inference.error_model import ErrorModel
from hbmodel.inference.surrogate import (HBSurrogate, build_surrogate, fit_constants, hat_gaussian_weights,
                                         pixel_for_errors, population_extent)

__all__ = ["ErrorModel", "HBSurrogate", "CMDLikelihood", "hat_gaussian_weights", "build_surrogate",
           "pixel_for_errors", "population_extent", "fit_constants",
           "hess_poisson_deviance"]

#: Threads of the once-per-fit transforms of the basis (the machine's two cores; per-walker work stays on one)
_FFT_WORKERS = 2
# Gauss-Hermite nodes/weights for the standard normal (probabilists' Hermite, weights summing to 1)
_GH_T, _GH_W = np.polynomial.hermite_e.hermegauss(9)
_GH_W = _GH_W / _GH_W.sum()


# --------------------------------------------------------------------------- likelihood
class CMDLikelihood:
    """Unbinned mixture log-likelihood of stars in a rectangular CMD region (see the module docstring).

    ``colour``/``mag``: observed values of the stars inside ``region`` = (cmin, cmax, mbright, mfaint).
    ``completeness``: callable of the observed first-band magnitude (or None)."""

    def __init__(self, surrogate: HBSurrogate, colour, mag, region, completeness=None, *, shift_lo, shift_hi,
                 n_shift=41, reddening_vector=None, spread_max=0.0):
        self.s = surrogate
        self.colour = np.asarray(colour, float)
        self.mag = np.asarray(mag, float)
        self.region = tuple(float(v) for v in region)
        cmin, cmax, mb, mf = self.region
        self.area = (cmax - cmin) * (mf - mb)
        self.completeness = completeness
        self.c_star = np.ones(self.colour.size) if completeness is None else np.asarray(completeness(self.mag))
        self.n = self.colour.size
        mcen = 0.5 * (surrogate.mag_edges[1:] + surrogate.mag_edges[:-1])
        self._mcen = mcen
        self.shift_lo = np.asarray(shift_lo, float)
        self.shift_hi = np.asarray(shift_hi, float)
        self._box_lo, self._box_hi = self.shift_lo.copy(), self.shift_hi.copy()  # the walkers' shift range
        self._setup_blur(reddening_vector, float(spread_max))
        self._setup_at_stars()
        if self._blur_q is not None:
            # the normalisation of a convolved image is the Gauss-Hermite average of the plain one over shifts
            # along the reddening vector: the tables reach that far, at the same shift spacing
            ext = _GH_T.max() * self.spread_max * np.abs(np.array(self.reddening_vector))
            width = self.shift_hi - self.shift_lo
            n_shift = int(min(3 * n_shift, np.ceil(n_shift * np.max((width + 2 * ext) / width))))
            self.shift_lo, self.shift_hi = self.shift_lo - ext, self.shift_hi + ext
        self._build_norm_tables(n_shift)

    #: Fractions of the largest spread for which zero-padded transform sizes are prepared: a batch of
    #: walkers uses the smallest that holds its largest spread (smaller transforms when spreads are small).
    _BLUR_LEVELS = (0.25, 0.5, 1.0)

    def _setup_blur(self, vec, spread_max):
        """Fourier multipliers of the differential-reddening convolution (see the module docstring):
        per level L of :data:`_BLUR_LEVELS`, ``(q, shape)`` such that the multiplier is exp(-sd^2 q) on an
        image zero-padded by 4.5 L sd_max |v| pixels (no wrap-around for sd <= L sd_max)."""
        self._blur_q = None
        self.spread_max = spread_max
        self.reddening_vector = None
        if vec is None or not spread_max > 0:
            return
        s = self.s
        nm, nc = s.shape
        um, uc = float(vec[1]) / s.dm, float(vec[0]) / s.dc   # pixels per unit E(B-V): rows (mag), columns
        self._blur_q = {}
        for level in self._BLUR_LEVELS:
            pm = int(np.ceil(4.5 * level * spread_max * abs(um))) + 2
            pc = int(np.ceil(4.5 * level * spread_max * abs(uc))) + 2
            shape = (sfft.next_fast_len(nm + pm, real=True), sfft.next_fast_len(nc + pc, real=True))
            fm = np.fft.fftfreq(shape[0])[:, None]
            fc = np.fft.rfftfreq(shape[1])[None, :]
            self._blur_q[level] = ((2.0 * np.pi ** 2 * (um * fm + uc * fc) ** 2).astype(np.float32), shape)
        self.reddening_vector = (float(vec[0]), float(vec[1]))

    def blur(self, img, spread):
        """Images (n, n_mag, n_col) convolved along the reddening vector with Gaussians of sd ``spread``
        (E(B-V), per walker).  Values below zero (float rounding of the transform) are set to zero."""
        if self._blur_q is None:
            return img
        n, nm, nc = img.shape
        sd = np.broadcast_to(np.abs(np.asarray(spread, float)), (n,))
        sd2 = (sd ** 2).astype(np.float32)
        out = np.empty(img.shape, np.float32)
        for a in range(0, n, 16):  # chunks of walkers (memory)
            top = float(sd[a:a + 16].max()) / self.spread_max
            level = next((lv for lv in self._BLUR_LEVELS if top <= lv), self._BLUR_LEVELS[-1])
            q, shape = self._blur_q[level]
            f = sfft.rfft2(img[a:a + 16], s=shape, axes=(1, 2), workers=1)
            f *= np.exp(-sd2[a:a + 16, None, None] * q)
            out[a:a + 16] = sfft.irfft2(f, s=shape, axes=(1, 2), workers=1)[:, :nm, :nc]
        return np.maximum(out, 0.0, out=out)

    # ------------------------------------------------------------------ fast path: the model at the stars
    #: Form the walkers' models on the stars' pixels from the pre-convolved basis (False: whole images
    #: convolved exactly per walker, the reference the fast path is tested against).
    at_stars = True
    #: Levels of the pre-convolved basis: from V = spread^2 = 0, each step the smaller of (i) W + V growing by
    #: _LEVEL_RATIO and (ii) the spread growing by _LEVEL_STEP sqrt(W), W the variance (in E(B-V)^2) of the
    #: narrowest image feature along the reddening vector (pixel and smoothing floor).  Own choices: the
    #: cubic Hermite interpolation in V between levels then changes the log-likelihood of a 1,745-star fit
    #: by < 0.03 over the whole spread range against the exact convolution of the walker's image (measured
    #: on random parameter sets); tests/test_fit.py checks the density against the analytic convolution.
    _LEVEL_STEP = 1.0
    _LEVEL_RATIO = 2.0
    #: Bytes of pre-convolved basis kept in memory (least recently used levels are dropped, recomputed on need).
    _LEVEL_BUDGET = 384 * 2 ** 20

    def _setup_at_stars(self):
        """The pixels the stars can read for shifts inside the walkers' box, and the spreads at which the
        basis is pre-convolved.

        The likelihood only needs the model at the (shifted) stars, so the walkers' images are formed on
        these pixels only, from basis images convolved once per fit along the reddening vector at evenly
        spaced spreads sd_l from 0 to spread_max (computed when first needed).  A Gaussian blur's
        variance adds, so the convolved basis is smooth in V = sd^2: it and its V-derivative (the heat
        equation: dB/dV = the multiplier -q of the transform) at the two bracketing levels give a cubic
        Hermite interpolation in V."""
        s = self.s
        self._levels = np.array([0.0])
        if self._blur_q is not None:
            vc, vm = self.reddening_vector
            e = np.array([vc, vm]) / np.hypot(vc, vm)
            pix = max(s.dc, s.dm)
            w2 = ((fit_constants()["smooth_floor_per_pixel"] * pix) ** 2
                  + (s.dc ** 2 * e[0] ** 2 + s.dm ** 2 * e[1] ** 2) / 12)   # floor and pixel along v
            W = w2 / (vc * vc + vm * vm)
            vmax, step = self.spread_max ** 2, self._LEVEL_STEP * np.sqrt(W)
            lv = [0.0]
            while lv[-1] < vmax:  # the smaller of the two steps (see _LEVEL_STEP)
                v = lv[-1]
                lv.append(v + min((self._LEVEL_RATIO - 1.0) * (W + v), (np.sqrt(v) + step) ** 2 - v))
            lv[-1] = vmax
            self._levels = np.array(lv)
        self._spectra = {}               # helium node -> [transforms of the padded basis rows, done]
        self._views = [self._view(self._box_lo, self._box_hi)]

    def _view(self, lo, hi):
        """The stars' pixels for shifts in the box ``lo``-``hi`` (bilinear corners, one pixel of margin)."""
        from collections import OrderedDict
        s = self.s
        nm, nc = s.shape

        def span(x, e0, d, n, a, b):
            u0 = np.clip((x - b - e0) / d - 0.5, 0, n - 1 - 1e-9)
            u1 = np.clip((x - a - e0) / d - 0.5, 0, n - 1 - 1e-9)
            return np.maximum(np.floor(u0).astype(int) - 1, 0), np.minimum(np.floor(u1).astype(int) + 2, n - 1)
        j0, j1 = span(self.colour, s.col_edges[0], s.dc, nc, lo[0], hi[0])
        i0, i1 = span(self.mag, s.mag_edges[0], s.dm, nm, lo[1], hi[1])
        diff = np.zeros((nm + 1, nc + 1), np.int64)   # rectangles of every star, summed (no loop over stars)
        for r, c, v in ((i0, j0, 1), (i0, j1 + 1, -1), (i1 + 1, j0, -1), (i1 + 1, j1 + 1, 1)):
            np.add.at(diff, (r, c), v)
        mask = np.cumsum(np.cumsum(diff, axis=0), axis=1)[:nm, :nc] > 0
        pix = np.flatnonzero(mask)
        cmap = np.full(nm * nc, -1, np.int64)
        cmap[pix] = np.arange(pix.size)
        # cache: (helium node, level) -> [B, D, done] (see _level)
        return {"lo": np.array(lo, float), "hi": np.array(hi, float), "pix": pix, "cmap": cmap,
                "cache": OrderedDict()}

    def focus_shifts(self, lo, hi):
        """Also keep the stars' pixels for the narrower shift box ``lo``-``hi`` (inside the walkers' box):
        walkers inside it (a sampler's, once it knows the posterior's extent) form their images on fewer
        pixels; the others use the whole box's pixels.  The likelihood's values are unchanged."""
        lo = np.maximum(np.asarray(lo, float), self._box_lo)
        hi = np.minimum(np.asarray(hi, float), self._box_hi)
        self._views = [self._views[-1]]
        if np.all(hi > lo):
            self._views.insert(0, self._view(lo, hi))

    def _level(self, view, j, l, rows, deriv=True):
        """Basis of helium node ``j`` convolved at level ``l`` on the pixels of ``view``: [B, D, done_B,
        done_D] with B, D of shape (n_nodes + 2, n_pix): row 0 and the last row the RGB, row k + 1 mass node
        k (a block of nodes and the RGB are then one contiguous slice of rows); D None without a
        convolution.  ``rows``: basis indices (mass nodes, n_nodes = the RGB) that must be computed (in D
        too if ``deriv``).  A narrower view copies its pixels from the whole box's arrays."""
        cache = view["cache"]
        key = (j, l)
        ent = cache.get(key)
        K = self.s.hb_images[j].shape[0]
        npix = view["pix"].size
        has_d = self._blur_q is not None
        if ent is None:
            ent = [np.zeros((K + 2, npix), np.float32), np.zeros((K + 2, npix), np.float32) if has_d else None,
                   np.zeros(K + 1, bool), np.zeros(K + 1, bool)]
            size = ent[0].nbytes * (2 if has_d else 1)
            used = sum(e[0].nbytes * (2 if e[1] is not None else 1) for e in cache.values())
            while cache and used + size > self._LEVEL_BUDGET // len(self._views):
                _, old = cache.popitem(last=False)
                used -= old[0].nbytes * (2 if old[1] is not None else 1)
            cache[key] = ent
        else:
            cache.move_to_end(key)
        todo_b = rows[~ent[2][rows]]
        todo_d = rows[~ent[3][rows]] if (deriv and has_d) else rows[:0]
        if todo_b.size or todo_d.size:
            if view is self._views[-1]:
                self._convolve_rows(view, j, l, todo_b, todo_d, ent)
            else:
                wide = self._views[-1]
                src = self._level(wide, j, l, np.union1d(todo_b, todo_d), deriv)
                sub = wide["cmap"][view["pix"]]
                for todo, dst, arr, flag in ((todo_b, ent[0], src[0], ent[2]), (todo_d, ent[1], src[1], ent[3])):
                    if todo.size:
                        st = np.where(todo == K, 0, todo + 1)
                        if np.any(todo == K):
                            st = np.append(st, K + 1)
                        dst[st] = arr[st][:, sub]
                        flag[todo] = True
        return ent

    def _convolve_rows(self, view, j, l, rows_b, rows_d, ent):
        """Convolve basis rows (mass nodes, K = the RGB) of helium node ``j`` at level ``l`` into B
        (``rows_b``) and its V-derivative D (``rows_d``); the transforms of the zero-padded images are kept
        per row for the fit.  The convolved rows are not clipped at zero: their float rounding then averages
        out in the walkers' sums, which are clipped."""
        s = self.s
        nm, nc = s.shape
        K = s.hb_images[j].shape[0]
        B, D, done_b, done_d = ent
        pix = view["pix"]
        V = float(self._levels[l])

        def store(arr, r, vals):  # basis index -> storage row(s)
            arr[np.where(r == K, 0, r + 1)] = vals
            if np.any(r == K):
                arr[K + 1] = vals[np.flatnonzero(r == K)[0]]

        def plain(r):
            return np.stack([s.rgb_images[j] if k == K else s.hb_images[j][k] for k in r])
        if V == 0 and rows_b.size:  # no convolution: the basis itself
            store(B, rows_b, plain(rows_b)[:, pix])
            done_b[rows_b] = True
            rows_b = rows_b[:0]
        if not (rows_b.size or rows_d.size):
            return
        q, shape = self._blur_q[self._BLUR_LEVELS[-1]]
        spec = self._spectra.get(j)
        if spec is None:
            spec = self._spectra[j] = [np.zeros((K + 1,) + q.shape, np.complex64), np.zeros(K + 1, bool)]
        F, have = spec
        rows = np.union1d(rows_b, rows_d)
        need = rows[~have[rows]]
        for a in range(0, need.size, 16):  # chunks of basis images (memory)
            r = need[a:a + 16]
            F[r] = sfft.rfft2(plain(r).reshape(-1, nm, nc), s=shape, axes=(1, 2), workers=_FFT_WORKERS)
        have[need] = True
        m = np.exp(-V * q)
        for rr, mult, arr, flag in ((rows_b, m, B, done_b), (rows_d, -q * m, D, done_d)):
            for a in range(0, rr.size, 16):
                r = rr[a:a + 16]
                out = sfft.irfft2(F[r] * mult, s=shape, axes=(1, 2), workers=_FFT_WORKERS)[:, :nm, :nc]
                store(arr, r, out.reshape(r.size, -1)[:, pix])
            flag[rr] = True

    def nearest_spread_level(self, sd):
        """The spread of the pre-convolved basis nearest to ``sd`` (``sd`` itself without a convolution):
        a likelihood evaluated there needs one convolved level only."""
        if self._blur_q is None or self._levels.size < 2:
            return float(sd)
        lv = np.sqrt(self._levels)
        return float(lv[np.argmin(np.abs(lv - float(sd)))])

    def _pick_view(self, sc, sm, sd):
        """The narrowest view holding every walker's shift, or None (then the exact path): also None when a
        spread lies beyond the pre-convolved range."""
        if not self.at_stars or (sd is not None and self._blur_q is not None
                                 and not np.all(sd * sd <= self._levels[-1])):
            return None
        for v in self._views:
            lo, hi = v["lo"], v["hi"]
            if (np.all(sc >= lo[0]) and np.all(sc <= hi[0]) and np.all(sm >= lo[1])
                    and np.all(sm <= hi[1])):
                return v
        return None

    def _level_weights(self, sd, n):
        """Cubic Hermite weights in V = sd^2 of the pre-convolved levels: per level l, (walkers using it,
        weight of B_l, weight of D_l) -- each walker uses its two bracketing levels."""
        if sd is None or self._blur_q is None or self._levels.size == 1:
            return [(0, np.arange(n), np.ones(n), None)]
        num = np.arange(self._levels.size)
        lv = self._levels
        V = sd * sd
        i0 = np.clip(np.searchsorted(lv, V, side="right") - 1, 0, lv.size - 2)
        l0 = num[i0]
        h = lv[i0 + 1] - lv[i0]
        t = np.clip((V - lv[l0]) / h, 0.0, 1.0)
        t2, t3 = t * t, t * t * t
        cb = np.stack([2 * t3 - 3 * t2 + 1, -2 * t3 + 3 * t2], axis=1)     # (n, 2): lower, upper level
        cd = np.stack([(t3 - 2 * t2 + t) * h, (t3 - t2) * h], axis=1)
        if np.all(i0 == i0[0]):  # every walker in the same bracket (the usual case in a sampler)
            walkers = np.arange(n)
            return [(int(l0[0]), walkers, cb[:, 0], cd[:, 0]), (int(num[i0[0] + 1]), walkers, cb[:, 1], cd[:, 1])]
        ll = np.stack([l0, num[i0 + 1]], axis=1)
        out = []
        for l in np.unique(ll):
            w_idx, side = np.nonzero(ll == l)
            b, d = cb[w_idx, side], cd[w_idx, side]
            keep = (b != 0) | (d != 0)
            if keep.any():
                out.append((int(l), w_idx[keep], b[keep], d[keep]))
        return out

    def _model_at_stars(self, view, p, blocks, sc, sm):
        """Model density at the stars (n, n_star) and normalisations (n,) of the walkers (fast path)."""
        n = sc.size
        sd = None
        if self._blur_q is not None and p.get("ebv_spread") is not None:
            sd = np.broadcast_to(np.abs(np.asarray(p["ebv_spread"], float)), (n,))
        npix = view["pix"].size
        img, tmp, tmp2 = self._work(n, npix)
        img[:] = 0.0
        for l, idx, cb, cd in self._level_weights(sd, n):
            m = idx.size
            out, rgb = tmp[:m], tmp2[:m]
            for j, a, w, amp in blocks:
                K = self.s.hb_images[j].shape[0]
                b = a + w.shape[1]
                need_d = cd is not None and bool(np.any(cd != 0))
                B, D = self._level(view, j, l, np.append(np.arange(a, b), K), need_d)[:2]
                # storage rows: the block's nodes a..b-1 at a+1..b, the RGB at 0 and K+1: next to the block
                # the RGB joins its matrix product, else it is added as an outer product
                if a == 0 or b == K:
                    wi = np.zeros((m, b - a + 1))
                    lo, sl_w, sl_a = (0, slice(1, None), 0) if a == 0 else (a + 1, slice(0, -1), -1)
                    wi[:, sl_w], wi[:, sl_a] = w[idx], amp[idx]
                    separate = False
                else:
                    wi, lo, separate = w[idx], a + 1, True
                hi = lo + wi.shape[1]
                for c, arr in ((cb, B), (cd, D)):
                    if c is None or (arr is D and not need_d):
                        continue
                    if hi > lo:
                        np.matmul(np.asarray(wi * c[:, None], np.float32), arr[lo:hi], out=out)
                    else:
                        out[:] = 0.0
                    if separate:
                        np.multiply(np.asarray(amp[idx] * c, np.float32)[:, None], arr[0][None, :], out=rgb)
                        out += rgb
                    if m == n:
                        img += out
                    else:
                        img[idx] += out
        np.maximum(img, 0.0, out=img)
        rho = self._density_at_stars(view, img, sc, sm)
        if sd is not None:
            vc, vm = self.reddening_vector
            t = _GH_T[:, None] * sd[None, :]
            zz = self._norm_from_tables(blocks, (sc[None] + t * vc).ravel(), (sm[None] + t * vm).ravel(),
                                        reps=_GH_T.size)
            z = _GH_W @ zz.reshape(_GH_T.size, n)
        else:
            z = self._norm_from_tables(blocks, sc, sm)
        return rho, z

    def _work(self, n, npix):
        """Three reusable float32 work arrays (n, npix) (no fresh large allocations per call)."""
        size = max(n, 16) * npix
        buf = getattr(self, "_work_buf", None)
        if buf is None or buf.shape[1] < size:
            buf = self._work_buf = np.empty((3, size), np.float32)
        return tuple(buf[i, :n * npix].reshape(n, npix) for i in range(3))

    def _density_at_stars(self, view, img, sc, sm):
        """:meth:`density_at` of the stars for images given on the stars' pixels (n, n_pix)."""
        s = self.s
        nm, nc = s.shape
        n = img.shape[0]
        u = (self.colour[None, :] - sc[:, None] - s.col_edges[0]) / s.dc - 0.5
        v = (self.mag[None, :] - sm[:, None] - s.mag_edges[0]) / s.dm - 0.5
        inside = (u > -0.5) & (u < nc - 0.5) & (v > -0.5) & (v < nm - 0.5)
        np.clip(u, 0, nc - 1 - 1e-9, out=u)
        np.clip(v, 0, nm - 1 - 1e-9, out=v)
        j = u.astype(np.intp)
        i = v.astype(np.intp)
        u -= j
        v -= i
        base = i * nc + j
        cm = view["cmap"]
        f = img.ravel()
        off = np.arange(n)[:, None] * view["pix"].size
        c00, c01 = cm[base] + off, cm[base + 1] + off
        c10, c11 = cm[base + nc] + off, cm[base + nc + 1] + off
        lo = f[c00] + (f[c01] - f[c00]) * u
        hi = f[c10] + (f[c11] - f[c10]) * u
        val = lo + (hi - lo) * v
        return np.where(inside, val, 0.0)

    def _model(self, p, blocks, sc, sm):
        """Model images of the walkers and their normalisations over the region."""
        img = self.s.images(None, None, None, blocks=blocks)
        if self._blur_q is not None and p.get("ebv_spread") is not None:
            sd = np.broadcast_to(np.asarray(p["ebv_spread"], float), sc.shape)
            vc, vm = self.reddening_vector
            z = sum(w * self._norm_from_tables(blocks, sc + t * sd * vc, sm + t * sd * vm)
                    for t, w in zip(_GH_T, _GH_W))
            return self.blur(img, sd), z
        return img, self._norm_from_tables(blocks, sc, sm)

    def _build_norm_tables(self, n_shift):
        """Region integral of every basis image on a grid of shifts (bilinear in the shift afterwards)."""
        s = self.s
        self._gc = np.linspace(self.shift_lo[0], self.shift_hi[0], n_shift)
        self._gm = np.linspace(self.shift_lo[1], self.shift_hi[1], n_shift)
        gc, gm = self._gc, self._gm
        nm, nc = s.shape
        tabs_hb, tabs_rgb = [], []
        for j in range(len(s.hb_images)):
            imgs = np.concatenate([s.hb_images[j], s.rgb_images[j][None]], axis=0).reshape(-1, nm, nc)
            z = np.empty((imgs.shape[0], gc.size, gm.size))
            for a in range(0, imgs.shape[0], 64):  # chunks of basis images (memory)
                z[a:a + 64] = self._normalisation(imgs[a:a + 64], gc, gm, grid=True)
            tabs_hb.append(z[:-1])
            tabs_rgb.append(z[-1])
        self._ztab_hb, self._ztab_rgb = tabs_hb, tabs_rgb

    def _norm_from_tables(self, blocks, sc, sm, reps=1):
        """Normalisations at shifts ``sc``, ``sm`` ((reps n,): ``reps`` shifts of each of the n walkers of
        ``blocks``, in blocks of n)."""
        u = np.clip((sc - self._gc[0]) / (self._gc[1] - self._gc[0]), 0, self._gc.size - 1 - 1e-9)
        v = np.clip((sm - self._gm[0]) / (self._gm[1] - self._gm[0]), 0, self._gm.size - 1 - 1e-9)
        i, k = u.astype(int), v.astype(int)
        tu, tv = u - i, v - k
        z = np.zeros(sc.size)
        for j, a, w, amp in blocks:
            def bil(t):  # t: (..., n_c, n_m) -> values per walker
                return ((t[..., i, k] * (1 - tu) + t[..., i + 1, k] * tu) * (1 - tv)
                        + (t[..., i, k + 1] * (1 - tu) + t[..., i + 1, k + 1] * tu) * tv)
            if reps > 1:
                w, amp = np.tile(w, (reps, 1)), np.tile(amp, reps)
            if w.shape[1]:
                zt = bil(self._ztab_hb[j][a:a + w.shape[1]])  # (b-a, n)
                z += np.einsum("nk,kn->n", w, zt)
            z += amp * bil(self._ztab_rgb[j])
        return z

    def _normalisation(self, img, sc, sm, grid=False):
        """Integral of c(m) rho(x - s) over the region (summed-area table; piecewise linear in s).

        Per walker (``sc``, ``sm`` of length n), or with ``grid=True`` for every image on the grid
        ``sc`` x ``sm`` -> (n, len(sc), len(sm))."""
        s = self.s
        n, nm, nc = img.shape
        if grid:
            cs = np.concatenate([np.zeros((n, nm, 1)), np.cumsum(img, axis=2, dtype=np.float64)], axis=2) * s.dc
            cmin, cmax, mb, mf = self.region
            def at_g(xc):  # (n, nm, len(xc))
                u = np.clip((xc - s.col_edges[0]) / s.dc, 0, nc - 1e-9)
                j = np.floor(u).astype(int)
                t = u - j
                return cs[:, :, j] * (1 - t) + cs[:, :, j + 1] * t
            rows = at_g(cmax - sc) - at_g(cmin - sc)  # (n, nm, Gc)
            lo = (mb - sm)[None, :]
            hi = (mf - sm)[None, :]
            e0, e1 = s.mag_edges[:-1, None], s.mag_edges[1:, None]
            overlap = np.clip(np.minimum(e1, hi) - np.maximum(e0, lo), 0, None)  # (nm, Gm)
            if self.completeness is not None:
                overlap = overlap * np.asarray(self.completeness(self._mcen[:, None] + sm[None, :]))
            return np.einsum("nrc,rm->ncm", rows, overlap)
        cmin, cmax, mb, mf = self.region
        cs = np.concatenate([np.zeros((n, nm, 1)), np.cumsum(img, axis=2, dtype=np.float64)], axis=2) * s.dc
        def at(xc):  # cumulative along colour at intrinsic colours xc (n,)
            u = np.clip((xc - s.col_edges[0]) / s.dc, 0, nc - 1e-9)
            j = np.floor(u).astype(int)
            t = (u - j)[:, None]
            r = np.arange(n)
            return cs[r, :, j] * (1 - t) + cs[r, :, j + 1] * t
        rows = at(cmax - sc) - at(cmin - sc)  # (n, nm)
        lo = (mb - sm)[:, None]
        hi = (mf - sm)[:, None]
        e0, e1 = s.mag_edges[None, :-1], s.mag_edges[None, 1:]
        overlap = np.clip(np.minimum(e1, hi) - np.maximum(e0, lo), 0, None)
        if self.completeness is not None:
            cw = np.asarray(self.completeness((self._mcen[None, :] + sm[:, None]).ravel())).reshape(n, nm)
            overlap = overlap * cw
        return np.sum(rows * overlap, axis=1)

    def density_at(self, img, sc, sm, colour=None, mag=None):
        """Model density (normalised image values) at observed points for each walker: (n, n_star)."""
        s = self.s
        colour = self.colour if colour is None else colour
        mag = self.mag if mag is None else mag
        n, nm, nc = img.shape
        u = (colour[None, :] - sc[:, None] - s.col_edges[0]) / s.dc - 0.5
        v = (mag[None, :] - sm[:, None] - s.mag_edges[0]) / s.dm - 0.5
        inside = (u > -0.5) & (u < nc - 0.5) & (v > -0.5) & (v < nm - 0.5)
        u = np.clip(u, 0, nc - 1 - 1e-9)
        v = np.clip(v, 0, nm - 1 - 1e-9)
        j = u.astype(int)
        i = v.astype(int)
        tu = u - j
        tv = v - i
        flat = img.reshape(n, -1)
        base = (np.arange(n)[:, None] * (nm * nc)) + i * nc + j
        f = flat.ravel()
        val = ((f[base] * (1 - tu) + f[base + 1] * tu) * (1 - tv)
               + (f[base + nc] * (1 - tu) + f[base + nc + 1] * tu) * tv)
        return np.where(inside, val, 0.0)

    def __call__(self, p: dict):
        """Log-likelihood for parameter arrays in ``p`` (keys: mass_loss, mass_loss_sd, age, shift_colour,
        shift_mag, field_fraction, optional helium_fraction, delta_y, ebv_spread); returns shape (n,)."""
        mu = np.atleast_1d(p["mass_loss"])
        n = mu.size
        blocks = self.s.blocks(mu, p["mass_loss_sd"], p["age"], p.get("helium_fraction"), p.get("delta_y"))
        sc = np.broadcast_to(np.asarray(p["shift_colour"], float), (n,))
        sm = np.broadcast_to(np.asarray(p["shift_mag"], float), (n,))
        f = np.broadcast_to(np.asarray(p["field_fraction"], float), (n,))
        sd = p.get("ebv_spread")
        sd = None if sd is None else np.broadcast_to(np.abs(np.asarray(sd, float)), (n,))
        view = self._pick_view(sc, sm, sd)
        if view is not None:
            rho, z = self._model_at_stars(view, p, blocks, sc, sm)
        else:  # shifts or spreads beyond the fast path's range: the whole images, convolved exactly
            img, z = self._model(p, blocks, sc, sm)
            rho = self.density_at(img, sc, sm)
        with np.errstate(divide="ignore", invalid="ignore"):
            pm = (1 - f)[:, None] * self.c_star[None, :] * rho / z[:, None] + (f / self.area)[:, None]
            ll = np.sum(np.log(np.maximum(pm, 1e-300)), axis=1)
        return np.where(z > 0, ll, -np.inf)

    def model_hess(self, p: dict, col_edges, mag_edges):
        """Expected counts of the fitted stars in observed-plane bins (for plots / Poisson deviance)."""
        pp = {k: np.atleast_1d(v)[:1] for k, v in p.items() if v is not None}
        return self.model_hess_batch(pp, col_edges, mag_edges)[0]

    def model_hess_batch(self, p: dict, col_edges, mag_edges):
        """:meth:`model_hess` of every parameter set in ``p`` (arrays of length n) -> (n, n_mag, n_col); the
        images are formed and convolved in chunks of parameter sets (one pass over the basis per chunk)."""
        cc = 0.5 * (col_edges[1:] + col_edges[:-1])
        mc = 0.5 * (mag_edges[1:] + mag_edges[:-1])
        C, M = np.meshgrid(cc, mc)
        pp = {k: np.atleast_1d(np.asarray(v, float)) for k, v in p.items() if v is not None}
        n = pp["mass_loss"].size
        comp = 1.0 if self.completeness is None else np.asarray(self.completeness(M))
        area = np.outer(np.diff(mag_edges), np.diff(col_edges))
        out = np.empty((n,) + C.shape)
        for a in range(0, n, 16):  # chunks of parameter sets (memory)
            q = {k: np.broadcast_to(v, (n,))[a:a + 16] for k, v in pp.items()}
            img = self.s.images(q["mass_loss"], q["mass_loss_sd"], q["age"], q.get("helium_fraction"),
                                q.get("delta_y"))
            if q.get("ebv_spread") is not None:
                img = self.blur(img, q["ebv_spread"])
            sc, sm, f = q["shift_colour"], q["shift_mag"], q["field_fraction"]
            z = self._normalisation(img, sc, sm)
            rho = self.density_at(img, sc, sm, C.ravel(), M.ravel()).reshape((-1,) + C.shape)
            dens = (1 - f)[:, None, None] * comp * rho / z[:, None, None] + (f / self.area)[:, None, None]
            out[a:a + 16] = self.n * dens * area
        return out


def hess_poisson_deviance(observed, model):
    """Poisson likelihood-ratio statistic of a Hess diagram (Dolphin 2002, MNRAS 332, 91, eq. 10):
    2 sum(m_i - n_i + n_i ln(n_i/m_i)); ~ chi^2 with about the number of occupied bins."""
    n = np.asarray(observed, float)
    m = np.maximum(np.asarray(model, float), 1e-12)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(n > 0, n * np.log(n / m), 0.0)
    return float(2.0 * np.sum(m - n + t))
