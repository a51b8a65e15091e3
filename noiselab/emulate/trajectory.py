"""Monte Carlo wavefunction (quantum trajectory) method for circuits past the density-matrix guard.

The circuit's noise is written into it as explicit Kraus instructions (the noise model's own
channels); qiskit-aer's statevector method samples one Kraus branch per instruction per shot
(with the state-dependent probabilities), so the average of ``|psi><psi|`` over shots is the
noisy density matrix. We run the circuit in ``num_batches`` batches of
``num_trajectories // num_batches`` shots with ``save_statevector(pershot=True)``; every
trajectory's state serves all bases through the pure-state kernel
(:func:`noiselab.emulate.contract.sv_batch_mean_distributions`), and the per-batch means (or
the estimator values read from them, :mod:`noiselab.emulate.batch_values`) are kept so that
the trajectory error can be estimated separately from shot noise (batch means are independent:
standard error = std of batch means / sqrt(n_batches)).
"""

from __future__ import annotations

from collections.abc import Hashable, Iterator, Sequence
from typing import Any

import numpy as np
from qiskit import QuantumCircuit
from qiskit.quantum_info import Kraus, SuperOp
from qiskit_aer import AerSimulator

from noiselab.common.errors import InputError
from noiselab.device.aer_adapter import gate_error, instruction_error, run_noise_passes
from noiselab.emulate.contract import (
    clean_probabilities,
    effect_rotation,
    sv_batch_mean_distributions,
)
from noiselab.emulate.memory import engine_threads


def unravelled_circuit(circuit: Any, noise_model: Any) -> Any:
    """``circuit`` with its noise written in: every error as an explicit Kraus instruction.

    Same channels as qiskit-aer attaches at run time: the noise model's passes (relaxation on
    delays) first, then after each gate its local error on those qubits, else the all-qubit one.
    The passes run on every circuit (aer itself skips circuits without delays), so a
    gate-triggered pass is never skipped.
    Needed because qiskit-aer 0.18's statevector method failed on some composed two-qubit errors
    of the device layer when given as a noise model ("heevx ... not hermitian", "Kraus is
    empty"); explicit ``kraus`` instructions (canonical Kraus operators from qiskit.quantum_info)
    are sampled per shot with the state-dependent branch probabilities and run cleanly.
    """
    if noise_model is None:
        return circuit
    circuit = run_noise_passes(circuit, noise_model)
    out = QuantumCircuit(circuit.num_qubits)
    cache: dict[tuple[str, tuple[int, ...]], Any] = {}
    for inst in circuit.data:
        op = inst.operation
        qs = tuple(circuit.find_bit(q).index for q in inst.qubits)
        if op.name in ("delay", "barrier"):
            continue
        if op.name == "quantum_channel":
            out.append(Kraus(SuperOp(instruction_error(op))).to_instruction(), list(qs))
            continue
        out.append(op, list(qs))
        key = (op.name, qs)
        if key not in cache:
            err = gate_error(noise_model, op.name, qs)
            cache[key] = None if err is None else Kraus(SuperOp(err)).to_instruction()
        if cache[key] is not None:
            out.append(cache[key], list(qs))
    return out


def simulate_trajectories(circuit: Any, shots: int, seed: int | None) -> np.ndarray:
    """One qiskit-aer statevector run of ``shots`` trajectories of an unravelled circuit (see
    :func:`unravelled_circuit`); returns the final states ``(shots, 2**k)``."""
    qc = circuit.copy()
    qc.save_statevector(label="psi", pershot=True)
    sim = AerSimulator(method="statevector", max_parallel_threads=engine_threads())
    opts: dict[str, Any] = {"shots": int(shots)}
    if seed is not None:
        opts["seed_simulator"] = int(seed)
    result = sim.run(qc, **opts).result()
    if not result.success:
        raise RuntimeError(f"qiskit-aer statevector run failed: {result.status}")
    states = result.data(0)["psi"]
    return np.array([np.asarray(getattr(s, "data", s)) for s in states])


def trajectory_batches(
    circuit: Any,
    noise_model: Any,
    qubits: Sequence[int],
    effects: Sequence[Sequence[np.ndarray]],
    keys: Sequence[Sequence[Hashable]],
    *,
    num_trajectories: int,
    num_batches: int,
    seed: int | None = None,
    counter: list[int] | None = None,
) -> Iterator[np.ndarray]:
    """Each batch's mean distributions ``(n_bases, 2**n)`` before readout error, one batch at a
    time (the caller keeps what it needs of each: all of them, or per-batch estimator values).

    ``circuit``: one circuit, or weighted circuits ``((w, circuit), ...)`` whose weighted state
    average is wanted (each batch runs every one of them; quadrature of static detuning)."""
    if num_batches < 2 or num_trajectories < num_batches:
        raise InputError(
            f"emulation: trajectories: {num_trajectories} trajectories in {num_batches} batches; "
            f"allowed: at least 2 batches and at least one trajectory per batch"
        )
    per_batch = num_trajectories // num_batches
    rotations = [[effect_rotation(e) for e in row] for row in effects]
    ensemble = ((1.0, circuit),) if isinstance(circuit, QuantumCircuit) else tuple(circuit)
    noisy = [(w, unravelled_circuit(c, noise_model)) for w, c in ensemble]
    rng = np.random.default_rng(seed)
    for _ in range(num_batches):
        batch_seed = int(rng.integers(0, 2**31 - 1))
        out: np.ndarray | None = None
        for w, circ in noisy:
            if counter is not None:
                counter[0] += 1
            psis = simulate_trajectories(circ, per_batch, batch_seed)
            part = sv_batch_mean_distributions(psis, qubits, rotations, keys)
            out = part if len(noisy) == 1 else (w * part if out is None else out + w * part)
            del psis
        assert out is not None
        yield clean_probabilities(out, what="trajectory distribution")


def trajectory_distributions(
    circuit: Any,
    noise_model: Any,
    qubits: Sequence[int],
    effects: Sequence[Sequence[np.ndarray]],
    keys: Sequence[Sequence[Hashable]],
    *,
    num_trajectories: int,
    num_batches: int,
    seed: int | None = None,
    counter: list[int] | None = None,
) -> np.ndarray:
    """Batch-mean distributions ``(num_batches, n_bases, 2**n)`` before readout error (every
    batch of :func:`trajectory_batches` kept)."""
    return np.stack(
        list(
            trajectory_batches(
                circuit,
                noise_model,
                qubits,
                effects,
                keys,
                num_trajectories=num_trajectories,
                num_batches=num_batches,
                seed=seed,
                counter=counter,
            )
        )
    )
