"""The one random-state convention of hbmodel (issue 14).

Every function or estimator that draws random numbers takes ``rng`` (or an estimator's ``seed``): either
a ``numpy.random.Generator``, used as given (its stream continues in the caller's hands), or a seed --
a non-negative integer or a ``numpy.random.SeedSequence`` -- from which a new Generator is made.  There
is no default and no global state: ``None`` is refused, so every result can be reproduced from its
inputs (common practice of reproducible scientific code; NumPy's ``default_rng`` policy, NEP 19)."""
from __future__ import annotations

import numpy as np


def as_generator(rng, name: str = "rng") -> np.random.Generator:
    """``rng`` as a ``numpy.random.Generator`` (see the module docstring); a one-line ValueError otherwise."""
    if isinstance(rng, np.random.Generator):
        return rng
    if isinstance(rng, np.random.SeedSequence):
        return np.random.default_rng(rng)
    if isinstance(rng, (int, np.integer)) and not isinstance(rng, bool):
        if rng < 0:
            raise ValueError(f"{name}: a random seed must be a non-negative integer, got {rng}")
        return np.random.default_rng(int(rng))
    raise ValueError(f"{name} must be a numpy.random.Generator or an integer seed (got {type(rng).__name__}); "
                     "hbmodel uses no hidden random state")
