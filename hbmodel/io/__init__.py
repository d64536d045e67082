"""Layer 3 -- edges to files: catalogues in and tables out (over the one atomic writer and JSON converter
of :mod:`hbmodel.core.files`), figure style and saving, the resumable parallel job runner."""
