"""What-if for the grid benchmark: share each variant's corrected estimate across tune settings.

    python benchmarks/whatif/grid_memo.py [QUBITS]      # default 10

A tune re-runs, for every one of its settings, the correction and estimate stages of every
variant the setting uses (readout inversion, pullbacks, post-selection), although settings that
differ only in their extrapolation (scale set, fit) share them. This script replaces
``noiselab.mitigate.recipe._evaluate`` with a version that memoizes the per-variant estimate under
(context, variant, specs of the correct + estimate passes, calibration mode), re-registers the
calibration sources on a hit, and checks that the tune JSON is unchanged. A prototype for the
mitigation layer (deep copies, a module-level dict), not production code.
"""

from __future__ import annotations

import copy
import json
import sys
import time
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from run import GRID_SCALES, load  # benchmarks/ is a folder of scripts, not a package

MEMO: dict[Any, Any] = {}


def _evaluate_shared(
    parsed: Any, ctx: Any, variants: Any, bases: Any, measured: Any, cal: Any
) -> Any:
    import noiselab.mitigate.recipe as recipe
    from noiselab.mitigate.base import STAGE_COMBINE, STAGE_CORRECT, STAGE_ESTIMATE, Workspace

    ws = Workspace(ctx=ctx, measured=measured, calibration=cal)
    corrects = [p for p in parsed.passes if p.stage == STAGE_CORRECT]
    estimator = parsed.of_stage(STAGE_ESTIMATE)
    combiner = parsed.of_stage(STAGE_COMBINE)
    specs = [p.spec() for p in corrects] + ([estimator.spec()] if estimator else [])
    prefix = json.dumps(specs, sort_keys=True)
    per_variant = {}
    for v in variants:
        key = (id(ctx), v, prefix, cal.mode)
        if key in MEMO:
            est, details = MEMO[key]
            for p in corrects:  # the calibration sources this evaluation draws on
                if hasattr(p, "calibration_states"):
                    states = p.calibration_states(ctx.plan.num_qubits)
                    cal(v, states, p.options.calibration_shots or None)
            for k, val in details.items():
                if isinstance(val, dict):
                    ws.details.setdefault(k, {}).update(copy.deepcopy(val))
                else:
                    ws.details.setdefault(k, copy.deepcopy(val))
            per_variant[v] = copy.deepcopy(est)
            continue
        before = copy.deepcopy(ws.details)
        data = {b: recipe.raw_distribution(recipe.meas_key(v, b), measured[v][b]) for b in bases}
        for p in corrects:
            data = p.correct(v, data, ws)
        per_variant[v] = (
            estimator.estimate(v, data, ws) if estimator else recipe.plan_estimate(ctx, data)
        )
        added = {k: val for k, val in ws.details.items() if before.get(k) != val}
        MEMO[key] = (copy.deepcopy(per_variant[v]), copy.deepcopy(added))
    if combiner is not None:
        est = combiner.combine(variants, [per_variant[v] for v in variants], ws)
    else:
        est = per_variant[variants[0]]
    return recipe._Evaluation(est, per_variant, ws.details, cal)


def main(qubits: int) -> None:
    import noiselab.mitigate.recipe as recipe
    from noiselab.study.context import build_context
    from noiselab.study.tune import GridOverride, tune

    study = load(qubits)
    grid = GridOverride(
        readout=["none", "per_qubit_inverse"],
        postselect=["none", "discard"],
        amplification=["none", "stretch"],
        scales=[[float(s) for s in sc] for sc in GRID_SCALES],
        fit=["linear", "richardson"],
    )
    ctx = build_context(study, cache=None)
    t = time.perf_counter()
    now = tune(study, grid=grid, cache=False, context=ctx).to_json()
    now_s = time.perf_counter() - t
    original = recipe._evaluate
    recipe._evaluate = _evaluate_shared
    try:
        t = time.perf_counter()
        shared = tune(study, grid=grid, cache=False, context=ctx).to_json()
        shared_s = time.perf_counter() - t
    finally:
        recipe._evaluate = original
    print(
        f"{qubits} qubits, {len(now['ranking'])} settings (context given): tune {now_s:.2f} s now, "
        f"{shared_s:.2f} s with shared per-variant estimates; identical JSON: {now == shared}"
    )


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 10)
