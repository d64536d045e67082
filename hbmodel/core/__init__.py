"""Layer 0 -- what every room uses: calibration-table reading, argument validation, the on-disk cache,
quantity names/units, resource budgets, the one atomic writer and JSON converter, the one
finite-difference Hessian. Imports nothing else from hbmodel."""
