"""Measurement plans, finite-shot statistics and mitigation passes, scored against exact
energies."""
