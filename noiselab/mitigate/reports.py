"""Typed records a recipe produces besides its energy: what each pass reports, and each circuit
variant as scored.

A pass returns a :class:`PassReport` subclass (a frozen dataclass of plain values: numbers,
strings, tuples of them, mappings of them) from each hook call; the reports of one pass over the
circuit variants are merged (:meth:`PassReport.merge`) into one, kept by pass name in
``RecipeResult.reports``. Plain values make the record survive the results cache (JSON) as it
is: :meth:`PassReport.from_record` rebuilds it by the pass name. ``PassReport.details`` is the
pass's part of ``RecipeResult.details`` (the JSON of assess); ``noiselab.mitigate.steps`` builds
that JSON at one place.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, ClassVar

#: pass name -> its report class (filled as report classes are defined)
REPORT_KINDS: dict[str, type[PassReport]] = {}


def plain(value: Any) -> Any:
    """JSON's lists back to tuples (mappings kept): a report's values as the report holds them."""
    if isinstance(value, Mapping):
        return {k: plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return tuple(plain(v) for v in value)
    return value


@dataclass(frozen=True)
class VariantScore:
    """One circuit variant of a scored recipe: its corrected energy, standard error at its
    shots, the shots, its noise scale (emulated, and realized by the error budget), the engine
    time and the two-qubit gate count of its circuit (None without a compiled circuit)."""

    label: str
    energy_ha: float
    std_mha: float
    shots: int
    scale: float
    scale_realized: float
    engine_seconds: float
    two_qubit_count: int | None

    def to_json(self) -> dict[str, Any]:
        """The entry of ``details["variants"]`` (keyed by the label)."""
        return {k: v for k, v in dataclasses.asdict(self).items() if k != "label"}


@dataclass(frozen=True)
class ScoredRun:
    """What a report's JSON may draw on besides itself: the bases read, the variants as scored
    (in the recipe's order) and the measurement shots per (variant label, basis)."""

    bases: tuple[str, ...]
    variants: tuple[VariantScore, ...]
    shots: Mapping[tuple[str, str], int]


@dataclass(frozen=True)
class PassReport:
    """Base of the typed reports passes return (subclass it with the pass's ``kind``, its name).

    Fields hold plain values only (numbers, strings, None, tuples and mappings of them).
    Reports of the variants of one recipe are merged field by field: mappings joined, tuples
    concatenated, anything else must agree.
    """

    kind: ClassVar[str] = ""

    def __init_subclass__(cls, **kwargs: Any) -> None:
        super().__init_subclass__(**kwargs)
        if cls.kind:
            REPORT_KINDS[cls.kind] = cls

    def merge(self, other: PassReport) -> PassReport:
        """This report and ``other`` (the same kind, another variant) as one."""
        if type(other) is not type(self):
            raise TypeError(f"cannot merge {type(other).__name__} into {type(self).__name__}")
        values = {}
        for f in dataclasses.fields(self):
            a, b = getattr(self, f.name), getattr(other, f.name)
            if isinstance(a, Mapping):
                values[f.name] = {**a, **b}
            elif isinstance(a, tuple):
                values[f.name] = a + b
            elif a == b:
                values[f.name] = a
            else:
                raise ValueError(f"{self.kind} reports disagree on {f.name}: {a!r} != {b!r}")
        return type(self)(**values)

    def details(self, run: ScoredRun) -> dict[str, Any]:
        """The entries this report adds to ``RecipeResult.details`` (none by default)."""
        return {}

    @staticmethod
    def from_record(kind: str, record: Mapping[str, Any]) -> PassReport:
        """A report from its ``dataclasses.asdict`` form (e.g. read back from the cache)."""
        cls = REPORT_KINDS.get(kind)
        if cls is None:
            raise KeyError(f"no report class for pass {kind!r}")
        names = {f.name for f in dataclasses.fields(cls)}
        return cls(**{k: plain(v) for k, v in record.items() if k in names})
