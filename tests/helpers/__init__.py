"""Test-only helpers (importable as ``helpers`` from the tests, which pytest runs with ``tests/``
on the path; benchmarks add that folder themselves): a hand-built noisy device and synthetic
measurement data."""
