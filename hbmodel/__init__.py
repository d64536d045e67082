"""hbmodel: a fast semi-analytic surrogate of core-helium-burning evolution.

Rooms by domain; the folder tree is the data flow, and a room imports only rooms below it
(``tests/test_layers.py`` walks every import, function-level ones included):

    core -> physics -> photometry -> io -> populations -> calibration -> observation -> inference
         -> outputs -> batch -> cli

``physics``: composition -> giant_branch -> mass_loss -> ignition -> zahb -> hb_evolution -> pulsation
(+ imf); ``photometry``: magnitudes, extinction; ``populations``: population, sampler, morphology, grids;
``observation``: effects, mock; ``inference``: error_model, surrogate, likelihood, mass_loss_fit (its parts in
mass_loss_estimator), clump_lf, clump_distance, classify, counts_fit; ``outputs``: plots, reports.
"""
from hbmodel.core.version import __version__  # noqa: F401

from hbmodel.physics.composition import Composition  # noqa: F401
from hbmodel.populations.population import Component, MassLoss, Population, StarSet  # noqa: F401


def __getattr__(name):
    # heavier parts are imported on first use
    lazy = {
        "make_mock": ("observation.mock", "make_mock"), "ObservationSpec": ("observation.mock", "ObservationSpec"),
        "MassLossFit": ("inference.mass_loss_fit", "MassLossFit"), "Priors": ("inference.mass_loss_fit", "Priors"),
        "measure_distance": ("inference.clump_distance", "measure_distance"), "clump_model": ("inference.clump_distance", "clump_model"),
        "fit_clump_lf": ("inference.clump_lf", "fit_clump_lf"), "CHeBClassifier": ("inference.classify", "CHeBClassifier"),
        "read_jobs": ("io.jobs", "read_jobs"), "run_batch": ("io.jobs", "run_batch"),
        "run_chunked": ("io.jobs", "run_chunked"), "read_catalog": ("io.catalogues", "read_catalog"),
        "write_table": ("io.catalogues", "write_table"), "absolute_magnitudes": ("photometry.magnitudes", "absolute_magnitudes"),
        "resolve_band": ("photometry.magnitudes", "resolve_band"),
    }
    if name in lazy:
        import importlib
        mod, attr = lazy[name]
        return getattr(importlib.import_module(f".{mod}", __name__), attr)
    raise AttributeError(f"module 'hbmodel' has no attribute {name!r}")
