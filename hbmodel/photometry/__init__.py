"""Layer 2 -- (Teff, log g, [Fe/H], L) -> absolute magnitudes by band (band registry, colour and
bolometric-correction relations) and extinction on the bands' passbands."""
