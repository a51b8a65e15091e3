"""Where a study's problem comes from: a molecule, an FCIDUMP file, or a qubit-operator file.

* ``molecule:`` (:class:`~noiselab.chem.molecule.MoleculeSpec`): PySCF integrals; its
  ``geometry`` may be ``{xyz: FILE}``, an XYZ file (atom count, a comment line, then one
  ``symbol x y z`` line per atom in Angstrom), read by :func:`read_xyz`.
* ``integrals: {fcidump: FILE}`` (:class:`FcidumpSource`): active-space integrals read with
  PySCF's FCIDUMP tools (``pyscf.tools.fcidump.read``); electron count and 2S from the file's
  ``NELEC`` and ``MS2``; the exact energy from FCI on those integrals; the Hartree-Fock energy
  is that of the determinant filling the lowest orbitals in the file's order.
* ``hamiltonian: {file: FILE}`` (:class:`OperatorSource`): a qubit operator in our own JSON
  format (:mod:`noiselab.chem.operator_file`); it is used as written (no encoding).

The qubit-operator format is described in :mod:`noiselab.chem.operator_file`. Every file is
read through ``common.reading.read_input_bytes``; the cache keys carry each file's SHA-256.
"""

from __future__ import annotations

import hashlib
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

from noiselab.chem.encode import QubitProblem, encode
from noiselab.chem.file_input import only_key, read_unchanged, resolve_file
from noiselab.chem.molecule import (
    MAX_ATOMS,
    MAX_DETERMINANTS,
    ElectronicProblem,
    MoleculeSizes,
    MoleculeSpec,
    compute_problem,
    molecule_sizes,
)
from noiselab.chem.operator_file import OperatorSource, operator_problem
from noiselab.common.errors import InputError, ProblemTooLargeError, input_error, quote

#: Spatial orbitals an FCIDUMP may have (40 qubits under Jordan-Wigner, the encoder's limit).
MAX_FCIDUMP_ORBITALS = 20
_NORB_RE = re.compile(r"NORB\s*=\s*(\d+)", re.IGNORECASE)


class FcidumpSource(BaseModel):
    """An FCIDUMP file: path, content digest and the sizes from its header."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    kind: str = "fcidump"
    file: str
    sha256: str
    n_orb: int
    n_alpha: int
    n_beta: int


# ---- xyz ------------------------------------------------------------------------------------


def read_xyz(value: Any, base: Path, src: str, key: str = "molecule.geometry.xyz") -> list[list]:
    """Atoms ``[[symbol, x, y, z], ...]`` (Angstrom) of an XYZ file; one-line errors with line."""
    path, data = resolve_file(value, base, src, key, "XYZ file")
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
    value = only_key(data, "fcidump", src, "integrals")
    path, raw = resolve_file(value, base, src, "integrals.fcidump", "FCIDUMP file")
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
    raw = read_unchanged(source.file, source.sha256, "FCIDUMP file", where)
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
