"""The estimators follow the scikit-learn estimator API.

Reference: scikit-learn developer guide, "Developing scikit-learn estimators" (the constructor only stores
its arguments, ``get_params``/``set_params``/``clone`` work from the constructor's signature, ``fit``
returns the estimator, learned attributes end in ``_``, using an unfitted estimator raises
``NotFittedError``) -- checked here with scikit-learn's own ``clone`` and exceptions.
"""
import inspect

import numpy as np
import pytest
from sklearn.base import BaseEstimator, clone
from sklearn.exceptions import NotFittedError

from hbmodel import Population
from hbmodel.inference.classify import CHeBClassifier
from hbmodel.inference.mass_loss_fit import MassLossFit, Priors


def _init_names(cls):
    return sorted(p for p in inspect.signature(cls.__init__).parameters if p != "self")


@pytest.mark.parametrize("make", [
    lambda: MassLossFit(Population(-1.5, 12.0), Priors(), bands=("V", "I"), n_walkers=24, seed=3),
    lambda: CHeBClassifier(Population(0.0, 4.0), teff_err_k=60.0, use_mass=True),
], ids=["MassLossFit", "CHeBClassifier"])
def test_parameters_come_from_the_constructor_and_clone(make):
    est = make()
    assert isinstance(est, BaseEstimator)
    params = est.get_params()
    assert sorted(params) == _init_names(type(est))
    twin = clone(est)  # a new, unfitted estimator with the same parameters (scikit-learn's own check)
    assert twin is not est and twin.get_params().keys() == params.keys()
    for k, v in params.items():
        assert twin.get_params()[k] == v, k
    assert type(est).__name__ + "(" in repr(est)
    # set_params returns the estimator and refuses unknown names with a ValueError
    name = "seed" if isinstance(est, MassLossFit) else "logg_err"
    assert est.set_params(**{name: 7}) is est and est.get_params()[name] == 7
    with pytest.raises(ValueError):
        est.set_params(no_such_parameter=1)


def test_unfitted_estimators_raise_not_fitted_error():
    fit = MassLossFit(Population(-1.5, 12.0))
    with pytest.raises(NotFittedError, match="call fit"):
        fit.posterior_table()
    clf = CHeBClassifier(Population(0.0, 4.0))
    with pytest.raises(NotFittedError, match="call fit"):
        clf.predict_proba([4800.0], [2.5])
    # NotFittedError is a ValueError: the command line reports it in one line like any bad input
    assert issubclass(NotFittedError, ValueError)


def test_classifier_validates_at_fit_and_fit_returns_self():
    bad = CHeBClassifier(Population(0.0, 4.0), teff_err_k=-5.0)  # the constructor only stores (convention)
    with pytest.raises(ValueError, match="teff error must be positive"):
        bad.fit()
    clf = CHeBClassifier(Population(0.0, 4.0), n_grid=(40, 50, 20))
    assert clf.fit() is clf
    assert hasattr(clf, "interp_") and 0.0 < clf.prior_cheb_ < 1.0
    # a red-clump star (4,800 K, log g 2.5) is more likely core-helium burning than an RGB star higher up
    # (4,300 K, log g 1.6) in a solar 4-Gyr population (common practice: the clump at log g ~2.4-2.5)
    p = clf.predict_proba(np.array([4800.0, 4300.0]), np.array([2.5, 1.6]))
    assert p[0] > p[1]


def test_population_is_a_value():
    # an immutable value object (common practice for value objects): equal defining values compare and
    # hash equal, a changed copy does not, and copying returns the value itself
    import copy
    a, b = Population(-1.5, 12.0, alpha_fe=0.3), Population(-1.5, 12.0, alpha_fe=0.3)
    assert a == b and hash(a) == hash(b) and a is not b
    assert a.replace(feh=-1.0) != a and a.replace(feh=-1.5) == a
    assert copy.deepcopy(a) is a and copy.copy(a) is a
    assert repr(a).startswith("Population(feh=-1.5, age_gyr=12")
