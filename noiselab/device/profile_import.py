"""A device profile from calibration tables (``noiselab.device.caltable``), one table per day.

Values: per qubit and pair, the median over the tables of each measured value (empty cells
skipped). A value no table has is filled with the worst value of that quantity on the device
(shortest time, largest error), and said so. The profile holds one duration per gate kind: the
longest over qubits or pairs (the pessimistic choice), and said so when they differ.

Layout: ``qubits.default`` / ``couplers.default`` hold the lower median over qubits / pairs of
each value (an actual qubit's value, so at least one qubit needs no override); overrides hold
only the values that differ from it. Links are the pairs of the pair table.

Drift (two tables or more): for each element (qubit or pair) and quantity, the sample relative
standard deviation over the tables, ``s / m`` (``s`` with n - 1 in the denominator, ``m`` the
mean); a channel's spread is the root mean square over its elements (the pooled estimate for
equally many days per element). Channels are those of ``DriftSpec``: T1, T2, single-qubit
error, two-qubit error, readout (P(1|0) and P(0|1) pooled, as the drift draw moves them
together).
"""

from __future__ import annotations

import math
import statistics
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import yaml

from noiselab.common.errors import arg, input_error
from noiselab.common.yamlio import parse_yaml_mapping
from noiselab.device.caltable import CalibrationTable
from noiselab.device.profile import (
    SCHEMA_VERSION,
    TWO_QUBIT_GATES,
    DeviceProfile,
    DriftSpec,
    profile_from_mapping,
    profile_warnings,
)

#: Largest relative spread a drift block holds (DriftSpec's bound).
MAX_REL_STD = 2.0
#: Table quantity -> profile key, per-qubit and per-pair.
QUBIT_KEYS = {
    "t1": "t1_us",
    "t2": "t2_us",
    "gate_error": "gate_error",
    "flip_0to1": "flip_0to1",
    "flip_1to0": "flip_1to0",
}
PAIR_KEYS = {"gate_error": "gate_error"}
#: DriftSpec key -> (section, table quantities pooled into it), in DriftSpec's order.
DRIFT_CHANNELS: dict[str, tuple[str, tuple[str, ...]]] = {
    "t1_rel_std": ("qubit", ("t1",)),
    "t2_rel_std": ("qubit", ("t2",)),
    "single_qubit_error_rel_std": ("qubit", ("gate_error",)),
    "two_qubit_error_rel_std": ("pair", ("gate_error",)),
    "readout_error_rel_std": ("qubit", ("flip_0to1", "flip_1to0")),
}
_TIMES = ("t1", "t2")  # worst = shortest; every other quantity: worst = largest


@dataclass(frozen=True)
class DriftRow:
    """One channel's measured spread: ``rel_std`` None when no element had two values."""

    key: str
    rel_std: float | None
    elements: int
    smallest: float | None
    largest: float | None


@dataclass(frozen=True)
class ImportedProfile:
    """The written profile (mapping, YAML text, validated model) and what the import reports."""

    mapping: dict[str, Any]
    text: str
    profile: DeviceProfile
    notes: tuple[str, ...]
    drift: tuple[DriftRow, ...]
    tables: int
    warnings: tuple[str, ...]


def _same_layout(tables: Sequence[CalibrationTable]) -> None:
    first = tables[0]
    for t in tables[1:]:
        for what, a, b in (("qubits", first.qubits, t.qubits), ("pairs", first.pairs, t.pairs)):
            if set(a) != set(b):
                missing = sorted(set(a) - set(b))
                extra = sorted(set(b) - set(a))
                raise input_error(
                    t.source,
                    what,
                    f"differ from {first.source} (missing: "
                    f"{_ids(missing) or 'none'}; extra: {_ids(extra) or 'none'})",
                    "the same qubits and pairs in every table",
                )


def _ids(items: list[Any]) -> str:
    shown = [str(x) if isinstance(x, int) else f"{x[0]}-{x[1]}" for x in items[:6]]
    return ", ".join(shown) + (" ..." if len(items) > 6 else "")


def _label(key: Any) -> str:
    return f"qubit {key}" if isinstance(key, int) else f"pair {key[0]}-{key[1]}"


def _medians(
    tables: Sequence[CalibrationTable], section: str, stems: Sequence[str], notes: list[str]
) -> dict[Any, dict[str, float]]:
    """Per element and quantity the median over the tables; gaps filled with the worst value."""
    keys = sorted(getattr(tables[0], section))
    out: dict[Any, dict[str, float]] = {k: {} for k in keys}
    for stem in stems:
        for k in keys:
            vals = [getattr(t, section)[k][stem].value for t in tables]
            got = [v for v in vals if v is not None]
            if got:
                out[k][stem] = float(np.median(got))
        have = [out[k][stem] for k in keys if stem in out[k]]
        if not have:
            raise input_error(
                tables[0].source,
                f"column {stem}",
                f"{stem} is empty in every row of every table",
                "a measured value on at least one qubit"
                if section == "qubits"
                else "a measured value on at least one pair",
            )
        worst = min(have) if stem in _TIMES else max(have)
        for k in keys:
            if stem not in out[k]:
                out[k][stem] = worst
                notes.append(
                    f"{_label(k)}: {stem} empty in every table; the worst value on the device "
                    f"({worst:g}) is used"
                )
    if section == "qubits":  # keep T2 <= 2 T1 where a filled value met a measured one
        for k in keys:
            t1, t2 = out[k]["t1"], out[k]["t2"]
            if t2 > 2.0 * t1:
                out[k]["t1"] = t2 / 2.0
                notes.append(
                    f"qubit {k}: the filled T1 is raised to T2 / 2 = {t2 / 2.0:g} us (T2 <= 2 T1)"
                )
    return out


def _duration(per: dict[Any, dict[str, float]], stem: str, what: str, notes: list[str]) -> float:
    vals = [v[stem] for v in per.values()]
    longest = max(vals)
    if min(vals) != longest:
        notes.append(
            f"{what} durations differ ({min(vals):g} to {longest:g} ns); the profile holds one "
            f"value: the longest, {longest:g} ns (pessimistic)"
        )
    return longest


def defaults_and_overrides(
    per: dict[Any, dict[str, float]], keys: dict[str, str]
) -> tuple[dict[str, float], dict[Any, dict[str, float]]]:
    """(default, overrides): per key the lower median over elements; overrides hold only the
    values that differ from it (``keys``: element quantity -> profile key)."""
    default = {
        key: float(statistics.median_low([v[stem] for v in per.values()]))
        for stem, key in keys.items()
    }
    overrides: dict[Any, dict[str, float]] = {}
    for k, v in per.items():
        diff = {key: v[stem] for stem, key in keys.items() if v[stem] != default[key]}
        if diff:
            overrides[k] = diff
    return default, overrides


def relative_spread(values: Sequence[float]) -> float | None:
    """Sample relative standard deviation s / m (n - 1 in s); None below two values or m = 0."""
    x = np.asarray(values, dtype=float)
    if x.size < 2 or x.mean() == 0.0:
        return None
    return float(x.std(ddof=1) / x.mean())


def drift_rows(tables: Sequence[CalibrationTable]) -> tuple[DriftRow, ...]:
    """Per DriftSpec channel: the pooled (root mean square) relative spread over elements."""
    rows = []
    for key, (section, stems) in DRIFT_CHANNELS.items():
        per_table = [t.qubits if section == "qubit" else t.pairs for t in tables]
        spreads = []
        for elem in sorted(per_table[0]):
            for stem in stems:
                vals = [p[elem][stem].value for p in per_table]
                r = relative_spread([v for v in vals if v is not None])
                if r is not None:
                    spreads.append(r)
        if spreads:
            pooled = math.sqrt(sum(r * r for r in spreads) / len(spreads))
            rows.append(DriftRow(key, pooled, len(spreads), min(spreads), max(spreads)))
        else:
            rows.append(DriftRow(key, None, 0, None, None))
    return tuple(rows)


def _drift_block(rows: Sequence[DriftRow], notes: list[str]) -> dict[str, float]:
    defaults = DriftSpec()
    block = {}
    for row in rows:
        if row.rel_std is None:
            notes.append(
                f"drift.{row.key}: no element has two measured values; the default "
                f"{getattr(defaults, row.key):g} (common practice) stays"
            )
            block[row.key] = float(getattr(defaults, row.key))
        elif row.rel_std > MAX_REL_STD:
            notes.append(
                f"drift.{row.key}: measured {row.rel_std:.3g} is cut to {MAX_REL_STD:g} "
                "(the largest spread the drift model takes)"
            )
            block[row.key] = MAX_REL_STD
        else:
            block[row.key] = row.rel_std
    return block


def _flow(value: Any) -> str:
    return yaml.safe_dump(value, default_flow_style=True, width=10**6, sort_keys=False).strip()


def _yaml_text(mapping: dict[str, Any], header: Sequence[str]) -> str:
    """Compact YAML: one line per override, links as flow pairs ten to a line."""
    lines = [f"# {h}" for h in header]
    for key in ("schema_version", "name", "description", "qubit_count"):
        lines.append(_flow({key: mapping[key]})[1:-1])
    links = [_flow(list(p)) for p in mapping["links"]]
    chunks = [", ".join(links[i : i + 10]) for i in range(0, len(links), 10)] or [""]
    lines.append("links: [" + ",\n        ".join(chunks) + "]")
    lines.append("native_gates: " + _flow(mapping["native_gates"]))
    lines.append("durations: " + _flow(mapping["durations"]))
    for section, over_style in (("qubits", "map"), ("couplers", "list")):
        sec = mapping[section]
        lines += [f"{section}:", "  default: " + _flow(sec["default"])]
        if sec.get("overrides"):
            lines.append("  overrides:")
            if over_style == "map":
                lines += [f"    {q}: {_flow(v)}" for q, v in sec["overrides"].items()]
            else:
                lines += [f"    - {_flow(v)}" for v in sec["overrides"]]
    if "drift" in mapping:
        lines += ["drift:"] + ["  " + _flow({k: v})[1:-1] for k, v in mapping["drift"].items()]
    return "\n".join(lines) + "\n"


def profile_from_tables(
    tables: Sequence[CalibrationTable],
    name: str,
    source: str,
    two_qubit_gate: str = "cz",
    description: str | None = None,
) -> ImportedProfile:
    """The profile of ``tables`` (one per day, same qubits and pairs), validated as ``source``."""
    if not tables:
        raise input_error(source, None, "no calibration tables given", "one or more table files")
    if two_qubit_gate not in TWO_QUBIT_GATES:
        raise input_error(
            None, arg("two_qubit_gate"), f"{two_qubit_gate!r}", ", ".join(TWO_QUBIT_GATES)
        )
    _same_layout(tables)
    notes: list[str] = []
    q_stems = (*QUBIT_KEYS, "gate_duration", "readout_duration")
    per_q = _medians(tables, "qubits", q_stems, notes)
    per_p = (
        _medians(tables, "pairs", (*PAIR_KEYS, "gate_duration"), notes) if tables[0].pairs else {}
    )
    durations = {
        "single_qubit_ns": _duration(per_q, "gate_duration", "single-qubit gate", notes),
        "two_qubit_ns": _duration(per_p, "gate_duration", "two-qubit gate", notes)
        if per_p
        else _duration(per_q, "gate_duration", "single-qubit gate", []),
        "readout_ns": _duration(per_q, "readout_duration", "readout", notes),
    }
    q_default, q_over = defaults_and_overrides(per_q, QUBIT_KEYS)
    if per_p:
        p_default, p_over = defaults_and_overrides(per_p, PAIR_KEYS)
    else:  # one qubit: no pair, a placeholder coupler (no two-qubit gate can run)
        p_default, p_over = {"gate_error": 0.0}, {}
    sources = ", ".join(t.source for t in tables)
    mapping: dict[str, Any] = {
        "schema_version": SCHEMA_VERSION,
        "name": name,
        "description": description
        if description is not None
        else f"Imported from {len(tables)} calibration table(s): {sources}",
        "qubit_count": len(per_q),
        "links": [list(p) for p in sorted(per_p)],
        "native_gates": {"single_qubit": ["rz", "sx", "x"], "two_qubit": two_qubit_gate},
        "durations": durations,
        "qubits": {"default": q_default, "overrides": q_over},
        "couplers": {
            "default": p_default,
            "overrides": [{"pair": list(p), **v} for p, v in sorted(p_over.items())],
        },
    }
    rows: tuple[DriftRow, ...] = ()
    if len(tables) >= 2:
        rows = drift_rows(tables)
        mapping["drift"] = _drift_block(rows, notes)
    else:
        notes.append(
            "drift: one table, no day-to-day spread measured; the default spreads (common "
            "practice) apply to assess --drift"
        )
    notes += [
        "the single-qubit gate_error is used for both sx and x (one value per qubit)",
        "over_rotation_fraction and zz_angle_rad: not in calibration tables, left at 0 (no "
        "coherent error: optimistic if the device has any)",
        "readout_crosstalk: not in calibration tables, none (independent readout errors: "
        "optimistic if the device's readout errors are correlated)",
        "repetition_delay_us: not in calibration tables; the rehearse job's default applies",
    ]
    header = [
        f"Imported by 'noiselab profile import' from {len(tables)} calibration table(s):",
        f"  {sources}",
        "Values: per qubit and pair the median over the tables; durations the longest.",
        "Not in the tables (left out): over-rotation, ZZ angle, readout crosstalk.",
    ]
    text = _yaml_text(mapping, header)
    profile = profile_from_mapping(parse_yaml_mapping(text, source, "device profile"), source)
    return ImportedProfile(
        mapping=mapping,
        text=text,
        profile=profile,
        notes=tuple(notes),
        drift=rows,
        tables=len(tables),
        warnings=tuple(profile_warnings(profile)),
    )
