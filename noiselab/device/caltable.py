"""Calibration tables (a format of our own): one device calibration ("day") as measured values.

A table file holds two tables: the **qubit table** (one row per qubit) and the **pair table**
(one row per coupled pair; may be left out on a one-qubit device). Every column name carries its
unit, ``<quantity>_<unit>``; each quantity column is required once, in one of its units:

====================  ===========================  =========================================
column                units                        meaning
====================  ===========================  =========================================
``qubit``             (integer id 0..n-1)          qubit table key
``t1``, ``t2``        ``us``, ``ns``, ``ms``       relaxation and dephasing (Hahn echo) times
``gate_error``        ``prob``, ``pct``            single-qubit (sx, x) average infidelity
``gate_duration``     ``ns``, ``us``               single-qubit gate duration
``flip_0to1``         ``prob``, ``pct``            P(read 1 | prepared 0)
``flip_1to0``         ``prob``, ``pct``            P(read 0 | prepared 1)
``readout_duration``  ``ns``, ``us``               measurement duration
``pair``              (``a-b``)                    pair table key: the two qubit ids
``gate_error``        ``prob``, ``pct``            two-qubit gate average infidelity
``gate_duration``     ``ns``, ``us``               two-qubit gate duration
====================  ===========================  =========================================

An empty cell (JSON ``null``) means "not measured"; ``nan``, text and out-of-range values are
refused with the file, row and column.

**CSV** (``.csv``): the qubit table, an empty line, the pair table; each table starts with its
header row (first column ``qubit`` or ``pair``); lines starting with ``#`` are comments. Rows
are named by their line number.

**JSON** (``.json``)::

    {"format": "noiselab-calibration-1", "note": "optional text",
     "qubits": [{"qubit": 0, "t1_us": 120.5, ...}, ...],
     "pairs":  [{"pair": "0-1", "gate_error_prob": 0.008, "gate_duration_ns": 300}, ...]}

Rows are named ``qubits[i]`` / ``pairs[i]``. Values are converted to the profile's units
(``t1_us``, ``duration_ns``, probabilities); bounds are the profile's.

(Somewhat over 400 lines on purpose: the format, both readers and every refusal stay together.)
"""

from __future__ import annotations

import csv
import io
import json
import math
import re
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from decimal import Decimal
from pathlib import Path
from typing import Any

from noiselab.common.errors import input_error, quote
from noiselab.common.reading import read_input_text
from noiselab.device.channel_registry import (
    MAX_READOUT_ERROR,
    MAX_SINGLE_QUBIT_ERROR,
    MAX_TWO_QUBIT_ERROR,
)
from noiselab.device.profile import (
    MAX_COHERENCE_US,
    MAX_DURATION_NS,
    MAX_QUBITS,
    MIN_COHERENCE_US,
    MIN_DURATION_NS,
)

JSON_FORMAT = "noiselab-calibration-1"
# factors to the canonical unit, as decimal text: a cell is converted in decimal arithmetic and
# rounded once (0.031 pct is 0.00031, not 0.00031000000000000005)
_TIME_US = {"us": "1", "ns": "0.001", "ms": "1000"}
_DURATION_NS = {"ns": "1", "us": "1000"}
_PROB = {"prob": "1", "pct": "0.01"}


@dataclass(frozen=True)
class Quantity:
    """One measured quantity: its column stem, units (factor to the canonical unit), bounds."""

    stem: str
    units: Mapping[str, str]
    lo: float
    hi: float

    def allowed_columns(self) -> str:
        return " or ".join(f"{self.stem}_{u}" for u in self.units)

    def bounds_text(self, unit: str) -> str:
        f = float(self.units[unit])
        lo, hi = self.lo / f, self.hi / f
        return f">= {lo:g} and <= {hi:g} {unit}"


QUBIT_QUANTITIES: tuple[Quantity, ...] = (
    Quantity("t1", _TIME_US, MIN_COHERENCE_US, MAX_COHERENCE_US),
    Quantity("t2", _TIME_US, MIN_COHERENCE_US, MAX_COHERENCE_US),
    Quantity("gate_error", _PROB, 0.0, MAX_SINGLE_QUBIT_ERROR),
    Quantity("gate_duration", _DURATION_NS, MIN_DURATION_NS, MAX_DURATION_NS),
    Quantity("flip_0to1", _PROB, 0.0, MAX_READOUT_ERROR),
    Quantity("flip_1to0", _PROB, 0.0, MAX_READOUT_ERROR),
    Quantity("readout_duration", _DURATION_NS, MIN_DURATION_NS, MAX_DURATION_NS),
)
PAIR_QUANTITIES: tuple[Quantity, ...] = (
    Quantity("gate_error", _PROB, 0.0, MAX_TWO_QUBIT_ERROR),
    Quantity("gate_duration", _DURATION_NS, MIN_DURATION_NS, MAX_DURATION_NS),
)


@dataclass(frozen=True)
class Value:
    """One cell in canonical units (``None``: empty, not measured) and where it was read."""

    value: float | None
    where: str  # "line 4, column t1_ns" or "qubits[3].t1_ns"


@dataclass(frozen=True)
class CalibrationTable:
    """One calibration: per qubit and per pair (a < b), quantity stem -> :class:`Value`."""

    source: str
    qubits: Mapping[int, Mapping[str, Value]]
    pairs: Mapping[tuple[int, int], Mapping[str, Value]]
    rows: Mapping[Any, str]  # qubit id or pair -> where its key cell is, for messages


@dataclass(frozen=True)
class _Table:
    key: str  # "qubit" or "pair"
    quantities: tuple[Quantity, ...]


_TABLES = {"qubit": _Table("qubit", QUBIT_QUANTITIES), "pair": _Table("pair", PAIR_QUANTITIES)}
_PAIR_RE = re.compile(r"\s*(\d{1,6})\s*-\s*(\d{1,6})\s*")


def allowed_columns(kind: str) -> str:
    """The allowed header of a ``qubit`` or ``pair`` table, for messages."""
    t = _TABLES[kind]
    return ", ".join([t.key, *(q.allowed_columns() for q in t.quantities)])


def _columns(
    src: str, kind: str, names: list[str], where: str
) -> dict[str, tuple[str, str, Quantity]]:
    """Map each quantity stem to (column name, unit, Quantity); refuse unknown or missing."""
    table = _TABLES[kind]
    found: dict[str, tuple[str, str, Quantity]] = {}
    seen: set[str] = set()
    for name in names:
        if name in seen:
            raise input_error(src, f"{where}, column {name}", "column repeats", "each column once")
        seen.add(name)
        if name == table.key:
            continue
        q = next((q for q in table.quantities if name.startswith(q.stem + "_")), None)
        q = q if q is not None else next((q for q in table.quantities if name == q.stem), None)
        if q is None:
            raise input_error(
                src,
                f"{where}, column {quote(name)}",
                f"unknown column in the {kind} table",
                allowed_columns(kind),
            )
        unit = name[len(q.stem) + 1 :]
        if unit not in q.units:
            problem = "no unit in the column name" if not unit else f"unknown unit {quote(unit)}"
            raise input_error(src, f"{where}, column {quote(name)}", problem, q.allowed_columns())
        if q.stem in found:
            raise input_error(
                src,
                f"{where}, column {name}",
                f"{q.stem} is already given as {found[q.stem][0]}",
                f"one of {q.allowed_columns()}",
            )
        found[q.stem] = (name, unit, q)
    if table.key not in names:
        raise input_error(src, where, f"no column {table.key!r}", allowed_columns(kind))
    for q in table.quantities:
        if q.stem not in found:
            raise input_error(src, where, f"column for {q.stem} missing", q.allowed_columns())
    return found


class JsonConstant(str):
    """NaN, Infinity or -Infinity as written in a JSON file (refused as not finite)."""


def _number(
    src: str, where: str, raw: Any, q: Quantity, unit: str, text_cells: bool
) -> float | None:
    """A cell as a float in canonical units; None for an empty cell."""
    allowed = f"a number {q.bounds_text(unit)}, or an empty cell"
    if isinstance(raw, JsonConstant):
        raise input_error(src, where, f"{quote(str(raw))} is not a finite number", allowed)
    if raw is None or (text_cells and isinstance(raw, str) and not raw.strip()):
        return None
    kinds = int | float | str if text_cells else int | float
    if isinstance(raw, bool) or not isinstance(raw, kinds):
        raise input_error(src, where, f"{quote(raw)} is not a number", allowed)
    try:
        x = float(raw)
    except (ValueError, OverflowError):
        raise input_error(src, where, f"{quote(raw)} is not a number", allowed) from None
    if not math.isfinite(x):
        raise input_error(src, where, f"{quote(raw)} is not a finite number", allowed)
    v = float(Decimal(raw.strip() if isinstance(raw, str) else repr(x)) * Decimal(q.units[unit]))
    if not q.lo <= v <= q.hi:
        raise input_error(src, where, f"{x:g} {unit} is out of range", allowed)
    return v


def _key(src: str, kind: str, where: str, raw: Any) -> Any:
    """Qubit id (int) or pair (a, b) with a < b."""
    if kind == "qubit":
        text = str(raw).strip() if isinstance(raw, int | str) and not isinstance(raw, bool) else ""
        if not text.isdigit() or len(text) > 6:
            raise input_error(src, where, f"{quote(raw)} is not a qubit id", "an integer >= 0")
        return int(text)
    if isinstance(raw, list) and len(raw) == 2 and all(type(x) is int for x in raw):
        a, b = raw
    else:
        m = _PAIR_RE.fullmatch(raw) if isinstance(raw, str) else None
        if m is None:
            raise input_error(src, where, f"{quote(raw)} is not a pair", "two qubit ids like 0-1")
        a, b = int(m.group(1)), int(m.group(2))
    if a == b:
        raise input_error(src, where, f"pair {a}-{b} links a qubit to itself", "two qubits")
    return (min(a, b), max(a, b))


def _rows(
    src: str,
    kind: str,
    header_where: str,
    names: list[str],
    cells: Iterator[tuple[str, Mapping[str, Any]]],
    col_where: Any,
    text_cells: bool,
) -> tuple[dict[Any, dict[str, Value]], dict[Any, str]]:
    cols = _columns(src, kind, names, header_where)
    out: dict[Any, dict[str, Value]] = {}
    rows: dict[Any, str] = {}
    row_names: dict[Any, str] = {}
    for row_name, row in cells:
        key_where = col_where(row_name, kind)
        key = _key(src, kind, key_where, row.get(kind))
        if key in out:
            shown = key if kind == "qubit" else f"{key[0]}-{key[1]}"
            raise input_error(
                src, key_where, f"{kind} {shown} repeats {row_names[key]}", f"each {kind} once"
            )
        values: dict[str, Value] = {}
        for stem, (name, unit, q) in cols.items():
            where = col_where(row_name, name)
            values[stem] = Value(_number(src, where, row.get(name), q, unit, text_cells), where)
        if kind == "qubit":
            t1, t2 = values["t1"].value, values["t2"].value
            if t1 is not None and t2 is not None and t2 > 2.0 * t1 * (1 + 1e-12):
                raise input_error(
                    src,
                    values["t2"].where,
                    f"T2 = {t2:g} us exceeds 2 T1 = {2 * t1:g} us",
                    "T2 <= 2 T1 (Nielsen & Chuang sec. 8.3)",
                )
        out[key] = values
        rows[key] = key_where
        row_names[key] = row_name
    return out, rows


def _finish(
    src: str,
    qubits: dict[int, dict[str, Value]] | None,
    pairs: dict[tuple[int, int], dict[str, Value]] | None,
    rows: dict[Any, str],
    what: str,
) -> CalibrationTable:
    if not qubits:
        raise input_error(src, what, "no qubit table (or no rows in it)", allowed_columns("qubit"))
    n = len(qubits)
    if n > MAX_QUBITS:
        raise input_error(src, what, f"{n} qubits", f"at most {MAX_QUBITS}")
    for q in sorted(qubits):
        if q >= n:
            missing = sorted(set(range(n)) - set(qubits))
            raise input_error(
                src,
                rows[q],
                f"qubit {q} leaves a gap (missing: {', '.join(map(str, missing[:5]))})",
                f"ids 0..{n - 1} for {n} qubits",
            )
    pairs = pairs or {}
    for pair in pairs:
        for q in pair:
            if q not in qubits:
                raise input_error(
                    src,
                    rows[pair],
                    f"qubit {q} is not in the qubit table",
                    f"qubits 0..{n - 1}",
                )
    if n >= 2 and not pairs:
        raise input_error(src, what, "no pair table (or no rows in it)", allowed_columns("pair"))
    return CalibrationTable(src, qubits, pairs, rows)


def _read_csv(src: str, text: str) -> CalibrationTable:
    reader = csv.reader(io.StringIO(text))
    tables: dict[str, Any] = {}
    lines: list[tuple[int, list[str]]] = []
    for cells in reader:
        lines.append((reader.line_num, [c.strip() for c in cells]))

    def col_where(row_name: str, column: str) -> str:
        return f"{row_name}, column {column}"

    i = 0
    while i < len(lines):
        line_no, cells = lines[i]
        if not any(cells) or cells[0].startswith("#"):
            i += 1
            continue
        kind = cells[0]
        if kind not in _TABLES:
            raise input_error(
                src,
                f"line {line_no}",
                f"expected a header row, got {quote(cells[0])} first",
                "a header row starting with qubit (qubit table) or pair (pair table)",
            )
        if kind in tables:
            raise input_error(
                src, f"line {line_no}", f"a second {kind} table", "one qubit and one pair table"
            )
        names = cells
        body: list[tuple[str, dict[str, str]]] = []
        i += 1
        while i < len(lines):
            row_no, row = lines[i]
            if not any(row):
                break
            i += 1
            if row[0].startswith("#"):
                continue
            if len(row) != len(names):
                raise input_error(
                    src,
                    f"line {row_no}",
                    f"{len(row)} cells, the header (line {line_no}) has {len(names)}",
                    "one cell per column (an empty cell for a missing value)",
                )
            body.append((f"line {row_no}", dict(zip(names, row, strict=True))))
        tables[kind] = _rows(
            src, kind, f"line {line_no}", names, iter(body), col_where, text_cells=True
        )
    qubits, q_rows = tables.get("qubit", ({}, {}))
    pairs, p_rows = tables.get("pair", ({}, {}))
    return _finish(src, qubits, pairs, {**q_rows, **p_rows}, "(file)")


def _no_duplicate_keys(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for k, v in pairs:
        if k in out:
            raise ValueError(f"key {quote(k)} repeats")
        out[k] = v
    return out


def _read_json(src: str, text: str) -> CalibrationTable:
    try:
        data = json.loads(text, object_pairs_hook=_no_duplicate_keys, parse_constant=JsonConstant)
    except (ValueError, RecursionError) as exc:
        raise input_error(src, None, f"not valid JSON ({one_reason(exc)})", "JSON text") from None
    if not isinstance(data, dict):
        raise input_error(src, None, "top level is not an object", "a JSON object")
    allowed_top = ("format", "note", "qubits", "pairs")
    for k in data:
        if k not in allowed_top:
            raise input_error(src, quote(k), "unknown key", ", ".join(allowed_top))
    if data.get("format") != JSON_FORMAT:
        raise input_error(src, "format", f"{quote(data.get('format'))}", repr(JSON_FORMAT))
    if not isinstance(data.get("note", ""), str):
        raise input_error(src, "note", "not text", "a string")

    def col_where(row_name: str, column: str) -> str:
        return f"{row_name}.{column}"

    tables: dict[str, Any] = {}
    for kind, section in (("qubit", "qubits"), ("pair", "pairs")):
        rows = data.get(section, [])
        if not isinstance(rows, list):
            raise input_error(src, section, "not a list", "a list of objects, one per row")
        for j, row in enumerate(rows):
            if not isinstance(row, dict):
                raise input_error(src, f"{section}[{j}]", "not an object", "one object per row")
            _columns(src, kind, list(row), f"{section}[{j}]")
            if set(row) != set(rows[0]):
                raise input_error(
                    src,
                    f"{section}[{j}]",
                    f"columns differ from {section}[0]",
                    ", ".join(rows[0]),
                )
        names = list(rows[0]) if rows else [kind]
        body = ((f"{section}[{j}]", row) for j, row in enumerate(rows))
        tables[kind] = _rows(src, kind, f"{section}[0]", names, body, col_where, text_cells=False)
    qubits, q_rows = tables["qubit"]
    pairs, p_rows = tables["pair"]
    return _finish(src, qubits, pairs, {**q_rows, **p_rows}, "qubits")


def one_reason(exc: BaseException) -> str:
    return " ".join(str(exc).split())[:120] or type(exc).__name__


def read_calibration_table(path: str | Path) -> CalibrationTable:
    """Read one calibration table file (``.csv`` or ``.json``); one-line InputError on bad input."""
    src = str(path)
    suffix = Path(path).suffix.lower()
    if suffix not in (".csv", ".json"):
        raise input_error(
            src, None, f"unknown table format {quote(suffix or '(none)')}", ".csv or .json"
        )
    text = read_input_text(path, what="calibration table")
    if text.startswith("\ufeff"):  # a byte-order mark from a spreadsheet export
        text = text[1:]
    return _read_csv(src, text) if suffix == ".csv" else _read_json(src, text)
