"""The coherence knob says what it does to the quoted gate errors (they stay fixed)."""

from __future__ import annotations

import dataclasses

from test_report_figures import _hand_sweep

from noiselab.study.sweep import COHERENCE_NOTE


def test_coherence_knob_says_gate_errors_stay_fixed() -> None:
    sweep = _hand_sweep()
    assert COHERENCE_NOTE not in sweep.notes()
    coherence = dataclasses.replace(sweep, knob="coherence_us")
    assert COHERENCE_NOTE in coherence.notes()
    assert COHERENCE_NOTE in coherence.to_json()["notes"]
    assert "kept fixed" in COHERENCE_NOTE
