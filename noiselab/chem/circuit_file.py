"""A trial circuit from a file: OpenQASM 3 (``.qasm``, ``.qasm3``) or QPY (``.qpy``).

Read with qiskit's loaders (``qiskit.qpy.load``; ``qiskit.qasm3.loads``, which needs the optional
``qiskit-qasm3-import`` package; without it qiskit's built-in importer
``qiskit.qasm3.loads_experimental`` is used, which reads fixed-angle circuits but not ``input``
parameters). The circuit acts on the problem's logical qubits from |0...0> (it prepares its own
reference state); it must be unitary: no measurements, resets or classical bits. Unbound
parameters are optimized noiselessly like the built-in trial circuits'.
"""

from __future__ import annotations

import hashlib
import io
import warnings
from pathlib import Path

from qiskit import QuantumCircuit, qasm3, qpy

from noiselab.common.errors import InputError, input_error, quote
from noiselab.common.reading import read_input_bytes

SUFFIXES = {".qasm": "qasm3", ".qasm3": "qasm3", ".qpy": "qpy"}
#: Operations a trial circuit from a file may hold (each one is compiled and emulated).
MAX_CIRCUIT_OPERATIONS = 20_000


def _reason(exc: BaseException) -> str:
    return " ".join(str(exc).split())[:120] or type(exc).__name__


def _load(raw: bytes, kind: str, where: str) -> QuantumCircuit:
    try:
        if kind == "qpy":
            circuits = qpy.load(io.BytesIO(raw))
            if len(circuits) != 1:
                raise input_error(where, None, f"{len(circuits)} circuits", "exactly one")
            return circuits[0]
        text = raw.decode("utf-8")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # the built-in importer says it is experimental
            try:
                return qasm3.loads(text)
            except ImportError:  # qiskit-qasm3-import is optional
                return qasm3.loads_experimental(text)
    except InputError:
        raise
    except Exception as exc:  # any loader failure is a bad file, said in one line
        hint = ""
        if kind == "qasm3" and "InputDeclaration" in str(exc):
            hint = " (input parameters need the qiskit-qasm3-import package, or use QPY)"
        raise input_error(
            where,
            None,
            f"not a readable {kind.upper()} circuit ({_reason(exc)}){hint}",
            "OpenQASM 3 (.qasm) or QPY (.qpy) of one unitary circuit",
        ) from None


def read_circuit_file(path: str | Path, where: str) -> tuple[QuantumCircuit, str]:
    """(circuit, SHA-256 of the file) of a circuit file; one-line InputError naming ``where``."""
    p = Path(path)
    kind = SUFFIXES.get(p.suffix.lower())
    if kind is None:
        raise input_error(
            where,
            None,
            f"unknown circuit format {quote(p.suffix or '(none)')}",
            ", ".join(SUFFIXES),
        )
    raw = read_input_bytes(p, what="circuit file", source=where)
    circuit = _load(raw, kind, where)
    if circuit.num_clbits or any(
        inst.operation.name in ("measure", "reset") for inst in circuit.data
    ):
        raise input_error(
            where,
            None,
            "measurements, resets or classical bits",
            "a unitary circuit (noiselab adds the measurements)",
        )
    if len(circuit.data) > MAX_CIRCUIT_OPERATIONS:
        raise input_error(
            where, None, f"{len(circuit.data)} operations", f"at most {MAX_CIRCUIT_OPERATIONS}"
        )
    return circuit, hashlib.sha256(raw).hexdigest()
