"""Calibration tables shipped with hbmodel (each file's header names its source)."""
