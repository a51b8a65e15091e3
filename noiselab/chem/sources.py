"""Where a study's problem comes from: a molecule, an FCIDUMP file, or a qubit-operator file.

* ``molecule:`` (:class:`~noiselab.chem.molecule.MoleculeSpec`): PySCF integrals; its
  ``geometry`` may be ``{xyz: FILE}``, an XYZ file (atom count, a comment line, then one
  ``symbol x y z`` line per atom in Angstrom), read by :func:`read_xyz`.
* ``integrals: {fcidump: FILE}`` (:class:`FcidumpSource`): active-space integrals read with
  PySCF's FCIDUMP tools (``pyscf.tools.fcidump.read``); electron count and 2S from the file's
  ``NELEC`` and ``MS2``; the exact energy from FCI on those integrals; the Hartree-Fock energy
  is that of the determinant filling the lowest orbitals in the file's order.
* ``hamiltonian: {file: FILE}`` (:class:`OperatorSource`): a qubit operator in our own JSON
  format (below); it is used as written (no encoding).

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
import os
import re
import tempfile
from pathlib import Path
from typing import Any

import numpy as np
from pydantic import BaseModel, ConfigDict
from pyscf import ao2mo, fci
from pyscf.tools import fcidump as pyscf_fcidump
from qiskit.quantum_info import SparsePauliOp, Statevector

from noiselab.chem.encode import QubitProblem, encode
from noiselab.chem.exact import MAX_EXACT_QUBITS, sector_ground_energy
from noiselab.chem.molecule import (
    MAX_ATOMS,
    MAX_DETERMINANTS,
    ElectronicProblem,
    MoleculeSizes,
    MoleculeSpec,
    compute_problem,
    molecule_sizes,
)
from noiselab.common.errors import InputError, ProblemTooLargeError, input_error, quote
from noiselab.common.reading import read_input_bytes

OPERATOR_FORMAT = "noiselab-qubit-operator-1"
#: QubitProblem.encoding of a problem read from a qubit-operator file
OPERATOR_ENCODING = "qubit_operator"
#: Spatial orbitals an FCIDUMP may have (40 qubits under Jordan-Wigner, the encoder's limit).
MAX_FCIDUMP_ORBITALS = 20
_NORB_RE = re.compile(r"NORB\s*=\s*(\d+)", re.IGNORECASE)
_LABEL_RE = re.compile(r"[IXYZ]+")


class FcidumpSource(BaseModel):
    """An FCIDUMP file: path, content digest and the sizes from its header."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    kind: str = "fcidump"
    file: str
    sha256: str
    n_orb: int
    n_alpha: int
    n_beta: int


class OperatorSource(BaseModel):
    """A qubit-operator file: path, content digest, qubit count."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    kind: str = "qubit_operator"
    file: str
    sha256: str
    num_qubits: int


def _resolve(value: Any, base: Path, src: str, key: str, what: str) -> tuple[Path, bytes]:
    if not isinstance(value, str) or not value.strip():
        raise input_error(src, key, f"{quote(value)} is not a file path", f"the path of {what}")
    path = Path(value).expanduser()
    path = path if path.is_absolute() else base / path
    return path, read_input_bytes(path, what=what, source=f"{src}: {key}: {path}")


def _only_key(data: Any, key: str, src: str, section: str) -> Any:
    if not isinstance(data, dict) or set(data) != {key}:
        shown = sorted(data) if isinstance(data, dict) else type(data).__name__
        raise input_error(src, section, f"got {quote(shown)}", f"{{{key}: FILE}}")
    return data[key]


# ---- xyz ------------------------------------------------------------------------------------


def read_xyz(value: Any, base: Path, src: str, key: str = "molecule.geometry.xyz") -> list[list]:
    """Atoms ``[[symbol, x, y, z], ...]`` (Angstrom) of an XYZ file; one-line errors with line."""
    path, data = _resolve(value, base, src, key, "XYZ file")
    where = f"{src}: {key}: {path}"
    try:
        lines = data.decode("utf-8").splitlines()
    except UnicodeDecodeError:
        raise input_error(where, None, "not UTF-8 text", "an XYZ text file") from None
    head = lines[0].strip() if lines else ""
    if not head.isdigit() or not 1 <= int(head) <= MAX_ATOMS:
        raise input_error(
            where, "line 1", f"{quote(head)} is not an atom count", f"1..{MAX_ATOMS} atoms"
        )
    n = int(head)
    body = [ln for ln in lines[2:] if ln.strip()]
    if len(body) != n:
        raise input_error(
            where,
            None,
            f"{len(body)} atom lines after the comment line, line 1 says {n}",
            "as many 'symbol x y z' lines as the count",
        )
    atoms = []
    for i, ln in enumerate(lines[2:], start=3):
        parts = ln.split()
        if not parts:
            continue
        if len(parts) != 4:
            raise input_error(where, f"line {i}", f"{quote(ln.strip())}", "symbol x y z (Angstrom)")
        try:
            xyz = [float(p) for p in parts[1:]]
        except ValueError:
            raise input_error(
                where,
                f"line {i}",
                f"{quote(ln.strip())}: coordinates are not numbers",
                "symbol x y z (Angstrom)",
            ) from None
        atoms.append([parts[0], *xyz])
    return atoms


# ---- FCIDUMP ----------------------------------------------------------------------------------


def fcidump_source(data: Any, base: Path, src: str) -> FcidumpSource:
    """Validate ``integrals: {fcidump: FILE}``: read the file once, check it parses."""
    value = _only_key(data, "fcidump", src, "integrals")
    path, raw = _resolve(value, base, src, "integrals.fcidump", "FCIDUMP file")
    d = _parse_fcidump(raw, f"{src}: integrals.fcidump: {path}")
    n_orb, nelec, ms2 = d["NORB"], d["NELEC"], d.get("MS2", 0)
    return FcidumpSource(
        file=str(path),
        sha256=hashlib.sha256(raw).hexdigest(),
        n_orb=n_orb,
        n_alpha=(nelec + ms2) // 2,
        n_beta=(nelec - ms2) // 2,
    )


def _parse_fcidump(raw: bytes, where: str) -> dict[str, Any]:
    head = raw[:4000].decode("utf-8", errors="replace")
    m = _NORB_RE.search(head)
    if m is None:
        raise input_error(where, None, "no NORB in the header", "an FCIDUMP file (&FCI NORB=...)")
    if not 1 <= int(m.group(1)) <= MAX_FCIDUMP_ORBITALS:
        raise ProblemTooLargeError(
            f"{where}: NORB={m.group(1)}; allowed: 1..{MAX_FCIDUMP_ORBITALS} orbitals"
        )
    fd, tmp = tempfile.mkstemp(prefix="noiselab-fcidump-")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(raw)
        d = pyscf_fcidump.read(tmp, verbose=False)
    except (ValueError, KeyError, IndexError, RuntimeError, UnicodeDecodeError) as exc:
        reason = " ".join(str(exc).split())[:100] or type(exc).__name__
        raise input_error(
            where, None, f"not a readable FCIDUMP ({reason})", "an FCIDUMP file"
        ) from None
    finally:
        os.unlink(tmp)
    nelec, ms2, norb = d.get("NELEC"), d.get("MS2", 0), d["NORB"]
    if not isinstance(nelec, int) or not 0 < nelec <= 2 * norb:
        raise input_error(where, "NELEC", f"{quote(nelec)}", f"1..{2 * norb} electrons")
    if ms2 < 0 or ms2 > nelec or (nelec - ms2) % 2 or (nelec + ms2) // 2 > norb:
        raise input_error(
            where,
            "MS2",
            f"{ms2} with NELEC={nelec}",
            "2S >= 0 with the parity of NELEC, alpha electrons <= NORB",
        )
    h1, h2 = np.asarray(d["H1"]), np.asarray(d["H2"])
    if not (np.all(np.isfinite(h1)) and np.all(np.isfinite(h2))):
        raise input_error(where, None, "integrals that are not finite", "finite numbers")
    return d


def fcidump_problem(source: FcidumpSource) -> ElectronicProblem:
    """Integrals of the FCIDUMP file, FCI in its (N_alpha, N_beta) sector, the HF determinant."""
    where = f"integrals.fcidump: {source.file}"
    raw = read_input_bytes(source.file, what="FCIDUMP file", source=where)
    if hashlib.sha256(raw).hexdigest() != source.sha256:
        raise input_error(
            where,
            None,
            "the file changed after the study was read",
            "an unchanged file (run again)",
        )
    d = _parse_fcidump(raw, where)
    n, na, nb = source.n_orb, source.n_alpha, source.n_beta
    n_det = math.comb(n, na) * math.comb(n, nb)
    if n_det > MAX_DETERMINANTS:
        raise ProblemTooLargeError(
            f"{where}: {n_det} determinants; allowed: at most {MAX_DETERMINANTS}"
        )
    h1 = np.asarray(d["H1"], dtype=float)
    h2 = ao2mo.restore(1, np.asarray(d["H2"], dtype=float), n)
    ecore = float(d.get("ECORE", 0.0))
    solver = fci.direct_spin1.FCI()
    solver.conv_tol = 1e-12
    solver.max_cycle = 500
    solver.nroots = min(3, n_det)
    energies, vecs = solver.kernel(h1, h2, n, (na, nb), ecore=ecore)
    energies = np.atleast_1d(energies)
    vecs = vecs if isinstance(vecs, list) else [vecs]
    k = int(np.argmin(energies))
    s2, _ = fci.spin_op.spin_square(vecs[k], n, (na, nb))
    hf = np.zeros((math.comb(n, na), math.comb(n, nb)))
    hf[0, 0] = 1.0  # the determinant filling orbitals 0..na-1 and 0..nb-1
    e_hf = float(fci.direct_spin1.energy(h1, h2, hf, n, (na, nb))) + ecore
    h1.setflags(write=False)
    h2 = np.ascontiguousarray(h2)
    h2.setflags(write=False)
    return ElectronicProblem(
        spec=source,
        n_orb=n,
        n_alpha=na,
        n_beta=nb,
        n_core_orbitals=0,
        n_basis_orbitals=n,
        h1=h1,
        h2=h2,
        e_core_ha=ecore,
        nuclear_repulsion_ha=ecore,
        hf_energy_ha=e_hf,
        exact_energy_ha=float(energies[k]),
        exact_s2=float(s2),
    )


# ---- qubit-operator file ----------------------------------------------------------------------


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
    value = _only_key(data, "file", src, "hamiltonian")
    path, raw = _resolve(value, base, src, "hamiltonian.file", "qubit-operator file")
    source = OperatorSource(file=str(path), sha256=hashlib.sha256(raw).hexdigest(), num_qubits=0)
    qp = _operator_problem(raw, f"{src}: hamiltonian.file: {path}")
    return source.model_copy(update={"num_qubits": qp.num_qubits})


def operator_problem(source: OperatorSource) -> QubitProblem:
    """The :class:`QubitProblem` of a qubit-operator file (encoding ``qubit_operator``)."""
    where = f"hamiltonian.file: {source.file}"
    raw = read_input_bytes(source.file, what="qubit-operator file", source=where)
    if hashlib.sha256(raw).hexdigest() != source.sha256:
        raise input_error(
            where,
            None,
            "the file changed after the study was read",
            "an unchanged file (run again)",
        )
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


# ---- dispatch ---------------------------------------------------------------------------------


ProblemSource = MoleculeSpec | FcidumpSource | OperatorSource


def source_sizes(source: Any) -> MoleculeSizes:
    """Basis functions, orbitals and alpha/beta electrons of any problem source (cheap)."""
    if isinstance(source, FcidumpSource):
        return MoleculeSizes(source.n_orb, source.n_orb, source.n_alpha, source.n_beta)
    if isinstance(source, OperatorSource):
        return MoleculeSizes(0, (source.num_qubits + 1) // 2, 0, 0)
    return molecule_sizes(source)


def source_qubit_count(source: Any, encoding: str, drop_fixed_parity_qubits: bool) -> int:
    """Logical qubits of the study's Hamiltonian before any PySCF run."""
    if isinstance(source, OperatorSource):
        return source.num_qubits
    n = 2 * source_sizes(source).n_orb
    return n - 2 if drop_fixed_parity_qubits and encoding == "parity" else n


def build_problem(
    source: Any, encoding: str, drop_fixed_parity_qubits: bool
) -> tuple[ElectronicProblem | None, QubitProblem]:
    """(electronic problem or None, qubit problem) of any problem source."""
    if isinstance(source, OperatorSource):
        return None, operator_problem(source)
    if isinstance(source, FcidumpSource):
        problem = fcidump_problem(source)
    elif isinstance(source, MoleculeSpec):
        problem = compute_problem(source)
    else:  # pragma: no cover - the study layer validates the source
        raise InputError(f"unknown problem source {type(source).__name__}")
    return problem, encode(problem, encoding, drop_fixed_parity_qubits)
