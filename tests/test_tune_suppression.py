"""tune's suppress axis: the default grid, no-op suppression left out, measurement twirling
sharing the state simulation of the variant without it."""

from __future__ import annotations

import numpy as np
from helpers.pass_contract import DEMO, h2_experiment
from helpers.twirl import explicit_twirl
from qiskit.quantum_info import Kraus, SuperOp

from noiselab.device.noise import gate_channel, noise_spec
from noiselab.device.profile import scale_profile
from noiselab.device.suppression import MeasureTwirl, _with_profile_values
from noiselab.mitigate.experiment import make_runner
from noiselab.mitigate.registry import make_pass
from noiselab.mitigate.variants import CircuitVariant
from noiselab.study.cache import CachingRunner
from noiselab.study.context import replace_experiment
from noiselab.study.spec import load_study
from noiselab.study.tune import GridOverride, applicable, grid_settings, resolve_grid


def test_default_grid_holds_suppression() -> None:
    study = load_study(DEMO)
    bare = study.__class__(**{**study.__dict__, "tune": None})
    settings, notes = grid_settings(resolve_grid(bare, GridOverride())[0])
    by = {}
    for s in settings:
        by[s.options["suppress"]] = by.get(s.options["suppress"], 0) + 1
    # by hand: the stack without clifford_regression is 4 readout x 3 post-selection x (1 + 3
    # amplifiers x 2 scale sets x 2 fits) = 156 per suppression choice; without suppression
    # the 181 of before (clifford_regression and the families included); measure_twirl only with
    # the 3 readout corrections: 3 x 3 x 13 = 117
    assert by == {"none": 181, "twirl": 156, "decouple": 156, "twirl+decouple": 156,
                  "measure_twirl": 117}
    assert len(settings) == 766
    assert any("clifford_regression takes no suppression partner" in n for n in notes)
    for s in settings:
        names = [p["pass"] for p in s.passes]
        sup = s.options["suppress"]
        if sup != "none":
            assert names[: sup.count("+") + 1] == sup.split("+")  # suppression first
        if "measure_twirl" in sup:
            assert "readout" in names
    # the demo's own section pins the family only: 81 settings x 4 + 54 with measure_twirl
    own = grid_settings(resolve_grid(study, GridOverride())[0])[0]
    assert len(own) == 81 * 4 + 54
    # an explicit suppress axis of none gives the grid as it was (no suppress key)
    plain = grid_settings(resolve_grid(study, GridOverride(suppress=["none"]))[0])[0]
    assert len(plain) == 81 and all("suppress" not in s.options for s in plain)


def _is_pauli_diagonal(channel: SuperOp) -> bool:
    kraus = Kraus(channel).data
    # source: Wallman and Emerson, PRA 94, 052325 (2016): a channel equal to its Pauli twirl
    # (built explicitly in tests/helpers/twirl.py) is a Pauli channel
    return np.allclose(SuperOp(explicit_twirl(list(kraus), 2)).data, channel.data, atol=1e-12)


def test_noop_suppression_is_left_out_with_a_note() -> None:
    ctx, _, _ = h2_experiment()
    grid = resolve_grid(
        load_study(DEMO),
        GridOverride(
            readout=["per_qubit_inverse"],
            postselect=["none"],
            amplifier=["none"],
            suppress=["none", "twirl", "decouple", "measure_twirl"],
        ),
    )[0]
    settings = grid_settings(grid)[0]
    patch = tuple(ctx.compiled.patch)
    rules = [r for r in noise_spec(ctx.profile, patch).gates if len(r.qubits) == 2]

    def channels_diagonal(profile: object) -> bool:
        return all(
            _is_pauli_diagonal(
                SuperOp(gate_channel(profile, r.gate, r.noise.qubits).to_quantumchannel())
            )
            for r in rules
        )

    # the demo device: T1 finite, so twirling changes the two-qubit channels; readout asymmetric
    assert not channels_diagonal(ctx.profile)
    kept, notes = applicable(_Ctx(ctx), settings)
    assert {s.options["suppress"] for s in kept} == {"none", "twirl", "decouple", "measure_twirl"}
    assert notes == []
    # no relaxation and no coherent terms (depolarizing gates only), readout made symmetric
    flat = scale_profile(ctx.profile, 0.0, ["relaxation", "coherent"])
    flat = MeasureTwirl().apply(None, flat, None).profile
    assert channels_diagonal(flat)
    quiet = replace_experiment(ctx, profile=flat)
    kept, notes = applicable(_Ctx(quiet), settings)
    assert {s.options["suppress"] for s in kept} == {"none", "decouple"}
    assert any(n.startswith("twirl left out: ") for n in notes)
    assert any(n.startswith("measure_twirl left out: ") for n in notes)
    # an outcome-dependent flip between two measured qubits is asymmetric (by hand: a flips
    # only when b reads 1), so measurement twirling is no no-op there
    patch = ctx.compiled.patch
    leaky = _with_profile_values(
        flat, readout_crosstalk=[{"pair": [patch[0], patch[1]], "flip_a_if_b_reads_1": 0.01}]
    )
    mt = make_pass({"pass": "measure_twirl"}, where="t")
    assert mt.no_op(quiet) is not None
    assert mt.no_op(replace_experiment(ctx, profile=leaky)) is None
    # decoupling still acts without T1 (pulse errors): not a no-op while pulses fit
    assert make_pass({"pass": "decouple"}, where="t").no_op(quiet) is None
    huge = make_pass({"pass": "decouple", "min_window_ns": 1e6}, where="t")
    assert huge.no_op(quiet) is not None


class _Ctx:
    """The study-context fields ``applicable`` reads."""

    def __init__(self, experiment: object) -> None:
        self.experiment = experiment


def test_measure_twirl_shares_the_state_simulation() -> None:
    ctx, _, _ = h2_experiment()
    ctx = replace_experiment(ctx, profile=_with_profile_values(ctx.profile))
    runner = CachingRunner(ctx)
    base = CircuitVariant()
    twirled = CircuitVariant((MeasureTwirl(),))
    runner.prefetch([base, twirled])
    assert runner.simulations == 1
    got = runner(twirled)
    assert runner.simulations == 1
    direct = make_runner(ctx)(twirled)  # its own simulation under the twirled profile
    assert np.max(np.abs(got.probs - direct.probs)) < 1e-12
    assert np.max(np.abs(got.probs_ideal - direct.probs_ideal)) < 1e-12
    assert np.max(np.abs(got.probs - runner(base).probs)) > 1e-6  # the readout did change


def test_tune_with_suppression_shares_simulations(tmp_path) -> None:
    from noiselab.study.tune import tune

    grid = GridOverride(
        readout=["none", "per_qubit_inverse"],
        postselect=["none"],
        amplifier=["none"],
        family=["none"],
        suppress=["none", "twirl", "measure_twirl"],
    )
    result = tune(DEMO, grid=grid, cache=tmp_path / "t.db", reuse=False)
    # by hand: 2 readout choices x (none, twirl) + measure_twirl with the readout correction
    assert len(result.entries) == 5
    # circuits: the device as it is, twirled, measure-twirled (read from the first's state)
    assert result.distinct_variants == 3
    assert result.stats.simulations == 2
    by = {(e.setting["suppress"], e.setting["readout"]): e.result for e in result.entries}
    # by hand: the per-qubit inverse undoes either per-qubit assignment exactly (and the demo's
    # joint flip is symmetric, and off its patch), so measurement twirling leaves the corrected
    # bias as it is
    plain, twirled = by[("none", "per_qubit_inverse")], by[("measure_twirl", "per_qubit_inverse")]
    assert abs(plain.bias_exact_mha - twirled.bias_exact_mha) < 1e-6
    assert by[("twirl", "none")].bias_exact_mha != by[("none", "none")].bias_exact_mha


def test_suppress_axis_refuses_unknown_values(tmp_path) -> None:
    from helpers.cli import run_main

    code, out, err = run_main(
        ["tune", str(DEMO), "--suppress", "twril", "--cache", str(tmp_path / "never.db")]
    )
    assert code == 2 and out == ""
    assert "--suppress" in err and "twril" in err and "twirl+decouple" in err
    assert len(err.strip().splitlines()) == 1
