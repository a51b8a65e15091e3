"""Noiseless variational optimization of a trial circuit (energies in Hartree).

Energies come from the compiled statevector of :mod:`noiselab.chem.statevector`; gradients are
exact (adjoint differentiation), so quasi-Newton methods (BFGS, L-BFGS-B) converge tightly. The
Hamiltonian is a sparse matrix (:func:`noiselab.chem.pauli_sparse.operator_matrix`: qiskit's
below 17 qubits, else built block by block from the X-masks, real values: ~4 GiB at 20 qubits).

Starts: start 0 is all parameters zero (the Hartree-Fock state for :func:`uccsd_circuit`, and
for :func:`layered_circuit` started from ``hf_bitstring``), or ``initial`` when given; starts
1, 2, ... are uniform random in [-init_scale, init_scale] (default pi), drawn from
``numpy.random.default_rng(seed)``. A start where the gradient already vanishes (every component
<= ``gtol``: the optimizer would stop there at once, e.g. the Hartree-Fock state of a layered
circuit) is replaced by itself plus a Gaussian perturbation of ``perturb_scale`` radians from
the same generator. At least ``starts`` starts run; more run, up to ``max_starts``, until the two
lowest energies agree within ``agree_ha`` or the lowest reaches the exact energy (the
variational floor) within ``agree_ha``. Agreement at the Hartree-Fock energy does not count while
the exact energy is lower: many starts of a layered circuit fall back to that stationary point.
The lowest energy wins.

:func:`optimum_warnings` turns a result into one-line warnings: the two lowest starts disagree
by more than the target, the optimum lies below the exact sector energy (the trial state left the
particle-number and spin sector), the optimum sits at the Hartree-Fock energy while the exact
energy is lower, or the trial state's <S^2> differs from the exact ground state's.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np
from qiskit import QuantumCircuit
from scipy.optimize import minimize

from noiselab.chem.encode import QubitProblem
from noiselab.chem.fermion import ENCODINGS
from noiselab.chem.pauli_sparse import operator_matrix
from noiselab.chem.spin import spin_squared_op
from noiselab.chem.statevector import compile_statevector
from noiselab.common.errors import InputError

METHODS = ("BFGS", "L-BFGS-B")
#: Default cap on the number of starts (the study's ``ansatz.max_starts``).
DEFAULT_MAX_STARTS = 16
#: Two starts "agree", and a start "reaches" the exact or Hartree-Fock energy, within this (Ha).
AGREE_HA = 1e-6
#: <S^2> of the trial state and of the exact state differ when further apart than this.
SPIN_TOLERANCE = 1e-2
#: Why the starts stopped.
STOP_REASONS = ("two_agree", "reached_exact", "cap", "no_parameters")


@dataclass(frozen=True, eq=False)
class OptimizationResult:
    """Best parameters (``circuit.parameters`` order) and energy of a noiseless optimization."""

    parameters: np.ndarray
    energy_ha: float
    ansatz_error_mha: float  # (energy_ha - exact_energy_ha) * 1000
    n_evaluations: int  # energy+gradient evaluations over all starts
    converged: bool  # the best start's optimizer reported success
    starts: int  # starts run
    start_energies_ha: tuple[float, ...]
    seconds: float
    method: str
    replaced_starts: int = 0  # stationary starts replaced by a perturbed point
    stopped: str = "cap"  # one of STOP_REASONS
    spread_mha: float | None = None  # second-lowest minus lowest start energy; None: one start
    spin_squared: float | None = None  # <S^2> of the trial state at the optimum

    @property
    def hit_cap(self) -> bool:
        """The starts ran out before two agreed or one reached the exact energy."""
        return self.stopped == "cap"


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
    max_starts: int | None = None,
    agree_ha: float = AGREE_HA,
    perturb_scale: float = 0.1,
) -> OptimizationResult:
    """Minimize <psi(theta)|H|psi(theta)> over the circuit parameters (see the module text).

    ``starts``: at least this many starts; ``max_starts``: at most this many (default
    ``max(starts, DEFAULT_MAX_STARTS)``).
    """
    if method not in METHODS:
        raise InputError(f"optimizer.method: {method!r}; allowed: {', '.join(METHODS)}")
    if starts < 1:
        raise InputError(f"optimizer.starts: {starts}; allowed: at least 1")
    cap = max(starts, DEFAULT_MAX_STARTS) if max_starts is None else int(max_starts)
    if cap < starts:
        raise InputError(f"optimizer.max_starts: {cap}; allowed: at least starts ({starts})")
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
    hmat = operator_matrix(qubit_problem.hamiltonian)
    n_par = program.num_parameters
    rng = np.random.default_rng(seed)
    exact = float(qubit_problem.exact_energy_ha)
    hf = float(qubit_problem.hf_energy_ha)
    evaluations = 0

    def fun(theta: np.ndarray) -> tuple[float, np.ndarray]:
        nonlocal evaluations
        evaluations += 1
        return program.expectation_and_gradient(hmat, theta)

    runs: list[tuple[np.ndarray, float, bool]] = []
    replaced = 0
    stopped = "cap"
    for k in range(cap if n_par else 1):
        if k == 0:
            x0 = np.zeros(n_par) if initial is None else np.asarray(initial, dtype=float)
        else:
            x0 = rng.uniform(-init_scale, init_scale, size=n_par)
        if n_par == 0:
            runs.append((x0, program.expectation(hmat, x0), True))
            stopped = "no_parameters"
            break
        _, grad = fun(x0)
        if float(np.max(np.abs(grad))) <= gtol:  # the optimizer would not move from here
            x0 = x0 + rng.normal(0.0, perturb_scale, size=n_par)
            replaced += 1
        options = {"maxiter": max_iterations, "gtol": gtol}
        res = minimize(fun, x0, jac=True, method=method, options=options)
        # BFGS reports "precision loss" at machine-precision optima; accept a tiny gradient
        ok = bool(res.success) or float(np.max(np.abs(res.jac), initial=0.0)) < 1e-5
        runs.append((np.asarray(res.x, dtype=float), float(res.fun), ok))
        if len(runs) < starts:
            continue
        low = sorted(e for _, e, _ in runs)
        if low[0] - exact <= agree_ha:
            stopped = "reached_exact"
            break
        at_hf = abs(low[0] - hf) <= agree_ha and hf - exact > agree_ha
        if len(low) >= 2 and low[1] - low[0] <= agree_ha and not at_hf:
            stopped = "two_agree"
            break
    energies = [e for _, e, _ in runs]
    x, e, ok = min(runs, key=lambda r: r[1])
    x.setflags(write=False)
    low = sorted(energies)
    hmat = None  # freed before the spin operator's matrix is built (20 qubits: GiB each)
    s2 = (  # a qubit-operator file (no fermionic encoding) has no spin operator
        program.expectation(operator_matrix(spin_squared_op(qubit_problem)), x)
        if qubit_problem.encoding in ENCODINGS
        else None
    )
    return OptimizationResult(
        parameters=x,
        energy_ha=e,
        ansatz_error_mha=(e - exact) * 1000.0,
        n_evaluations=evaluations,
        converged=ok,
        starts=len(runs),
        start_energies_ha=tuple(energies),
        seconds=time.perf_counter() - t0,
        method=method,
        replaced_starts=replaced,
        stopped=stopped,
        spread_mha=(low[1] - low[0]) * 1000.0 if len(low) >= 2 else None,
        spin_squared=None if s2 is None else float(s2),
    )


def optimum_warnings(
    result: OptimizationResult,
    qubit_problem: QubitProblem,
    target_mha: float,
    exact_spin_squared: float | None = None,
) -> tuple[str, ...]:
    """One-line warnings about a noiseless optimum the verdict should not be trusted on."""
    out: list[str] = []
    exact = float(qubit_problem.exact_energy_ha)
    hf = float(qubit_problem.hf_energy_ha)
    at_exact = result.energy_ha - exact <= AGREE_HA
    spread = result.spread_mha
    if not at_exact and spread is not None and spread > target_mha:
        out.append(
            f"optimizer: the two lowest of {result.starts} starts differ by {spread:.3g} mHa, more "
            f"than the {target_mha:.4g} mHa target; the noiseless optimum may not be the best "
            "the trial circuit can do (raise ansatz.max_starts)"
        )
    if result.energy_ha < exact - AGREE_HA:
        out.append(
            f"optimizer: the noiseless optimum is {(exact - result.energy_ha) * 1000:.3g} mHa "
            "below the exact energy of the molecule's particle-number and spin sector: the trial "
            "state has left that sector (the circuit does not conserve them), so biases against "
            "the exact energy mix that leakage with the device's error"
        )
    ansatz_mha = (result.energy_ha - exact) * 1000.0
    if abs(result.energy_ha - hf) <= AGREE_HA and hf - exact > AGREE_HA:
        out.append(
            f"optimizer: the noiseless optimum equals the Hartree-Fock energy ({hf:.6f} Ha) while "
            f"the exact energy is {(hf - exact) * 1000:.3g} mHa lower; the optimizer stayed at "
            "the Hartree-Fock state or the trial circuit cannot go below it"
        )
    elif ansatz_mha > target_mha:
        share = (
            f"; it recovers {100.0 * (hf - result.energy_ha) / (hf - exact):.0f} % of the "
            f"correlation energy ({(hf - exact) * 1000.0:.3g} mHa)"
            if hf - exact > AGREE_HA
            else ""
        )
        out.append(
            f"optimizer: the noiseless optimum is {ansatz_mha:.3g} mHa above the exact energy, "
            f"more than the {target_mha:.4g} mHa target{share}: no mitigation removes that part; "
            "the trial circuit or its optimization limits this study before the device does"
        )
    s2 = result.spin_squared
    if (
        s2 is not None
        and exact_spin_squared is not None
        and math.isfinite(s2)
        and abs(s2 - exact_spin_squared) > SPIN_TOLERANCE
    ):
        out.append(
            f"optimizer: the trial state's <S^2> is {s2:.3f} but the exact ground state's is "
            f"{exact_spin_squared:.3f}; the optimum is (partly) another spin state"
        )
    return tuple(out)


def noiseless_energy(
    qubit_problem: QubitProblem, circuit: QuantumCircuit, parameters: np.ndarray
) -> float:
    """<psi|H|psi> (Hartree) of the circuit at ``parameters`` (``circuit.parameters`` order)."""
    program = compile_statevector(circuit)
    return program.expectation(operator_matrix(qubit_problem.hamiltonian), parameters)
