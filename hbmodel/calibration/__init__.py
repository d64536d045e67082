"""Calibration of hbmodel against published targets.

The data flow of this room:

* :mod:`.targets` reads the published targets (``tables/targets/*.ecsv``: value, uncertainty,
  source, how obtained, role ``fit`` or ``check``) and the cluster benchmark;
* :mod:`.evaluators` computes the model value of a target row, one function per quantity;
* :mod:`.coefficients` reads and rewrites the coefficient cells of a calibration table;
* :mod:`.stages` fits each stage's free coefficients to its ``fit`` rows by weighted least
  squares (``scipy.optimize.least_squares``), stage by stage in the data-flow order;
* :mod:`.scorecard` judges the model on every row (``fit`` and held-out ``check``) and on the
  cluster benchmark.

This room sits above the physics, photometry and population rooms and imports them; nothing
below imports it.
"""
from hbmodel.calibration.targets import read_targets, read_clusters, TargetError
from hbmodel.calibration.evaluators import EVALUATORS, evaluate_row, NotModelled
from hbmodel.calibration.scorecard import score_rows, Score

__all__ = ["read_targets", "read_clusters", "TargetError", "EVALUATORS", "evaluate_row", "NotModelled",
           "score_rows", "Score"]
