"""Noiseless variational optimization of a trial circuit (energies in Hartree).

Energies come from the compiled statevector of :mod:`noiselab.chem.statevector`; gradients are
exact (adjoint differentiation), so quasi-Newton methods (BFGS, L-BFGS-B) converge tightly.
Start 0 is all parameters zero (the Hartree-Fock state for :func:`uccsd_circuit`, and for
:func:`layered_circuit` started from ``hf_bitstring``), or ``initial`` when given; starts
1, 2, ... are uniform random in [-init_scale, init_scale] (default pi) drawn from
``numpy.random.default_rng(seed)``. The lowest energy wins.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
from qiskit import QuantumCircuit
from scipy.optimize import minimize

from noiselab.chem.encode import QubitProblem
from noiselab.chem.statevector import compile_statevector
from noiselab.common.errors import InputError

METHODS = ("BFGS", "L-BFGS-B")


@dataclass(frozen=True, eq=False)
class OptimizationResult:
    """Best parameters (``circuit.parameters`` order) and energy of a noiseless optimization."""

    parameters: np.ndarray
    energy_ha: float
    ansatz_error_mha: float  # (energy_ha - exact_energy_ha) * 1000
    n_evaluations: int  # energy+gradient evaluations over all starts
    converged: bool  # the best start's optimizer reported success
    starts: int
    start_energies_ha: tuple[float, ...]
    seconds: float
    method: str


def optimize_noiseless(
    qubit_problem: QubitProblem,
    circuit: QuantumCircuit,
    starts: int = 1,
    seed: int = 0,
    method: str = "BFGS",
    initial: np.ndarray | None = None,
    max_iterations: int = 2000,
    gtol: float = 1e-8,
    init_scale: float = np.pi,
) -> OptimizationResult:
    """Minimize <psi(theta)|H|psi(theta)> over the circuit parameters."""
    if method not in METHODS:
        raise InputError(f"optimizer.method: {method!r}; allowed: {', '.join(METHODS)}")
    if starts < 1:
        raise InputError(f"optimizer.starts: {starts}; allowed: at least 1")
    if circuit.num_qubits != qubit_problem.num_qubits:
        raise InputError(
            f"ansatz: circuit has {circuit.num_qubits} qubits; "
            f"allowed: {qubit_problem.num_qubits} (the Hamiltonian's)"
        )
    if initial is not None and np.size(initial) != circuit.num_parameters:
        raise InputError(
            f"optimizer.initial: {np.size(initial)} values; "
            f"allowed: {circuit.num_parameters} (one per circuit parameter)"
        )
    t0 = time.perf_counter()
    program = compile_statevector(circuit)
    hmat = qubit_problem.hamiltonian.to_matrix(sparse=True).tocsr()
    n_par = program.num_parameters
    rng = np.random.default_rng(seed)
    evaluations = 0

    def fun(theta: np.ndarray) -> tuple[float, np.ndarray]:
        nonlocal evaluations
        evaluations += 1
        return program.expectation_and_gradient(hmat, theta)

    best = None
    energies: list[float] = []
    for k in range(starts):
        if k == 0:
            x0 = np.zeros(n_par) if initial is None else np.asarray(initial, dtype=float)
        else:
            x0 = rng.uniform(-init_scale, init_scale, size=n_par)
        if n_par == 0:
            e = program.expectation(hmat, x0)
            res_x, res_e, ok = x0, e, True
        else:
            options = {"maxiter": max_iterations, "gtol": gtol}
            res = minimize(fun, x0, jac=True, method=method, options=options)
            res_x, res_e = np.asarray(res.x, dtype=float), float(res.fun)
            # BFGS reports "precision loss" at machine-precision optima; accept a tiny gradient
            ok = bool(res.success) or float(np.max(np.abs(res.jac), initial=0.0)) < 1e-5
        energies.append(res_e)
        if best is None or res_e < best[1]:
            best = (res_x, res_e, ok)
    assert best is not None
    x, e, ok = best
    x.setflags(write=False)
    return OptimizationResult(
        parameters=x,
        energy_ha=e,
        ansatz_error_mha=(e - qubit_problem.exact_energy_ha) * 1000.0,
        n_evaluations=evaluations,
        converged=ok,
        starts=starts,
        start_energies_ha=tuple(energies),
        seconds=time.perf_counter() - t0,
        method=method,
    )


def noiseless_energy(
    qubit_problem: QubitProblem, circuit: QuantumCircuit, parameters: np.ndarray
) -> float:
    """<psi|H|psi> (Hartree) of the circuit at ``parameters`` (``circuit.parameters`` order)."""
    program = compile_statevector(circuit)
    return program.expectation(qubit_problem.hamiltonian.to_matrix(sparse=True), parameters)
