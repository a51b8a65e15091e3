"""qiskit interoperability: profile -> Target -> profile, a generic Target, the Aer simulator."""

from __future__ import annotations

import copy
import json
from pathlib import Path

import numpy as np
import pytest
import yaml
from qiskit.providers.fake_provider import GenericBackendV2
from qiskit.quantum_info import SparsePauliOp

from noiselab.common.errors import InputError
from noiselab.device.profile import load_profile, profile_from_mapping
from noiselab.device.qiskit_target import aer_simulator, profile_from_target, profile_to_target
from tests.test_device_profile import base_mapping

ROOT = Path(__file__).resolve().parents[1]
DEVICES = sorted((ROOT / "configs" / "devices").glob("*.yaml"))
QUBIT_KEYS = ("t1_us", "t2_us", "gate_error", "flip_0to1", "flip_1to0", "over_rotation_fraction")


def _close(a: float, b: float) -> bool:
    return abs(a - b) <= 1e-12 * max(abs(a), abs(b))


def assert_same_numbers(p, q) -> None:
    """Every noise number of two profiles agrees to 1e-12 (relative), qubit by qubit."""
    assert p.qubit_count == q.qubit_count and p.pairs() == q.pairs()
    assert p.native_gate_names == q.native_gate_names
    for key in ("single_qubit_ns", "two_qubit_ns", "readout_ns"):
        assert _close(getattr(p.durations, key), getattr(q.durations, key)), key
    for i in range(p.qubit_count):
        a, b = p.qubit(i), q.qubit(i)
        for key in QUBIT_KEYS:
            assert _close(getattr(a, key), getattr(b, key)), (i, key)
    for a, b in p.pairs():
        assert _close(p.pair(a, b).gate_error, q.pair(a, b).gate_error)
        assert _close(p.pair(a, b).zz_angle_rad, q.pair(a, b).zz_angle_rad)
        assert _close(p.joint_flip(a, b), q.joint_flip(a, b))


@pytest.mark.parametrize("path", DEVICES, ids=lambda p: p.stem)
def test_profile_target_profile_keeps_every_number(path: Path) -> None:
    p = load_profile(path)
    notes: list[str] = []
    back = profile_from_target(profile_to_target(p), name=p.name, notes=notes)
    assert_same_numbers(p, back)
    assert notes == []  # nothing had to be chosen


def test_round_trip_survives_a_copy_of_the_target() -> None:
    """The extra fields (flips, coherent terms, joint flips) live on properties qiskit keeps."""
    p = profile_from_mapping(base_mapping(), "unit")
    assert_same_numbers(p, profile_from_target(copy.deepcopy(profile_to_target(p))))


def test_generic_backend_target_imports_unchanged() -> None:
    """qiskit's own generic fake backend: T1, T2 and gate errors appear as given."""
    target = GenericBackendV2(num_qubits=5, seed=42).target
    notes: list[str] = []
    p = profile_from_target(target, name="generic-5", notes=notes)
    for q in range(5):
        props = target.qubit_properties[q]
        assert _close(p.qubit(q).t1_us, props.t1 * 1e6)  # qiskit: seconds; profile: us
        assert _close(p.qubit(q).t2_us, props.t2 * 1e6)
        assert p.qubit(q).gate_error == target["sx"][(q,)].error
        assert p.qubit(q).flip_0to1 == p.qubit(q).flip_1to0 == target["measure"][(q,)].error
    for (a, b), props in target["cx"].items():
        both = (
            [props.error, target["cx"][(b, a)].error] if (b, a) in target["cx"] else [props.error]
        )
        assert p.pair_error(a, b) == max(both)  # the larger direction, said so in the notes
    assert any("directions differ" in n for n in notes)
    assert any("x error" in n for n in notes)


def test_target_without_coherence_times_is_refused() -> None:
    target = GenericBackendV2(num_qubits=2, seed=1).target
    target.qubit_properties = None
    with pytest.raises(InputError, match=r"qubit_properties\[0\]: no T1/T2"):
        profile_from_target(target)


def test_simulator_energy_equals_assess(tmp_path: Path) -> None:
    """The study's compiled circuit on aer_simulator(profile) gives assess's raw energy.

    A diagonal qubit operator (one measurement basis, no basis-change gates) on a device with
    no readout error: assess's raw energy is then sum_k p(k) h(k) with p the emulated state's
    populations; the simulator's density matrix gives p independently (qiskit-aer run, numpy).
    """
    from noiselab.study.assess import assess
    from noiselab.study.context import build_context
    from noiselab.study.spec import load_study

    terms = {"II": -1.0, "IZ": 0.4, "ZI": -0.3, "ZZ": 0.25}
    (tmp_path / "op.json").write_text(
        json.dumps(
            {
                "format": "noiselab-qubit-operator-1",
                "num_qubits": 2,
                "terms": terms,
                "reference_bitstring": "00",
                "exact_energy_ha": -1.95,  # lowest diagonal entry: |10>: -1 - 0.4 - 0.3 - 0.25
            }
        ),
        encoding="utf-8",
    )
    mapping = base_mapping()
    mapping["qubits"]["default"].update(flip_0to1=0.0, flip_1to0=0.0)
    mapping["qubits"]["overrides"][1]["flip_1to0"] = 0.0
    mapping["readout_crosstalk"] = []
    (tmp_path / "dev.yaml").write_text(yaml.safe_dump(mapping), encoding="utf-8")
    (tmp_path / "s.yaml").write_text(
        "name: sim-check\nhamiltonian: {file: op.json}\nansatz: {kind: layered, layers: 1}\n"
        "device: dev.yaml\nshots: 100000\nseed: 1\nrecipes:\n  raw: []\n",
        encoding="utf-8",
    )
    study = load_study(tmp_path / "s.yaml")
    ctx = build_context(study)
    energy = assess(study, context=ctx, cache=False).recipes["raw"].energy_ha

    compiled = ctx.compiled
    circuit = compiled.circuit.copy()
    circuit.save_density_matrix()
    sim = aer_simulator(study.profile, compiled.patch)
    rho = np.asarray(sim.run(circuit).result().data()["density_matrix"])
    probs = np.real(np.diag(rho))
    h = np.real(np.diag(SparsePauliOp.from_list(list(terms.items())).to_matrix()))
    e_sim = 0.0
    for k, pk in enumerate(probs):  # circuit bit logical_to_circuit[l] holds logical qubit l
        logical = sum(((k >> c) & 1) << lq for lq, c in enumerate(compiled.logical_to_circuit))
        e_sim += pk * h[logical]
    assert e_sim == pytest.approx(energy, abs=1e-10)
    assert abs(energy - ctx.exact_energy_ha) > 1e-4  # the noise is visible, so the check bites
