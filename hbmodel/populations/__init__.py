"""Layer 4 -- a population's stars: `Population` (physics + photometry for a metallicity/age mix),
the tabulated star sampler, HB-morphology and clump statistics, prediction grids."""
