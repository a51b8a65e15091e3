"""The coherence knob's two modes: gate errors that follow T1/T2 (default) or stay fixed."""

from __future__ import annotations

import math

import numpy as np
import pytest
from qiskit.quantum_info import average_gate_fidelity
from qiskit_aer.noise import thermal_relaxation_error

from noiselab.common.errors import InputError
from noiselab.device.coherence import scale_coherence_with_gates
from noiselab.device.profile import load_profile, profile_from_mapping
from noiselab.study.sweep import COHERENCE_FOLLOW_NOTE, COHERENCE_NOTE, sweep


def _profile(gate_error_1q: float = 1e-3, gate_error_2q: float = 6e-3) -> object:
    return profile_from_mapping(
        {
            "schema_version": 1,
            "name": "coherence-toy",
            "qubit_count": 2,
            "links": [[0, 1]],
            "native_gates": {"single_qubit": ["rz", "sx", "x"], "two_qubit": "cz"},
            "durations": {"single_qubit_ns": 40, "two_qubit_ns": 300, "readout_ns": 1000},
            "qubits": {
                "default": {
                    "t1_us": 80,
                    "t2_us": 60,
                    "gate_error": gate_error_1q,
                    "flip_0to1": 0.01,
                    "flip_1to0": 0.02,
                },
                "overrides": {1: {"t1_us": 50, "t2_us": 70}},
            },
            "couplers": {"default": {"gate_error": gate_error_2q}},
        },
        "toy.yaml",
    )


def _one_qubit_part(t_ns: float, t1_us: float, t2_us: float) -> float:
    # source: average fidelity of amplitude + phase damping over time t (from memory; Nielsen &
    # Chuang sec. 8.3 with Nielsen, Phys. Lett. A 303, 249 (2002)):
    # F = 1/2 + (exp(-t/T1) + 2 exp(-t/T2)) / 6
    t_us = t_ns * 1e-3
    return 1.0 - (0.5 + (math.exp(-t_us / t1_us) + 2.0 * math.exp(-t_us / t2_us)) / 6.0)


def _aer_part(t_ns: float, coherence: list[tuple[float, float]]) -> float:
    # source: qiskit-aer's thermal_relaxation_error, qiskit.quantum_info.average_gate_fidelity
    channel = None
    for t1_us, t2_us in coherence:
        err = thermal_relaxation_error(t1_us * 1e3, t2_us * 1e3, t_ns).to_quantumchannel()
        channel = err if channel is None else err.expand(channel)
    return 1.0 - average_gate_fidelity(channel)


@pytest.mark.parametrize("factor", [2.0, 0.5, 0.25])
def test_relaxation_part_follows_the_closed_form(factor: float) -> None:
    p = _profile()
    moved = scale_coherence_with_gates(p, factor)
    q = moved.profile
    assert moved.clipped == ()
    for i, (t1, t2) in enumerate([(80.0, 60.0), (50.0, 70.0)]):
        assert q.qubit(i).t1_us == pytest.approx(t1 / factor)
        assert q.qubit(i).t2_us == pytest.approx(t2 / factor)
        old, new = _one_qubit_part(40, t1, t2), _one_qubit_part(40, t1 / factor, t2 / factor)
        assert new == pytest.approx(_aer_part(40, [(t1 / factor, t2 / factor)]), rel=1e-9)
        # the quoted error moves by exactly the change of its relaxation part
        assert q.qubit(i).gate_error == pytest.approx(1e-3 - old + new, rel=1e-12)
    coh = [(80.0, 60.0), (50.0, 70.0)]
    coh_new = [(a / factor, b / factor) for a, b in coh]
    # two-qubit analogue: entanglement fidelities of the two qubits multiply, F = (4 F_e + 1)/5
    # (Horodecki / Nielsen 2002, from memory); checked against qiskit's channel algebra
    part_old, part_new = _aer_part(300, coh), _aer_part(300, coh_new)
    f_e = np.prod([(1 + 2 * math.exp(-0.3 / b) + math.exp(-0.3 / a)) / 4 for a, b in coh_new])
    assert part_new == pytest.approx(1 - (4 * f_e + 1) / 5, rel=1e-9)
    assert q.pair_error(0, 1) == pytest.approx(6e-3 - part_old + part_new, rel=1e-9)


def test_longer_coherence_lowers_every_gate_error_and_infinite_leaves_the_rest() -> None:
    p = _profile()
    errors = [
        scale_coherence_with_gates(p, f).profile.pair_error(0, 1) for f in (4.0, 2.0, 1.0, 0.5)
    ]
    assert errors == sorted(errors, reverse=True)
    assert scale_coherence_with_gates(p, 1.0).profile.pair_error(0, 1) == pytest.approx(6e-3)
    infinite = scale_coherence_with_gates(p, 0.0).profile
    assert infinite.qubit(0).t1_us is None
    assert infinite.pair_error(0, 1) == pytest.approx(6e-3 - _aer_part(300, [(80, 60), (50, 70)]))


def test_quoted_error_below_its_relaxation_part_is_clipped_and_said() -> None:
    p = _profile(gate_error_2q=1e-4)  # below what T1/T2 cause over 300 ns
    moved = scale_coherence_with_gates(p, 0.5)
    assert moved.clipped == ("pair 0-1 gate error below its relaxation part",)
    # the rest is taken as 0: the new error is the relaxation part alone, never below zero
    assert moved.profile.pair_error(0, 1) == pytest.approx(_aer_part(300, [(160, 120), (100, 140)]))


def test_raw_error_falls_monotonically_with_t1_on_the_demo() -> None:
    res = sweep(
        "h2-equilibrium", "coherence_us", 100.0, 1000.0, 3, True, recipes=["raw"], cache=False
    )
    assert res.coherence_gate_errors == "follow"  # the default
    errors, _ = res.series(res.recipes[0])
    assert errors[0] > errors[1] > errors[2] > 0
    assert COHERENCE_FOLLOW_NOTE in res.notes()
    assert res.to_json()["coherence_gate_errors"] == "follow"
    from noiselab.report.tables import sweep_table

    assert "follow T1/T2" in sweep_table(res, plain=True).title
    from noiselab.report.figures import sweep_figure

    assert "gate errors follow" in sweep_figure(res).axes[0].get_xlabel()


def test_fixed_mode_keeps_the_quoted_errors_and_says_so() -> None:
    res = sweep(
        "h2-equilibrium",
        "coherence_us",
        values=[200.0],
        recipes=["raw"],
        cache=False,
        coherence_gate_errors="fixed",
    )
    assert res.to_json()["coherence_gate_errors"] == "fixed"
    assert COHERENCE_NOTE in res.notes()
    other = sweep("h2-equilibrium", "readout_error", values=[0.01], recipes=["raw"], cache=False)
    assert "coherence_gate_errors" not in other.to_json()


def test_bad_mode_is_refused_naming_the_option() -> None:
    from noiselab.cli.options import option_of

    # from Python the argument; the command line (main) shows the option
    with pytest.raises(InputError, match=r": coherence_gate_errors 'both': ") as refused:
        sweep("h2-equilibrium", "coherence_us", values=[200.0], coherence_gate_errors="both")
    assert "--coherence-gate-errors 'both'" in refused.value.with_options(option_of).message


def test_shipped_profiles_scale_without_clipping() -> None:
    for name in ("cobaltgrid-12", "amberline-10", "tallowtrap-8"):
        assert scale_coherence_with_gates(load_profile(name), 2.0).clipped == ()
