"""hbmodel: a fast semi-analytic surrogate of core-helium-burning evolution.

Stages (one module each, data flowing one way): composition -> giant_branch -> ignition ->
mass_loss -> zahb -> hb_evolution -> pulsation -> photometry/extinction -> population ->
morphology / mock -> likelihood / fit -> clump_distance / classify -> reports / batch.
"""
__version__ = "0.1.0"

from .composition import Composition  # noqa: F401
from .population import Component, MassLoss, Population, StarSet  # noqa: F401


def __getattr__(name):
    # heavier parts are imported on first use
    lazy = {
        "make_mock": ("mock", "make_mock"), "ObservationSpec": ("mock", "ObservationSpec"),
        "MassLossFit": ("fit", "MassLossFit"), "Priors": ("fit", "Priors"),
        "measure_distance": ("clump_distance", "measure_distance"), "clump_model": ("clump_distance", "clump_model"),
        "fit_clump_lf": ("clump_lf", "fit_clump_lf"), "CHeBClassifier": ("classify", "CHeBClassifier"),
        "read_jobs": ("batch", "read_jobs"), "run_batch": ("batch", "run_batch"),
        "run_chunked": ("batch", "run_chunked"), "read_catalog": ("io", "read_catalog"),
        "write_table": ("io", "write_table"), "absolute_magnitudes": ("photometry", "absolute_magnitudes"),
        "resolve_band": ("photometry", "resolve_band"),
    }
    if name in lazy:
        import importlib
        mod, attr = lazy[name]
        return getattr(importlib.import_module(f".{mod}", __name__), attr)
    raise AttributeError(f"module 'hbmodel' has no attribute {name!r}")
