"""Layer 8 -- figures and reports of results."""
