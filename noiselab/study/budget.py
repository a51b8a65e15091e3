"""The error budget: which noise channel costs how much energy error.

For each channel group of the device profile (relaxation, single_qubit, two_qubit, coherent,
readout) the energy error is computed with that channel *alone* (every other channel scaled to
0) and with that channel *removed* (it alone scaled to 0), beside the device as profiled and the
noiseless limit (every channel removed: the ansatz error). Errors are against the exact energy,
in mHa. The compiled circuit and measurement plan are those of the study, reused for every row.
"""

from __future__ import annotations

import dataclasses
from typing import Any

CHANNELS: tuple[str, ...] = ("relaxation", "single_qubit", "two_qubit", "coherent", "readout")


@dataclasses.dataclass(frozen=True)
class BudgetRow:
    """One noise configuration and every chosen recipe's energy error (mHa, signed)."""

    label: str  # "all channels", "two_qubit alone", "without two_qubit", "noiseless"
    kind: str  # "total" | "alone" | "removed" | "noiseless"
    channel: str | None
    errors_mha: tuple[float, ...]  # one per recipe, energy - exact
    stds_mha: tuple[float, ...]  # standard error at the budget


@dataclasses.dataclass(frozen=True)
class BudgetResult:
    """A finished error budget."""

    study_name: str
    device_name: str
    recipes: tuple[str, ...]
    target_mha: float
    shots_total: int
    exact_energy_ha: float
    ansatz_energy_ha: float
    rows: tuple[BudgetRow, ...]
    dominant: str  # the channel whose presence costs the most error in the first recipe
    sentence: str
    stats: Any = dataclasses.field(default=None, compare=False)  # RunStats, not in the JSON

    def row(self, kind: str, channel: str | None = None) -> BudgetRow:
        for r in self.rows:
            if r.kind == kind and r.channel == channel:
                return r
        raise KeyError((kind, channel))

    def to_json(self) -> dict[str, Any]:
        return {
            "study": self.study_name,
            "device": self.device_name,
            "recipes": list(self.recipes),
            "target_mha": self.target_mha,
            "shots_total": self.shots_total,
            "exact_energy_ha": self.exact_energy_ha,
            "ansatz_energy_ha": self.ansatz_energy_ha,
            "rows": [dataclasses.asdict(r) for r in self.rows],
            "dominant_channel": self.dominant,
            "sentence": self.sentence,
        }


def dominant_channel(rows: tuple[BudgetRow, ...], recipe_index: int = 0) -> tuple[str, str]:
    """(channel, sentence): the channel whose removal lowers |error| the most, with its numbers.

    Ties and the case where removal barely matters fall back to the largest error alone.
    """
    total = next(r for r in rows if r.kind == "total")
    floor = next(r for r in rows if r.kind == "noiseless")
    alone = {r.channel: r for r in rows if r.kind == "alone"}
    removed = {r.channel: r for r in rows if r.kind == "removed"}
    t = abs(total.errors_mha[recipe_index])
    gain = {c: t - abs(removed[c].errors_mha[recipe_index]) for c in removed}
    solo = {
        c: abs(alone[c].errors_mha[recipe_index] - floor.errors_mha[recipe_index]) for c in alone
    }
    best = max(gain, key=lambda c: (round(gain[c], 9), solo.get(c, 0.0)))
    if gain[best] <= 1e-9:
        best = max(solo, key=lambda c: solo[c])
    a = alone[best].errors_mha[recipe_index]
    w = removed[best].errors_mha[recipe_index]
    sentence = (
        f"dominant error source: {best} (alone {a:+.3g} mHa; without it {w:+.3g} mHa, "
        f"against {total.errors_mha[recipe_index]:+.3g} mHa with every channel)"
    )
    return best, sentence
