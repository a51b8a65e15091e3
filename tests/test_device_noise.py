"""Noise model: idle relaxation, gate channels, coherent terms, readout matrices."""

from __future__ import annotations

import math

import numpy as np
import pytest
from qiskit import QuantumCircuit
from qiskit.circuit.library import CXGate, CZGate, RXGate, RZZGate, SXGate
from qiskit.quantum_info import (
    DensityMatrix,
    Operator,
    SuperOp,
    average_gate_fidelity,
    partial_trace,
)
from qiskit_aer import AerSimulator
from qiskit_aer.noise import thermal_relaxation_error

from noiselab.common.errors import InputError
from noiselab.device.noise import (
    attach_idle_relaxation,
    build_noise_model,
    gate_channel,
    gate_infidelity,
    gate_noise,
    readout_crosstalk,
    readout_matrices,
    readout_transfer_matrix,
)
from noiselab.device.profile import DeviceProfile, profile_from_mapping, scale_profile


def mapping(two_qubit: str = "cz") -> dict:
    return {
        "schema_version": 1,
        "name": "noise-line-3",
        "qubit_count": 3,
        "links": [[0, 1], [1, 2]],
        "native_gates": {"single_qubit": ["rz", "sx", "x"], "two_qubit": two_qubit},
        "durations": {"single_qubit_ns": 40, "two_qubit_ns": 350, "readout_ns": 1500},
        "qubits": {
            "default": {
                "t1_us": 90,
                "t2_us": 70,
                "gate_error": 6e-4,
                "flip_0to1": 0.02,
                "flip_1to0": 0.04,
                "over_rotation_fraction": 0.01,
            },
            "overrides": {1: {"t1_us": 40, "t2_us": 65, "flip_0to1": 0.01}, 2: {"t2_us": 30}},
        },
        "couplers": {
            "default": {"gate_error": 1.0e-2, "zz_angle_rad": 0.05},
            "overrides": [{"pair": [1, 2], "gate_error": 2.0e-2}],
        },
        "readout_crosstalk": [{"pair": [0, 1], "joint_flip": 0.03}],
    }


@pytest.fixture(scope="module")
def prof() -> DeviceProfile:
    return profile_from_mapping(mapping(), "noise-test")


@pytest.fixture(scope="module")
def prof_cx() -> DeviceProfile:
    return profile_from_mapping(mapping("cx"), "noise-test-cx")


SIM = AerSimulator(method="density_matrix")


def run_dm(circuit: QuantumCircuit, noise_model) -> DensityMatrix:
    circ = circuit.copy()
    circ.save_density_matrix()
    result = SIM.run(circ, noise_model=noise_model).result()
    return DensityMatrix(result.data()["density_matrix"])


# ---- idle relaxation on delays ----------------------------------------------------------------


@pytest.mark.parametrize(
    ("duration", "unit", "dt_s"),
    [(12.5e-6, "s", None), (12500, "ns", None), (12.5, "us", None), (50000, "dt", 0.25e-9)],
)
def test_idle_excited_state_decays_with_t1(prof: DeviceProfile, duration, unit, dt_s):
    t_us = 12.5
    patch = (
        2,
        1,
    )  # circuit qubit 0 is physical 2 (T1 90 us), circuit qubit 1 is physical 1 (40 us)
    nm = build_noise_model(prof, patch, dt_s=dt_s)
    qc = QuantumCircuit(2)
    qc.y(0)  # y is not a native gate: prepares |1> without gate noise
    qc.y(1)
    qc.delay(duration, 0, unit=unit)
    qc.delay(duration, 1, unit=unit)
    rho = run_dm(qc, nm)
    p1_q0 = partial_trace(rho, [1]).data[1, 1].real
    p1_q1 = partial_trace(rho, [0]).data[1, 1].real
    # source: Nielsen & Chuang sec. 8.3, amplitude damping: P(1) = exp(-t/T1)
    assert abs(p1_q0 - math.exp(-t_us / 90)) < 1e-10
    assert abs(p1_q1 - math.exp(-t_us / 40)) < 1e-10


def test_idle_plus_state_dephases_with_t2(prof: DeviceProfile):
    t_us = 7.0
    nm = build_noise_model(prof, (0, 2))
    qc = QuantumCircuit(2)
    qc.h([0, 1])  # h is not native: no gate noise
    qc.delay(t_us, [0, 1], unit="us")
    rho = run_dm(qc, nm)
    c0 = abs(partial_trace(rho, [1]).data[0, 1])
    c1 = abs(partial_trace(rho, [0]).data[0, 1])
    # source: Nielsen & Chuang sec. 8.3, phase damping: |rho01| = exp(-t/T2)/2
    assert abs(c0 - math.exp(-t_us / 70) / 2) < 1e-10
    assert abs(c1 - math.exp(-t_us / 30) / 2) < 1e-10


def test_attach_idle_relaxation_equals_noise_pass(prof: DeviceProfile):
    qc = QuantumCircuit(1)
    qc.y(0)
    qc.delay(3.0, 0, unit="us")
    explicit = attach_idle_relaxation(qc, prof, (1,))
    rho_a = run_dm(explicit, build_noise_model(prof, (1,), idle_relaxation=False))
    rho_b = run_dm(qc, build_noise_model(prof, (1,)))
    assert np.allclose(rho_a.data, rho_b.data, atol=1e-12)
    # source: Nielsen & Chuang sec. 8.3
    assert abs(rho_a.data[1, 1].real - math.exp(-3.0 / 40)) < 1e-10


def test_dt_delay_without_dt_refused(prof: DeviceProfile):
    qc = QuantumCircuit(1)
    qc.delay(100, 0, unit="dt")
    with pytest.raises(InputError, match="dt"):
        attach_idle_relaxation(qc, prof, (0,))


def test_compiled_idle_period_decays(prof: DeviceProfile):
    """x on qubit 0, barrier, 20 sx on qubit 1: qubit 0 idles 20 gate times (ALAP schedule)."""
    from noiselab.device.compile import compile_to_device

    quiet = scale_profile(prof, 0.0, ["single_qubit", "two_qubit", "coherent", "readout"])
    qc = QuantumCircuit(2)
    qc.x(0)
    qc.barrier()
    for _ in range(20):
        qc.sx(1)
    compiled = compile_to_device(qc, quiet, layout=[0, 1], optimization_level=0)
    rho = run_dm(compiled.circuit, build_noise_model(quiet, compiled.patch))
    total_ns = 21 * 40.0  # the x gate itself plus the idle time
    p1 = partial_trace(rho, [1]).data[1, 1].real
    # source: Nielsen & Chuang sec. 8.3 (amplitude damping composes: exp(-t1/T1) exp(-t2/T1))
    assert abs(p1 - math.exp(-total_ns * 1e-3 / 90)) < 1e-10
    assert compiled.duration_ns == pytest.approx(total_ns)


# ---- gate channels ------------------------------------------------------------------------------


def _infidelity(error) -> float:
    return 1.0 - average_gate_fidelity(error.to_quantumchannel())


@pytest.mark.parametrize(
    ("gate", "qubits"), [("sx", (0,)), ("x", (1,)), ("cz", (0, 1)), ("cz", (2, 1))]
)
def test_depolarizing_only_gate_has_quoted_infidelity(prof: DeviceProfile, gate, qubits):
    p = scale_profile(prof, 0.0, ["relaxation", "coherent"])
    quoted = p.qubit(qubits[0]).gate_error if len(qubits) == 1 else p.pair_error(*qubits)
    # source: qiskit.quantum_info.average_gate_fidelity
    assert _infidelity(gate_channel(p, gate, qubits)) == pytest.approx(quoted, rel=1e-9)
    d = 2 ** len(qubits)
    # source: Nielsen 2002 / REFERENCES.md: depolarizing p has r = p (d-1)/d
    assert gate_noise(p, gate, qubits).depolarizing_param == pytest.approx(
        quoted * d / (d - 1), rel=1e-12
    )


@pytest.mark.parametrize(
    ("gate", "qubits"), [("sx", (2,)), ("x", (0,)), ("cz", (1, 0)), ("cz", (1, 2))]
)
def test_relaxation_plus_depolarizing_total_is_quoted(prof: DeviceProfile, gate, qubits):
    p = scale_profile(prof, 0.0, ["coherent"])
    noise = gate_noise(p, gate, qubits)
    assert noise.relaxation_infidelity > 0 and noise.depolarizing_param > 0
    relax_only = gate_channel(p, gate, qubits, parts=["relaxation"])
    # relaxation part cross-checked against qiskit-aer's own thermal_relaxation_error
    ref = thermal_relaxation_error(
        p.qubit(qubits[0]).t1_us * 1e-6, p.qubit(qubits[0]).t2_us * 1e-6, noise.duration_ns * 1e-9
    )
    for q in qubits[1:]:
        ref = ref.expand(
            thermal_relaxation_error(
                p.qubit(q).t1_us * 1e-6, p.qubit(q).t2_us * 1e-6, noise.duration_ns * 1e-9
            )
        )
    assert np.allclose(SuperOp(relax_only).data, SuperOp(ref).data, atol=1e-12)
    # source: qiskit.quantum_info.average_gate_fidelity of the composed channel
    assert _infidelity(gate_channel(p, gate, qubits)) == pytest.approx(noise.quoted_error, rel=1e-9)


def test_relaxation_limited_gate_uses_relaxation_alone(prof: DeviceProfile):
    data = mapping()
    data["qubits"]["overrides"][0] = {"gate_error": 1e-6, "over_rotation_fraction": 0.0}
    p = profile_from_mapping(data, "floor")
    noise = gate_noise(p, "sx", (0,))
    assert noise.relaxation_limited and noise.depolarizing_param == 0.0
    ref = thermal_relaxation_error(90e-6, 70e-6, 40e-9)
    assert np.allclose(SuperOp(gate_channel(p, "sx", (0,))).data, SuperOp(ref).data, atol=1e-12)
    t = 0.040
    # source: Nielsen & Chuang sec. 8.3 + F_avg = (d F_e + 1)/(d + 1) (Nielsen 2002)
    assert gate_infidelity(p, "sx", (0,)) == pytest.approx(
        (3 - 2 * math.exp(-t / 70) - math.exp(-t / 90)) / 6
    )


def test_rz_is_noiseless(prof: DeviceProfile):
    assert gate_channel(prof, "rz", (0,)).ideal()
    assert gate_infidelity(prof, "rz", (1,)) == 0.0


def test_coherent_terms_are_the_documented_unitaries(prof: DeviceProfile):
    p = scale_profile(prof, 0.0, ["relaxation", "single_qubit", "two_qubit"])
    zz = Operator(RZZGate(0.05))
    assert SuperOp(gate_channel(p, "cz", (0, 1))) == SuperOp(zz)
    over = Operator(RXGate(0.01 * math.pi / 2))
    assert SuperOp(gate_channel(p, "sx", (2,))) == SuperOp(over)
    # source: Nielsen 2002: unitary error U has F_e = |Tr U|^2/d^2; Tr RZZ(t) = 4 cos(t/2)
    f_e = math.cos(0.025) ** 2
    assert gate_infidelity(p, "cz", (0, 1)) == pytest.approx(1 - (4 * f_e + 1) / 5, rel=1e-9)


def test_noise_model_matches_channel_on_right_qubits(prof_cx: DeviceProfile):
    """aer with the noise model == quantum_info evolve by the ideal gate then gate_channel."""
    patch = (2, 1)  # cx on circuit (1, 0) = physical (1, 2): control 1 (T1 40 us)
    nm = build_noise_model(prof_cx, patch, idle_relaxation=False)
    qc = QuantumCircuit(2)
    qc.h(1)
    qc.ry(0.7, 0)
    qc.append(CXGate(), [1, 0])
    rho = run_dm(qc, nm)
    prep = QuantumCircuit(2)
    prep.h(1)
    prep.ry(0.7, 0)
    ref = DensityMatrix(prep).evolve(Operator(CXGate()), qargs=[1, 0])
    ref = ref.evolve(gate_channel(prof_cx, "cx", (1, 2)).to_quantumchannel(), qargs=[1, 0])
    # source: qiskit.quantum_info DensityMatrix.evolve
    assert np.allclose(rho.data, ref.data, atol=1e-10)


def test_noise_model_covers_natives_of_the_patch(prof: DeviceProfile):
    nm = build_noise_model(prof, (0, 1, 2))
    assert set(nm.noise_instructions) == {"sx", "x", "cz"}
    qc = QuantumCircuit(3)
    qc.append(SXGate(), [0])
    qc.append(CZGate(), [0, 2])  # not linked: no two-qubit error there
    rho = run_dm(qc, nm)
    assert rho.purity().real < 1.0


# ---- readout -------------------------------------------------------------------------------------


def test_readout_matrices_columns_are_prepared_state(prof: DeviceProfile):
    mats = readout_matrices(prof, (1, 0))
    # REFERENCES.md: A = [[1 - P(1|0), P(0|1)], [P(1|0), 1 - P(0|1)]]
    assert np.allclose(mats[0], [[0.99, 0.04], [0.01, 0.96]])
    assert np.allclose(mats[1], [[0.98, 0.04], [0.02, 0.96]])
    assert np.allclose(mats.sum(axis=1), 1.0)


def test_crosstalk_terms_and_dense_matrix(prof: DeviceProfile):
    assert readout_crosstalk(prof, (2, 1, 0)) == ((1, 2, 0.03),)
    m = readout_transfer_matrix(prof, (0, 1))
    a0, a1 = readout_matrices(prof, (0, 1))
    c = 0.03
    # built independently, outcome by outcome, from the definition (module docstring)
    expect = np.zeros((4, 4))
    for true in range(4):
        for mid in range(4):
            p_ind = a0[mid & 1, true & 1] * a1[mid >> 1, true >> 1]
            expect[mid, true] += (1 - c) * p_ind
            expect[mid ^ 0b11, true] += c * p_ind
    assert np.allclose(m, expect, atol=1e-15)
    assert np.allclose(m.sum(axis=0), 1.0)
    # a joint flip keeps the Z0 Z1 parity: from the definition (from memory)
    parity = np.array([1, -1, -1, 1])
    no_xt = np.kron(a1, a0)
    for true in range(4):
        assert parity @ m[:, true] == pytest.approx(parity @ no_xt[:, true])
