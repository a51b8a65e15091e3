"""Lowest layer: errors, units, safe YAML loading, atomic file writes. Imports nothing of noiselab."""
