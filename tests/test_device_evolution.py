"""Always-on ZZ, quasi-static detuning and spectator phases (noiselab/device/evolution.py)
against closed forms, in both emulation methods."""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest
from qiskit import QuantumCircuit

from noiselab.common.errors import ProblemTooLargeError
from noiselab.device.evolution import evolution_ensemble, evolution_spec
from noiselab.device.noise import noise_spec
from noiselab.device.profile import DeviceProfile, scale_profile
from noiselab.device.suppression import _with_profile_values
from noiselab.emulate.engine import emulate_bases

GATE_NS = 0.001  # the shortest allowed duration: gates are (nearly) instantaneous


def coherent_only(
    *, zz_khz: float = 0.0, det_khz: float = 0.0, spectator: float = 0.0, t2_us: float = 0.0
) -> DeviceProfile:
    """A 3-qubit line whose only errors are the always-on terms (and T2 if > 0)."""
    data = {
        "schema_version": 1,
        "name": "coherent-line",
        "qubit_count": 3,
        "links": [[0, 1], [1, 2]],
        "native_gates": {"single_qubit": ["rz", "sx", "x"], "two_qubit": "cz"},
        "durations": {"single_qubit_ns": GATE_NS, "two_qubit_ns": 300, "readout_ns": 1000},
        "qubits": {
            "default": {
                "t1_us": 1e8,
                "t2_us": t2_us or 100.0,
                "gate_error": 1e-4,
                "flip_0to1": 0.01,
                "flip_1to0": 0.01,
            },
            "overrides": {0: {"detuning_std_khz": det_khz}},  # the Ramsey qubit only
        },
        "couplers": {
            "default": {"gate_error": 1e-3, "zz_rate_khz": zz_khz, "spectator_phase_rad": spectator}
        },
    }
    zeroed = ["single_qubit", "two_qubit", "readout"] + ([] if t2_us else ["relaxation"])
    return scale_profile(DeviceProfile.model_validate(data), 0.0, zeroed)


def bloch_xy(profile: DeviceProfile, qc: QuantumCircuit, method: str) -> tuple[float, float]:
    """(phase, length) of qubit 0's transverse Bloch vector at the end of ``qc``."""
    comp = SimpleNamespace(circuit=qc, patch=(0, 1, 2), logical_to_circuit=(0, 1, 2))
    out = emulate_bases(
        comp, profile, ["IIX", "IIY"], method=method, num_trajectories=32, num_batches=2, seed=3
    )
    z0 = np.array([1.0 - 2.0 * (m & 1) for m in range(8)])
    ex, ey = out.probs_ideal[0] @ z0, out.probs_ideal[1] @ z0
    return math.atan2(ey, ex), math.hypot(ex, ey)


def ramsey(t_ns: float, *, control_one: bool = False, echo: bool = False) -> QuantumCircuit:
    """sx on qubit 0, qubit 1 in |1> or |0>, an idle window of t_ns (with echo: x in its middle)."""
    qc = QuantumCircuit(3)
    qc.sx(0)
    if control_one:
        qc.x(1)
    else:
        qc.delay(GATE_NS * 1e-9, 1, unit="s")
    if echo:
        qc.delay(t_ns / 2 * 1e-9, 0, unit="s")
        qc.x(0)
        qc.delay(t_ns / 2 * 1e-9, 0, unit="s")
        qc.delay((t_ns + GATE_NS) * 1e-9, 1, unit="s")
    else:
        qc.delay(t_ns * 1e-9, 0, unit="s")
        qc.delay(t_ns * 1e-9, 1, unit="s")
    return qc


def conditional_phase(profile: DeviceProfile, t_ns: float, method: str, echo: bool) -> float:
    one = bloch_xy(profile, ramsey(t_ns, control_one=True, echo=echo), method)[0]
    zero = bloch_xy(profile, ramsey(t_ns, control_one=False, echo=echo), method)[0]
    return (one - zero + math.pi) % (2 * math.pi) - math.pi


@pytest.mark.parametrize("method", ["density_matrix", "trajectory"])
def test_idle_zz_conditional_phase_and_echo(method: str) -> None:
    profile = coherent_only(zz_khz=50.0)
    window_ns = 2000.0
    # the window's part: phase(t) - phase(0), so that the (1 ps) preparation gates drop out
    acc = conditional_phase(profile, window_ns, method, False) - conditional_phase(
        profile, 0.0, method, False
    )
    # source: closed form, H = h nu ZZ / 4 gives the conditional phase 2 pi nu t (from memory;
    # the sign follows qiskit's rzz(theta) = exp(-i theta ZZ / 2), conditional phase -2 theta)
    assert acc == pytest.approx(-2 * math.pi * 50e3 * window_ns * 1e-9, abs=1e-9)
    # an X-X echo on qubit 0 (x in the middle of the window; the second x of the pair is the
    # frame change the phase is read in) cancels the window's ZZ
    echoed = conditional_phase(profile, window_ns, method, True) - conditional_phase(
        profile, 0.0, method, True
    )
    assert abs(echoed) < 1e-9


def test_own_cz_carries_no_extra_zz_but_a_neighbours_cz_does() -> None:
    """The pair's own 300 ns cz: its calibration holds the static ZZ (the convention of
    device/evolution.py), so qubit 0 turns only during the second half of the 1 ps preparation
    pulses; a cz of qubit 1 with qubit 2 leaves the ZZ of (0, 1) acting over its 300 ns."""
    nu_khz = 50.0
    profile, base = coherent_only(zz_khz=nu_khz), coherent_only()

    def phase_shift(qc: QuantumCircuit) -> float:
        got = bloch_xy(profile, qc, "density_matrix")[0] - bloch_xy(base, qc, "density_matrix")[0]
        return (got + math.pi) % (2 * math.pi) - math.pi

    def expected(t_ns: float) -> float:
        # source: closed form as in the idle test: with qubit 1 in |1>, rzz(pi nu t) turns
        # qubit 0 by -pi nu t (qiskit's rzz(theta) = exp(-i theta ZZ / 2), from memory)
        return -math.pi * nu_khz * 1e3 * t_ns * 1e-9

    own = QuantumCircuit(3)
    own.sx(0)
    own.x(1)
    own.cz(0, 1)
    assert phase_shift(own) == pytest.approx(expected(GATE_NS / 2), abs=1e-12)
    other = QuantumCircuit(3)
    other.sx(0)
    other.x(1)
    other.delay(GATE_NS * 1e-9, 0, unit="s")
    other.cz(1, 2)  # 300 ns, from 1 ps; qubit 0 waits until 300.002 ns
    other.delay(300e-9, 0, unit="s")
    assert phase_shift(other) == pytest.approx(expected(GATE_NS / 2 + 300.0 + GATE_NS), abs=1e-12)
    # the other convention: a gate calibrated without the static ZZ present carries it too
    profile = _with_profile_values(profile, zz_during_own_gate="extra")
    assert phase_shift(own) == pytest.approx(expected(GATE_NS / 2 + 300.0), abs=1e-12)


def test_quasi_static_detuning_ramsey_gaussian_and_echo() -> None:
    sigma_khz, t2_us = 40.0, 30.0
    profile = coherent_only(det_khz=sigma_khz, t2_us=t2_us)
    for t_ns in (1000.0, 4000.0, 8000.0):
        t_eff = (t_ns + GATE_NS / 2) * 1e-9  # the detuning after the middle of the sx
        _, free = bloch_xy(profile, ramsey(t_ns), "density_matrix")
        # source: Gaussian free-induction decay for a static Gaussian frequency spread,
        # <cos(2 pi delta t)> = exp(-(2 pi sigma t)^2 / 2), times the Markovian exp(-t/T2)
        # (Slichter, Principles of Magnetic Resonance, ch. 2 on line shapes and free induction
        # decay; from memory)
        markov = math.exp(-(t_ns + GATE_NS) / (t2_us * 1e3))  # the window and the sx
        expect = math.exp(-((2 * math.pi * sigma_khz * 1e3 * t_eff) ** 2) / 2) * markov
        assert free == pytest.approx(expect, abs=1e-9)
        # source: Hahn spin echo (Hahn 1950; Slichter ch. 2): a static offset is refocused
        # exactly; only the Markovian T2 decay over the whole window stays
        _, echo = bloch_xy(profile, ramsey(t_ns, echo=True), "density_matrix")
        markov = math.exp(-(t_ns + 2 * GATE_NS) / (t2_us * 1e3))  # the window, sx and x
        assert echo == pytest.approx(markov, abs=1e-9)


def test_detuning_in_trajectory_method_matches_density_matrix() -> None:
    profile = coherent_only(det_khz=40.0)
    qc = ramsey(4000.0)
    _, dm = bloch_xy(profile, qc, "density_matrix")
    _, traj = bloch_xy(profile, qc, "trajectory")  # no other noise: every trajectory is exact
    assert traj == pytest.approx(dm, abs=1e-9)


def test_spectator_phase_on_linked_neighbour() -> None:
    phi = 0.3
    profile = coherent_only(spectator=phi)
    qc = QuantumCircuit(3)
    qc.sx(0)
    qc.cz(1, 2)  # qubit 0 is linked to 1: it picks up rz(phi)
    base = coherent_only()
    got = bloch_xy(profile, qc, "density_matrix")[0] - bloch_xy(base, qc, "density_matrix")[0]
    # source: rz(phi) = exp(-i phi Z / 2) turns the Bloch vector by +phi about z (qiskit
    # convention, from memory)
    assert got == pytest.approx(phi, abs=1e-12)


def test_new_channels_sit_in_the_noise_specification() -> None:
    profile = coherent_only(zz_khz=10.0, det_khz=5.0)
    spec = noise_spec(profile, (0, 1, 2))
    assert spec.evolution is not None
    assert spec.evolution.zz == ((0, 1, 10.0), (1, 2, 10.0))
    assert noise_spec(coherent_only(), (0, 1, 2)).evolution is None


def test_quadrature_beyond_its_limit_is_refused_in_one_line() -> None:
    profile = coherent_only(det_khz=5000.0)
    qc = QuantumCircuit(3)
    qc.delay(20e-6, 0, unit="s")
    with pytest.raises(ProblemTooLargeError) as err:
        evolution_ensemble(qc, evolution_spec(profile, (0, 1, 2)))
    assert "detuning_std_khz" in str(err.value) and "\n" not in str(err.value)
