"""Input files of ``hbmodel demo`` (an invented scenario; see scenario.toml)."""
