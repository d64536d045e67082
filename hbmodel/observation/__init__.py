"""Layer 6 -- from stars to a catalogue: errors, completeness, reddening, binaries, field; mocks."""
