"""A qubit operator from a JSON file of our own, used as written (no encoding).

Qubit-operator file (``noiselab-qubit-operator-1``)::

    {"format": "noiselab-qubit-operator-1", "note": "optional text",
     "num_qubits": 4,
     "terms": {"IIII": -0.0988, "IIIZ": 0.1712, ...},      # Pauli label -> real coefficient (Ha)
     "reference_bitstring": "0011",                         # the trial circuit's starting state
     "sector": {"number": {"terms": {...}, "value": 2},     # optional: number and Sz operators
                "sz": {"terms": {...}, "value": 0}},        #   (I/Z strings) and their values
     "exact_energy_ha": -1.137}                             # optional if "sector" is given

Labels and bitstrings in qiskit's order: the rightmost character is qubit 0. With ``sector``
the exact energy is the lowest eigenvalue in that sector (and must agree with an
``exact_energy_ha`` given beside it to 1e-6 Ha); without it, ``exact_energy_ha`` is taken as
given. Every file is read through ``common.reading.read_input_bytes``; the cache keys carry
each file's SHA-256.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import re
from pathlib import Path
from typing import Any

import numpy as np
from pydantic import BaseModel, ConfigDict
from qiskit.quantum_info import SparsePauliOp, Statevector

from noiselab.chem.encode import QubitProblem
from noiselab.chem.exact import MAX_EXACT_QUBITS, sector_ground_energy
from noiselab.chem.file_input import only_key, read_unchanged, resolve_file
from noiselab.common.errors import input_error, quote

OPERATOR_FORMAT = "noiselab-qubit-operator-1"
#: QubitProblem.encoding of a problem read from a qubit-operator file
OPERATOR_ENCODING = "qubit_operator"
_LABEL_RE = re.compile(r"[IXYZ]+")


class OperatorSource(BaseModel):
    """A qubit-operator file: path, content digest, qubit count."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    kind: str = "qubit_operator"
    file: str
    sha256: str
    num_qubits: int


def _no_dup(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for k, v in pairs:
        if k in out:
            raise ValueError(f"key {quote(k)} repeats")
        out[k] = v
    return out


def _load_operator_json(raw: bytes, where: str) -> dict[str, Any]:
    def refuse_constant(name: str) -> None:
        raise ValueError(f"{name} is not a finite number")

    try:
        d = json.loads(
            raw.decode("utf-8"), object_pairs_hook=_no_dup, parse_constant=refuse_constant
        )
    except (ValueError, UnicodeDecodeError, RecursionError) as exc:
        reason = " ".join(str(exc).split())[:100]
        raise input_error(where, None, f"not valid JSON ({reason})", "JSON text") from None
    if not isinstance(d, dict):
        raise input_error(where, None, "top level is not an object", "a JSON object")
    allowed = (
        "format",
        "note",
        "num_qubits",
        "terms",
        "reference_bitstring",
        "sector",
        "exact_energy_ha",
    )
    for k in d:
        if k not in allowed:
            raise input_error(where, quote(k), "unknown key", ", ".join(allowed))
    if d.get("format") != OPERATOR_FORMAT:
        raise input_error(where, "format", quote(d.get("format")), repr(OPERATOR_FORMAT))
    n = d.get("num_qubits")
    if type(n) is not int or not 1 <= n <= MAX_EXACT_QUBITS:
        raise input_error(where, "num_qubits", quote(n), f"an integer 1..{MAX_EXACT_QUBITS}")
    return d


def _pauli_sum(terms: Any, n: int, where: str, key: str, diagonal: bool = False) -> SparsePauliOp:
    if not isinstance(terms, dict) or not terms:
        raise input_error(where, key, "not a mapping of Pauli labels", '{"IZ": 0.5, ...}')
    labels, coeffs = [], []
    for label, c in terms.items():
        if len(label) != n or not _LABEL_RE.fullmatch(label):
            raise input_error(
                where,
                f"{key}.{quote(label)}",
                "not a Pauli label",
                f"{n} characters of I, X, Y, Z (qubit 0 rightmost)",
            )
        if diagonal and any(ch in "XY" for ch in label):
            raise input_error(where, f"{key}.{label}", "not diagonal", "I and Z only")
        if isinstance(c, bool) or not isinstance(c, int | float) or not math.isfinite(c):
            raise input_error(
                where,
                f"{key}.{label}",
                f"{quote(c)} is not a real number",
                "a finite real coefficient",
            )
        labels.append(label)
        coeffs.append(float(c))
    return SparsePauliOp(labels, np.asarray(coeffs, dtype=complex))


def operator_source(data: Any, base: Path, src: str) -> OperatorSource:
    """Validate ``hamiltonian: {file: FILE}``: read the file once and check it."""
    value = only_key(data, "file", src, "hamiltonian")
    path, raw = resolve_file(value, base, src, "hamiltonian.file", "qubit-operator file")
    source = OperatorSource(file=str(path), sha256=hashlib.sha256(raw).hexdigest(), num_qubits=0)
    qp = _operator_problem(raw, f"{src}: hamiltonian.file: {path}")
    return source.model_copy(update={"num_qubits": qp.num_qubits})


def operator_problem(source: OperatorSource) -> QubitProblem:
    """The :class:`QubitProblem` of a qubit-operator file (encoding ``qubit_operator``)."""
    where = f"hamiltonian.file: {source.file}"
    raw = read_unchanged(source.file, source.sha256, "qubit-operator file", where)
    return _operator_problem(raw, where)


def _operator_problem(raw: bytes, where: str) -> QubitProblem:
    d = _load_operator_json(raw, where)
    n = d["num_qubits"]
    h = _pauli_sum(d.get("terms"), n, where, "terms").simplify(atol=0.0)
    ref = d.get("reference_bitstring")
    if not isinstance(ref, str) or len(ref) != n or set(ref) - {"0", "1"}:
        raise input_error(
            where, "reference_bitstring", quote(ref), f"{n} characters 0/1 (qubit 0 rightmost)"
        )
    bits = tuple(int(ch) for ch in reversed(ref))
    e_ref = float(np.real(Statevector.from_label(ref).expectation_value(h)))
    number_op = sz_op = None
    na = nb = 0
    sector = d.get("sector")
    given = d.get("exact_energy_ha")
    if given is not None and (isinstance(given, bool) or not isinstance(given, int | float)):
        raise input_error(where, "exact_energy_ha", quote(given), "a number (Ha)")
    if sector is None and given is None:
        raise input_error(
            where,
            None,
            "neither sector nor exact_energy_ha",
            "sector (number and sz operators) or exact_energy_ha",
        )
    if sector is not None:
        if not isinstance(sector, dict) or set(sector) != {"number", "sz"}:
            raise input_error(
                where,
                "sector",
                "not {number: ..., sz: ...}",
                '{"number": {"terms": ..., "value": N}, "sz": {...}}',
            )
        ops, vals = {}, {}
        for name in ("number", "sz"):
            part = sector[name]
            if not isinstance(part, dict) or set(part) != {"terms", "value"}:
                raise input_error(
                    where,
                    f"sector.{name}",
                    "not {terms, value}",
                    '{"terms": {"IZ": ...}, "value": ...}',
                )
            ops[name] = _pauli_sum(part["terms"], n, where, f"sector.{name}.terms", True)
            v = part["value"]
            if isinstance(v, bool) or not isinstance(v, int | float):
                raise input_error(where, f"sector.{name}.value", quote(v), "a number")
            vals[name] = float(v)
        two_sz = 2.0 * vals["sz"]
        if (
            vals["number"] != round(vals["number"])
            or two_sz != round(two_sz)
            or (round(vals["number"]) + round(two_sz)) % 2
        ):
            raise input_error(
                where,
                "sector",
                f"N = {vals['number']:g}, Sz = {vals['sz']:g}",
                "whole N and half-whole Sz with N + 2 Sz even",
            )
        na = (round(vals["number"]) + round(two_sz)) // 2
        nb = round(vals["number"]) - na
        number_op, sz_op = ops["number"], ops["sz"]
    qp = QubitProblem(
        hamiltonian=SparsePauliOp(h.paulis, h.coeffs.real.astype(float)),
        num_qubits=n,
        encoding=OPERATOR_ENCODING,
        drop_fixed_parity_qubits=False,
        number_op=number_op,
        sz_op=sz_op,
        hf_bitstring=bits,
        n_alpha=na,
        n_beta=nb,
        n_orb=0,
        exact_energy_ha=float(given) if given is not None else math.nan,
        hf_energy_ha=e_ref,
        symmetries=(),
    )
    if sector is not None:
        try:
            exact = sector_ground_energy(qp)
        except (ValueError, IndexError):
            raise input_error(
                where,
                "sector",
                "no basis state has these N and Sz values",
                "values the number and sz operators take",
            ) from None
        if given is not None and abs(exact - float(given)) > 1e-6:
            raise input_error(
                where,
                "exact_energy_ha",
                f"{given!r} but the sector's lowest eigenvalue is {exact:.10g}",
                "agreement to 1e-6 Ha, or leave exact_energy_ha out",
            )
        qp = dataclasses.replace(qp, exact_energy_ha=exact)
    return qp
