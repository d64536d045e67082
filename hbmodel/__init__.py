"""hbmodel: a fast semi-analytic surrogate of core-helium-burning evolution."""
__version__ = "0.1.0"

from .composition import Composition  # noqa: F401
