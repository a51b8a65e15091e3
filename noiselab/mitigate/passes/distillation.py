"""Virtual distillation with two copies (Huggins et al., PRX 11, 041036 (2021); Koczor, PRX 11,
031057 (2021)): the estimator Tr(rho^2 H) / Tr(rho^2).

The measurement (Koczor's form, with one ancilla): an ancilla in |+> controls a SWAP of every
qubit pair of the two copies (n controlled-SWAPs), is rotated back by H and read in Z, while
copy 1 is measured in the plan's bases. With x = +-1 the ancilla's outcome, E[x w(k)] =
Tr(rho^2 h) for a group's weights w and E[x] = Tr(rho^2), exactly, for every Pauli string. (The
ancilla-free form with a two-qubit gate per pair of copies reads only the part of Tr(rho^2 P)
diagonal in the pairs' basis: exact for single-qubit P, not for the longer strings of a
molecular Hamiltonian; hence the ancilla.) So each measured row has 2 x 2**n entries (outcome of
copy 1, ancilla bit), the estimate is sum_g E[x w_g] / D + constant with D the mean of E[x]
over the bases, and its variance follows from the delta method.

Emulated exactly: both copies carry the circuit's noisy state rho (the device's emulation of the
compiled circuit); the copy-and-measure circuit runs on 2n + 1 qubits as a density matrix, its
controlled-SWAPs decomposed into CX and single-qubit gates (8 CX each), with ``copy_noise`` a
depolarizing error after every CX at the device's mean two-qubit gate error and after every
single-qubit gate (and basis rotation) at its mean single-qubit error, and readout error on
copy 1 (the patch's matrices) and the ancilla (the device's mean). Assumptions that favour the
experiment, reported as such: the two copies are identical, the ancilla reaches every pair
without routing swaps, and nothing relaxes during the copy-and-measure circuit.
"""

from __future__ import annotations

import time
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np
from qiskit import QuantumCircuit, transpile
from qiskit.quantum_info import DensityMatrix, Operator, SuperOp, partial_trace
from qiskit_aer import AerSimulator
from qiskit_aer.library import SetDensityMatrix
from qiskit_aer.noise import NoiseModel, depolarizing_error

from noiselab.common.errors import InputError
from noiselab.device.noise import readout_matrices
from noiselab.device.transforms import Applied, CircuitTransform, register_transform
from noiselab.emulate.device_inputs import logical_readout, noise_model_for
from noiselab.emulate.engine import BasisDistributions, choose_method, simulate_density_matrix
from noiselab.emulate.memory import check_memory
from noiselab.emulate.readout import apply_readout
from noiselab.mitigate.base import (
    STAGE_ESTIMATE,
    Estimated,
    MitigationPass,
    PassOptions,
    VariantData,
    Workspace,
)
from noiselab.mitigate.estimate import total
from noiselab.mitigate.reports import PassReport, ScoredRun
from noiselab.mitigate.variants import CircuitVariant

#: CX gates of one controlled-SWAP: CX, Toffoli (6 CX), CX (Nielsen and Chuang, Fig. 4.9).
CX_PER_CONTROLLED_SWAP = 8
#: Most qubits of the copy-and-measure density matrix (2n + 1): 13 would need 1 GiB a matrix.
MAX_TWO_COPY_QUBITS = 11

ASSUMPTIONS = (
    "both copies carry the same noisy state",
    "the ancilla reaches every qubit pair without routing swaps",
    "no relaxation during the copy-and-measure circuit",
)


class DistillationOptions(PassOptions):
    copy_noise: bool = True  # noise of the copy-and-measure circuit (off: an ideal one)


def reduced_logical_state(rho: np.ndarray, qubits: list[int]) -> np.ndarray:
    """The state of circuit qubits ``qubits`` (logical qubit l = ``qubits[l]``, bit l of the
    index) of the k-qubit density matrix ``rho`` (qiskit order), the others traced out."""
    k = rho.shape[0].bit_length() - 1
    traced = [q for q in range(k) if q not in qubits]
    dm = DensityMatrix(np.asarray(rho))
    reduced = partial_trace(dm, traced) if traced else dm
    kept = [q for q in range(k) if q in qubits]  # the order partial_trace keeps
    perm = [kept.index(q) for q in qubits]  # logical l sits at position perm[l]
    n = len(qubits)
    t = np.asarray(reduced.data).reshape((2,) * (2 * n))
    # C order: row axis of position p is n - 1 - p; column axis 2n - 1 - p
    axes = [n - 1 - perm[n - 1 - a] for a in range(n)]
    axes += [n + a for a in axes]
    return np.ascontiguousarray(t.transpose(axes)).reshape(2**n, 2**n)


def _mean_errors(profile: Any) -> tuple[float, float]:
    """(mean single-qubit, mean two-qubit quoted gate error) over the device."""
    e1 = float(np.mean([profile.qubit(q).gate_error for q in range(profile.qubit_count)]))
    pairs = profile.pairs()
    e2 = float(np.mean([profile.pair(a, b).gate_error for a, b in pairs])) if pairs else 0.0
    return e1, e2


@dataclass(frozen=True)
class TwoCopyMeasurement(CircuitTransform):
    """The circuit's state twice, with the ancilla-controlled SWAP test measurement; emulated by
    :meth:`emulate_variant` (the runner calls it instead of the plain emulator)."""

    kind: ClassVar[str] = "two_copy_measurement"
    copy_noise: bool = True

    def label(self) -> str:
        return f"two_copies[{'noisy' if self.copy_noise else 'ideal'}]"

    def apply(self, compiled: Any, profile: Any, tools: Any) -> Applied:
        return Applied(compiled, profile, 1.0)

    def emulate_variant(self, ctx: Any, compiled: Any, profile: Any) -> BasisDistributions:
        """Rows of (copy-1 outcome, ancilla bit) for every basis of ``ctx.measured_bases``."""
        t0 = time.perf_counter()
        qubits = [int(c) for c in compiled.logical_to_circuit]
        n = len(qubits)
        rho_k = simulate_density_matrix(compiled.circuit, noise_model_for(profile, compiled.patch))
        rho = reduced_logical_state(rho_k, qubits)
        e1, e2 = _mean_errors(profile)
        # depolarizing parameter from the average infidelity r: p = r d / (d - 1)
        p1, p2 = (2.0 * e1, 4.0 * e2 / 3.0) if self.copy_noise else (0.0, 0.0)
        sigma = two_copy_state(rho, p1, p2)
        mats, terms = logical_readout(profile, compiled.patch, qubits)
        all_mats = readout_matrices(profile, range(profile.qubit_count))
        anc_mat = np.mean(np.asarray(all_mats), axis=0)
        ideal = np.array([_rotated_probs(sigma, b, p1) for b in ctx.measured_bases])
        probs = apply_readout(ideal, [*mats, anc_mat], terms)
        return BasisDistributions(
            bases=tuple(ctx.measured_bases),
            probs_ideal=ideal,
            probs=probs,
            num_qubits=n,
            engine_seconds=time.perf_counter() - t0,
            engine_calls=2,
        )


register_transform(TwoCopyMeasurement)


def two_copy_state(rho: np.ndarray, p1: float, p2: float) -> np.ndarray:
    """(copy 1, ancilla) state after the SWAP test circuit on rho x rho (2n + 1 qubits: copy 1
    on 0..n-1, copy 2 on n..2n-1, ancilla 2n), copy 2 traced out: n + 1 qubits, ancilla last.
    Depolarizing errors p2 after each CX and p1 after each single-qubit gate (0: ideal)."""
    n = rho.shape[0].bit_length() - 1
    anc = 2 * n
    gates = QuantumCircuit(2 * n + 1)
    gates.h(anc)
    for l in range(n):
        gates.cswap(anc, l, n + l)
    gates.h(anc)
    gates = transpile(gates, basis_gates=["cx", "u"], optimization_level=0)
    zero = np.zeros((2, 2))
    zero[0, 0] = 1.0
    circ = QuantumCircuit(2 * n + 1)
    circ.append(SetDensityMatrix(np.kron(zero, np.kron(rho, rho))), list(range(2 * n + 1)))
    circ.compose(gates, inplace=True)
    circ.save_density_matrix(label="rho")
    model = None
    if p1 > 0.0 or p2 > 0.0:
        model = NoiseModel(basis_gates=["cx", "u"])
        if p2 > 0.0:
            model.add_all_qubit_quantum_error(depolarizing_error(p2, 2), ["cx"])
        if p1 > 0.0:
            model.add_all_qubit_quantum_error(depolarizing_error(p1, 1), ["u"])
    sim = AerSimulator(method="density_matrix", noise_model=model, max_parallel_threads=1)
    out = np.asarray(sim.run(circ, shots=1).result().data(0)["rho"])
    return np.asarray(partial_trace(DensityMatrix(out), list(range(n, 2 * n))).data)


_ROTATION = {
    "X": Operator.from_label("H"),
    "Y": Operator.from_label("H").compose(Operator.from_label("S").adjoint(), front=True),
}


def _rotated_probs(sigma: np.ndarray, basis: str, p1: float) -> np.ndarray:
    """Outcome probabilities of copy 1 measured in ``basis`` (noisy rotations) and the ancilla."""
    dm = DensityMatrix(sigma)
    n = len(basis)
    dep = SuperOp(depolarizing_error(p1, 1).to_quantumchannel()) if p1 > 0.0 else None
    for l in range(n):
        letter = basis[n - 1 - l]
        if letter in _ROTATION:
            dm = dm.evolve(_ROTATION[letter], qargs=[l])
            if dep is not None:
                dm = dm.evolve(dep, qargs=[l])
    return np.clip(np.real(np.diag(dm.data)), 0.0, None)


@dataclass(frozen=True)
class DistillationReport(PassReport):
    """Per variant label: the purity Tr(rho^2) (the denominator, noisy as measured)."""

    kind: ClassVar[str] = "distillation"
    purity: Mapping[str, float]
    copy_noise: bool
    qubits_used: int
    two_qubit_gates: int

    def details(self, run: ScoredRun) -> dict[str, Any]:
        return {
            "distillation": {
                "purity": dict(self.purity),
                "copy_noise": self.copy_noise,
                "qubits_used": self.qubits_used,
                "copy_circuit_two_qubit_gates": self.two_qubit_gates,
                "assumptions_favouring_the_experiment": list(ASSUMPTIONS),
            }
        }


class DistillationPass(MitigationPass):
    """Virtual distillation, M = 2 (see the module docstring)."""

    name: ClassVar[str] = "distillation"
    stage: ClassVar[int] = STAGE_ESTIMATE
    Options: ClassVar[type[PassOptions]] = DistillationOptions
    options: DistillationOptions
    incompatible: ClassVar[Mapping[str, str]] = {
        "readout": "its calibration covers the n patch qubits, not the copy circuit's ancilla",
    }

    def describe(self) -> str:
        return "distillation" + ("" if self.options.copy_noise else "(ideal copy circuit)")

    def transforms(self, ctx: Any) -> tuple[CircuitTransform, ...]:
        return (TwoCopyMeasurement(bool(self.options.copy_noise)),)

    def check(self, ctx: Any, where: str) -> None:
        n = ctx.plan.num_qubits
        need = 2 * n + 1
        have = ctx.profile.qubit_count
        if have < need:
            raise InputError(
                f"{where}.pass: distillation needs 2n + 1 = {need} qubits (two copies of {n} and "
                f"an ancilla), the device has {have}; allowed: a device with at least {need}"
            )
        if need > MAX_TWO_COPY_QUBITS:
            raise InputError(
                f"{where}.pass: distillation emulates {need} qubits as a density matrix; allowed: "
                f"at most {MAX_TWO_COPY_QUBITS} (problems of up to "
                f"{(MAX_TWO_COPY_QUBITS - 1) // 2} qubits)"
            )
        check_memory(need, "density_matrix")
        k = ctx.compiled.circuit.num_qubits
        method, _ = choose_method(
            k, ctx.emulation_method, max_density_matrix_qubits=ctx.max_density_matrix_qubits
        )
        if method != "density_matrix":
            raise InputError(
                f"{where}.pass: distillation needs the circuit's density matrix, which this "
                "experiment does not use; allowed: emulation method auto or density_matrix"
            )

    def estimate(self, variant: CircuitVariant, data: VariantData, ws: Workspace) -> Estimated:
        ctx = ws.ctx
        dim = 2**ctx.plan.num_qubits
        sign = np.concatenate([np.ones(dim), -np.ones(dim)])
        num = total([data[g.basis].estimate(np.tile(g.weights, 2) * sign) for g in ctx.plan.groups])
        bases = list(dict.fromkeys(g.basis for g in ctx.plan.groups))
        purity = total([data[b].estimate(sign) for b in bases]) / float(len(bases))
        n = ctx.plan.num_qubits
        report = DistillationReport(
            purity={variant.label(): float(purity.value)},
            copy_noise=bool(self.options.copy_noise),
            qubits_used=2 * n + 1,
            two_qubit_gates=CX_PER_CONTROLLED_SWAP * n,
        )
        return Estimated(num / purity + ctx.plan.constant, report)
