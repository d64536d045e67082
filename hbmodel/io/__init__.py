"""Layer 3 -- edges to files: catalogues in and tables out (one atomic writer, one JSON writer), figure
style and saving, the resumable parallel job runner."""
