"""The error budget: which noise channel costs how much energy error.

For each channel group of the device profile (relaxation, single_qubit, two_qubit, coherent,
readout) the energy error is computed with that channel *alone* (every other channel scaled to
0) and with that channel *removed* (it alone scaled to 0), beside the device as profiled and the
noiseless limit (every channel removed: the ansatz error). Errors are against the exact energy,
in mHa. The compiled circuit and measurement plan are those of the study, reused for every row.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from typing import Any

from noiselab.common.errors import arg
from noiselab.device.channel_registry import CHANNELS
from noiselab.device.profile import scale_profile
from noiselab.study.context import build_context
from noiselab.study.display import NotebookDisplay
from noiselab.study.job import own_executor, scan_fields, start_job
from noiselab.study.results import RunStats, trajectory_std_of
from noiselab.study.sweep import (
    ConfigTask,
    chosen_recipes,
    run_configs,
)

__all__ = ["CHANNELS", "BudgetResult", "BudgetRow", "budget"]


@dataclasses.dataclass(frozen=True)
class BudgetRow:
    """One noise configuration and every chosen recipe's energy error (mHa, signed)."""

    label: str  # "all channels", "two_qubit alone", "without two_qubit", "noiseless"
    kind: str  # "total" | "alone" | "removed" | "noiseless"
    channel: str | None
    errors_mha: tuple[float, ...]  # one per recipe, energy - exact
    stds_mha: tuple[float, ...]  # standard error at the budget
    #: the emulator's own error per recipe (trajectory method), None under the density matrix
    trajectory_stds_mha: tuple[float | None, ...] = ()
    #: P(within target) at the budget and the one rule (P >= confidence), per recipe
    p_within_target: tuple[float, ...] = ()
    reaches_target: tuple[bool, ...] = ()


@dataclasses.dataclass(frozen=True, repr=False)
class BudgetResult(NotebookDisplay):
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
    emulation_method: str = "density_matrix"  # or "trajectory"
    emulation_notice: str | None = None
    confidence: float = 0.95

    def summary(self) -> str:
        """One line: study, recipes and the budget's sentence."""
        return f"{self.study_name}: recipes {', '.join(self.recipes)}; {self.sentence}"

    def to_records(self) -> list[dict[str, Any]]:
        """One dict per noise configuration and recipe: error and std (mHa)."""
        return [
            {
                "configuration": r.label,
                "kind": r.kind,
                "channel": r.channel,
                "recipe": name,
                "error_mha": float(r.errors_mha[k]),
                "std_mha": float(r.stds_mha[k]),
            }
            for r in self.rows
            for k, name in enumerate(self.recipes)
        ]

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
            "emulation_method": self.emulation_method,
            "target_mha": self.target_mha,
            "confidence": self.confidence,
            "shots_total": self.shots_total,
            "exact_energy_ha": self.exact_energy_ha,
            "ansatz_energy_ha": self.ansatz_energy_ha,
            "rows": [dataclasses.asdict(r) for r in self.rows],
            "dominant_channel": self.dominant,
            "sentence": self.sentence,
        }


def dominant_channel(
    rows: tuple[BudgetRow, ...], recipe_index: int = 0, target_mha: float | None = None
) -> tuple[str, str]:
    """(channel, sentence): the channel whose removal lowers |error| the most, with its numbers.

    When removal barely matters the largest error alone decides. With ``target_mha`` and a
    recipe that already reaches the target with every channel present (the one rule, P >=
    confidence at the budget), the sentence says so instead of naming a cost inside the noise.
    """
    total = next(r for r in rows if r.kind == "total")
    floor = next(r for r in rows if r.kind == "noiseless")
    alone = {r.channel: r for r in rows if r.kind == "alone"}
    removed = {r.channel: r for r in rows if r.kind == "removed"}
    k = recipe_index
    t = abs(total.errors_mha[k])
    gain = {c: t - abs(removed[c].errors_mha[k]) for c in removed}
    solo = {c: abs(alone[c].errors_mha[k] - floor.errors_mha[k]) for c in alone}
    best = max(gain, key=lambda c: (round(gain[c], 9), solo.get(c, 0.0)))
    lowers = gain[best] > 1e-9  # removing ``best`` lowers |error|: it is a cost
    if not lowers:
        best = max(solo, key=lambda c: solo[c])
    a = alone[best].errors_mha[k]
    w = removed[best].errors_mha[k]
    reaches = total.reaches_target[k] if k < len(total.reaches_target) else False
    if target_mha is not None and reaches:
        cost = (
            f"largest single cost {best} (without it {w:+.3g} mHa)"
            if lowers
            else f"no single channel's removal lowers the error (largest alone: {best}, "
            f"{a:+.3g} mHa)"
        )
        return best, (
            f"reaches the {target_mha:.3g} mHa target at the budget with every channel present "
            f"({total.errors_mha[k]:+.3g} mHa); {cost}"
        )
    if not lowers:
        return best, (
            f"no single channel's removal lowers the error ({total.errors_mha[k]:+.3g} mHa with "
            f"every channel); largest error alone: {best} ({a:+.3g} mHa; without it {w:+.3g} mHa)"
        )
    sentence = (
        f"dominant error source: {best} (alone {a:+.3g} mHa; without it {w:+.3g} mHa, "
        f"against {total.errors_mha[k]:+.3g} mHa with every channel)"
    )
    return best, sentence


def configurations(profile: Any) -> list[tuple[str, str, str | None, Any]]:
    """(label, kind, channel, profile) for the device as profiled, each channel alone, each
    channel removed, and the noiseless limit."""
    out: list[tuple[str, str, str | None, Any]] = [("all channels", "total", None, profile)]
    for c in CHANNELS:
        others = [o for o in CHANNELS if o != c]
        out.append((f"{c} alone", "alone", c, scale_profile(profile, 0.0, others)))
    for c in CHANNELS:
        out.append((f"without {c}", "removed", c, scale_profile(profile, 0.0, [c])))
    out.append(("noiseless", "noiseless", None, scale_profile(profile, 0.0, None)))
    return out


def budget(
    study_or_path: Any,
    recipe: str | None = None,
    *,
    cache: Any = None,
    seed: int | None = None,
    shots: int | None = None,
    workers: int | None = None,
    executor: Any = None,
    progress: Callable[[str, int, int], None] | None = None,
    context: Any = None,
    method: str | None = None,
    trajectories: int | None = None,
    cluster: Any = None,
) -> BudgetResult:
    """The error budget of the raw energy (and of ``recipe``, a mitigated recipe of the study).

    ``cache``: a ResultsCache, a path, None (the user cache folder) or False. Every
    configuration's simulations go through the cache; ``workers`` > 1 runs them in processes,
    ``cluster`` (a Dask scheduler address or Client) on a cluster. ``method`` /
    ``trajectories`` override the study's ``emulation:`` section.
    """
    job = start_job(
        study_or_path, cache, seed=seed, shots=shots, method=method, trajectories=trajectories
    )
    picked = chosen_recipes(job.study, [] if recipe is None else [recipe], where=arg("recipe"))
    with own_executor(workers, cluster, executor) as ex:
        return _budget_with(job.study, picked, job.store, ex, progress, context, job.t0)


def _budget_with(
    study: Any,
    picked: tuple[tuple[str, tuple[dict[str, Any], ...]], ...],
    store: Any,
    executor: Any,
    progress: Callable[[str, int, int], None] | None,
    context: Any,
    t0: float,
) -> BudgetResult:
    ctx = context if context is not None else build_context(study, cache=store, progress=progress)
    configs = configurations(study.profile)
    tasks = [ConfigTask(ctx.experiment, prof, picked, store) for _, _, _, prof in configs]
    done = [0]

    def finished(i: int, out: Any) -> None:
        done[0] += 1
        if progress is not None:
            progress("error budget", done[0], len(tasks))

    if progress is not None:
        progress("error budget", 0, len(tasks))
    outs, described = run_configs(tasks, None, finished, executor)
    rows = tuple(
        BudgetRow(
            label=label,
            kind=kind,
            channel=channel,
            errors_mha=tuple(float(r.bias_exact_mha) for _, r in out.results),
            stds_mha=tuple(float(r.std_mha) for _, r in out.results),
            trajectory_stds_mha=tuple(trajectory_std_of(r) for _, r in out.results),
            p_within_target=tuple(float(r.p_within_target) for _, r in out.results),
            reaches_target=tuple(bool(r.reaches_target) for _, r in out.results),
        )
        for (label, kind, channel, _), out in zip(configs, outs, strict=True)
    )
    names = tuple(n for n, _ in picked)
    target = float(study.target_mha)
    dom, sentence = dominant_channel(rows, 0, target)
    sentence = f"{names[0]}: {sentence}"
    if len(names) > 1:
        _, sentence2 = dominant_channel(rows, 1, target)
        sentence += f"; {names[1]}: {sentence2}"
    stats = RunStats.of_outcomes(outs, t0, described)
    return BudgetResult(
        rows=rows,
        dominant=dom,
        sentence=sentence,
        **scan_fields(study, ctx, names, stats),
    )
