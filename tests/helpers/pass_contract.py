"""The contract every mitigation pass meets, as checks a test can run on any pass class.

Used for every entry of the registry (``tests/test_mitigate_conformance.py``) and for a pass
added by a test (``tests/test_mitigate_open_registry.py``). In the spirit of scikit-learn's
estimator checks: the same checks for every pass, whatever it does.
"""

from __future__ import annotations

import functools
import json
import math
import typing
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from noiselab.common.errors import InputError
from noiselab.mitigate.base import STAGE_NAMES, MitigationPass, PassOptions
from noiselab.mitigate.experiment import ExperimentContext, make_calibrator, make_runner
from noiselab.mitigate.recipe import run_recipe
from noiselab.mitigate.registry import PASSES, make_pass
from noiselab.study.context import build_context
from noiselab.study.spec import load_study

DEMO = Path(__file__).resolve().parents[2] / "configs" / "studies" / "h2-equilibrium.yaml"

#: A value no option of any pass may accept (options are numbers, names, lists of them).
BAD_VALUE = {"not": "an option value"}


@functools.lru_cache(maxsize=1)
def h2_experiment() -> tuple[ExperimentContext, Any, Any]:
    """(context, runner, calibrator) of the shipped demo study (H2, 4 qubits, Jordan-Wigner, on
    cobaltgrid-12), verification bases included; built once per test process."""
    ctx = build_context(load_study(DEMO), cache=None, verification=True)
    return ctx.experiment, make_runner(ctx.experiment), make_calibrator(ctx.experiment)


def check_interface(cls: type[MitigationPass]) -> None:
    """A registered MitigationPass with a name, a stage and a PassOptions model."""
    assert PASSES.get(cls.name) is cls
    assert issubclass(cls, MitigationPass)
    assert cls.stage in STAGE_NAMES
    assert issubclass(cls.Options, PassOptions)


def check_validates_options(cls: type[MitigationPass]) -> int:
    """Every option refuses a bad value with a one-line InputError naming ``recipe[0].<option>``.

    Returns the number of options checked (a pass without options has nothing to refuse).
    """
    for option in cls.Options.model_fields:
        with pytest.raises(InputError) as info:
            make_pass({"pass": cls.name, option: BAD_VALUE}, where="recipe[0]")
        message = str(info.value)
        assert f"recipe[0].{option}" in message and "\n" not in message, message
    return len(cls.Options.model_fields)


def check_refuses_unknown_keys(cls: type[MitigationPass]) -> None:
    """A misspelt option is refused in one line naming it, not silently ignored."""
    with pytest.raises(InputError, match=r"recipe\[0\]\.no_such_option: unknown key") as info:
        make_pass({"pass": cls.name, "no_such_option": 1}, where="recipe[0]")
    assert "\n" not in str(info.value)


def _other_values(annotation: Any, default: Any) -> list[Any]:
    """Values of an option's type other than its default (Literal choices, a flipped bool,
    a shifted number); [] where none can be named."""
    out: list[Any] = []
    if typing.get_origin(annotation) is typing.Literal:
        out += [v for v in typing.get_args(annotation) if v != default]
    for arg in typing.get_args(annotation):
        if arg is not type(None):
            out += _other_values(arg, default)
    if isinstance(default, bool):
        out.append(not default)
    elif isinstance(default, int | float) and math.isfinite(default):
        out += [default + 1, 2 * default + 1]
    return out


def check_cache_key(cls: type[MitigationPass]) -> None:
    """The cache key depends on the options only: equal for equal options however written (key
    order, defaults spelt out, a round trip through JSON), different when an option changes."""
    p = make_pass({"pass": cls.name})
    key = p.cache_key()
    assert isinstance(key, str) and len(key) == 64 and int(key, 16) >= 0
    assert make_pass({"pass": cls.name}).cache_key() == key
    spelt_out = dict(reversed(list(p.spec().items())))
    assert make_pass(spelt_out).cache_key() == key
    assert make_pass(json.loads(json.dumps(p.spec()))).cache_key() == key
    others = {make_pass({"pass": n}).cache_key() for n in PASSES if n != cls.name}
    assert key not in others
    changed = tried = 0
    for option, field in cls.Options.model_fields.items():
        for value in _other_values(field.annotation, field.default):
            try:
                q = make_pass({"pass": cls.name, option: value})
            except InputError:
                continue  # not an allowed value of this option
            tried += 1
            if q.spec() != p.spec():
                assert q.cache_key() != key, (option, value)
                changed += 1
    # a pass whose options each allow one value (twirl, measure_twirl) has nothing to change
    assert changed or not tried, "no option value changed the key"


def composed_recipe(cls: type[MitigationPass]) -> list[dict[str, Any]]:
    """``cls`` with one registered pass of each other stage, in the order a recipe needs (the
    first of that stage that neither declares incompatible; none where every one does)."""
    recipe = []
    for stage in sorted(STAGE_NAMES):
        if stage == cls.stage:
            recipe.append({"pass": cls.name})
            continue
        partners = [
            n
            for n, c in PASSES.items()
            if c.stage == stage
            and c is not cls
            and n not in cls.incompatible
            and cls.name not in c.incompatible
        ]
        if partners:
            recipe.append({"pass": partners[0]})
    return recipe


def check_composes(cls: type[MitigationPass]) -> None:
    """The pass runs in a recipe with passes of the other stages, its spec kept in the result."""
    ctx, runner, calibrator = h2_experiment()
    result = run_recipe(composed_recipe(cls), ctx, runner, calibrator=calibrator)
    assert make_pass({"pass": cls.name}).spec() in [dict(s) for s in result.spec]
    assert math.isfinite(result.energy_ha) and math.isfinite(result.std_mha)
    assert result.std_mha > 0 and 0.0 <= result.p_within_target <= 1.0


def check_analytic_matches_sampled(cls: type[MitigationPass], reps: int = 60) -> None:
    """The pass alone: the spread of ``reps`` sampled evaluations (shots and calibration drawn at
    random) matches the analytic standard error, and their mean the analytic energy."""
    ctx, runner, calibrator = h2_experiment()
    recipe = [{"pass": cls.name}]
    analytic = run_recipe(recipe, ctx, runner, calibrator=calibrator)
    rng = np.random.default_rng(20240611)
    values = np.array(
        [
            run_recipe(recipe, ctx, runner, sampled=True, rng=rng, calibrator=calibrator).energy_ha
            for _ in range(reps)
        ]
    )
    std_ha = analytic.std_mha / 1000
    assert std_ha > 0
    # common practice, no source: the sample std of 60 normal draws is within 30 % of the true
    # std (more than 3 standard deviations of the sample std, 1/sqrt(2 * 59) = 9 %)
    assert values.std(ddof=1) == pytest.approx(std_ha, rel=0.3)
    # the analytic energy carries one seeded draw of the calibration noise (within std_ha of the
    # expectation); the mean of the draws is within std_ha / sqrt(reps) of the expectation
    assert abs(values.mean() - analytic.energy_ha) < 3 * std_ha


def check_all(cls: type[MitigationPass]) -> None:
    """Every check of the contract, in order."""
    check_interface(cls)
    check_validates_options(cls)
    check_refuses_unknown_keys(cls)
    check_cache_key(cls)
    check_composes(cls)
    check_analytic_matches_sampled(cls)
