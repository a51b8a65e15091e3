"""One size and memory estimate of a study's heavy steps, made before any of them runs.

``preflight(study)`` runs first in :func:`noiselab.study.context.build_context`, from what the
study file says alone (no integral, no circuit): the basis size, the exact-energy solver, the
noiseless optimizer's sparse Hamiltonian and compiled statevector program, and the emulation
(density matrix, or trajectories with their stored batches). Each estimate is compared with the
memory this process may use (:func:`noiselab.common.memory.memory_budget`: a share of what is
actually available, process limits included); the largest one that does not fit is refused in
one line naming the study file, the key to change, the size needed and the memory available.

The estimates are upper bounds from counting, not measurements:

* exact energy: ``FCI_VECTORS`` float64 vectors over the determinants (PySCF's Davidson keeps a
  subspace of a few vectors per root);
* Hamiltonian: a number-conserving two-body Hamiltonian on n spin orbitals has X-masks of
  weight 0, 2 or 4 only (every encoding maps them linearly, so the count is the same), so its
  sparse matrix has at most ``2**q * (1 + C(n,2) + C(n,4))`` non-zeros (capped at ``4**q``),
  24 bytes each (complex value and index), twice while it is built;
* statevector program: one permutation (int64) and one phase (complex128) vector of ``2**q``
  entries per Pauli rotation (UCCSD: 2 per single, 8 per double excitation; layered: 2 per
  qubit and layer), plus a few statevectors;
* emulation: :func:`resolve_emulation` with one measured basis (the
  exact count is checked again once the measurement plan exists, still before simulating).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from math import comb
from typing import Any

from noiselab.chem.sources import source_sizes
from noiselab.common.errors import ProblemTooLargeError, input_error
from noiselab.common.memory import GIB, memory_budget
from noiselab.emulate.memory import estimate_memory_bytes
from noiselab.mitigate.batch_spec import VALUE_RECIPES, needs_distributions, value_masks

#: float64 vectors over the determinants the exact solver keeps (Davidson subspace, 3 roots).
FCI_VECTORS = 40
#: Bytes per stored sparse non-zero (complex128 value + index), times two while building.
SPARSE_BYTES = 2 * 24
#: Bytes per statevector entry of one compiled Pauli rotation (int64 permutation + phase).
ROTATION_BYTES = 8 + 16
#: Statevectors alive during an adjoint-gradient sweep (and its temporaries).
STATEVECTORS = 8


@dataclass(frozen=True)
class StepEstimate:
    """Estimated peak memory of one heavy step and what to change when it does not fit."""

    step: str
    key: str
    bytes: int
    detail: str
    allowed: str


def _uccsd_rotations(n_orb: int, n_alpha: int, n_beta: int, singles: bool, doubles: bool) -> int:
    va, vb = n_orb - n_alpha, n_orb - n_beta
    n_singles = n_alpha * va + n_beta * vb if singles else 0
    n_doubles = (
        comb(n_alpha, 2) * comb(va, 2) + comb(n_beta, 2) * comb(vb, 2) + n_alpha * va * n_beta * vb
        if doubles
        else 0
    )
    return 2 * n_singles + 8 * n_doubles


def estimate_steps(molecule: Any, ansatz: Any, num_qubits: int) -> tuple[StepEstimate, ...]:
    """Memory estimates of the exact-energy and optimizer steps (see the module docstring)."""
    sizes = source_sizes(molecule)
    q = int(num_qubits)
    n_spin = 2 * sizes.n_orb
    out = [
        StepEstimate(
            "exact energy (FCI/CASCI)",
            "molecule.active_space",
            FCI_VECTORS * 8 * sizes.n_determinants,
            f"{sizes.n_determinants} determinants",
            "a smaller active_space",
        )
    ]
    masks = 1 + comb(n_spin, 2) + comb(n_spin, 4)
    nnz = min(4**q, 2**q * masks)
    if getattr(ansatz, "kind", "uccsd") == "layered":
        rotations = 2 * q * (int(ansatz.layers) + 1)
    elif getattr(ansatz, "kind", "uccsd") == "circuit":
        rotations = int(ansatz.operations)
    else:
        rotations = _uccsd_rotations(
            sizes.n_orb, sizes.n_alpha, sizes.n_beta, ansatz.singles, ansatz.doubles
        )
    out.append(
        StepEstimate(
            "noiseless optimizer",
            "ansatz",
            SPARSE_BYTES * nnz + (ROTATION_BYTES * rotations + 16 * STATEVECTORS) * 2**q,
            f"{q} qubits, {rotations} Pauli rotations, Hamiltonian with up to {nnz:.3g} non-zeros",
            "a smaller active space (fewer qubits) or a shorter ansatz",
        )
    )
    return tuple(out)


def check_sizes(source: str, molecule: Any, ansatz: Any, num_qubits: int, emulation: Any) -> None:
    """Refuse in one line a study whose heavy steps cannot fit (before any of them runs)."""
    from noiselab.chem.molecule import MAX_BASIS_FUNCTIONS
    from noiselab.chem.statevector import MAX_STATEVECTOR_QUBITS

    sizes = source_sizes(molecule)
    if sizes.n_basis > MAX_BASIS_FUNCTIONS:
        raise ProblemTooLargeError(
            str(
                input_error(
                    source,
                    "molecule.basis",
                    f"{sizes.n_basis} basis functions for this molecule",
                    f"at most {MAX_BASIS_FUNCTIONS} (Hartree-Fock holds about N**4 bytes of "
                    "integrals): a smaller basis or fewer atoms",
                )
            )
        )
    q = int(num_qubits)
    if q > MAX_STATEVECTOR_QUBITS:
        raise ProblemTooLargeError(
            f"{source}: molecule: the problem needs {q} qubits; allowed: at most "
            f"{MAX_STATEVECTOR_QUBITS} (the noiseless optimizer holds statevectors of 2**q "
            "entries): a smaller active_space or drop_fixed_parity_qubits"
        )
    emulation_method(source, emulation, q, 1)  # density matrix, or trajectories with one basis
    budget = memory_budget()
    too_big = [e for e in estimate_steps(molecule, ansatz, q) if e.bytes > budget.usable]
    if too_big:
        worst = max(too_big, key=lambda e: e.bytes)
        raise ProblemTooLargeError(
            f"{source}: {worst.key}: the {worst.step} needs about {worst.bytes / GIB:.3g} GiB "
            f"({worst.detail}) but only {budget.describe()}; allowed: {worst.allowed}, "
            "or more memory"
        )


def preflight(study: Any) -> None:
    """:func:`check_sizes` of a resolved :class:`noiselab.study.spec.Study` (overrides
    included)."""
    check_sizes(str(study.source), study.molecule, study.ansatz, study.num_qubits, study.emulation)


def emulation_method(
    source: str,
    emulation: Any,
    circuit_qubits: int,
    num_bases: int = 1,
    *,
    num_values: int = -1,
    num_qubits_measured: int | None = None,
) -> tuple[str, str | None]:
    """(method, notice) the emulator will use for ``circuit_qubits`` compiled qubits under the
    study's ``emulation`` settings.

    An emulation that cannot fit (``density_matrix`` beyond the memory guard or beyond
    ``emulation.max_density_matrix_qubits``; trajectories beyond the memory guard) is refused
    here, before any simulation: one line naming the study file, the qubit count and the
    memory estimate in GiB. ``num_values >= 0``: trajectories keep that many per-batch values
    instead of per-batch distributions (:mod:`noiselab.emulate.batch_values`).
    """
    from noiselab.emulate.engine import choose_method
    from noiselab.emulate.memory import check_memory
    from noiselab.emulate.pauli_propagation import MAX_PAULI_QUBITS

    e = emulation
    if e.method == "pauli_propagation":  # strings of two uint64 words; no 2**n array anywhere
        if circuit_qubits > MAX_PAULI_QUBITS:
            raise ProblemTooLargeError(
                f"{source}: emulation.method: pauli_propagation on {circuit_qubits} circuit "
                f"qubits; allowed: at most {MAX_PAULI_QUBITS}"
            )
        return "pauli_propagation", None
    try:
        method, notice = choose_method(
            circuit_qubits, e.method, max_density_matrix_qubits=e.max_density_matrix_qubits
        )
        if method == "trajectory":
            check_memory(
                circuit_qubits,
                "trajectory",
                trajectories_per_batch=max(1, e.trajectories // e.batches),
                num_bases=num_bases,
                num_batches=e.batches,
                num_values=num_values,
                num_qubits_measured=num_qubits_measured,
            )
    except ProblemTooLargeError as exc:
        raise ProblemTooLargeError(f"{source}: {exc.message}") from None
    return method, notice


def resolve_emulation(
    study: Any, circuit_qubits: int, num_bases: int = 1
) -> tuple[str, str | None]:
    """:func:`emulation_method` for a resolved study (a :class:`noiselab.study.spec.Study`)."""
    return emulation_method(str(study.source), study.emulation, circuit_qubits, num_bases)


def resolve_store(
    study: Any,
    circuit_qubits: int,
    experiment: Any,
    recipes: Mapping[str, Sequence[Mapping[str, Any]]] | None,
) -> tuple[str, str | None, bool]:
    """(method, notice, keep per-batch values) for a study's experiment, checked against the
    memory guard before any simulation.

    Under the trajectory method, per-batch values are kept when every recipe of ``recipes``
    (the job's; None: recipes not known here, keep distributions) reads term parities only
    (:func:`noiselab.mitigate.batch_spec.needs_distributions`). Otherwise the per-batch
    distributions are kept; when they do not fit, a recipe that needs them is refused in one
    line naming it and the alternatives.
    """
    source = str(study.source)
    bases = len(experiment.measured_bases)
    n = int(experiment.plan.num_qubits)
    method, notice = emulation_method(source, study.emulation, circuit_qubits, 1)
    if method != "trajectory":
        return (*emulation_method(source, study.emulation, circuit_qubits, bases), False)
    blockers = (
        {"(this job's recipes)": "unknown"}
        if recipes is None
        else {k: r for k, p in recipes.items() if (r := needs_distributions(p)) is not None}
    )
    if not blockers:
        values = 2 * sum(len(m) for m in value_masks(experiment))  # identity and readout inverse
        method, notice = emulation_method(
            source,
            study.emulation,
            circuit_qubits,
            bases,
            num_values=values,
            num_qubits_measured=n,
        )
        return method, notice, True
    try:
        method, notice = emulation_method(
            source, study.emulation, circuit_qubits, bases, num_qubits_measured=n
        )
    except ProblemTooLargeError as exc:
        if recipes is None:
            raise
        name, why = next(iter(blockers.items()))
        e = study.emulation
        need = estimate_memory_bytes(
            circuit_qubits,
            "trajectory",
            trajectories_per_batch=max(1, e.trajectories // e.batches),
            num_bases=bases,
            num_batches=e.batches,
            num_qubits_measured=n,
        )
        raise ProblemTooLargeError(
            f"{source}: recipes.{name}: {why} needs the per-batch outcome distributions of the "
            f"trajectory method ({n} qubits, {bases} bases, {e.batches} batches: about "
            f"{need / GIB:.3g} GiB) but only {memory_budget().describe()}; allowed: recipes "
            f"with no passes or only {VALUE_RECIPES} (they keep per-batch values), "
            "emulation.method pauli_propagation, or fewer qubits"
        ) from exc
    return method, notice, False
