"""The Z2 symmetries of an encoding as Pauli operators: the sector projector and what measuring
it costs.

With P = prod_s (1 + lambda_s S_s) / 2 and [H, S_s] = 0, symmetry verification estimates
E = <H P> / <P> (see :mod:`noiselab.mitigate.passes.postselect`); the Pauli terms of H P and P
that no basis of the plan measures need extra bases, which every runner of a context measures
(:attr:`noiselab.mitigate.experiment.ExperimentContext.measured_bases`).
"""

from __future__ import annotations

from collections.abc import Sequence
from itertools import combinations

import numpy as np
from qiskit.quantum_info import SparsePauliOp

from noiselab.common.errors import InputError
from noiselab.mitigate.plan import assign_to_bases


def symmetry_table(problem) -> dict[str, tuple[str, int]]:
    """name -> (Pauli label, eigenvalue +-1) for the symmetries a QubitProblem declares."""
    out: dict[str, tuple[str, int]] = {}
    for sym in getattr(problem, "symmetries", None) or ():
        name, pauli, eig = _unpack(sym)
        op = pauli if isinstance(pauli, SparsePauliOp) else SparsePauliOp(pauli)
        op = op.simplify()
        if len(op) != 1:
            raise InputError(f"symmetry {name!r}: must be a single Pauli string")
        c = complex(op.coeffs[0])
        label = op.paulis.to_labels()[0]
        # fold a +-1 coefficient into the eigenvalue
        sign = 1 if c.real > 0 else -1
        if abs(abs(c) - 1.0) > 1e-9 or abs(c.imag) > 1e-9:
            raise InputError(f"symmetry {name!r}: Pauli coefficient must be +-1")
        out[str(name)] = (label, round(float(eig)) * sign)
    return out


def _unpack(sym) -> tuple[str, object, float]:
    if hasattr(sym, "name"):
        return sym.name, sym.pauli, sym.eigenvalue
    name, pauli, eig = sym
    return name, pauli, eig


def projector_op(labels_eigs: Sequence[tuple[str, int]], num_qubits: int) -> SparsePauliOp:
    """P = prod_s (1 + lambda_s S_s) / 2 as a Pauli sum."""
    p = SparsePauliOp("I" * num_qubits)
    for label, eig in labels_eigs:
        p = (p @ SparsePauliOp(["I" * num_qubits, label], [0.5, 0.5 * eig])).simplify()
    return p


def verification_ops(
    hamiltonian: SparsePauliOp, labels_eigs: Sequence[tuple[str, int]]
) -> tuple[SparsePauliOp, SparsePauliOp]:
    """(H P, P) for the sector projector P; refuses symmetries that do not commute with H."""
    n = hamiltonian.num_qubits
    p = projector_op(labels_eigs, n)
    hp = (hamiltonian @ p).simplify(atol=1e-12)
    if len(hp) and np.max(np.abs(np.asarray(hp.coeffs).imag)) > 1e-8:
        raise InputError("postselect: a symmetry does not commute with the Hamiltonian")
    hp = SparsePauliOp(hp.paulis, np.asarray(hp.coeffs).real)
    return hp, p


def verification_bases(plan, problem) -> tuple[str, ...]:
    """Bases (beyond the plan's) needed to verify any non-empty subset of the symmetries."""
    table = symmetry_table(problem)
    bases = list(plan.bases)
    extra: list[str] = []
    items = list(table.values())
    for r in range(1, len(items) + 1):
        for subset in combinations(items, r):
            hp, p = verification_ops(problem.hamiltonian, subset)
            for op in (hp, p):
                _, _, new = assign_to_bases(op, bases)
                bases.extend(new)
                extra.extend(new)
    return tuple(extra)
