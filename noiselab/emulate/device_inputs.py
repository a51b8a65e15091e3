"""What the emulator takes from a device profile: the basis-layer spec, readout error in logical
indices, and the qiskit-aer noise model (memoized per process).

Shared by the state simulation (:mod:`noiselab.emulate.engine`) and the readout-calibration
circuits (:mod:`noiselab.emulate.calibration`), so that both see the same noise model.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from noiselab.device.noise import build_noise_model
from noiselab.device.readout_map import readout_matrices, readout_terms
from noiselab.emulate.channels import BasisLayerSpec
from noiselab.emulate.readout import PairMatrix


def layer_spec_for(profile: Any, num_qubits: int) -> BasisLayerSpec:
    """Basis-layer spec of a device profile: its native single-qubit gates and their durations."""
    gates = tuple(profile.single_qubit_gates)
    durations = {
        (g, i): float(profile.gate_duration_ns(g)) for g in gates for i in range(num_qubits)
    }
    return BasisLayerSpec(native_1q=gates, durations_ns=durations)


def logical_readout(
    profile: Any, patch: Sequence[int], qubits: Sequence[int]
) -> tuple[list[np.ndarray], list[PairMatrix]]:
    """Readout matrices and crosstalk terms (``readout_map.readout_terms``) in LOGICAL indices.

    ``qubits[l]`` is the circuit position of logical qubit l; circuit position i is physical
    ``patch[i]``. Crosstalk terms touching an unmeasured patch qubit are dropped (that qubit is
    not read out).
    """
    mats = readout_matrices(profile, patch)
    where = {c: l for l, c in enumerate(qubits)}
    terms: list[PairMatrix] = []
    for term in readout_terms(profile, patch, measured=list(where)):
        if len(term) == 2:
            terms.append((tuple(where[c] for c in term[0]), term[1]))
        else:
            terms.append((where[term[0]], where[term[1]], term[2]))
    return [mats[c] for c in qubits], terms


#: Noise models built in this process, by (profile fingerprint, patch); a study asks for the same
#: one for a variant's simulation and its readout calibration.
_NOISE_MODELS: dict[tuple[str, tuple[int, ...]], Any] = {}
_NOISE_MODEL_SLOTS = 8


def noise_model_for(profile: Any, patch: Sequence[int]) -> Any:
    """``build_noise_model(profile, patch)``, memoized per process (last 8 distinct keys).

    Keyed by ``profile.fingerprint`` (content hash); profiles without one are built afresh.
    Callers must not modify the returned model.
    """
    patch_t = tuple(int(q) for q in patch)
    fp = getattr(profile, "fingerprint", None)
    if not isinstance(fp, str):
        return build_noise_model(profile, patch_t)
    key = (fp, patch_t)
    nm = _NOISE_MODELS.pop(key, None)
    if nm is None:
        nm = build_noise_model(profile, patch_t)
        while len(_NOISE_MODELS) >= _NOISE_MODEL_SLOTS:
            _NOISE_MODELS.pop(next(iter(_NOISE_MODELS)))
    _NOISE_MODELS[key] = nm  # most recently used last
    return nm
