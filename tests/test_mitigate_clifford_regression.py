"""clifford_regression: near-Clifford training circuits, the fit and its error bar, on the demo."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from helpers.pass_contract import h2_experiment
from qiskit import QuantumCircuit
from qiskit.quantum_info import Clifford, StabilizerState, Statevector

from noiselab.common.errors import InputError
from noiselab.device.clifford_substitute import (
    CliffordSubstitution,
    non_clifford_rotations,
    substitute,
)
from noiselab.mitigate.base import Workspace
from noiselab.mitigate.passes.clifford_regression import ideal_energy_ha
from noiselab.mitigate.recipe import run_recipe
from noiselab.mitigate.registry import make_pass
from noiselab.mitigate.regression_fit import fit_and_gradient, noiseless_distributions

CDR = {"pass": "clifford_regression"}


def _bare(circuit: QuantumCircuit) -> QuantumCircuit:
    out = QuantumCircuit(circuit.num_qubits)
    for inst in circuit.data:
        if inst.operation.name != "delay":
            out.append(inst.operation, [circuit.find_bit(q).index for q in inst.qubits])
    return out


def test_substitution_rounds_only_the_chosen_rotations() -> None:
    ctx, _, _ = h2_experiment()
    circuit = ctx.compiled.circuit
    pos = non_clifford_rotations(circuit)
    assert len(pos) >= 4
    out = substitute(circuit, pos[:2])
    for i, (a, b) in enumerate(zip(circuit.data, out.data, strict=True)):
        assert a.operation.name == b.operation.name and a.qubits == b.qubits
        if i in pos[:2]:
            angle = float(b.operation.params[0])
            assert math.isclose(angle / (math.pi / 2), round(angle / (math.pi / 2)), abs_tol=1e-12)
            assert abs(angle - float(a.operation.params[0])) <= math.pi / 4 + 1e-12
        else:
            assert a.operation.params == b.operation.params
    assert non_clifford_rotations(out) == pos[2:]
    assert CliffordSubstitution(pos[:2]).label() == CliffordSubstitution(pos[:2]).label()


def test_noiseless_distributions_give_the_statevector_energy() -> None:
    ctx, _, _ = h2_experiment()
    ws = Workspace(ctx=ctx, measured={}, calibration=None)
    # source: qiskit.quantum_info.Statevector.expectation_value of the logical circuit's state
    op = ctx.problem.hamiltonian.apply_layout(
        list(ctx.compiled.logical_to_circuit), ctx.compiled.circuit.num_qubits
    )
    ref = float(np.real(Statevector(_bare(ctx.compiled.circuit)).expectation_value(op)))
    assert ideal_energy_ha(ws, None, ctx.compiled) == pytest.approx(ref, abs=1e-10)
    probs = noiseless_distributions(ctx.compiled, ctx.plan.bases)
    assert all(p.sum() == pytest.approx(1.0) for p in probs.values())


def test_fit_matches_numpy_least_squares_and_its_gradient() -> None:
    rng = np.random.default_rng(3)
    x = rng.normal(size=(7, 2))
    y = 0.3 + x @ np.array([1.2, -0.4]) + 0.01 * rng.normal(size=7)
    t = np.array([0.2, -0.1])
    f, beta, dx, dt = fit_and_gradient(x, y, t)
    # source: numpy.linalg.lstsq (ordinary least squares)
    ref = np.linalg.lstsq(np.hstack([np.ones((7, 1)), x]), y, rcond=None)[0]
    np.testing.assert_allclose(beta, ref, rtol=1e-12)
    assert f == pytest.approx(ref[0] + t @ ref[1:])
    h = 1e-6  # central differences of the fitted value (common practice, no source)
    for idx in np.ndindex(*x.shape):
        up, down = x.copy(), x.copy()
        up[idx] += h
        down[idx] -= h
        num = (fit_and_gradient(up, y, t)[0] - fit_and_gradient(down, y, t)[0]) / (2 * h)
        assert dx[idx] == pytest.approx(num, abs=1e-7)
    np.testing.assert_allclose(dt, ref[1:], rtol=1e-12)


def test_anchored_fit_undoes_global_depolarizing_exactly() -> None:
    # global depolarizing: E_noisy = (1 - p) E + p Tr(H)/d (Nielsen & Chuang eq. 8.101), so the
    # line through (Tr(H)/d, Tr(H)/d) maps every noisy value back exactly
    p, c = 0.3, -0.25
    y = np.array([-1.1, -0.9, -0.7, -1.05])
    x = (1 - p) * y + p * c
    target = -1.137
    f, *_ = fit_and_gradient(x[:, None], y, np.array([(1 - p) * target + p * c]), anchor=c)
    assert f == pytest.approx(target, abs=1e-12)


def test_exact_on_a_circuit_whose_rotations_are_all_clifford() -> None:
    ctx, _, calibrator = h2_experiment()
    pos = non_clifford_rotations(ctx.compiled.circuit)
    clifford = dataclasses.replace(ctx.compiled, circuit=substitute(ctx.compiled.circuit, pos))
    cctx = dataclasses.replace(ctx, compiled=clifford)
    from noiselab.mitigate.experiment import make_runner

    result = run_recipe([CDR], cctx, make_runner(cctx), calibrator=calibrator)
    # source: stabilizer simulation, qiskit.quantum_info.Clifford / StabilizerState
    state = StabilizerState(Clifford(_bare(clifford.circuit)))
    op = ctx.problem.hamiltonian.apply_layout(
        list(clifford.logical_to_circuit), clifford.circuit.num_qubits
    )
    terms = zip(op.paulis, op.coeffs, strict=True)
    ref = sum(float(np.real(c)) * state.expectation_value(p) for p, c in terms)
    assert result.energy_ha == pytest.approx(ref, abs=1e-9)
    assert result.details["clifford_regression"]["classical"] is True


@pytest.fixture(scope="module")
def demo_results():
    ctx, runner, calibrator = h2_experiment()
    raw = run_recipe([], ctx, runner, calibrator=calibrator)
    cdr = run_recipe([CDR], ctx, runner, calibrator=calibrator)
    return ctx, runner, calibrator, raw, cdr


def test_cuts_the_demo_bias_at_least_five_fold(demo_results) -> None:
    ctx, _, _, raw, cdr = demo_results
    assert abs(cdr.bias_exact_mha) * 5 <= abs(raw.bias_exact_mha)
    d = cdr.details["clifford_regression"]
    # the training circuits are run: they take shots from the one budget
    assert d["training_circuits"] == 16 and 0 < d["training_shots"] < ctx.shots
    assert sum(cdr.shots_per_circuit.values()) == ctx.shots
    assert cdr.details["std_training_choice_mha"] > 0


@pytest.mark.parametrize(
    ("options", "reps", "rel"),
    [
        ({}, 250, 0.15),
        # variable noise: two nearly collinear noise levels, far from linear at these shots
        ({"noise_levels": [1, 2]}, 150, 0.2),
    ],
)
def test_error_bar_matches_a_sampled_check(demo_results, options, reps, rel) -> None:
    ctx, runner, calibrator, _, _ = demo_results
    recipe = [{**CDR, **options}]
    cdr = run_recipe(recipe, ctx, runner, calibrator=calibrator)
    rng = np.random.default_rng(77)
    values = np.array(
        [
            run_recipe(recipe, ctx, runner, sampled=True, rng=rng, calibrator=calibrator).energy_ha
            for _ in range(reps)
        ]
    )
    std_ha = cdr.std_mha / 1000
    # common practice, no source: the sample std of n normal draws has a relative std of
    # 1/sqrt(2 (n - 1)): 4.5 % for 250, 5.8 % for 150; the tolerances are more than 3 of them
    assert values.std(ddof=1) == pytest.approx(std_ha, rel=rel)
    # bias = expectation: the mean of the sampled runs is the reported energy
    assert abs(values.mean() - cdr.energy_ha) < 4 * std_ha / math.sqrt(reps)


def test_composes_with_readout_and_postselection(demo_results) -> None:
    ctx, runner, calibrator, _, _ = demo_results
    stack = [{"pass": "readout"}, {"pass": "postselect", "mode": "verify"}]
    without = run_recipe(stack, ctx, runner, calibrator=calibrator)
    with_cdr = run_recipe([*stack, CDR], ctx, runner, calibrator=calibrator)
    assert abs(with_cdr.bias_exact_mha) * 2 < abs(without.bias_exact_mha)
    assert with_cdr.details["calibration_shots_total"] > 0


def test_refuses_too_few_distinct_training_circuits() -> None:
    ctx, _, _ = h2_experiment()
    p = make_pass({**CDR, "training_size": 64, "training_sets": 8, "replaced_share": 0.05})
    with pytest.raises(InputError, match=r"recipe\[0\]\.training_size: replacing 1 of"):
        p.check(ctx, "recipe[0]")


@pytest.mark.parametrize(
    ("options", "message"),
    [
        ({"replaced_share": 1.0}, "replaced_share"),
        ({"replaced_share": 0.0}, "replaced_share"),
        ({"noise_levels": [2.0, 3.0]}, "start with 1"),
        ({"noise_levels": [1.0, 2.0, 3.0], "training_size": 4}, "training_size"),
        ({"training_sets": 1}, "training_sets"),
    ],
)
def test_refuses_impossible_options(options: dict, message: str) -> None:
    with pytest.raises(InputError, match=message) as info:
        make_pass({**CDR, **options}, where="recipe[0]")
    assert "\n" not in str(info.value)


def test_in_tune_default_grid_and_in_a_small_tune(tmp_path) -> None:
    from helpers.pass_contract import DEMO

    from noiselab.study.spec import load_study
    from noiselab.study.tune import GridOverride, grid_settings, resolve_grid, tune

    study = load_study(DEMO)
    bare = study.__class__(**{**study.__dict__, "tune": None})
    settings, _ = grid_settings(resolve_grid(bare, GridOverride())[0])
    assert any(s.passes[-1]["pass"] == "clifford_regression" for s in settings if s.passes)
    grid = GridOverride(
        readout=["none"],
        postselect=["none"],
        amplifier=["none", CDR["pass"]],
        suppress=["none"],
    )
    result = tune(study, grid=grid, cache=tmp_path / "t.db")
    by_label = {e.label: e.result for e in result.entries}
    assert len(by_label) == 2
    cdr = next(r for label, r in by_label.items() if "clifford_regression" in label)
    raw = next(r for label, r in by_label.items() if "clifford_regression" not in label)
    assert abs(cdr.bias_exact_mha) * 5 <= abs(raw.bias_exact_mha)


def test_in_the_error_budget(tmp_path) -> None:
    from helpers.pass_contract import DEMO

    from noiselab.study.budget import budget

    text = DEMO.read_text(encoding="utf-8").replace(
        "recipes:\n",
        "recipes:\n  regression:\n    - {pass: clifford_regression, training_sets: 2}\n",
        1,
    )
    study = tmp_path / "h2-regression.yaml"
    study.write_text(text, encoding="utf-8")
    result = budget(study, "regression", cache=False)
    rows = {r.label: r for r in result.rows}
    # raw, then the recipe; without noise the fit is the identity (UCCSD is exact for H2), up to
    # the finite-shot (second-order) shift of the fit, well below a micro-hartree here
    assert abs(rows["all channels"].errors_mha[1]) * 5 <= abs(rows["all channels"].errors_mha[0])
    assert rows["noiseless"].errors_mha[1] == pytest.approx(0.0, abs=1e-2)


def test_verdict_states_the_training_assumption() -> None:
    from types import SimpleNamespace

    from noiselab.study.results import _with_amplification

    details = {
        "clifford_regression": {
            "assumption": "no drift",
            "training_circuits": 16,
            "training_shots": 1_900_000,
            "classical": False,
        },
        "std_training_choice_mha": 0.004,
    }
    text = _with_amplification("Verdict.", SimpleNamespace(details=details))
    assert text == (
        "Verdict. Training assumed: no drift (16 training circuits, 1.9e6 of the shots; the "
        "choice of rotations adds 0.004 mHa (1 std))."
    )
    assert _with_amplification("Verdict.", SimpleNamespace(details={})) == "Verdict."


def test_refuses_a_circuit_too_wide_for_exact_training_energies(monkeypatch) -> None:
    from noiselab.common.errors import ProblemTooLargeError
    from noiselab.mitigate.passes import clifford_regression as module

    ctx, _, _ = h2_experiment()
    monkeypatch.setattr(module, "MAX_STATEVECTOR_QUBITS", 3)
    with pytest.raises(ProblemTooLargeError, match=r"recipe\[1\]\.pass: .* 4 qubits"):
        make_pass(CDR).check(ctx, "recipe[1]")
