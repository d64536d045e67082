"""One module per ``hbmodel`` sub-command (see :mod:`hbmodel.cli`)."""
