"""assess with ``emulation.method: pauli_propagation``: raw and per-qubit readout recipes.

Each recipe's grouped energy and the per-shot variance of every group come from
:func:`noiselab.emulate.pauli_circuit.pauli_energy` (no density matrix, no distribution); the
shots are spread with the plan's one allocation (:func:`noiselab.mitigate.plan.allocate_shots`,
by deviation) and the verdict follows the one target rule
(:func:`noiselab.mitigate.target.assess_target`). A per-qubit readout correction with exact
calibration assigns each outcome of logical qubit l the value ``A_l^-T (1, -1)`` (the corrected
single-qubit observable), with ``A_l`` the exact per-qubit matrix of the all-0 / all-1
calibration circuits; the finite calibration's extra variance is left out and the recipe's
details say so. Recipes that need distributions (other passes) are refused in one line.

Truncation (``emulation.truncation``): beside the rigorous bound (sum of the dropped |c|, loose
by orders of magnitude), ``estimate: true`` reports an estimate of the truncation error with its
standard error (noiselab.emulate.pauli_truncation; seeded by the study's seed) and the limit
|estimate| + 3 standard errors (statistical, not rigorous). The energy and
bias are **not** corrected by it: a bias is an expectation without random draws, and the
correction's Monte Carlo part is one. The verdict does not ignore it either: P(within target) is
the lower of the values at the bias and at the bias plus the estimate, with the estimate's
variance as a fixed (shot-independent) variance ("truncation"), so it is never the more
optimistic reading. With an ``executor`` (``workers`` / ``cluster``) every group is one task.

:func:`auto_method` resolves assess's ``emulation.method: auto``: the density matrix while it
fits the memory guard, then this method when every recipe is one it serves (with the reason,
for the output); other recipes keep the trajectory method's place.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from noiselab.common.errors import InputError
from noiselab.emulate.calibration import per_qubit_assignment
from noiselab.emulate.device_inputs import layer_spec_for, logical_readout, noise_model_for
from noiselab.emulate.engine import choose_method
from noiselab.emulate.pauli_circuit import PauliEnergy, pauli_energy
from noiselab.emulate.pauli_propagation import Truncation
from noiselab.emulate.pauli_truncation import Sampling, truncation_limit
from noiselab.mitigate.plan import allocate_shots
from noiselab.mitigate.recipe import parse_recipe
from noiselab.mitigate.result import RecipeResult
from noiselab.mitigate.target import assess_target

METHOD = "pauli_propagation"
ALLOWED = "no passes ([]) or one {pass: readout, method: per_qubit_inverse}"
NOTICE = (
    "pauli_propagation: gate and idle noise are Pauli-twirled (exact for twirled runs, an "
    "approximation otherwise) and readout crosstalk is left out"
)
TRUNCATION_NOTE = (
    "energy and bias are the truncated propagation's (not corrected); the truncation estimate "
    "is a seeded Monte Carlo estimate and its limit (|estimate| + 3 standard errors) a "
    "statistical bound, not a rigorous one; the verdict takes the worse of the bias with and "
    "without the estimate, with its variance as a fixed variance"
)
CALIBRATION_NOTE = (
    "exact calibration matrices: the finite calibration's extra variance is left out of std_mha"
)


def recipe_kinds(source: str, recipes: Mapping[str, Sequence[Mapping[str, Any]]]) -> dict[str, Any]:
    """Per recipe: None (raw) or the parsed readout pass; any other recipe is refused."""
    out: dict[str, Any] = {}
    for name, passes in recipes.items():
        where = f"recipes.{name}"
        parsed = parse_recipe(list(passes), where=where)
        ok = len(parsed.passes) == 0 or (
            len(parsed.passes) == 1
            and getattr(parsed.passes[0], "name", "") == "readout"
            and parsed.passes[0].options.method == "per_qubit_inverse"  # type: ignore[attr-defined]
        )
        if not ok:
            raise InputError(
                f"{source}: {where}: not available with emulation.method {METHOD} (it needs "
                f"outcome distributions); allowed: {ALLOWED}, or method density_matrix / trajectory"
            )
        out[name] = parsed.passes[0] if parsed.passes else None
    return out


def auto_method(study: Any) -> tuple[Any, str | None]:
    """(study, reason): ``study`` with ``emulation.method: pauli_propagation`` and the reason
    when its method is ``auto``, the density matrix does not fit and the recipes need no
    distributions; else the study unchanged and None."""
    e = study.emulation
    if e.method != "auto":
        return study, None
    q = len(study.layout) if study.layout is not None else int(study.num_qubits)
    method, why = choose_method(q, "auto", max_density_matrix_qubits=e.max_density_matrix_qubits)
    if method == "density_matrix":
        return study, None
    try:
        recipe_kinds(str(study.source), study.recipes)
    except InputError:
        return study, None  # trajectories (their own memory guard decides)
    head = (why or f"{q} qubits: the density matrix does not fit").split("; using")[0]
    reason = (
        f"emulation.method auto: {head}; using {METHOD} (every recipe is raw or per-qubit "
        "readout correction, which need no outcome distributions)"
    )
    return study.with_emulation(method=METHOD), reason


def _groups(plan: Any) -> list[tuple[str, list[tuple[str, float]]]]:
    return [(g.basis, list(zip(g.labels, np.real(g.coeffs), strict=True))) for g in plan.groups]


def pauli_recipes(ctx: Any, executor: Any = None) -> dict[str, RecipeResult]:
    """RecipeResult per recipe (truncation bound in ``details["truncation_bound_mha"]``, the
    estimate in ``truncation_estimate_mha`` +- ``truncation_estimate_std_mha``) of a study
    context whose emulation method is ``pauli_propagation``; ``executor``: runs the groups as
    tasks (noiselab.study.executor; None: in-process)."""
    study, exp = ctx.study, ctx.experiment
    kinds = recipe_kinds(str(study.source), study.recipes)
    compiled, profile = ctx.compiled, study.profile
    l2c = list(compiled.logical_to_circuit)
    model = noise_model_for(profile, compiled.patch)
    mats, _ = logical_readout(profile, compiled.patch, l2c)
    layer = layer_spec_for(profile, compiled.circuit.num_qubits)
    t = study.emulation.truncation
    rule = Truncation(min_abs_coeff=float(t.min_abs_coeff), max_weight=t.max_weight)
    sampling = None
    if getattr(t, "estimate", False):
        seed = int(getattr(study, "seed", 0) or 0)
        sampling = Sampling(seed=seed, keep_factor=float(t.keep_factor))
    groups = _groups(ctx.plan)
    memo: dict[bool, PauliEnergy] = {}
    out: dict[str, RecipeResult] = {}
    for name, readout in kinds.items():
        corrected = readout is not None
        if corrected not in memo:
            values = None
            if corrected:
                cal = per_qubit_assignment(profile, compiled.patch, l2c, model)
                values = [np.linalg.inv(a).T @ np.array([1.0, -1.0]) for a in cal]
            memo[corrected] = pauli_energy(
                compiled.circuit,
                model,
                groups,
                l2c,
                layer,
                mats,
                rule,
                constant_ha=float(ctx.plan.constant),
                outcome_values=values,
                sampling=sampling,
                executor=executor,
            )
        out[name] = _score(name, study.recipes[name], memo[corrected], exp, ctx.plan, readout)
    return out


def _score(
    name: str,
    spec: Sequence[Mapping[str, Any]],
    got: PauliEnergy,
    exp: Any,
    plan: Any,
    readout: Any,
) -> RecipeResult:
    sigmas = np.sqrt(np.asarray(got.group_variance_ha2, dtype=float))
    shots = allocate_shots(sigmas, int(exp.shots))
    var_ha2 = float(np.sum(sigmas**2 / shots))
    std_mha = 1e3 * math.sqrt(var_ha2)
    bias = 1e3 * (got.energy_ha - float(exp.exact_energy_ha))
    budget = int(exp.shots)
    details: dict[str, Any] = {
        "emulation_method": METHOD,
        "truncation_bound_mha": 1e3 * got.truncation_bound_ha,
        "peak_strings": int(got.peak_strings),
        "propagation_tasks": int(got.tasks),
        "notice": NOTICE,
    }
    fixed = 0.0
    readings = [bias]
    if got.truncation_estimate_ha is not None:
        est, est_std = 1e3 * got.truncation_estimate_ha, 1e3 * float(got.truncation_std_ha or 0.0)
        details["truncation_estimate_mha"] = est
        details["truncation_estimate_std_mha"] = est_std
        details["truncation_limit_mha"] = truncation_limit(est, est_std)
        details["truncation_estimate_residual_bound_mha"] = 1e3 * float(
            got.estimate_residual_ha or 0.0
        )
        details["truncation_note"] = TRUNCATION_NOTE
        fixed = est_std**2
        readings.append(bias + est)
    verdicts = [
        assess_target(
            b, std_mha**2 * budget, fixed, budget, exp.target_mha, exp.confidence, "truncation"
        )
        for b in readings
    ]
    verdict = min(verdicts, key=lambda v: v.p_within_target)
    cal_shots = 0
    if readout is not None:
        per = readout.options.calibration_shots or 0
        cal_shots = 2 * int(per)
        details["calibration_shots_total"] = cal_shots
        details["calibration_note"] = CALIBRATION_NOTE
    return RecipeResult(
        recipe=name,
        spec=tuple(dict(p) for p in spec),
        energy_ha=float(got.energy_ha),
        bias_exact_mha=bias,
        bias_ansatz_mha=1e3 * (got.energy_ha - float(exp.ansatz_energy_ha)),
        std_mha=std_mha,
        shots_total=int(exp.shots),
        shots_per_circuit={
            f"base|{g.basis}": int(n) for g, n in zip(plan.groups, shots, strict=True)
        },
        n_circuits=len(plan.groups) + (2 if readout is not None else 0),
        engine_seconds=0.0,
        p_within_target=verdict.p_within_target,
        shots_needed=verdict.shots_needed,
        limited_by=verdict.limited_by,
        reaches_target=verdict.reaches_target,
        details=details,
    )
