"""Mitigation on emulated device data: H2 (Jordan-Wigner, UCCSD) on the shipped typical profile,
folding in native gates, readout-only noise, cache keys; folding against a closed form."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from noiselab.device.folding import two_qubit_gate_folding, whole_circuit_folding
from noiselab.mitigate.variants import STRETCH_CHANNELS, CircuitVariant, folded, stretched

ROOT = Path(__file__).resolve().parents[1]
TYPICAL = ROOT / "configs" / "devices" / "amberline-10.yaml"  # "typical current" invented chip


def test_whole_circuit_folding_multiplies_the_depolarizing_exponent():
    from qiskit import QuantumCircuit
    from qiskit.quantum_info import DensityMatrix, Pauli, Statevector
    from qiskit_aer import AerSimulator
    from qiskit_aer.noise import NoiseModel, depolarizing_error

    p = 0.02
    qc = QuantumCircuit(1)
    qc.sx(0)
    qc.rz(0.4, 0)
    qc.sx(0)
    qc.rz(1.1, 0)
    qc.x(0)
    qc.sx(0)
    n_noisy = 4  # sx, sx, x, sx; rz is virtual (noiseless) here
    nm = NoiseModel(basis_gates=["rz", "sx", "x"])
    nm.add_all_qubit_quantum_error(depolarizing_error(p, 1), ["sx", "x"])
    sim = AerSimulator(method="density_matrix", noise_model=nm)
    ideal = Statevector(qc)
    for scale in (1, 3, 5):
        folded = whole_circuit_folding(qc, scale).circuit
        noisy_gates = sum(1 for i in folded.data if i.operation.name in ("sx", "x"))
        assert noisy_gates == n_noisy * scale
        run = folded.copy()
        run.save_density_matrix()
        rho = DensityMatrix(sim.run(run).result().data()["density_matrix"])
        for label in "XYZ":
            # closed form: depolarizing commutes with unitaries, so after N noisy gates the Bloch
            # vector is (1-p)^N times the ideal one (Nielsen & Chuang sec. 8.3); folding keeps
            # the ideal state (U^dag U = I) and multiplies N by the scale
            expected = (1 - p) ** (n_noisy * scale) * ideal.expectation_value(Pauli(label)).real
            assert rho.expectation_value(Pauli(label)).real == pytest.approx(expected, abs=1e-12)


def test_partial_folds_reach_the_nearest_gate_count():
    from qiskit import QuantumCircuit
    from qiskit.quantum_info import Operator

    qc = QuantumCircuit(2)
    for _ in range(5):
        qc.x(0)  # x, cz, rz: each inverse is one instruction, so instructions = gates here
        qc.cz(0, 1)
        qc.rz(0.3, 1)
    d = len(qc.data)
    res = whole_circuit_folding(qc, 1.4)
    # gates after partial folding = d + 2 round((c-1) d / 2) (Giurgica-Tiron et al. 2020)
    assert len(res.circuit.data) == d + 2 * round(0.4 * d / 2)
    assert res.actual_scale == pytest.approx((d + 2 * 3) / d)
    two = two_qubit_gate_folding(qc, 1.8)  # 5 cz -> 5 + 2 round(0.8 * 5 / 2) = 9
    assert sum(1 for i in two.circuit.data if i.operation.name == "cz") == 9
    assert len(two.circuit.data) == d + 4
    # folding never changes the unitary (source: qiskit.quantum_info Operator, up to phase)
    for c in (res.circuit, two.circuit, two_qubit_gate_folding(qc, 3).circuit):
        assert Operator(c).equiv(Operator(qc))


# ---- H2 on the typical profile -----------------------------------------------------------------


@pytest.fixture(scope="module")
def h2_device():
    from noiselab.chem.ansatz import uccsd_circuit
    from noiselab.chem.encode import encode
    from noiselab.chem.molecule import MoleculeSpec, compute_problem
    from noiselab.chem.optimize import optimize_noiseless
    from noiselab.device.compile import compile_to_device
    from noiselab.device.profile import load_profile

    spec = MoleculeSpec(geometry=[("H", 0, 0, 0), ("H", 0, 0, 0.7408)])
    qp = encode(compute_problem(spec), "jordan_wigner")
    circ = uccsd_circuit(qp)
    opt = optimize_noiseless(qp, circ)
    profile = load_profile(TYPICAL)
    compiled = compile_to_device(circ.assign_parameters(list(opt.parameters)), profile, seed=7)
    return qp, opt, profile, compiled


@pytest.fixture(scope="module")
def h2_ctx(h2_device):
    from noiselab.mitigate.experiment import build_context, make_runner

    qp, opt, profile, compiled = h2_device
    ctx = build_context(qp, compiled, profile, ansatz_energy_ha=opt.energy_ha, shots=100_000)
    return ctx, make_runner(ctx)


H2_RECIPES = {
    "raw": [],
    "readout": [{"pass": "readout"}],
    "postselect(verify)": [{"pass": "postselect", "mode": "verify"}],
    "postselect(discard)": [{"pass": "postselect", "mode": "discard"}],
    "extrapolate(stretch)": [{"pass": "extrapolate"}],
    "combined": [
        {"pass": "readout"},
        {"pass": "postselect", "mode": "verify"},
        {"pass": "extrapolate", "amplifier": "stretch", "scales": [1, 2, 3], "fit": "richardson"},
    ],
    "clifford_regression": [{"pass": "clifford_regression"}],
    "readout+verify+regression": [
        {"pass": "readout"},
        {"pass": "postselect", "mode": "verify"},
        {"pass": "clifford_regression"},
    ],
}


def test_h2_bias_table_and_combined_reduction(h2_ctx, capsys):
    from noiselab.mitigate.recipe import run_recipe

    ctx, runner = h2_ctx
    results = {name: run_recipe(r, ctx, runner) for name, r in H2_RECIPES.items()}
    with capsys.disabled():
        print("\nH2 / JW / UCCSD on amberline-10, 100k shots: bias vs FCI (mHa), std (mHa)")
        for name, r in results.items():
            print(
                f"  {name:22s} bias {r.bias_exact_mha:9.3f}  std {r.std_mha:7.3f}  "
                f"circuits {r.n_circuits:3d}  limited_by {r.limited_by}"
            )
    raw = results["raw"]
    # source: PySCF FCI via chem (exact_energy_ha); the optimum equals FCI for 2 electrons
    assert abs(ctx.ansatz_energy_ha - ctx.exact_energy_ha) < 1e-6
    assert abs(results["combined"].bias_exact_mha) * 5 <= abs(raw.bias_exact_mha)
    for name in ("readout", "postselect(verify)", "extrapolate(stretch)"):
        assert abs(results[name].bias_exact_mha) < abs(raw.bias_exact_mha)
    json.dumps(results["combined"].to_dict())  # JSON-serializable record
    ext = results["combined"].details["extrapolation"]
    assert ext["scales"] == [1.0, 2.0, 3.0] and len(ext["stds_mha"]) == 3


def test_readout_only_profile_is_corrected_exactly(h2_device):
    from noiselab.device.compile import compile_to_device
    from noiselab.device.profile import scale_profile
    from noiselab.mitigate.base import Workspace, raw_distribution
    from noiselab.mitigate.experiment import build_context, make_calibrator, make_runner
    from noiselab.mitigate.recipe import run_recipe
    from noiselab.mitigate.registry import make_pass

    qp, opt, profile, compiled = h2_device
    readout_only = scale_profile(profile, 0.0, STRETCH_CHANNELS)  # all but readout switched off
    # a patch whose pairs (5, 6) and (6, 7) carry correlated readout flips in the profile
    from noiselab.chem.ansatz import uccsd_circuit

    bound = uccsd_circuit(qp).assign_parameters(list(opt.parameters))
    compiled = compile_to_device(bound, profile, layout=[5, 6, 7, 2], seed=7)
    assert compiled.patch == (5, 6, 7, 2)
    ctx = build_context(qp, compiled, readout_only, ansatz_energy_ha=opt.energy_ha, shots=10_000)
    runner = make_runner(ctx)
    raw = run_recipe([], ctx, runner)
    fixed = run_recipe(
        [{"pass": "readout", "method": "full_inverse", "calibration_shots": 0}], ctx, runner
    )
    assert abs(raw.bias_exact_mha) > 1.0
    # source: PySCF FCI (the noiseless UCCSD optimum equals it for H2)
    assert abs(fixed.energy_ha - qp.exact_energy_ha) < 1e-8
    per_qubit = run_recipe([{"pass": "readout", "calibration_shots": 0}], ctx, runner)
    # per-qubit inversion cannot undo correlated joint flips (crosstalk): it helps, not fully
    assert 1e-3 < abs(per_qubit.bias_exact_mha) < abs(raw.bias_exact_mha)

    d = runner(CircuitVariant())
    cal = make_calibrator(ctx)
    ws = Workspace(
        ctx=ctx, measured={}, calibration=lambda v, s, n: cal(v.calibration_variant(), s)
    )
    p = make_pass({"pass": "readout", "method": "full_inverse", "calibration_shots": 0})
    data = {
        b: raw_distribution(("meas", CircuitVariant(), b), d.probs[i])
        for i, b in enumerate(d.bases)
    }
    out = p.correct(CircuitVariant(), data, ws).data
    for i, b in enumerate(d.bases):
        # source: emulate's distribution before readout error
        assert np.max(np.abs(out[b].probs - d.probs_ideal[i])) < 1e-10


def test_folded_variants_in_native_gates(h2_ctx):
    from noiselab.mitigate.experiment import variant_inputs
    from noiselab.mitigate.recipe import run_recipe

    ctx, runner = h2_ctx
    n2 = ctx.compiled.two_qubit_count
    two, _, reached = variant_inputs(ctx, folded("two_qubit_gates", 3))
    assert two.two_qubit_count == 3 * n2 and reached == 3.0
    whole, _, _ = variant_inputs(ctx, folded("whole_circuit", 3))
    assert whole.two_qubit_count == 3 * n2
    assert whole.duration_ns > 2.5 * ctx.compiled.duration_ns  # re-scheduled, idle time included
    natives = set(ctx.profile.single_qubit_gates) | {ctx.profile.two_qubit_gate, "delay"}
    assert set(whole.circuit.count_ops()) <= natives
    from qiskit.quantum_info import Operator

    # the folds are identities: same unitary up to a global phase (source: qiskit.quantum_info)
    reference = Operator(ctx.compiled.circuit)
    assert Operator(whole.circuit).equiv(reference) and Operator(two.circuit).equiv(reference)
    res = run_recipe(
        [
            {
                "pass": "extrapolate",
                "amplifier": "two_qubit_gates",
                "scales": [1, 3],
                "fit": "linear",
            }
        ],
        ctx,
        runner,
    )
    ext = res.details["extrapolation"]
    assert ext["two_qubit_counts"] == [n2, 3 * n2]
    assert ext["engine_seconds"][1] > 0 and res.engine_seconds >= sum(ext["engine_seconds"]) - 1e-9
    assert math.isfinite(res.energy_ha)


def test_variant_key_material_separates_simulations(h2_ctx):
    from noiselab.mitigate.experiment import variant_key_material

    ctx, _ = h2_ctx
    base = variant_key_material(ctx, CircuitVariant())
    same = variant_key_material(ctx, stretched(1.0, ("readout",)))
    stretch = variant_key_material(ctx, stretched(2.0, STRETCH_CHANNELS))
    fold = variant_key_material(ctx, folded("whole_circuit", 3))
    dump = [json.dumps(m, sort_keys=True) for m in (base, same, stretch, fold)]
    assert dump[0] == dump[1]
    assert len(set(dump[1:])) == 3
    assert base["circuit_qpy_sha256"] != fold["circuit_qpy_sha256"]
    assert base["profile"] != stretch["profile"]
