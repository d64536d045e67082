"""The fit's independence proposal (hbmodel.inference.mass_loss_fit._IndependenceProposal): the log density it hands to the
Metropolis-Hastings acceptance must be that of the points it draws -- checked against scipy's
multivariate Student t (reference library) and, folded into a prior box, against a histogram of draws."""
import numpy as np
from scipy.stats import multivariate_t

from hbmodel.inference.mass_loss_fit import _IndependenceProposal

MEAN = np.array([0.004, 0.5])
COV = np.array([[0.01 ** 2, 0.3 * 0.01 * 0.1], [0.3 * 0.01 * 0.1, 0.1 ** 2]])


def test_unbounded_density_is_the_student_t():
    p = _IndependenceProposal(MEAN, COV, nu=10.0)
    x = multivariate_t(MEAN, COV, df=10.0).rvs(size=50, random_state=3)
    ref = multivariate_t(MEAN, COV, df=10.0).logpdf(x)
    diff = p.log_q(x) - ref  # equal up to the normalising constant
    assert np.ptp(diff) < 1e-10


def test_acceptance_ratio_is_ln_q_old_minus_ln_q_new():
    p = _IndependenceProposal(MEAN, COV, nu=10.0)
    x0 = np.tile(MEAN + 0.01, (5, 1))
    x, ratio = p(x0, np.random.RandomState(0))
    np.testing.assert_allclose(ratio, p.log_q(x0) - p.log_q(x), rtol=0, atol=1e-12)


def test_folded_density_matches_its_draws():
    # the box [0, 0.05] x [0, 1] cuts the t near its centre in the first coordinate: one reflection folds
    # the mass back; the bin-averaged folded density must match the draws within Poisson errors
    p = _IndependenceProposal(MEAN, COV, lo=[0.0, 0.0], hi=[0.05, 1.0], nu=10.0)
    n = 200_000
    x, _ = p(np.tile(MEAN, (n, 1)), np.random.RandomState(1))
    inside = np.all((x >= p.lo) & (x <= p.hi), axis=1)
    assert inside.mean() > 0.999  # nothing is lost at the bound
    ref = multivariate_t(MEAN, COV, df=10.0)
    logc = float(ref.logpdf(MEAN) - p._log_t(MEAN[None])[0])  # normalising constant of the t
    h, ex, ey = np.histogram2d(x[inside, 0], x[inside, 1], bins=(8, 8), range=[[0, 0.05], [0, 1]])
    sub = (np.arange(10) + 0.5) / 10
    model = np.zeros((8, 8))
    for a in sub:
        for b in sub:
            gx = np.repeat(ex[:-1] + a * (ex[1] - ex[0]), 8)
            gy = np.tile(ey[:-1] + b * (ey[1] - ey[0]), 8)
            model += np.exp(p.log_q(np.c_[gx, gy]) + logc).reshape(8, 8)
    expect = model / sub.size ** 2 * n * (ex[1] - ex[0]) * (ey[1] - ey[0])
    ok = expect > 500
    pulls = (h[ok] - expect[ok]) / np.sqrt(expect[ok])
    assert ok.sum() >= 15
    assert np.max(np.abs(pulls)) < 4.5 and abs(np.mean(pulls)) < 1.0
