"""Sentences that must read the same in every output: the caution and the wording of the target.

Tables, verdicts, sweep sentences, JSON files, figures and the command line all take them from
here.
"""

from __future__ import annotations

from noiselab.common.units import CHEMICAL_ACCURACY_MHA

CAUTION = (
    "Caution: this prediction is only as good as the device noise model; real devices drift "
    "and have errors a profile does not describe."
)


def is_chemical_accuracy(target_mha: float) -> bool:
    """True when the target is chemical accuracy (1 kcal/mol) to the 4 digits shown."""
    return abs(target_mha - CHEMICAL_ACCURACY_MHA) < 5e-4


def target_words(target_mha: float) -> str:
    """The target as words: 'chemical accuracy (±1.594 mHa)' or 'the ±2 mHa target'."""
    if is_chemical_accuracy(target_mha):
        return f"chemical accuracy (±{target_mha:.4g} mHa)"
    return f"the ±{target_mha:.4g} mHa target"
