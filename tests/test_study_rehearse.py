"""The rehearse job: optimizers, in-loop evaluations, shot accounting, outputs and refusals."""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import numpy as np
import pytest
import yaml

from noiselab.common.errors import InputError
from noiselab.device.profile import scale_profile
from noiselab.mitigate.experiment import make_calibrator
from noiselab.mitigate.optimizers import SpsaOptions, spsa, spsa_gains
from noiselab.study.context import build_context
from noiselab.study.loop import LoopEvaluator, emulate_points
from noiselab.study.rehearse import rehearse
from noiselab.study.rehearse_spec import DEFAULT_LOOP_RECIPE
from noiselab.study.spec import load_study

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "configs" / "studies" / "h2-equilibrium.yaml"


@pytest.fixture(scope="module")
def demo_ctx():
    study = load_study(DEMO)
    return study, build_context(study, verification=True)


def test_spsa_on_a_quadratic_follows_its_mean_recursion():
    """f = |x|^2 / 2: the symmetric difference is exact, E[delta delta^T] = I for +-1
    perturbations, so E[x_{k+1}] = (1 - a_k) E[x_k] with Spall's gains.
    # source: Spall 1992 (gradient estimate, Bernoulli +-1 perturbations) and Spall 1998 (gain
    # exponents 0.602 / 0.101, A = 10 % of the iterations); the recursion is derived here
    """
    opts = SpsaOptions(a=0.5, c=0.1)
    n_iter, runs = 30, 300
    x0 = np.array([1.0, -0.5, 0.8])
    finals = []
    for r in range(runs):
        calls = []

        def f(x, calls=calls):
            calls.append(1)
            return 0.5 * float(x @ x)

        out = spsa(f, x0, n_iter, np.random.default_rng(r), opts)
        assert len(calls) == 2 * n_iter  # two evaluations per iteration
        finals.append(out.parameters)
    a_k, c_k = spsa_gains(opts, n_iter, 0.5)
    # source: Spall 1998, a_k = a/(A+k+1)^0.602, c_k = c/(k+1)^0.101
    assert a_k[0] == pytest.approx(0.5 / (3.0 + 1.0) ** 0.602)
    assert c_k[4] == pytest.approx(0.1 / 5.0**0.101)
    expected = np.prod(1.0 - a_k) * x0
    finals = np.array(finals)
    se = finals.std(axis=0, ddof=1) / math.sqrt(runs)
    assert np.all(np.abs(finals.mean(axis=0) - expected) < 4 * se + 1e-12)
    assert np.linalg.norm(expected) < 0.1 * np.linalg.norm(x0)  # it does converge


def test_spsa_calibration_costs_two_evaluations_per_sample():
    calls = []

    def f(x):
        calls.append(1)
        return float(x @ x)

    spsa(f, [0.5, 0.5], 4, np.random.default_rng(0), SpsaOptions(calibration_samples=3))
    assert len(calls) == 2 * 3 + 1 + 2 * 4  # the curvature rule also evaluates the start
    calls.clear()
    opts = SpsaOptions(calibration_samples=3, first_step_rule="fixed")
    spsa(f, [0.5, 0.5], 4, np.random.default_rng(0), opts)
    assert len(calls) == 2 * 3 + 2 * 4


@pytest.mark.parametrize(("h", "m"), [(3.0, 0.4), (0.5, -1.2), (40.0, 0.01)])
def test_spsa_calibrated_first_step_lands_on_the_minimum_of_a_parabola(h, m):
    """f = h (x - m)^2 / 2 in one dimension: the symmetric differences are exact, so the
    calibrated first change is |x0 - m| and the first step lands on m.
    # source: Spall 1998 (a / (A+1)^alpha |g_0| = desired first change); Newton's step on a
    # quadratic (textbook): the minimum of the parabola through three points
    """

    def f(x):
        return 0.5 * h * float((x[0] - m) ** 2)

    opts = SpsaOptions(stability=0.0, first_step=3.0, c=0.05)
    out = spsa(f, [0.0], 1, np.random.default_rng(1), opts)
    assert out.parameters[0] == pytest.approx(m, abs=1e-9)
    small = SpsaOptions(stability=0.0, first_step=0.001, c=0.05)
    capped = spsa(f, [0.0], 1, np.random.default_rng(1), small)
    assert abs(capped.parameters[0]) == pytest.approx(0.001, rel=1e-9)  # the cap holds


def test_spsa_first_step_on_the_demo_improves_where_a_fixed_step_overshoots(demo_ctx):
    """From Hartree-Fock on the demo (noiseless energies, 8 seeds): the calibrated first step
    lowers the energy every time; the former fixed 0.2 rad step raised it (singles pushed up
    the walls of the valley, the double past its optimum at about -0.11 rad)."""
    from noiselab.chem.statevector import compile_statevector

    _, ctx = demo_ctx
    prog = compile_statevector(ctx.ansatz_circuit)
    h = ctx.qubit_problem.hamiltonian.to_matrix(sparse=True)

    def f(x):
        return float(prog.expectation(h, np.asarray(x, dtype=float)))

    x0 = np.zeros(len(ctx.optimum.parameters))
    e0 = f(x0)
    for seed in range(8):
        calibrated = spsa(f, x0, 1, np.random.default_rng(seed), SpsaOptions())
        fixed = spsa(f, x0, 1, np.random.default_rng(seed), SpsaOptions(first_step_rule="fixed"))
        assert f(calibrated.parameters) < e0 - 0.005  # at least 5 mHa better than the start
        assert f(fixed.parameters) > e0


def _fci_energy(study) -> float:
    from pyscf import fci, gto, scf

    mol = gto.M(atom="H 0 0 0; H 0 0 0.735", basis="sto-3g", verbose=0)
    mf = scf.RHF(mol).run()
    return float(fci.FCI(mf).kernel()[0])


def test_cobyla_noiseless_analytic_reaches_the_uccsd_optimum():
    study = load_study(DEMO)
    study = dataclasses.replace(study, profile=scale_profile(study.profile, 0.0))
    ctx = build_context(study, verification=True)
    res = rehearse(
        study, context=ctx, analytic=True, optimizer="cobyla", iterations=300, repeats=1,
        cobyla={"rhobeg": 0.3, "tol": 1e-9},
    )  # fmt: skip
    (run,) = res.repeats
    # source: PySCF FCI (UCCSD is exact for two electrons)
    assert abs(run.final_energy_ha - _fci_energy(study)) < 1e-6
    assert run.start_parameters == (0.0,) * len(run.start_parameters)  # Hartree-Fock start


def _loop_parts(demo_ctx):
    study, ctx = demo_ctx
    from noiselab.device.compile import compile_to_device

    param = compile_to_device(
        ctx.ansatz_circuit, study.profile, layout=list(ctx.compiled.patch),
        seed=ctx.ensemble.chosen_seed,
    )  # fmt: skip
    x = np.asarray(ctx.optimum.parameters) + np.array([0.05, -0.03, 0.1])
    return ctx, param, x, make_calibrator(ctx.experiment)


def test_in_loop_sampled_evaluations_match_the_analytic_estimate(demo_ctx):
    """One evaluation in each of many repeats (each repeat calibrates afresh): mean and spread
    are the analytic ones, calibration noise included."""
    ctx, param, x, cal = _loop_parts(demo_ctx)
    first = LoopEvaluator(ctx, param, DEFAULT_LOOP_RECIPE, 2000, np.random.default_rng(0),
                          calibrator=cal)  # fmt: skip
    data = emulate_points(first, [x])[0]  # the exact distributions at x, emulated once
    analytic = LoopEvaluator(ctx, param, DEFAULT_LOOP_RECIPE, 2000, np.random.default_rng(0),
                             calibrator=cal, analytic=True).score(data)  # fmt: skip
    n = 300
    values = []
    for seed in range(n):
        ev = LoopEvaluator(ctx, param, DEFAULT_LOOP_RECIPE, 2000, np.random.default_rng(seed),
                           calibrator=cal)  # fmt: skip
        values.append(ev.record(data))
        # shot accounting: the evaluation's shots plus the repeat's two 4000-shot calibrations
        assert ev.shots_spent == sum(ev.evaluation_shots) == 2000 + 2 * 4000
    values = np.array(values)
    mean, std = values.mean(), values.std(ddof=1)
    std_ha = analytic.std_mha / 1000.0
    # source: central limit theorem (textbook): mean within 3 standard errors, spread within 15 %
    assert abs(mean - analytic.energy_ha) < 3 * std_ha / math.sqrt(n)
    assert abs(std / std_ha - 1.0) < 0.15


def test_a_repeat_calibrates_once_and_its_evaluations_share_that_calibration(demo_ctx):
    """Within one repeat the readout calibration is drawn at the first evaluation and reused:
    its shots are counted once and the spread of the repeat's evaluations is the measurement
    part of the analytic error alone; a different repeat draws a different calibration."""
    ctx, param, x, cal = _loop_parts(demo_ctx)
    ev = LoopEvaluator(ctx, param, DEFAULT_LOOP_RECIPE, 2000, np.random.default_rng(3),
                       calibrator=cal)  # fmt: skip
    data = emulate_points(ev, [x])[0]
    analytic = LoopEvaluator(ctx, param, DEFAULT_LOOP_RECIPE, 2000, np.random.default_rng(0),
                             calibrator=cal, analytic=True).score(data)  # fmt: skip
    n = 300
    values = [ev.record(data)]
    drawn = {k: v[1].copy() for k, v in ev.calibration_record.items()}
    assert len(drawn) == 2  # the all-0 and all-1 calibration circuits
    values += [ev.record(data) for _ in range(n - 1)]
    values = np.array(values)
    assert all(np.array_equal(drawn[k], ev.calibration_record[k][1]) for k in drawn)
    assert ev.shots_spent == n * 2000 + 2 * 4000
    other = LoopEvaluator(ctx, param, DEFAULT_LOOP_RECIPE, 2000, np.random.default_rng(4),
                          calibrator=cal)  # fmt: skip
    other.record(data)
    assert any(not np.array_equal(drawn[k], other.calibration_record[k][1]) for k in drawn)
    std_meas = math.sqrt(analytic.std_mha**2 - analytic.details["std_calibration_mha"] ** 2)
    # source: central limit theorem (textbook): a fixed calibration leaves the shot noise only
    assert abs(values.std(ddof=1) * 1000.0 / std_meas - 1.0) < 0.15


def test_rehearse_separates_errors_accounts_shots_and_more_shots_narrow_the_spread(demo_ctx):
    study, ctx = demo_ctx
    common = dict(
        context=ctx, iterations=6, repeats=4, start="perturbed_optimum",
        spsa={"calibration_samples": 1, "first_step": 0.05},
    )  # fmt: skip
    low = rehearse(study, shots_per_evaluation=500, **common)
    high = rehearse(study, shots_per_evaluation=8000, **common)
    for res, shots in ((low, 500), (high, 8000)):
        for r in res.repeats:
            assert r.evaluations == 2 * (6 + 1) + 1  # iterations, calibration, its centre
            # the repeat calibrates once (8000 shots), then each evaluation spends its shots
            assert r.loop_shots == sum(r.evaluation_shots) == r.evaluations * shots + 8000
            assert r.final_shots == study.shots + 8000
            assert r.total_shots == r.loop_shots + r.final_shots
            parts = r.ansatz_error_mha + r.optimizer_error_mha + r.noise_bias_mha
            assert parts == pytest.approx(r.final_error_mha, abs=1e-9)
            assert not np.allclose(r.final_parameters, ctx.optimum.parameters, atol=1e-6)
            # device time: measured shots x (schedule + readout + repetition delay), calibration
            # shots x (one 1q gate + readout + delay), 0.05 s per circuit run (the stated rule)
            cal = 2 * 8000  # the repeat's calibration (once) and the final estimate's
            prof = study.profile
            delay_s = (prof.repetition_delay_us or 250.0) * 1e-6
            cal_s = (prof.durations.single_qubit_ns + prof.durations.readout_ns) * 1e-9 + delay_s
            assert r.device_hours * 3600 == pytest.approx(
                (r.total_shots - cal) * res.seconds_per_shot + cal * cal_s + r.circuit_runs * 0.05
            )
    spread = [np.std([r.final_error_mha for r in res.repeats]) for res in (low, high)]
    assert spread[1] < spread[0]
    assert high.to_json()["total_shots"] == max(r.total_shots for r in high.repeats)


def test_parameter_shift_gradient_equals_finite_differences(demo_ctx):
    from noiselab.chem.shift_rule import parameter_frequencies
    from noiselab.chem.statevector import compile_statevector
    from noiselab.mitigate.optimizers import ShiftRule, shift_gradient

    _, ctx = demo_ctx
    prog = compile_statevector(ctx.ansatz_circuit)
    h = ctx.qubit_problem.hamiltonian.to_matrix(sparse=True)

    def f(y):
        return prog.expectation(h, y)

    rules = [ShiftRule(b, o) for b, o in parameter_frequencies(ctx.ansatz_circuit)]
    x = np.array([0.3, -0.2, 0.5])
    eps = 1e-5
    fd = [(f(x + eps * e) - f(x - eps * e)) / (2 * eps) for e in np.eye(3)]
    # source: Wierichs et al., Quantum 6, 677 (2022) shift rule vs central differences
    assert np.allclose(shift_gradient(f, x, rules), fd, atol=1e-7)


def test_bad_rehearse_options_are_one_line_errors(tmp_path, demo_ctx):
    import contextlib
    import io

    from noiselab.cli.app import main

    data = yaml.safe_load(DEMO.read_text())
    data["device"] = str(ROOT / "configs" / "devices" / "cobaltgrid-12.yaml")
    for section, key in (
        ({"spsa": {"c": -1}}, "rehearse.spsa.c"),
        ({"optimizer": "newton"}, "rehearse.optimizer"),
        ({"cobyla": {"rho": 1}}, "rehearse.cobyla.rho"),
        ({"final_recipe": "nope"}, "rehearse.final_recipe"),
    ):
        path = tmp_path / "s.yaml"
        path.write_text(yaml.safe_dump({**data, "rehearse": section}))
        out, err = io.StringIO(), io.StringIO()
        argv = ["rehearse", str(path), "--out", str(tmp_path / "o"), "--no-cache"]
        with (
            contextlib.redirect_stdout(out),
            contextlib.redirect_stderr(err),
            pytest.raises(SystemExit) as info,
        ):
            main(argv)
        assert info.value.code == 2, err.getvalue()
        text = out.getvalue() + err.getvalue()
        lines = [ln for ln in text.splitlines() if ln.strip()]
        assert len(lines) == 1 and key in lines[0] and "Traceback" not in text
        assert not (tmp_path / "o").exists()
    with pytest.raises(InputError, match=r"rehearse\.iterations"):
        rehearse(demo_ctx[0], context=demo_ctx[1], iterations=0)


def test_rehearse_outputs(tmp_path, demo_ctx):
    from noiselab.report.rehearse_figure import write_rehearse_outputs

    study, ctx = demo_ctx
    res = rehearse(study, context=ctx, iterations=2, repeats=2,
                   spsa={"calibration_samples": 1})  # fmt: skip
    written = write_rehearse_outputs(res, tmp_path)
    assert {p.name for p in written} == {"rehearse.json", "rehearse_traces.csv", "rehearse.png"}
    doc = json.loads((tmp_path / "rehearse.json").read_text())
    for key in ("total_shots", "device_hours", "p_within_target", "reaches_target", "repeats"):
        assert key in doc
    rep = doc["repeats"][0]
    for key in ("seed", "final_error_mha", "optimizer_error_mha", "noise_bias_mha", "std_mha"):
        assert key in rep
    assert len(rep["trace"]) == 2
    assert res.verdict.startswith("Verdict: with 2 SPSA iterations at 2,000 shots")
