"""Device noise profiles (YAML), scaling, qiskit-aer noise models and compilation to a device.

Names are loaded lazily so that ``import noiselab.device`` does not import qiskit.
"""

from __future__ import annotations

from noiselab.common.lazy import lazy_exports

_EXPORTS = {
    "DeviceProfile": "profile",
    "CHANNELS": "channel_registry",
    "CHANNEL_SPECS": "channel_registry",
    "DeviceModel": "model",
    "resolve_device": "model",
    "load_profile": "profile",
    "profile_from_mapping": "profile",
    "profile_warnings": "profile",
    "scale_profile": "profile",
    "build_noise_model": "noise",
    "gate_channel": "noise",
    "readout_matrices": "readout_map",
    "readout_crosstalk": "readout_map",
    "CompiledCircuit": "compile",
    "build_target": "compile",
    "compile_to_device": "compile",
    "compile_ensemble": "compile",
    "CompileEnsemble": "compile",
    "select_patch": "compile",
    "profile_from_target": "qiskit_target",
    "profile_to_target": "qiskit_target",
    "aer_simulator": "qiskit_target",
    "read_calibration_table": "caltable",
    "profile_from_tables": "profile_import",
}

__all__ = sorted(_EXPORTS)
__getattr__ = lazy_exports(__name__, _EXPORTS)
