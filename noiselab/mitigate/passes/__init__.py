"""Mitigation passes, one module each; registered by name in ``noiselab.mitigate.registry``."""
