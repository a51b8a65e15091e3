"""Many simulations in one qiskit-aer call: many parameter sets of one parameterized circuit
(:func:`emulate_parameter_sets`), or circuits under many profiles (:func:`emulate_written`).
A profile with always-on terms (``device.evolution``) goes through ``emulate_bases`` one
simulation at a time, which writes them into the circuit.

A variational loop evaluates the same compiled circuit at many parameter sets. qiskit-aer runs a
parameterized circuit at a list of parameter bindings in one call: the circuit is converted
once, and the per-call work of the noise model (its relaxation pass over every ``delay``,
which aer also copies the whole noise model for) is done here once per circuit: the relaxation
after each delay is written into the circuit as an explicit ``superop`` instruction (the same
channel the pass attaches) and the delays are dropped, so aer sees only gate errors in the noise
model. The basis-change effects come from the shared per-noise-model cache.
"""

from __future__ import annotations

import time
from collections.abc import Sequence
from typing import Any

import numpy as np
from qiskit import QuantumCircuit
from qiskit.quantum_info import SuperOp
from qiskit_aer import AerSimulator

from noiselab.device.aer_adapter import (
    instruction_error,
    run_noise_passes,
    superop_instruction,
)
from noiselab.device.evolution import evolution_spec
from noiselab.emulate.channels import effect_cache_for
from noiselab.emulate.contract import dm_distributions
from noiselab.emulate.device_inputs import layer_spec_for, logical_readout, noise_model_for
from noiselab.emulate.engine import (
    BasisDistributions,
    basis_tables,
    check_circuit,
    choose_method,
    count_engine_call,
    emulate_bases,
    validate_bases,
)
from noiselab.emulate.memory import engine_threads
from noiselab.emulate.readout import apply_readout
from noiselab.emulate.written import WrittenEffects, WrittenNoise

#: bytes of density matrices one batched call may return (the memory bound of a batch)
BATCH_BYTES = 2**28

#: circuits with their idle relaxation written in, by (circuit, noise model) identity; the
#: entry keeps both alive, most recently used last
_WRITTEN: dict[tuple[int, int], tuple[Any, Any, Any]] = {}
_WRITTEN_SLOTS = 8


def idle_noise_written(circuit: Any, noise_model: Any) -> Any:
    """``circuit`` (parameters allowed) with the noise model's passes applied, every inserted
    channel as a ``superop`` instruction, and no delays; memoized per process (last 8)."""
    key = (id(circuit), id(noise_model))
    entry = _WRITTEN.pop(key, None)
    if entry is None or entry[0] is not circuit or entry[1] is not noise_model:
        passed = run_noise_passes(circuit, noise_model)
        out = QuantumCircuit(passed.num_qubits, global_phase=passed.global_phase)
        for inst in passed.data:
            op = inst.operation
            qs = [passed.find_bit(q).index for q in inst.qubits]
            if op.name == "delay":
                continue
            if op.name == "quantum_channel":
                sop = SuperOp(instruction_error(op)).data
                out.append(superop_instruction(sop), qs)
                continue
            out.append(op, qs)
        entry = (circuit, noise_model, out)
        while len(_WRITTEN) >= _WRITTEN_SLOTS:
            _WRITTEN.pop(next(iter(_WRITTEN)))
    _WRITTEN[key] = entry
    return entry[2]


def emulate_parameter_sets(
    compiled: Any,
    profile: Any,
    bases: Sequence[str],
    values: Sequence[Sequence[float]],
    *,
    method: str = "auto",
    num_trajectories: int = 256,
    num_batches: int = 16,
    seed: int | None = None,
    max_density_matrix_qubits: int | None = None,
) -> list[BasisDistributions]:
    """``emulate_bases`` of a parameterized ``compiled`` circuit at many parameter sets.

    ``values[i]``: one value per ``compiled.parameters``. Density matrix: one qiskit-aer call per
    at most :data:`BATCH_BYTES` of density matrices, every set a parameter binding of the
    circuit with its idle relaxation written in (:func:`idle_noise_written`; equal to the bound
    circuit's run to rounding). Trajectories, or a circuit without parameters: one
    ``emulate_bases`` per set.
    """
    circuit = compiled.circuit
    sets = [np.asarray(v, dtype=float) for v in values]
    if not sets:
        return []
    k = circuit.num_qubits
    chosen, notice = choose_method(k, method, max_density_matrix_qubits=max_density_matrix_qubits)
    always_on = evolution_spec(profile, tuple(compiled.patch)) is not None
    if chosen != "density_matrix" or not circuit.parameters or always_on:
        return [
            emulate_bases(
                compiled.bind(v) if circuit.parameters else compiled,
                profile,
                bases,
                method=method,
                num_trajectories=num_trajectories,
                num_batches=num_batches,
                seed=seed,
                max_density_matrix_qubits=max_density_matrix_qubits,
            )
            for v in sets
        ]
    patch = tuple(compiled.patch)
    qubits = list(compiled.logical_to_circuit)
    bases_t = validate_bases(bases, len(qubits))
    nm = noise_model_for(profile, patch)
    mats, terms = logical_readout(profile, patch, qubits)
    effects, keys = basis_tables(
        bases_t, qubits, effect_cache_for(nm, k, layer_spec_for(profile, k))
    )
    position = {p: i for i, p in enumerate(compiled.parameters)}
    qc = idle_noise_written(circuit, nm).copy()
    qc.save_density_matrix(label="rho")
    sim = AerSimulator(
        method="density_matrix",
        noise_model=nm,
        max_parallel_threads=engine_threads(),
        # bind in the simulator: the circuit is prepared once for all sets (same results)
        runtime_parameter_bind_enable=True,
    )
    chunk = max(1, BATCH_BYTES // (16 * 4**k))
    out: list[BasisDistributions] = []
    for start in range(0, len(sets), chunk):
        part = sets[start : start + chunk]
        t0 = time.perf_counter()
        binds = {p: [float(v[position[p]]) for v in part] for p in qc.parameters}
        count_engine_call()
        result = sim.run(qc, parameter_binds=[binds], shots=1).result()
        if not result.success:
            raise RuntimeError(f"qiskit-aer density-matrix run failed: {result.status}")
        share = (time.perf_counter() - t0) / len(part)
        for i in range(len(part)):
            out.append(
                _distributions(
                    result.data(i)["rho"], bases_t, qubits, effects, keys, mats, terms,
                    share, first=i == 0, notice=notice,
                )
            )  # fmt: skip
    return out


def emulate_written(
    jobs: Sequence[tuple[Any, Any]], bases: Sequence[str], noises: Sequence[Any] | None = None
) -> list[BasisDistributions]:
    """``emulate_bases(compiled, profile, bases)`` of every ``(compiled, profile)`` job, all in
    one qiskit-aer call (at most :data:`BATCH_BYTES` of density matrices per call): each circuit
    carries its profile's noise as written ``superop`` instructions
    (:class:`~noiselab.emulate.written.WrittenNoise`; ``noises[i]`` reuses one built for job
    i's profile and patch). Density matrix only; equal to ``emulate_bases`` to rounding."""
    if not jobs:
        return []
    if any(evolution_spec(p, tuple(c.patch)) is not None for c, p in jobs):
        # always-on terms are written into each circuit by emulate_bases (device.evolution)
        return [emulate_bases(c, p, bases, method="density_matrix") for c, p in jobs]
    prepared = []
    for i, (compiled, profile) in enumerate(jobs):
        circuit = compiled.circuit
        check_circuit(circuit)
        k = circuit.num_qubits
        choose_method(k, "density_matrix")  # refuses what does not fit in memory
        patch = tuple(compiled.patch)
        qubits = list(compiled.logical_to_circuit)
        noise = noises[i] if noises is not None else WrittenNoise(profile, patch)
        qc = noise.written(circuit)
        qc.save_density_matrix(label="rho")
        effects, keys = basis_tables(
            validate_bases(bases, len(qubits)),
            qubits,
            WrittenEffects(noise, layer_spec_for(profile, k)),
        )
        prepared.append((qc, qubits, effects, keys, logical_readout(profile, patch, qubits)))
    sim = AerSimulator(method="density_matrix", max_parallel_threads=engine_threads())
    bases_t = validate_bases(bases, len(prepared[0][1]))
    out: list[BasisDistributions] = []
    chunk = max(1, BATCH_BYTES // (16 * 4 ** prepared[0][0].num_qubits))
    for start in range(0, len(prepared), chunk):
        part = prepared[start : start + chunk]
        t0 = time.perf_counter()
        count_engine_call()
        result = sim.run([p[0] for p in part], shots=1).result()
        if not result.success:
            raise RuntimeError(f"qiskit-aer density-matrix run failed: {result.status}")
        share = (time.perf_counter() - t0) / len(part)
        for i, (_, qubits, effects, keys, (mats, terms)) in enumerate(part):
            out.append(
                _distributions(
                    result.data(i)["rho"], bases_t, qubits, effects, keys, mats, terms,
                    share, first=i == 0,
                )
            )  # fmt: skip
    return out


def _distributions(
    rho: Any,
    bases: tuple[str, ...],
    qubits: list[int],
    effects: Any,
    keys: Any,
    mats: Any,
    terms: Any,
    share_s: float,
    *,
    first: bool,
    notice: str | None = None,
) -> BasisDistributions:
    """One saved density matrix of a batched run contracted to its bases, readout applied
    (``share_s``: this circuit's share of the simulator call; the first carries the call)."""
    t1 = time.perf_counter()
    ideal = dm_distributions(
        [np.asarray(getattr(rho, "data", rho))],
        qubits,
        effects,
        keys,
        threads=engine_threads() or None,
    )
    return BasisDistributions(
        bases=bases,
        probs_ideal=ideal,
        probs=apply_readout(ideal, mats, terms),
        num_qubits=len(qubits),
        engine_seconds=share_s + time.perf_counter() - t1,
        engine_calls=1 if first else 0,
        method="density_matrix",
        notice=notice,
    )
