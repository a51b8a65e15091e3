"""The explicit Pauli twirl of a channel, an outside reference for noiselab's twirled noise.

The twirl averages P E(P rho P) P over the n-qubit Paulis (Wallman and Emerson, PRA 94, 052325
(2016), eq. 2); built here with qiskit.quantum_info only, independently of noiselab's fidelity
tables, as Kraus operators P K P / 2^n.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
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


@dataclass(frozen=True)
class TwirledReference:
    """A shipped or benchmark study under the explicitly twirled noise: what a Pauli propagation
    needs (circuit, model, groups, basis layer, readout) and the reference distributions
    ``probs`` (one per plan group) from qiskit-aer's density matrix, to which noiselab's engine
    adds the basis layer and the per-qubit readout."""

    circuit: Any
    model: Any
    plan: Any
    logical_to_circuit: Any
    layer: Any
    readout: list[Any]
    groups: list[Any]
    probs: Any
    seed: int


def twirled_study_reference(path: Any) -> TwirledReference:
    """:class:`TwirledReference` of the study file at ``path``."""
    import numpy as np

    from noiselab.device.noise import readout_matrices
    from noiselab.emulate.device_inputs import layer_spec_for
    from noiselab.emulate.engine import emulate_circuit_bases
    from noiselab.mitigate.plan import build_plan
    from noiselab.study.context import build_context
    from noiselab.study.spec import load_study

    study = load_study(path)
    ctx = build_context(study)
    c, profile = ctx.compiled, study.profile
    model = twirled_noise_model(profile, c.patch)
    plan = build_plan(ctx.qubit_problem.hamiltonian)
    mats = readout_matrices(profile, c.patch)
    readout = [mats[q] for q in c.logical_to_circuit]
    layer = layer_spec_for(profile, c.circuit.num_qubits)
    dist = emulate_circuit_bases(
        c.circuit,
        model,
        plan.bases,
        layer=layer,
        logical_to_circuit=list(c.logical_to_circuit),
        readout_matrices=readout,
        method="density_matrix",
    )
    groups = [(g.basis, list(zip(g.labels, np.real(g.coeffs), strict=True))) for g in plan.groups]
    return TwirledReference(
        c.circuit, model, plan, c.logical_to_circuit, layer, readout, groups, dist.probs, study.seed
    )
