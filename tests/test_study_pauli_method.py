"""assess with ``emulation.method: pauli_propagation`` (noiselab.study.pauli_assess)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from qiskit.quantum_info import SparsePauliOp
from scipy.stats import norm

from noiselab.common.errors import InputError, ProblemTooLargeError
from tests.helpers.twirl import twirled_noise_model

ROOT = Path(__file__).resolve().parents[1]

STUDY = """\
name: h2-pauli
molecule:
  geometry: "H 0 0 0; H 0 0 0.735"
  basis: sto-3g
encoding: jordan_wigner
ansatz:
  kind: uccsd
device: cobaltgrid-12
shots: 4000000
seed: 11
emulation:
  method: pauli_propagation
  truncation:
    min_abs_coeff: {cut}
recipes:
{recipes}
"""
RAW_AND_READOUT = """\
  raw: []
  readout:
    - {pass: readout, method: per_qubit_inverse, calibration_shots: 0}
"""


def _study(tmp_path: Path, recipes: str = RAW_AND_READOUT, cut: float = 0.0) -> Path:
    path = tmp_path / "h2-pauli.yaml"
    path.write_text(STUDY.replace("{cut}", repr(cut)).replace("{recipes}", recipes))
    return path


def test_readout_corrected_moments_equal_the_density_matrix_engine(tmp_path: Path) -> None:
    # outside reference: qiskit-aer's density matrix (through noiselab's engine: basis layer and
    # per-qubit readout) of the same explicitly twirled noise; the per-qubit inverse applied to
    # its exact distributions gives each outcome k the value u[k] = (A^-T x ... x A^-T) w [k],
    # so the corrected mean is u . p and the single-shot variance u**2 . p - mean**2
    from noiselab.emulate.calibration import per_qubit_assignment
    from noiselab.emulate.device_inputs import layer_spec_for, logical_readout
    from noiselab.emulate.engine import emulate_circuit_bases
    from noiselab.emulate.pauli_circuit import pauli_energy
    from noiselab.mitigate.passes.readout import apply_per_qubit
    from noiselab.study.context import build_context
    from noiselab.study.spec import load_study

    ctx = build_context(load_study(_study(tmp_path)))
    compiled, profile, plan = ctx.compiled, ctx.study.profile, ctx.plan
    l2c = list(compiled.logical_to_circuit)
    model = twirled_noise_model(profile, compiled.patch)
    mats, _ = logical_readout(profile, compiled.patch, l2c)
    layer = layer_spec_for(profile, compiled.circuit.num_qubits)
    cal = per_qubit_assignment(profile, compiled.patch, l2c)
    inv_t = [np.linalg.inv(a).T for a in cal]
    dist = emulate_circuit_bases(
        compiled.circuit,
        model,
        plan.bases,
        layer=layer,
        logical_to_circuit=l2c,
        readout_matrices=mats,
        method="density_matrix",
    )
    us = [apply_per_qubit(inv_t, g.weights) for g in plan.groups]
    want_means = [float(dist.probs[i] @ u) for i, u in enumerate(us)]
    want_vars = [float(dist.probs[i] @ u**2) - want_means[i] ** 2 for i, u in enumerate(us)]
    groups = [(g.basis, list(zip(g.labels, g.coeffs, strict=True))) for g in plan.groups]
    got = pauli_energy(
        compiled.circuit,
        model,
        groups,
        l2c,
        layer,
        mats,
        constant_ha=plan.constant,
        outcome_values=[m @ np.array([1.0, -1.0]) for m in inv_t],
    )
    assert got.group_energy_ha == pytest.approx(want_means, abs=1e-10)
    assert got.group_variance_ha2 == pytest.approx(want_vars, abs=1e-10)


def test_assess_reports_the_propagated_energy_and_the_target_rule(tmp_path: Path) -> None:
    from noiselab.emulate.device_inputs import layer_spec_for, logical_readout, noise_model_for
    from noiselab.emulate.pauli_circuit import pauli_energy
    from noiselab.study.assess import assess

    result = assess(_study(tmp_path), cache=False)
    assert result.emulation_method == "pauli_propagation"
    assert "Pauli-twirled" in result.emulation_notice
    assert "crosstalk is left out" in result.emulation_notice
    assert "leaves out the finite calibration's variance" in result.emulation_notice
    raw = result.recipes["raw"]
    # untruncated: the raw recipe's energy is pauli_energy's (checked against aer's density
    # matrix above and in tests/test_emulate_pauli_propagation.py) under the device's noise
    from noiselab.study.context import build_context
    from noiselab.study.spec import load_study

    ctx = build_context(load_study(_study(tmp_path)))
    c = ctx.compiled
    mats, _ = logical_readout(ctx.study.profile, c.patch, list(c.logical_to_circuit))
    groups = [(g.basis, list(zip(g.labels, g.coeffs, strict=True))) for g in ctx.plan.groups]
    want = pauli_energy(
        c.circuit,
        noise_model_for(ctx.study.profile, c.patch),
        groups,
        c.logical_to_circuit,
        layer_spec_for(ctx.study.profile, c.circuit.num_qubits),
        mats,
        constant_ha=ctx.plan.constant,
    )
    assert raw.energy_ha == pytest.approx(want.energy_ha, abs=1e-12)
    assert raw.details["truncation_bound_mha"] == 0.0
    assert sum(raw.shots_per_circuit.values()) == 4_000_000
    # P(|E - E_exact| <= t) of a normal estimate (textbook; scipy.stats.norm)
    b, s, t = raw.bias_exact_mha, raw.std_mha, result.target_mha
    assert raw.p_within_target == pytest.approx(norm.cdf((t - b) / s) - norm.cdf((-t - b) / s))
    assert "calibration_note" in result.recipes["readout"].details
    assert result.to_json()["recipes"]["raw"]["truncation_bound_mha"] == 0.0


def test_truncated_assess_stays_within_its_bound(tmp_path: Path) -> None:
    from noiselab.study.assess import assess

    exact = assess(_study(tmp_path), cache=False).recipes["raw"]
    cut = assess(_study(tmp_path, cut=1e-3), cache=False).recipes["raw"]
    bound_mha = cut.details["truncation_bound_mha"]
    assert bound_mha > 0
    assert abs(cut.energy_ha - exact.energy_ha) * 1e3 <= bound_mha + 1e-9


def test_recipes_needing_distributions_are_refused_in_one_line(tmp_path: Path) -> None:
    from noiselab.study.assess import assess

    recipes = "  post:\n    - {pass: postselect, mode: discard}\n"
    with pytest.raises(InputError) as info:
        assess(_study(tmp_path, recipes), cache=False)
    text = str(info.value)
    assert "\n" not in text and "recipes.post" in text and "per_qubit_inverse" in text


def test_former_check_factor_key_and_bad_keep_factor_get_one_line(tmp_path: Path) -> None:
    from noiselab.study.spec import load_study

    path = _study(tmp_path, cut=1e-3)
    text = path.read_text()
    for extra, words in (
        ("check_factor: 0.1", ("check_factor", "did you mean `keep_factor`")),
        ("keep_factor: 0", ("keep_factor", "greater than 0")),
        ("keep_factor: 2", ("keep_factor", "less than or equal to 1")),
    ):
        path.write_text(text.replace("    min_abs_coeff:", f"    {extra}\n    min_abs_coeff:"))
        with pytest.raises(InputError) as info:
            load_study(path)
        message = str(info.value)
        assert "\n" not in message and str(path) in message, message
        assert all(w in message for w in words), message


def test_twenty_qubits_pass_the_emulation_guard_and_the_plan_stays_sparse() -> None:
    from noiselab.mitigate.plan import build_plan, weight_vector
    from noiselab.study.preflight import emulation_method
    from noiselab.study.spec import EmulationSettings

    pauli = EmulationSettings(method="pauli_propagation")
    assert emulation_method("s.yaml", pauli, 20, 1448) == ("pauli_propagation", None)
    with pytest.raises(ProblemTooLargeError):  # 16 x 4**20 bytes
        emulation_method("s.yaml", EmulationSettings(method="density_matrix"), 20, 1448)
    rng = np.random.default_rng(3)
    labels = ["".join(rng.choice(list("IXZ"), size=20)) for _ in range(300)]
    plan = build_plan(SparsePauliOp(labels, rng.normal(size=300)), dense=False)
    assert plan.n_groups > 10
    assert all(g.dense_weights is None for g in plan.groups)  # no 2**20 vector per group
    # lazily computed weights: a Z-only group's weights are the diagonal of its operator
    # (qiskit.quantum_info.SparsePauliOp.to_matrix)
    small = build_plan(SparsePauliOp(["ZIZ", "IZZ", "XXI"], [0.5, -0.25, 0.1]), dense=False)
    z = next(g for g in small.groups if set(g.basis) == {"Z"})
    want = np.real(np.diag(SparsePauliOp(list(z.labels), z.coeffs).to_matrix()))
    assert z.weights == pytest.approx(want, abs=1e-14)
    assert z.weights is z.dense_weights
    assert np.allclose(z.weights, weight_vector(z.labels, z.coeffs, 3))


def test_jobs_other_than_assess_are_refused_in_one_line(tmp_path: Path) -> None:
    from noiselab.study.sweep import sweep
    from noiselab.study.tune import tune

    path = _study(tmp_path)
    for job in (tune, sweep):
        with pytest.raises(InputError) as info:
            job(path, cache=False)
        text = str(info.value)
        assert "\n" not in text and str(path) in text and "assess and compare only" in text


def test_compare_runs_each_device_through_the_pauli_method(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # compare is one assess per device: under pauli_propagation each device's row is that
    # device's assess (P, bias, std), and the notice says how they were emulated
    import json

    from noiselab.cli.app import main
    from noiselab.study.assess import assess
    from noiselab.study.compare import compare, resolve_device, study_on_device
    from noiselab.study.spec import load_study

    path = _study(tmp_path, cut=1e-3)
    devices = ["cobaltgrid-12", "tallowtrap-8"]
    got = compare(path, devices, cache=False)
    assert sorted(r.device for r in got.rows) == sorted(devices)
    for row in got.rows:
        alone = assess(study_on_device(load_study(path), resolve_device(row.device)), cache=False)
        best = alone.recipes[row.best_recipe]
        assert row.p_within_target == pytest.approx(best.p_within_target, abs=1e-12)
        assert row.bias_mha == pytest.approx(best.bias_exact_mha, abs=1e-9)
        assert "truncation_limit_mha" in best.details
    assert "pauli_propagation" in (got.emulation_notice or "")
    assert got.to_json()["emulation_notice"] == got.emulation_notice
    with pytest.raises(SystemExit) as info:
        main(["compare", str(path), "--devices", *devices, "--no-cache", "--out", str(tmp_path)])
    _, err = capsys.readouterr()
    assert info.value.code in (0, None), err
    written = json.loads((tmp_path / "compare.json").read_text())
    assert written["devices"][0]["device"] in devices
    assert "pauli_propagation" in written["emulation_notice"]
    assert "note: " in err and "pauli_propagation" in err


def test_truncation_estimate_is_reported_and_workers_give_the_same_numbers(
    tmp_path: Path,
) -> None:
    # reference for the estimate: the untruncated assess of the same study (equal to aer's
    # density matrix above); the pool path must give the in-process numbers (one task per
    # group, draws hashed per string: noiselab.emulate.pauli_truncation)
    from noiselab.emulate.pauli_circuit import ENERGY_CHUNKS
    from noiselab.study.assess import assess

    exact = assess(_study(tmp_path), cache=False).recipes["raw"]
    inproc = assess(_study(tmp_path, cut=1e-3), cache=False)
    pooled = assess(_study(tmp_path, cut=1e-3), cache=False, workers=2)
    raw = inproc.recipes["raw"]
    est, std = raw.details["truncation_estimate_mha"], raw.details["truncation_estimate_std_mha"]
    true_mha = (exact.energy_ha - raw.energy_ha) * 1e3
    assert abs(true_mha - est) <= 3 * std
    assert abs(true_mha) <= raw.details["truncation_bound_mha"]
    assert abs(true_mha) <= raw.details["truncation_limit_mha"] == pytest.approx(abs(est) + 3 * std)
    entry = inproc.to_json()["recipes"]["raw"]
    assert entry["truncation_estimate_mha"] == est
    assert entry["truncation_estimate_std_mha"] == std
    assert entry["truncation_limit_mha"] == raw.details["truncation_limit_mha"]
    assert "truncation error estimate" in inproc.emulation_notice
    assert "truncation limit (|estimate| + 3 standard errors" in inproc.emulation_notice
    # in-process: the energy sums and the groups' moments, one joint run each; pooled: each
    # energy sum and each share of the moments is a task
    assert raw.details["propagation_tasks"] == 2
    chunks = min(ENERGY_CHUNKS, len(raw.shots_per_circuit))
    assert pooled.recipes["raw"].details["propagation_tasks"] == 2 * chunks > 2
    print(f"h2 at 1e-3: true {true_mha:.4g} mHa, estimate {est:.4g} +- {std:.3g} mHa")
    for name, r in inproc.recipes.items():
        p = pooled.recipes[name]
        assert p.energy_ha == pytest.approx(r.energy_ha, abs=1e-12)
        assert p.std_mha == pytest.approx(r.std_mha, rel=1e-9)
        for key in (
            "truncation_bound_mha",
            "truncation_estimate_mha",
            "truncation_estimate_std_mha",
            "truncation_limit_mha",
        ):
            assert p.details[key] == pytest.approx(r.details[key], rel=1e-9, abs=1e-9)
        assert p.p_within_target == pytest.approx(r.p_within_target, abs=1e-12)


def test_workers_are_refused_for_other_methods_in_one_line(tmp_path: Path) -> None:
    from noiselab.study.assess import assess

    path = _study(tmp_path)
    path.write_text(path.read_text().replace("method: pauli_propagation", "method: density_matrix"))
    with pytest.raises(InputError) as err:
        assess(path, cache=False, workers=2)
    assert "workers/cluster: " in str(err.value) and "\n" not in str(err.value)


def test_auto_chooses_pauli_propagation_past_the_density_matrix_and_says_why(
    tmp_path: Path,
) -> None:
    from noiselab.study.assess import assess

    text = (
        _study(tmp_path)
        .read_text()
        .replace(
            "  method: pauli_propagation\n", "  method: auto\n  max_density_matrix_qubits: 3\n"
        )
    )
    path = tmp_path / "h2-auto.yaml"
    path.write_text(text)
    result = assess(path, cache=False)
    assert result.emulation_method == "pauli_propagation"
    notice = result.emulation_notice
    assert notice.startswith("emulation.method auto:") and "density-matrix limit" in notice
    assert "Pauli-twirled" in notice
    # the same study asked explicitly gives the same numbers (the auto path changes nothing)
    explicit = assess(_study(tmp_path), cache=False)
    assert result.recipes["raw"].energy_ha == explicit.recipes["raw"].energy_ha
    # within the density-matrix limit auto keeps the density matrix
    inside = tmp_path / "h2-auto-inside.yaml"
    inside.write_text(text.replace("max_density_matrix_qubits: 3", "max_density_matrix_qubits: 8"))
    assert assess(inside, cache=False).emulation_method == "density_matrix"


def test_auto_with_distribution_recipes_that_fit_nowhere_names_the_alternatives(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    from noiselab.emulate.memory import MEMORY_LIMIT_ENV
    from noiselab.study.assess import assess, demo_study_path

    monkeypatch.setenv(MEMORY_LIMIT_ENV, "1000")  # bytes: neither method fits
    with pytest.raises(ProblemTooLargeError) as info:
        assess(demo_study_path(), cache=False, method="auto")
    text = str(info.value)
    assert "\n" not in text and "trajector" in text and "pauli_propagation" in text
    assert info.value.exit_code == 2
