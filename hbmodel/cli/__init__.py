"""Layer 10 -- the command line: one module per command, a thin layer over the rooms below."""
from hbmodel.cli.main import main  # noqa: F401
