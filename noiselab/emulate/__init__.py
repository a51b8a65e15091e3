"""Density-matrix (and trajectory) emulation: exact measured distributions per measurement basis.

Names are loaded lazily so that ``import noiselab.emulate`` does not import qiskit.
"""

from __future__ import annotations

from noiselab.common.lazy import lazy_exports

_EXPORTS = {
    "BasisDistributions": "engine",
    "emulate_bases": "engine",
    "emulate_circuit_bases": "engine",
    "engine_call_count": "engine",
    "BasisLayerSpec": "channels",
    "apply_readout": "readout",
    "assignment_matrix": "readout",
    "CalibrationDistributions": "calibration",
    "calibration_distributions": "calibration",
    "calibration_states": "calibration",
    "estimate_memory_bytes": "memory",
    "available_memory_bytes": "memory",
    "check_memory": "memory",
    "MEMORY_LIMIT_ENV": "memory",
}

__all__ = sorted(_EXPORTS)
__getattr__ = lazy_exports(__name__, _EXPORTS)
