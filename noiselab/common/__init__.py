"""Lowest layer: errors, units, safe YAML loading, atomic writes. Imports nothing of noiselab."""
