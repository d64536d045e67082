"""emcee sampling of the mass-loss posterior: walkers started from the Laplace approximation at the MAP, a
differential-evolution pilot, an independence Metropolis-Hastings proposal shaped by it, and chains grown
until they are many autocorrelation times long."""
from __future__ import annotations

import numpy as np

from hbmodel.core.progress import progress_bar
from hbmodel.inference.surrogate import fit_constants

#: Half-width, in Laplace standard deviations about the MAP, of the shift box whose stars' pixels the
#: sampler's likelihood keeps (own choice; walkers beyond it only cost more, their values are the same).
_FOCUS_SIGMAS = 8.0

#: Steps of the pilot runs of :meth:`MassLossFit._run_emcee` (differential evolution, then the proposal
#: of the first) and the share of independence-proposal steps after them (measured: scripts/bench_fit.py).
_PILOT_STEPS = (100, 50)
_MH_WEIGHT = 0.85


def _burn_in(n_steps, tau, n_tau=5):
    """Steps discarded as burn-in: ``n_tau`` autocorrelation times (the walkers start spread like the
    posterior, from the Laplace approximation at the MAP), never more than a fifth of the chain."""
    taumax = float(np.max(tau))
    if not np.isfinite(taumax):
        return n_steps // 5
    return int(min(n_steps // 5, np.ceil(n_tau * taumax)))


class _IndependenceProposal:
    """Independence proposal of an emcee ``MHMove``: a multivariate Student t (``nu`` degrees of
    freedom: heavier-tailed than the posterior, as an independence sampler needs; Tierney 1994, Ann.
    Stat. 22, 1701) of centre ``mean`` and scale matrix ``cov`` (a pilot run's), folded into the prior
    box ``lo``-``hi`` by one reflection at each bound within reach (a posterior piled against a bound,
    e.g. no field stars, then loses no proposals to it); the folded density is the sum over the mirror
    images.  Returns the proposed points and the log ratio ln q(x) - ln q(x') of the
    Metropolis-Hastings acceptance."""

    def __init__(self, mean, cov, lo=None, hi=None, nu=10.0):
        self.mean = np.asarray(mean, float)
        d = self.mean.size
        cov = np.atleast_2d(np.asarray(cov, float))
        self.chol = np.linalg.cholesky(cov)
        self.icov = np.linalg.inv(cov)
        self.nu = float(nu)
        sd = np.sqrt(np.diag(cov))
        self.lo = np.full(d, -np.inf) if lo is None else np.asarray(lo, float)
        self.hi = np.full(d, np.inf) if hi is None else np.asarray(hi, float)
        near = (np.isfinite(self.lo) & (self.mean - self.lo < 12 * sd)) | (np.isfinite(self.hi) & (self.hi - self.mean < 12 * sd))
        self.fold = np.flatnonzero(near & np.isfinite(self.lo) & np.isfinite(self.hi))
        # every combination of (identity, mirror at lo, mirror at hi) over the folded coordinates
        self.images = (np.array(np.meshgrid(*[[0, 1, 2]] * self.fold.size, indexing="ij")).reshape(self.fold.size, -1).T
                       if self.fold.size else np.zeros((1, 0), int))

    def _log_t(self, x):
        dx = x - self.mean
        q = np.einsum("...j,jk,...k->...", dx, self.icov, dx)
        return -0.5 * (self.nu + self.mean.size) * np.log1p(q / self.nu)

    def log_q(self, x):
        x = np.atleast_2d(np.asarray(x, float))
        inside = np.all((x >= self.lo) & (x <= self.hi), axis=1)
        if not self.fold.size:
            return self._log_t(x)
        lo, hi = self.lo[self.fold], self.hi[self.fold]
        imgs = np.repeat(x[None], len(self.images), axis=0)          # (n_images, n, d)
        v = x[:, self.fold][None]                                      # (1, n, k)
        c = self.images[:, None, :]                                    # (n_images, 1, k)
        imgs[:, :, self.fold] = np.where(c == 1, 2 * lo - v, np.where(c == 2, 2 * hi - v, v))
        lt = self._log_t(imgs)                                         # (n_images, n)
        folded = np.logaddexp.reduce(lt, axis=0)
        return np.where(inside, folded, lt[0])

    def __call__(self, x0, random):
        n, d = x0.shape
        z = random.standard_normal((n, d)) @ self.chol.T
        g = random.chisquare(self.nu, n) / self.nu
        x = self.mean + z / np.sqrt(g)[:, None]
        for i in self.fold:  # one reflection into the box (points beyond stay outside: rejected)
            lo, hi = self.lo[i], self.hi[i]
            xi = x[:, i]
            xi = np.where((xi < lo) & (xi >= 2 * lo - hi), 2 * lo - xi, xi)
            x[:, i] = np.where((xi > hi) & (xi <= 2 * hi - lo), 2 * hi - xi, xi)
        return x, self.log_q(x0) - self.log_q(x)


class _EnsembleMixin:
    """emcee sampler of :class:`~hbmodel.inference.mass_loss_fit.MassLossFit`."""

    def _run_emcee(self, names, x_map, rng):
        """emcee from the MAP.  The walkers start as draws of the Laplace approximation there (the
        surrogate and likelihood of the MAP search are reused as they are).  A short pilot run of
        differential-evolution moves (ter Braak 2006; ter Braak & Vrugt 2008) lets them settle; their
        mean and covariance then shape an independence Metropolis-Hastings proposal
        (:class:`_IndependenceProposal`), which on these near-Gaussian posteriors has autocorrelation
        times of a few steps, used for most steps of the main run, mixed with differential-evolution
        moves for what the proposal misses (e.g. a parameter piled against its prior bound).  The main
        chain grows by ``chunk`` steps until, after at least ``min_steps``, it is longer than
        ``tau_factor`` autocorrelation times past its burn-in (:func:`_burn_in`); the pilot is discarded."""
        import emcee
        d = len(names)
        nw = max(int(self.n_walkers), 2 * d + 2)
        nw += nw % 2
        try:
            cov = self._laplace(names, x_map)
            p0 = rng.multivariate_normal(x_map, cov, size=nw)
        except (np.linalg.LinAlgError, ValueError):
            cov = None
            p0 = x_map[None] + 0.1 * self._steps(names)[None] * rng.standard_normal((nw, d))
        if self._has_cmd and cov is not None and "shift_colour" in names:
            # the likelihood forms the walkers' images on the pixels their stars reach: from here on the
            # walkers' shifts stay within a few Laplace widths of the MAP (outside: the whole prior box's)
            i, k = names.index("shift_colour"), names.index("shift_mag")
            half = _FOCUS_SIGMAS * np.sqrt(np.maximum(np.diag(cov)[[i, k]], 0.0))
            centre = x_map[[i, k]]
            self.likelihood_.focus_shifts(centre - half, centre + half)
        for i, n in enumerate(names):
            lo, hi = self._bnds[n]
            x = p0[:, i]
            x = np.where(x < lo, 2 * lo - x, x)  # reflect into the prior box
            x = np.where(x > hi, 2 * hi - x, x)
            p0[:, i] = np.clip(x, lo + 1e-9 * (hi - lo), hi - 1e-9 * (hi - lo))
        f = self._log_post_fn(names)

        def ensemble(moves):
            s = emcee.EnsembleSampler(nw, d, f, vectorize=True, moves=moves)
            # emcee draws from its own RandomState: seed it from our Generator (reproducible, no global state)
            s.random_state = np.random.RandomState(int(rng.integers(2 ** 31))).get_state()
            return s

        state, moves = p0, [(emcee.moves.DEMove(), 0.8), (emcee.moves.DESnookerMove(), 0.2)]
        n_pilot = 0
        for k in _PILOT_STEPS:  # each pilot's second half shapes the next run's proposal
            if n_pilot + k > int(self.max_steps) // 4:
                break
            pilot = ensemble(moves)
            state = pilot.run_mcmc(state, k, progress=False)
            n_pilot += k
            pts = pilot.get_chain()[k // 2:].reshape(-1, d)
            try:
                prop = _IndependenceProposal(pts.mean(axis=0), np.cov(pts, rowvar=False),
                                             [self._bnds[n][0] for n in names], [self._bnds[n][1] for n in names])
            except (np.linalg.LinAlgError, ValueError):
                break
            moves = [(emcee.moves.MHMove(prop), _MH_WEIGHT), (emcee.moves.DEMove(), 1.0 - _MH_WEIGHT)]
        sampler = ensemble(moves)
        tau = np.full(d, np.inf)
        factor = fit_constants()["tau_factor"]
        n_done, burn = 0, 0
        n_main = int(self.max_steps) - n_pilot
        bar = progress_bar(n_main, getattr(self, "progress", None), "emcee (stops when converged)", "step",
                           leave=False)
        try:
            while n_done < n_main:
                k = min(int(self.chunk), n_main - n_done)
                state = sampler.run_mcmc(state, k, progress=False)
                n_done += k
                if bar is not None:
                    bar.update(k)
                # autocorrelation past the first fifth of the chain; the burn-in is a few autocorrelation times
                ch = sampler.get_chain()
                tau = emcee.autocorr.integrated_time(ch[n_done // 5:], quiet=True, tol=0)
                burn = _burn_in(n_done, tau)
                if n_done >= self.min_steps and np.all(np.isfinite(tau)) and n_done - burn > factor * np.max(tau):
                    break
        finally:
            if bar is not None:
                bar.close()
        self.n_steps_ = n_pilot + n_done
        ch = sampler.get_chain()
        taumax = float(np.max(tau))
        self.autocorr_time_ = {n: float(t) for n, t in zip(names, tau)}
        self.converged_ = bool(np.all(np.isfinite(tau)) and (n_done - burn) > factor * taumax)
        self.acceptance_fraction_ = float(np.mean(sampler.acceptance_fraction))
        thin = max(1, int(taumax / 2)) if np.isfinite(taumax) else 1
        flat = ch[burn::thin].reshape(-1, d)
        self.n_eff_ = float((n_done - burn) * nw / taumax) if np.isfinite(taumax) and taumax > 0 else 0.0
        return flat
