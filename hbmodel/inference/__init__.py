"""Layer 7 -- from a catalogue back to parameters: the surrogate likelihood and the mass-loss fit,
the clump luminosity-function fit and distances, the CHeB classifier, the catalogue-number fit."""
