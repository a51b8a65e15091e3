"""Device noise profiles (YAML), scaling, qiskit-aer noise models and compilation to a device.

Names are loaded lazily so that ``import noiselab.device`` does not import qiskit.
"""

from __future__ import annotations

import importlib
from typing import Any

_EXPORTS = {
    "DeviceProfile": "profile",
    "CHANNELS": "profile",
    "load_profile": "profile",
    "profile_from_mapping": "profile",
    "profile_warnings": "profile",
    "scale_profile": "profile",
    "build_noise_model": "noise",
    "gate_channel": "noise",
    "readout_matrices": "noise",
    "readout_crosstalk": "noise",
    "CompiledCircuit": "compile",
    "build_target": "compile",
    "compile_to_device": "compile",
    "select_patch": "compile",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str) -> Any:
    if name in _EXPORTS:
        module = importlib.import_module(f"noiselab.device.{_EXPORTS[name]}")
        return getattr(module, name)
    raise AttributeError(f"module 'noiselab.device' has no attribute {name!r}")
