"""Layer 0 -- what every room uses: calibration-table reading, argument validation, the on-disk cache,
quantity names/units, resource budgets. Imports nothing else from hbmodel."""
