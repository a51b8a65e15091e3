"""Monte Carlo wavefunction (quantum trajectory) method for circuits past the density-matrix guard.

qiskit-aer's statevector method with a noise model samples one Kraus branch per error per shot
(with the state-dependent probabilities), so the average of ``|psi><psi|`` over shots is the
noisy density matrix. We run the circuit in ``num_batches`` batches of
``num_trajectories // num_batches`` shots with ``save_statevector(pershot=True)``; every
trajectory's state serves all bases through the pure-state kernel
(:func:`noiselab.emulate.contract.sv_batch_mean_distributions`), and the per-batch means are kept
so that the trajectory error can be estimated separately from shot noise (batch means are
independent: standard error = std of batch means / sqrt(n_batches)).
"""

from __future__ import annotations

from collections.abc import Hashable, Sequence
from typing import Any

import numpy as np

from noiselab.common.errors import InputError
from noiselab.emulate.contract import (
    clean_probabilities,
    effect_rotation,
    sv_batch_mean_distributions,
)


def simulate_trajectories(
    circuit: Any, noise_model: Any, shots: int, seed: int | None
) -> np.ndarray:
    """One qiskit-aer statevector run of ``shots`` noisy trajectories; returns ``(shots, 2**k)``."""
    from qiskit_aer import AerSimulator

    qc = circuit.copy()
    qc.save_statevector(label="psi", pershot=True)
    sim = AerSimulator(method="statevector", noise_model=noise_model)
    opts: dict[str, Any] = {"shots": int(shots)}
    if seed is not None:
        opts["seed_simulator"] = int(seed)
    result = sim.run(qc, **opts).result()
    if not result.success:
        raise RuntimeError(f"qiskit-aer statevector run failed: {result.status}")
    states = result.data(0)["psi"]
    return np.array([np.asarray(getattr(s, "data", s)) for s in states])


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
    """Batch-mean distributions ``(num_batches, n_bases, 2**n)`` before readout error."""
    if num_batches < 2 or num_trajectories < num_batches:
        raise InputError(
            f"emulation: trajectories: {num_trajectories} trajectories in {num_batches} batches; "
            f"allowed: at least 2 batches and at least one trajectory per batch"
        )
    per_batch = num_trajectories // num_batches
    rotations = [[effect_rotation(e) for e in row] for row in effects]
    rng = np.random.default_rng(seed)
    out = np.empty((num_batches, len(effects), 2 ** len(qubits)))
    for b in range(num_batches):
        batch_seed = int(rng.integers(0, 2**31 - 1))
        if counter is not None:
            counter[0] += 1
        psis = simulate_trajectories(circuit, noise_model, per_batch, batch_seed)
        out[b] = sv_batch_mean_distributions(psis, qubits, rotations, keys)
        del psis
    return clean_probabilities(out, what="trajectory distribution")
