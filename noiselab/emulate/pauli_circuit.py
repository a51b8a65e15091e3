"""A compiled circuit, its device noise and its measurement as a Pauli-propagation program.

Builds what :mod:`noiselab.emulate.pauli_propagation` runs: every native gate as Pauli
rotations followed by the Pauli-twirled channel the device's noise model attaches to it, every
idle window (``delay``) as the twirled relaxation channel the model's noise pass inserts, and
the measured observable of each measurement basis including the basis-change layer (its gates'
noise and the idle relaxation of qubits waiting for it, exactly, as single-qubit channels) and
the readout assignment matrix of each qubit. Readout crosstalk (joint and outcome-dependent
flips) is left out: a product of per-qubit observables cannot carry it (callers say so).

``pauli_energy(...)`` gives the energy a plan's grouped measurement would estimate, its variance
per shot of each group, and the truncation bound, without any density matrix.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from qiskit.quantum_info import Kraus

from noiselab.device.aer_adapter import gate_error, instruction_error, run_noise_passes
from noiselab.emulate.channels import BasisLayerSpec, EffectCache, layer_duration_ns
from noiselab.emulate.pauli_propagation import (
    EXACT,
    Instruction,
    PauliDiagonal,
    PauliTerms,
    Propagated,
    Truncation,
    budget_strings,
    gate_rotations,
    merge,
    pauli_matrix,
    propagate,
    twirled_fidelities,
)
from noiselab.emulate.pauli_truncation import Sampling, TruncationEstimate, propagate_estimated

_ONE = np.uint64(1)
#: The measured observables' means are expanded with this fraction of the threshold.
EXPANSION_REFINE = 1e-4


def circuit_program(circuit: object, noise_model: object | None) -> list[Instruction]:
    """The instructions of ``circuit`` (qiskit, native gates, scheduled) with twirled noise."""
    qc = run_noise_passes(circuit, noise_model) if noise_model is not None else circuit
    index = {bit: i for i, bit in enumerate(qc.qubits)}
    memo: dict[tuple[str, tuple[int, ...]], PauliDiagonal | None] = {}
    program: list[Instruction] = []
    for inst in qc.data:
        op = inst.operation
        qubits = tuple(index[b] for b in inst.qubits)
        if op.name in ("delay", "barrier", "measure"):
            continue
        if op.name == "quantum_channel":  # inserted by a noise pass (idle relaxation)
            program.append(_twirled(instruction_error(op), qubits))
            continue
        program.extend(gate_rotations(op.name, [float(p) for p in op.params], qubits))
        if noise_model is None:
            continue
        key = (op.name, qubits)
        if key not in memo:
            err = gate_error(noise_model, op.name, qubits)
            memo[key] = None if err is None else _twirled(err, qubits)
        if memo[key] is not None:
            program.append(memo[key])
    return program


def _twirled(error: object, qubits: tuple[int, ...]) -> PauliDiagonal:
    kraus = Kraus(error.to_quantumchannel()).data  # type: ignore[attr-defined]
    return PauliDiagonal(qubits, twirled_fidelities(kraus, len(qubits)))


def measured_qubit_observable(
    effects: np.ndarray, readout: np.ndarray | None, values: np.ndarray | None = None
) -> np.ndarray:
    """Pauli coefficients (index 0..3 as I, X, Z, Y by ``x + 2 z``) of the single-qubit
    observable ``sum_m v_m sum_b R[m, b] E^b`` a measurement of this qubit reports.

    ``effects[b]`` (2x2): the Heisenberg image of ``|b><b|`` through the basis layer;
    ``readout[m, b]``: probability to report m when the qubit is in b (None: ideal);
    ``values[m]``: what the estimator assigns to outcome m (None: the eigenvalue (-1)^m; a
    per-qubit readout correction assigns ``A^-T (1, -1)``)."""
    r = np.eye(2) if readout is None else np.asarray(readout, dtype=float)
    v = np.array([1.0, -1.0]) if values is None else np.asarray(values, dtype=float)
    m_op = sum(v[m] * r[m, b] * effects[b] for m in (0, 1) for b in (0, 1))
    return np.array([np.real(np.trace(pauli_matrix(i, 1) @ m_op)) / 2 for i in range(4)])


def basis_observable(
    terms: Sequence[tuple[str, float]],
    qubit_observables: Mapping[int, np.ndarray],
    circuit_qubit: Sequence[int],
    min_abs_coeff: float = 0.0,
    tag: int = 0,
    squared: Mapping[int, np.ndarray] | None = None,
) -> tuple[PauliTerms, float]:
    """``sum_t h_t prod_{q in supp t} M_q`` as Pauli strings on the circuit's qubits, and the
    sum of the ``|c|`` dropped while expanding.

    ``terms``: (label over logical qubits, coefficient); ``qubit_observables[l]``: M of logical
    qubit l in this basis (from :func:`measured_qubit_observable`); ``circuit_qubit[l]``: its
    position in the circuit. A partial product below ``min_abs_coeff`` is dropped: every M has
    operator norm at most 1 (a +-1 outcome's observable), so what it would have become is
    bounded by its ``|c|`` (the dropped sum joins the truncation bound; a caller whose M may
    exceed norm 1 scales it). A lowercase letter in a label stands for the squared outcome of
    that qubit, ``squared[l]`` (None: lowercase letters are the identity, as for +-1 outcomes)."""
    if not terms:
        empty = np.zeros(0, dtype=np.uint64)
        return PauliTerms(empty, empty, np.zeros(0), np.zeros(0, dtype=np.int64)), 0.0
    letters = np.array([list(reversed(label)) for label, _ in terms])  # (T, logical)
    row = np.arange(len(terms))  # which term each partial product belongs to
    x = np.zeros(len(terms), dtype=np.uint64)
    z = np.zeros(len(terms), dtype=np.uint64)
    c = np.array([float(h) for _, h in terms])
    dropped = 0.0
    lower = np.char.islower(letters)  # squared outcomes
    for logical in range(letters.shape[1]):
        col, low = letters[row, logical], lower[row, logical]
        acting = (col != "I") & ~low
        kinds = [(acting, qubit_observables.get(logical))]
        if squared is not None:
            kinds.append((low, squared.get(logical)))
        touched = acting | low if squared is not None else acting
        if not touched.any():
            continue
        bit = np.uint64(int(circuit_qubit[logical]))
        parts = [(x[~touched], z[~touched], c[~touched], row[~touched])]
        for mask, mo in kinds:
            if not mask.any():
                continue
            m = np.asarray(mo, dtype=float)
            xa, za, ca, ra = x[mask], z[mask], c[mask], row[mask]
            for idx in range(4):
                if m[idx] == 0.0:
                    continue
                parts.append(
                    (
                        xa | (np.uint64(idx & 1) << bit),
                        za | (np.uint64(idx >> 1) << bit),
                        ca * m[idx],
                        ra,
                    )
                )
        x, z, c, row = (np.concatenate([p[k] for p in parts]) for k in range(4))
        small = np.abs(c) < min_abs_coeff
        if small.any():
            dropped += float(np.abs(c[small]).sum())
            keep = ~small
            x, z, c, row = x[keep], z[keep], c[keep], row[keep]
    return merge(PauliTerms(x, z, c, np.full(len(c), tag, dtype=np.int64))), dropped


@dataclass(frozen=True)
class PauliEnergy:
    """Energy (Ha) of a grouped measurement by Pauli propagation, with its pieces.

    ``truncation_bound_ha``: rigorous bound on ``energy_ha``'s truncation error (sum of the
    dropped |c|); with sampling, ``truncation_estimate_ha`` estimates that error (the untruncated
    energy is about ``energy_ha + truncation_estimate_ha``), ``truncation_std_ha`` is the
    estimate's standard error and ``estimate_residual_ha`` bounds what the estimate itself
    misses (:mod:`noiselab.emulate.pauli_truncation`)."""

    energy_ha: float
    group_energy_ha: tuple[float, ...]
    group_variance_ha2: tuple[float, ...]  # per shot, of each group's estimator
    truncation_bound_ha: float  # on the energy (sum of the groups' bounds)
    peak_strings: int
    truncation_estimate_ha: float | None = None
    truncation_std_ha: float | None = None
    estimate_residual_ha: float | None = None
    tasks: int = 1


#: One unit of work: (observable terms, program, rule, sampling or None).
PropagationTask = tuple[PauliTerms, Sequence[Instruction], Truncation, Sampling | None]

#: The energy is propagated as this many sums of groups (group g in sum g mod ENERGY_CHUNKS, one
#: tag each): equal strings of different groups merge, so a 20-qubit H10 energy at threshold
#: 1e-6 keeps 1.4e6 strings alive where one tag per group kept more than 4e6
#: (benchmarks/pauli_propagation.py); a fixed count: a pool's tasks give the in-process numbers.
ENERGY_CHUNKS = 16
#: Each group's mean and second moment (its shot variance) are propagated at this multiple of
#: the threshold: they set the shot allocation and std_mha, not the energy.
VARIANCE_FACTOR = 10.0


def propagate_task(item: PropagationTask) -> tuple[Propagated, TruncationEstimate | None]:
    """One task of :func:`pauli_energy` (module level and picklable: an executor's ``fn``)."""
    observable, program, rule, sampling = item
    if sampling is None:
        return propagate(observable, program, rule), None
    return propagate_estimated(observable, program, rule, sampling)


def pauli_energy(
    circuit: object,
    noise_model: object | None,
    groups: Sequence[tuple[str, Sequence[tuple[str, float]]]],
    circuit_qubit: Sequence[int],
    layer: BasisLayerSpec,
    readout: Sequence[np.ndarray] | None,
    rule: Truncation = EXACT,
    constant_ha: float = 0.0,
    outcome_values: Sequence[np.ndarray] | None = None,
    sampling: Sampling | None = None,
    executor: Any = None,
) -> PauliEnergy:
    """Energy and per-shot variance of each measured group.

    ``groups``: (basis label over logical qubits, [(term label, coefficient), ...]) with every
    term qubit-wise compatible with its basis; ``readout[l]``: 2x2 assignment matrix of logical
    qubit l (None: ideal). The energy is propagated as :data:`ENERGY_CHUNKS` sums of the
    groups' measured observables with ``rule`` (its truncation bound and, with ``sampling``, its
    estimate are the energy's). The variance of a group's single-shot estimator ``sum_t h_t
    o_t`` is ``E[(sum h o)^2] - E[sum h o]^2``; each product ``o_t o_s`` of outcomes is the
    measured observable on the qubits where exactly one of t, s acts, so both moments of every
    group are propagated, at :data:`VARIANCE_FACTOR` times the threshold.
    ``outcome_values[l]``: the values (for reported 0, 1) the estimator gives logical qubit l's
    outcome (None: +-1; a per-qubit readout correction ``A_l^-T (1, -1)``); then a shared
    qubit of o_t o_s contributes its squared value, and the partial products dropped while
    expanding are bounded with each M's norm bound (sum of |Pauli coefficients|).
    ``executor``: an object with ``map(fn, items)`` and ``parallelism``
    (noiselab.study.executor) that runs each energy sum and each share of the groups' moments as
    a :func:`propagate_task` (the same numbers as in-process, up to rounding)."""
    if not groups:  # a constant Hamiltonian: nothing to measure
        extra = {} if sampling is None else dict.fromkeys(
            ("truncation_estimate_ha", "truncation_std_ha", "estimate_residual_ha"), 0.0
        )
        return PauliEnergy(float(constant_ha), (), (), 0.0, 0, tasks=0, **extra)
    width = int(circuit.num_qubits)  # type: ignore[attr-defined]
    program = circuit_program(circuit, noise_model)
    cache = EffectCache(noise_model, width, layer, noisy=noise_model is not None)
    cut = rule.min_abs_coeff
    pooled = executor is not None and not getattr(executor, "in_process", False)
    if pooled and rule.max_strings is None:  # the workers share the memory budget
        parallel = int(getattr(executor, "parallelism", 1))
        rule = dataclasses.replace(rule, max_strings=budget_strings(parallel))
    var_rule = dataclasses.replace(rule, min_abs_coeff=cut * VARIANCE_FACTOR)
    # the means are expanded more finely than the threshold: the propagation's truncation then
    # drops those products, so the estimate samples them too, instead of their joining only the
    # bound
    mean_cut = cut * EXPANSION_REFINE
    chunks = max(1, min(ENERGY_CHUNKS, len(groups)))
    energy_parts: list[list[PauliTerms]] = [[] for _ in range(chunks)]
    moment_parts: list[list[PauliTerms]] = [[] for _ in range(chunks)]
    lost = np.zeros(len(groups))
    for g, (basis, terms) in enumerate(groups):
        measured = {int(circuit_qubit[l]): ch for l, ch in enumerate(reversed(basis)) if ch != "I"}
        layer_ns = layer_duration_ns(measured, layer)
        active = [(l, ch) for l, ch in enumerate(reversed(basis)) if ch != "I"]
        observables = {
            l: _qubit_observable(cache, circuit_qubit, readout, outcome_values, l, ch, layer_ns, 1)
            for l, ch in active
        }
        squared = None
        if outcome_values is not None:
            squared = {
                l: _qubit_observable(
                    cache, circuit_qubit, readout, outcome_values, l, ch, layer_ns, 2
                )
                for l, ch in active
            }
        energy, lost[g] = basis_observable(
            terms, observables, circuit_qubit, mean_cut, g % chunks
        )
        if outcome_values is not None:  # an M of norm > 1 may follow a cut
            norm = max(1.0, *(float(np.abs(m).sum()) for m in observables.values()))
            lost[g] *= norm ** max(sum(ch != "I" for ch in t) for t, _ in terms)
        # tag 2g: the group's estimator; tag 2g + 1: its square (second moment)
        var_cut = var_rule.min_abs_coeff
        first, _ = basis_observable(terms, observables, circuit_qubit, var_cut, 2 * g)
        second, _ = basis_observable(
            _squared_terms(terms, outcome_values is not None),
            observables,
            circuit_qubit,
            var_cut,
            2 * g + 1,
            squared,
        )
        energy_parts[g % chunks].append(energy)
        moment_parts[g % chunks] += [first, second]
    energy_items = [(merge(PauliTerms.join(p)), program, rule, sampling) for p in energy_parts]
    moment_items = [(PauliTerms.join(p), program, var_rule, None) for p in moment_parts]
    done = _run_tasks(energy_items, moment_items, executor)
    energy_done, moment_done = done[: len(done) // 2], done[len(done) // 2 :]
    n_tags = 2 * len(groups)
    values = np.zeros(n_tags)
    for result, _ in moment_done:
        k = min(len(result.values), n_tags)
        values[:k] += result.values[:k]
    sums, bounds = np.zeros(chunks), np.zeros(chunks)
    estimate, var, residual = np.zeros(chunks), np.zeros(chunks), np.zeros(chunks)
    for result, est in energy_done:
        k = min(len(result.values), chunks)
        sums[:k] += result.values[:k]
        bounds[:k] += result.bounds[:k]
        if est is not None:
            k = min(len(est.estimate), chunks)
            estimate[:k] += est.estimate[:k]
            var[:k] += est.std[:k] ** 2
            residual[:k] += est.residual[:k]
    means, moments = values[0::2], values[1::2]
    extra: dict[str, Any] = {}
    if sampling is not None:
        extra = {
            "truncation_estimate_ha": float(estimate.sum()),
            "truncation_std_ha": float(np.sqrt(var.sum())),
            "estimate_residual_ha": float(residual.sum() + lost.sum()),
        }
    peak = max(max(r.peak_strings, 0 if e is None else e.peak_strings) for r, e in done)
    return PauliEnergy(
        float(constant_ha + sums.sum()),
        tuple(float(v) for v in means),
        tuple(float(max(0.0, m2 - m1**2)) for m1, m2 in zip(means, moments, strict=True)),
        float(bounds.sum() + lost.sum()),
        peak,
        tasks=len(done),
        **extra,
    )


def _run_tasks(
    energy: list[PropagationTask], moments: list[PropagationTask], executor: Any
) -> list[tuple[Propagated, TruncationEstimate | None]]:
    """The energy sums' results, then the moments' (as many of each): in-process one joint
    propagation of each kind (numpy on long arrays; tags keep them apart), or every item as
    one task on ``executor``."""
    if executor is None or getattr(executor, "in_process", False):
        joint = [_joined(energy), _joined(moments)]
        return [propagate_task(item) for item in joint]
    return list(executor.map(propagate_task, [*energy, *moments]))


def _joined(items: list[PropagationTask]) -> PropagationTask:
    _, program, rule, sampling = items[0]
    return (PauliTerms.join([item[0] for item in items]), program, rule, sampling)


def _qubit_observable(
    cache: EffectCache,
    circuit_qubit: Sequence[int],
    readout: Sequence[np.ndarray] | None,
    outcome_values: Sequence[np.ndarray] | None,
    logical: int,
    letter: str,
    layer_ns: float,
    power: int,
) -> np.ndarray:
    """:func:`measured_qubit_observable` of one logical qubit with its outcome values**power."""
    values = None if outcome_values is None else np.asarray(outcome_values[logical]) ** power
    return measured_qubit_observable(
        cache.get(int(circuit_qubit[logical]), letter, layer_ns),
        None if readout is None else readout[logical],
        values,
    )


def _squared_terms(
    terms: Sequence[tuple[str, float]], mark_shared: bool = False
) -> list[tuple[str, float]]:
    """``(sum_t h_t o_t)^2`` as outcome products: o_t o_s acts where exactly one of t, s does;
    with ``mark_shared`` a qubit where both act is a lowercase letter (its squared outcome)."""

    def letter(a: str, b: str) -> str:
        if a == "I" and b == "I":
            return "I"
        if a != "I" and b != "I":
            return a.lower() if mark_shared else "I"
        return a if a != "I" else b

    out: dict[str, float] = {}
    for lt, ht in terms:
        for ls, hs in terms:
            label = "".join(letter(a, b) for a, b in zip(lt, ls, strict=True))
            out[label] = out.get(label, 0.0) + ht * hs
    return list(out.items())
