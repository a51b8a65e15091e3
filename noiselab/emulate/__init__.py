"""Density-matrix (and trajectory) emulation: exact measured distributions per measurement basis."""
