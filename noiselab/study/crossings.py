"""Where a recipe crosses the target along a sweep's knob: the sweep's entry and point records,
bisection between grid points with new evaluations, and the sentence in the knob's units.

Crossings are stated for the one rule of reaching the target (P(|E - E_exact| <= target) >=
confidence at the study's budget, :func:`noiselab.mitigate.target.reaches_target`) and
separately for the bias alone (unlimited shots). Each is located by bisection on the knob to
1 % relative, not by interpolation.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
from collections.abc import Callable, Sequence

from noiselab.common.wording import target_words
from noiselab.study.knobs import Knob


@dataclasses.dataclass(frozen=True)
class SweepEntry:
    """One recipe at one sweep point. Energies in Ha, errors in mHa (against the exact energy)."""

    recipe: str
    energy_ha: float
    error_mha: float  # energy - exact, signed
    std_mha: float  # standard error at the study's shot budget
    bias_ansatz_mha: float
    p_within_target: float
    limited_by: str
    trajectory_std_mha: float | None = None  # emulator's own error (trajectory method only)
    reaches_target: bool = False  # the one rule at the budget


@dataclasses.dataclass(frozen=True)
class SweepPoint:
    """One knob value (base units), the channel scale factor it meant, every recipe's result."""

    value: float
    factor: float
    entries: tuple[SweepEntry, ...]
    floored: bool = False  # quoted gate error below the T1/T2 floor: relaxation alone is used

    def entry(self, recipe: str) -> SweepEntry:
        for e in self.entries:
            if e.recipe == recipe:
                return e
        raise KeyError(recipe)


@dataclasses.dataclass(frozen=True)
class RecipeCrossing:
    """Where one recipe crosses the target, in knob base units, and the sentence."""

    recipe: str
    crossings: tuple[float, ...]  # reaches the target at the budget (P >= confidence) flips
    bias_crossings: tuple[float, ...]  # |bias| = target (the bias alone, unlimited shots)
    sentence: str
    evaluations: int = 0  # new evaluations of the recipe the bisections took


# ---------------------------------------------------------------- crossings


BISECTION_REL_TOL = 0.01  # a crossing is located until its bracket is 1 % of the knob value

#: A knob value (base units) -> the recipe's entry there (a new, cached evaluation).
Evaluate = Callable[[float], SweepEntry]


def bias_within(entry: SweepEntry, target_mha: float) -> bool:
    """The bias alone (unlimited shots) inside the target: |bias| < target."""
    return abs(float(entry.error_mha)) < float(target_mha)


def _midpoint(a: float, b: float, log_x: bool) -> float:
    if log_x and a > 0 and b > 0:
        return math.sqrt(a * b)
    return 0.5 * (a + b)


def bisect_crossing(
    lo: float,
    hi: float,
    inside_lo: bool,
    inside: Callable[[float], bool],
    log_x: bool = False,
    rel_tol: float = BISECTION_REL_TOL,
) -> tuple[float, int]:
    """(knob value where ``inside`` flips between ``lo`` and ``hi``, evaluations used).

    ``inside(lo)`` is ``inside_lo`` and ``inside(hi)`` its opposite; the bracket is halved
    (geometrically with ``log_x``) until its width is at most ``rel_tol`` of its larger end, and
    its midpoint is returned.
    """
    n = 0
    while abs(hi - lo) > rel_tol * max(abs(lo), abs(hi)):
        mid = _midpoint(lo, hi, log_x)
        n += 1
        if inside(mid) == inside_lo:
            lo = mid
        else:
            hi = mid
    return _midpoint(lo, hi, log_x), n


def locate_crossings(
    values: Sequence[float],
    entries: Sequence[SweepEntry],
    inside: Callable[[SweepEntry], bool],
    evaluate: Evaluate,
    log_x: bool = False,
) -> tuple[tuple[float, ...], int]:
    """(knob values where ``inside(entry)`` flips, in the order of ``values``; evaluations used).

    Each grid interval whose ends differ is bisected with new evaluations. An interval whose
    ends are both outside while the signed bias changes sign (an over-correcting estimate
    passing through zero) is probed once where the bias would be zero; when inside there, both
    halves are bisected.
    """
    out: list[float] = []
    n = 0

    def at(x: float) -> bool:
        return inside(evaluate(x))

    for i in range(len(values) - 1):
        a, b = float(values[i]), float(values[i + 1])
        ea, eb = entries[i], entries[i + 1]
        ia, ib = inside(ea), inside(eb)
        if ia != ib:
            x, k = bisect_crossing(a, b, ia, at, log_x)
            out.append(x)
            n += k
        elif not ia and float(ea.error_mha) * float(eb.error_mha) < 0:
            f = float(ea.error_mha) / (float(ea.error_mha) - float(eb.error_mha))
            if log_x and a > 0 and b > 0:
                probe = 10 ** (math.log10(a) + f * (math.log10(b) - math.log10(a)))
            else:
                probe = a + f * (b - a)
            n += 1
            if at(probe):
                x1, k1 = bisect_crossing(a, probe, False, at, log_x)
                x2, k2 = bisect_crossing(probe, b, True, at, log_x)
                out += [x1, x2]
                n += k1 + k2
    return tuple(out), n


def _region(
    knob: Knob, values: Sequence[float], flags: Sequence[bool], crossings: Sequence[float]
) -> tuple[str, str]:
    """(kind, words) of where ``flags`` hold: kind "all", "none" or "part"."""
    lo, hi = min(values), max(values)
    if lo == hi:
        return ("all" if flags[0] else "none"), f"at {knob.phrase} of {knob.show(lo)}"
    span = f"over the whole range of {knob.phrase} ({knob.show(lo)} to {knob.show(hi)})"
    if not crossings:
        if all(flags):
            return "all", span
        if not any(flags):
            return "none", span
    ascending = values[-1] > values[0]
    first_inside = flags[0] if ascending else flags[-1]  # at the smallest value
    if len(crossings) == 1:
        word = "below" if first_inside else "above"
        return "part", f"while {knob.phrase} is {word} {knob.show(crossings[0])}"
    bounds = [lo, *sorted(crossings), hi]
    parts = []
    inside_now = first_inside
    for a, b in itertools.pairwise(bounds):
        if inside_now:
            parts.append(f"{knob.show(a)} to {knob.show(b)}")
        inside_now = not inside_now
    return "part", f"for {knob.phrase} from " + " and from ".join(parts)


def crossing_sentence(
    recipe: str,
    knob: Knob,
    values: Sequence[float],
    reaches: Sequence[bool],
    crossings: Sequence[float],
    bias_inside: Sequence[bool],
    bias_crossings: Sequence[float],
    target_mha: float,
    confidence: float,
) -> str:
    """One sentence in the device's own units: where the recipe reaches the target at the
    budget (the rule: P >= confidence), then where its bias alone is within it."""
    goal = target_words(target_mha)
    rule = f"at the budget (P >= {confidence:g})"
    kind, words = _region(knob, values, reaches, crossings)
    if kind == "none":
        head = f"{recipe} does not reach {goal} {rule} {words.replace('over', 'anywhere in', 1)}"
    else:
        head = f"{recipe} reaches {goal} {rule} {words}"
    kind, words = _region(knob, values, bias_inside, bias_crossings)
    if kind == "all":
        tail = f"its bias alone (unlimited shots) is within the target {words}"
    elif kind == "none":
        tail = f"its bias alone (unlimited shots) is outside the target {words}"
    else:
        tail = f"its bias alone (unlimited shots) is within the target {words}"
    return f"{head}; {tail}"


def recipe_crossing(
    recipe: str,
    knob: Knob,
    points: Sequence[SweepPoint],
    target_mha: float,
    confidence: float,
    log_x: bool,
    evaluate: Evaluate,
) -> RecipeCrossing:
    """Crossings (by bisection through ``evaluate``) and the sentence for one recipe."""
    values = [p.value for p in points]
    entries = [p.entry(recipe) for p in points]
    rule, n1 = locate_crossings(values, entries, lambda e: e.reaches_target, evaluate, log_x)
    bias, n2 = locate_crossings(
        values, entries, lambda e: bias_within(e, target_mha), evaluate, log_x
    )
    sentence = crossing_sentence(
        recipe,
        knob,
        values,
        [e.reaches_target for e in entries],
        rule,
        [bias_within(e, target_mha) for e in entries],
        bias,
        target_mha,
        confidence,
    )
    return RecipeCrossing(
        recipe=recipe, crossings=rule, bias_crossings=bias, sentence=sentence, evaluations=n1 + n2
    )
