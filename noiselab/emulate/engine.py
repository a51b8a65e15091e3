"""Measured distributions of a compiled circuit in many Pauli bases from ONE state simulation.

``emulate_bases(compiled, profile, bases)`` runs the compiled circuit once (qiskit-aer density
matrix with the profile's noise model, no shots) and then, for every basis, contracts the density
matrix with the Heisenberg-evolved effects of the noisy basis-change layer (see
:mod:`noiselab.emulate.channels` and :mod:`noiselab.emulate.contract`). Readout assignment error
(per-qubit confusion and pair crosstalk) is applied analytically afterwards
(:mod:`noiselab.emulate.readout`). Past the memory guard, ``method="auto"`` switches to Monte Carlo
wavefunction trajectories (:mod:`noiselab.emulate.trajectory`), whose statistical error is kept
apart from shot noise in ``trajectory_batches``.

Longer than the usual 400 lines on purpose: it is the one dispatch point of both methods and both
trajectory storage modes (distributions or per-batch values); the arithmetic lives in the modules
it names.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Hashable, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from qiskit_aer import AerSimulator

from noiselab.common.errors import InputError, ProblemTooLargeError
from noiselab.device.evolution import EvolutionSpec, evolution_ensemble, evolution_spec
from noiselab.emulate.batch_values import BatchValueSpec, batch_functional
from noiselab.emulate.channels import (
    BasisLayerSpec,
    EffectCache,
    effect_cache_for,
    layer_duration_ns,
)
from noiselab.emulate.contract import dm_distributions
from noiselab.emulate.device_inputs import layer_spec_for, logical_readout, noise_model_for
from noiselab.emulate.memory import (
    GIB,
    check_memory,
    engine_threads,
    estimate_memory_bytes,
    fits_in_memory,
)
from noiselab.emulate.readout import PairMatrix, apply_readout
from noiselab.emulate.trajectory import trajectory_batches

METHODS = ("auto", "density_matrix", "trajectory")

_ENGINE_CALLS = [0]


def engine_call_count() -> int:
    """Total number of simulator runs made by this module since import (for tests and reports)."""
    return _ENGINE_CALLS[0]


def count_engine_call() -> None:
    """Count one simulator run made elsewhere in the emulate layer (``emulate.batch``)."""
    _ENGINE_CALLS[0] += 1


@dataclass(frozen=True, eq=False)  # arrays inside: compare fields explicitly
class BasisDistributions:
    """Exact (or trajectory-averaged) measured distributions, one row per basis.

    ``bases``: Pauli labels over logical qubits (qiskit order; 'I' and 'Z' measured in Z).
    ``probs_ideal`` ``(n_bases, 2**n)``: after the noisy basis layer, before readout error.
    ``probs`` ``(n_bases, 2**n)``: after readout assignment error (confusion and crosstalk).
    Entry k of a row has ``bit_l = (k >> l) & 1`` for logical qubit l.
    ``engine_seconds``: wall time of the simulation and contraction; ``engine_calls``: simulator
    runs (1 for the density matrix, one per batch for trajectories).
    ``method``: "density_matrix" or "trajectory"; ``notice``: one line for the user, or None.
    ``trajectory_batches`` / ``trajectory_batches_ideal`` ``(n_batches, n_bases, 2**n)``: batch
    means of the trajectory distributions (``probs`` is their mean); the trajectory standard error
    of any estimator f linear in the distributions is ``std(f(batch), ddof=1) / sqrt(n_batches)``
    (:meth:`trajectory_std`). ``None`` for the exact method.
    ``trajectory_values`` ``(n_batches, n_values)``: instead of ``trajectory_batches``, only the
    per-batch values of :class:`~noiselab.emulate.batch_values.BatchValueSpec` (after readout
    error), laid out by ``value_masks`` (concatenated per basis), ``value_counts`` (masks per
    basis) and ``value_transforms`` ``(n_t, n, 2, 2)``; read with :meth:`batch_functional`.
    """

    bases: tuple[str, ...]
    probs_ideal: np.ndarray
    probs: np.ndarray
    num_qubits: int
    engine_seconds: float
    engine_calls: int
    method: str = "density_matrix"
    notice: str | None = None
    trajectory_batches: np.ndarray | None = None
    trajectory_batches_ideal: np.ndarray | None = None
    num_trajectories: int = 0
    trajectory_values: np.ndarray | None = None
    value_masks: np.ndarray | None = None
    value_counts: np.ndarray | None = None
    value_transforms: np.ndarray | None = None

    @property
    def is_exact(self) -> bool:
        return self.trajectory_batches is None and self.trajectory_values is None

    def batch_functional(self, basis: str, u: np.ndarray) -> np.ndarray | None:
        """``u . probs_batch`` of ``basis`` for every trajectory batch (after readout error), from
        the stored batches or the stored per-batch values; None for the exact method."""
        i = self.bases.index(basis)
        if self.trajectory_batches is not None:
            return self.trajectory_batches[:, i, :] @ u
        if self.trajectory_values is None:
            return None
        assert self.value_masks is not None and self.value_counts is not None
        assert self.value_transforms is not None
        return batch_functional(
            self.trajectory_values,
            self.value_masks,
            self.value_counts,
            self.value_transforms,
            i,
            u,
        )

    def row(self, basis: str, *, ideal: bool = False) -> np.ndarray:
        """The distribution measured in ``basis``."""
        i = self.bases.index(basis)
        return (self.probs_ideal if ideal else self.probs)[i]

    def trajectory_std(
        self, estimator: Callable[[np.ndarray], float], *, ideal: bool = False
    ) -> float:
        """Trajectory standard error of ``estimator(probs)`` (0.0 for the exact method).

        ``estimator`` maps an ``(n_bases, 2**n)`` array to a number; for a linear estimator the
        batch-means formula is exact up to the usual sampling of the error itself.
        """
        batches = self.trajectory_batches_ideal if ideal else self.trajectory_batches
        if batches is None:
            if self.trajectory_values is not None:  # never 0.0 for a run that has an error
                raise ValueError(
                    "trajectory_std: this run kept per-batch values, not distributions; "
                    "use batch_functional"
                )
            return 0.0
        vals = np.array([estimator(b) for b in batches])
        return float(vals.std(ddof=1) / np.sqrt(len(vals)))


def validate_bases(bases: Sequence[str], num_qubits: int) -> tuple[str, ...]:
    """Check Pauli labels (letters IXYZ, one per logical qubit); return them as a tuple."""
    if isinstance(bases, str):
        bases = [bases]
    out = tuple(str(b).upper() for b in bases)
    if not out:
        raise InputError("emulation: bases: empty list; allowed: at least one Pauli label")
    for b in out:
        if len(b) != num_qubits or set(b) - set("IXYZ"):
            raise InputError(
                f"emulation: bases: {b!r} is not a Pauli label on {num_qubits} qubits; "
                f"allowed: {num_qubits} letters from I, X, Y, Z"
            )
    return out


def check_circuit(circuit: Any) -> None:
    """Refuse circuits the engine cannot run: unbound parameters, measurements."""
    params = list(circuit.parameters)
    if params:
        names = ", ".join(p.name for p in params[:3]) + (", ..." if len(params) > 3 else "")
        raise InputError(
            f"emulation: circuit: {len(params)} unbound parameter(s) ({names}); "
            f"allowed: a bound circuit (call assign_parameters first)"
        )
    if any(inst.operation.name == "measure" for inst in circuit.data):
        raise InputError(
            "emulation: circuit: contains measurements; allowed: a circuit without measurements "
            "(the emulator measures every basis itself)"
        )


def simulate_density_matrix(circuit: Any, noise_model: Any) -> np.ndarray:
    """One qiskit-aer density-matrix run (no shots); returns rho ``(2**k, 2**k)``."""
    qc = circuit.copy()
    qc.save_density_matrix(label="rho")
    sim = AerSimulator(
        method="density_matrix", noise_model=noise_model, max_parallel_threads=engine_threads()
    )
    _ENGINE_CALLS[0] += 1
    result = sim.run(qc, shots=1).result()
    if not result.success:
        raise RuntimeError(f"qiskit-aer density-matrix run failed: {result.status}")
    rho = result.data(0)["rho"]
    return np.asarray(getattr(rho, "data", rho))


#: circuits per qiskit-aer call when a state is a weighted average (quadrature of detuning)
_MIXTURE_CHUNK = 32


def simulate_mixture(ensemble: Sequence[tuple[float, Any]], noise_model: Any) -> np.ndarray:
    """sum_i w_i rho_i over weighted circuits (one circuit: :func:`simulate_density_matrix`)."""
    if len(ensemble) == 1:
        return simulate_density_matrix(ensemble[0][1], noise_model)
    sim = AerSimulator(
        method="density_matrix", noise_model=noise_model, max_parallel_threads=engine_threads()
    )
    total = None
    for start in range(0, len(ensemble), _MIXTURE_CHUNK):
        chunk = ensemble[start : start + _MIXTURE_CHUNK]
        circs = []
        for _, circ in chunk:
            qc = circ.copy()
            qc.save_density_matrix(label="rho")
            circs.append(qc)
        _ENGINE_CALLS[0] += 1
        result = sim.run(circs, shots=1).result()
        if not result.success:
            raise RuntimeError(f"qiskit-aer density-matrix run failed: {result.status}")
        for n, (w, _) in enumerate(chunk):
            rho = result.data(n)["rho"]
            part = w * np.asarray(getattr(rho, "data", rho))
            total = part if total is None else total + part
    assert total is not None
    return total


def basis_tables(
    bases: Sequence[str],
    qubits: Sequence[int],
    cache: EffectCache,
) -> tuple[list[list[np.ndarray]], list[list[Hashable]]]:
    """Per basis, each measured qubit's effect tensor and its key (letter, layer duration)."""
    effects: list[list[np.ndarray]] = []
    keys: list[list[Hashable]] = []
    for b in bases:
        letters = {qubits[l]: b[len(b) - 1 - l] for l in range(len(qubits))}
        layer_ns = layer_duration_ns(letters, cache.spec)
        row_e, row_k = [], []
        for l in range(len(qubits)):
            letter = letters[qubits[l]]
            letter = "Z" if letter == "I" else letter
            row_e.append(cache.get(qubits[l], letter, layer_ns))
            row_k.append((letter, round(layer_ns, 6)))
        effects.append(row_e)
        keys.append(row_k)
    return effects, keys


def choose_method(
    num_circuit_qubits: int, method: str, *, max_density_matrix_qubits: int | None = None
) -> tuple[str, str | None]:
    """``(method, notice)``: resolve "auto" with the memory guard; refuse impossible requests."""
    if method == "pauli_propagation":  # no distributions: noiselab.study.pauli_assess only
        raise InputError(
            "emulation: method: pauli_propagation serves assess and compare only (raw and "
            f"per-qubit readout recipes); allowed for this job: {', '.join(METHODS)}"
        )
    if method not in METHODS:
        raise InputError(f"emulation: method: {method!r}; allowed: {', '.join(METHODS)}")
    k = num_circuit_qubits
    over_cap = max_density_matrix_qubits is not None and k > max_density_matrix_qubits
    if method == "density_matrix":
        if over_cap:
            raise ProblemTooLargeError(
                f"emulation: {k} qubits exceed the density-matrix limit of "
                f"{max_density_matrix_qubits} qubits (about {estimate_memory_bytes(k) / GIB:.2f} "
                f"GiB); allowed: method 'auto' or 'trajectory', or fewer qubits"
            )
        check_memory(k, "density_matrix")
        return "density_matrix", None
    if method == "trajectory":
        return "trajectory", None
    if not over_cap and fits_in_memory(k, "density_matrix"):
        return "density_matrix", None
    need = estimate_memory_bytes(k, "density_matrix") / GIB
    why = (
        f"above the density-matrix limit of {max_density_matrix_qubits} qubits"
        if over_cap
        else "beyond the memory guard"
    )
    return "trajectory", (
        f"{k} qubits: the density matrix would need about {need:.2f} GiB, {why}; "
        f"using Monte Carlo trajectories (results carry a trajectory error bar)"
    )


def emulate_circuit_bases(
    circuit: Any,
    noise_model: Any,
    bases: Sequence[str],
    *,
    layer: BasisLayerSpec,
    logical_to_circuit: Sequence[int] | None = None,
    readout_matrices: Sequence[np.ndarray | None] | None = None,
    readout_crosstalk: Sequence[PairMatrix] = (),
    method: str = "auto",
    basis_noise: bool = True,
    num_trajectories: int = 256,
    num_batches: int = 16,
    seed: int | None = None,
    max_density_matrix_qubits: int | None = None,
    evolution: EvolutionSpec | None = None,
    batch_values: BatchValueSpec | None = None,
) -> BasisDistributions:
    """Lower-level :func:`emulate_bases` on a circuit and a qiskit-aer noise model.

    ``logical_to_circuit[l]``: circuit qubit of logical qubit l (default: the identity over all
    circuit qubits). ``readout_matrices[l]`` / ``readout_crosstalk``: readout error in LOGICAL
    indices (``None``: no readout error). ``basis_noise=False`` makes the basis layer noiseless.
    ``evolution``: the always-on terms (``device.evolution``), written into the circuit first.
    ``batch_values``: with trajectories, keep these per-batch values instead of the per-batch
    distributions (masks per basis in the order of ``bases``).
    """
    check_circuit(circuit)
    k = circuit.num_qubits
    qubits = list(range(k)) if logical_to_circuit is None else [int(c) for c in logical_to_circuit]
    n = len(qubits)
    if len(set(qubits)) != n or any(not 0 <= c < k for c in qubits):
        raise InputError(
            f"emulation: logical_to_circuit: {qubits}; allowed: distinct circuit qubits 0..{k - 1}"
        )
    bases_t = validate_bases(bases, n)
    chosen, notice = choose_method(k, method, max_density_matrix_qubits=max_density_matrix_qubits)
    t0 = time.perf_counter()
    cache = effect_cache_for(noise_model, k, layer, noisy=basis_noise)
    effects, keys = basis_tables(bases_t, qubits, cache)
    mats = list(readout_matrices) if readout_matrices is not None else [None] * n
    ensemble = evolution_ensemble(circuit, evolution)
    if chosen == "density_matrix":
        calls0 = engine_call_count()
        # handed over in a list so the contraction can drop the only reference once it has its
        # own copy (one density matrix less at the peak)
        ideal = dm_distributions(
            [simulate_mixture(ensemble, noise_model)],
            qubits,
            effects,
            keys,
            threads=engine_threads() or None,
        )
        probs = apply_readout(ideal, mats, readout_crosstalk)
        return BasisDistributions(
            bases=bases_t,
            probs_ideal=ideal,
            probs=probs,
            num_qubits=n,
            engine_seconds=time.perf_counter() - t0,
            engine_calls=engine_call_count() - calls0,
            method="density_matrix",
            notice=notice,
        )
    if batch_values is not None and len(batch_values.masks) != len(bases_t):
        raise ValueError("emulate_circuit_bases: batch_values needs one mask array per basis")
    check_memory(
        k,
        "trajectory",
        trajectories_per_batch=max(1, num_trajectories // max(1, num_batches)),
        num_bases=len(bases_t),
        num_batches=num_batches,
        num_qubits_measured=n,
        num_values=-1 if batch_values is None else batch_values.num_values,
    )
    calls0 = engine_call_count()
    batches = trajectory_batches(
        ensemble,
        noise_model,
        qubits,
        effects,
        keys,
        num_trajectories=num_trajectories,
        num_batches=num_batches,
        seed=seed,
        counter=_ENGINE_CALLS,
    )
    common = {
        "bases": bases_t,
        "num_qubits": n,
        "method": "trajectory",
        "notice": notice,
        "num_trajectories": int(num_trajectories // num_batches * num_batches),
    }
    if batch_values is None:
        batches_ideal = np.empty((num_batches, len(bases_t), 2**n))
        for b, part in enumerate(batches):
            batches_ideal[b] = part
        probs_b = apply_readout(batches_ideal, mats, readout_crosstalk)
        return BasisDistributions(
            probs_ideal=batches_ideal.mean(axis=0),
            probs=probs_b.mean(axis=0),
            engine_seconds=time.perf_counter() - t0,
            engine_calls=engine_call_count() - calls0,
            trajectory_batches=probs_b,
            trajectory_batches_ideal=batches_ideal,
            **common,
        )
    # per-batch values only: the sums of the batch means and one batch at a time
    sum_ideal = np.zeros((len(bases_t), 2**n))
    sum_probs = np.zeros((len(bases_t), 2**n))
    values = []
    for part in batches:
        sum_ideal += part
        part = apply_readout(part, mats, readout_crosstalk)
        sum_probs += part
        values.append(batch_values.reduce(part))
        del part
    return BasisDistributions(
        probs_ideal=sum_ideal / num_batches,
        probs=sum_probs / num_batches,
        engine_seconds=time.perf_counter() - t0,
        engine_calls=engine_call_count() - calls0,
        trajectory_values=np.array(values),
        value_masks=np.concatenate(batch_values.masks).astype(np.uint64),
        value_counts=np.array([len(m) for m in batch_values.masks], dtype=np.int64),
        value_transforms=batch_values.transform_array(n),
        **common,
    )


def emulate_flagged_bases(
    compiled: Any,
    profile: Any,
    circuit: Any,
    bases: Sequence[str],
    *,
    noise_model: Any = None,
) -> BasisDistributions:
    """Like :func:`emulate_bases` for ``circuit``: ``compiled``'s circuit plus one last circuit
    qubit, a classical *flag* (e.g. the sign of a sampled correction) that instructions only flip
    and that is read without error. Density matrix only.

    Rows have length ``2**(n+1)``: entry ``k + s 2**n`` is the probability of outcome k of the
    logical qubits (noisy basis layer and readout as in :func:`emulate_bases`) with flag s.
    """
    check_circuit(circuit)
    if evolution_spec(profile, tuple(compiled.patch)) is not None:
        raise InputError(
            f"{getattr(profile, 'source', 'device')}: couplers/qubits: always-on terms "
            "(zz_rate_khz, spectator_phase_rad, detuning_std_khz) are not modelled in flagged "
            "circuits (error cancellation); allowed: a device without them for this pass"
        )
    k = compiled.circuit.num_qubits
    if circuit.num_qubits != k + 1:
        raise ValueError("emulate_flagged_bases: the circuit needs exactly one qubit more")
    patch = tuple(compiled.patch)
    qubits = [int(c) for c in compiled.logical_to_circuit]
    n = len(qubits)
    bases_t = validate_bases(bases, n)
    check_memory(k + 1, "density_matrix")
    nm = noise_model_for(profile, patch) if noise_model is None else noise_model
    mats, terms = logical_readout(profile, patch, qubits)
    t0 = time.perf_counter()
    calls0 = engine_call_count()
    rho = simulate_density_matrix(circuit, nm)
    cache = effect_cache_for(nm, k, layer_spec_for(profile, k), noisy=True)
    effects, keys = basis_tables(bases_t, qubits, cache)
    dim = 2**k
    ideal_parts = []
    for s in (0, 1):  # the flag is the most significant circuit qubit
        block = np.array(rho[s * dim : (s + 1) * dim, s * dim : (s + 1) * dim])
        weight = float(np.real(np.trace(block)))
        if weight <= 1e-300:
            ideal_parts.append(np.zeros((len(bases_t), 2**n)))
            continue
        dist = dm_distributions([block / weight], qubits, effects, keys, threads=1)
        ideal_parts.append(weight * dist)
    ideal = np.concatenate(ideal_parts, axis=1)
    probs = np.concatenate([apply_readout(p, mats, terms) for p in ideal_parts], axis=1)
    return BasisDistributions(
        bases=bases_t,
        probs_ideal=ideal,
        probs=probs,
        num_qubits=n,
        engine_seconds=time.perf_counter() - t0,
        engine_calls=engine_call_count() - calls0,
        method="density_matrix",
    )


def emulate_bases(
    compiled: Any,
    profile: Any,
    bases: Sequence[str],
    *,
    method: str = "auto",
    basis_noise: bool = True,
    readout: bool = True,
    noise_model: Any = None,
    num_trajectories: int = 256,
    num_batches: int = 16,
    seed: int | None = None,
    max_density_matrix_qubits: int | None = None,
    batch_values: BatchValueSpec | None = None,
) -> BasisDistributions:
    """Measured distributions of ``compiled`` (a ``CompiledCircuit``) in every basis of ``bases``.

    ``bases``: Pauli labels over logical qubits. One state simulation whatever their number
    (density matrix), or one trajectory set (``method="trajectory"``, or "auto" past the memory
    guard). The basis layer is noisy (the profile's gate channels, relaxation of idle qubits over
    its duration) unless ``basis_noise=False``; ``readout=False`` makes ``probs`` equal
    ``probs_ideal``. ``noise_model`` overrides the one built from ``profile`` and the patch.
    ``batch_values``: see :func:`emulate_circuit_bases`.
    """
    circuit = compiled.circuit
    patch = tuple(compiled.patch)
    qubits = list(compiled.logical_to_circuit)
    nm = noise_model_for(profile, patch) if noise_model is None else noise_model
    mats, terms = logical_readout(profile, patch, qubits) if readout else (None, ())
    return emulate_circuit_bases(
        circuit,
        nm,
        bases,
        layer=layer_spec_for(profile, circuit.num_qubits),
        logical_to_circuit=qubits,
        readout_matrices=mats,
        readout_crosstalk=terms,
        method=method,
        basis_noise=basis_noise,
        num_trajectories=num_trajectories,
        num_batches=num_batches,
        seed=seed,
        max_density_matrix_qubits=max_density_matrix_qubits,
        evolution=evolution_spec(profile, patch),
        batch_values=batch_values,
    )


def with_readout(dist: BasisDistributions, compiled: Any, profile: Any) -> BasisDistributions:
    """``dist`` (exact) under the readout error of ``profile`` instead of its own: the same state
    simulation (``probs_ideal``), read out again as :func:`emulate_bases` does. For transforms
    that change only the readout (measurement twirling), which then cost no simulation."""
    if not dist.is_exact:
        raise ValueError("with_readout: exact distributions only (no trajectory batches)")
    qubits = list(compiled.logical_to_circuit)
    mats, terms = logical_readout(profile, tuple(compiled.patch), qubits)
    probs = apply_readout(dist.probs_ideal, mats, terms)
    return replace(dist, probs=probs, engine_seconds=0.0, engine_calls=0)
