"""The explicit Pauli twirl of a channel, an outside reference for noiselab's twirled noise.

The twirl averages P E(P rho P) P over the n-qubit Paulis (Wallman and Emerson, PRA 94, 052325
(2016), eq. 2); built here with qiskit.quantum_info only, independently of noiselab's fidelity
tables, as Kraus operators P K P / 2^n.
"""

from __future__ import annotations

import itertools
from typing import Any

from qiskit.quantum_info import Kraus, Pauli


def explicit_twirl(kraus: list[Any], n: int) -> Kraus:
    """The twirled channel of Kraus operators ``kraus`` on ``n`` qubits."""
    out = []
    for letters in itertools.product("IXYZ", repeat=n):
        p = Pauli("".join(letters)).to_matrix()
        out += [p @ a @ p / 2**n for a in kraus]
    return Kraus(out)


def twirled_noise_model(profile: Any, patch: Any) -> Any:
    """qiskit-aer noise model whose every gate error is the explicit twirl of the device's channel
    (no idle pass: a reference and a propagation then see the same noise)."""
    from qiskit_aer.noise import NoiseModel, QuantumError

    from noiselab.device.noise import channel_from_noise, noise_spec

    spec = noise_spec(profile, patch, idle_relaxation=False)
    model = NoiseModel(basis_gates=list(spec.native_gates))
    for rule in spec.gates:
        err = channel_from_noise(profile, rule.noise)
        if err.ideal():
            continue
        kraus = Kraus(err.to_quantumchannel()).data
        twirled = explicit_twirl(list(kraus), len(rule.qubits))
        model.add_quantum_error(QuantumError(twirled), rule.gate, list(rule.qubits))
    return model
