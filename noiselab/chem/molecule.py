"""Molecule specification and its electronic problem (PySCF integrals, HF and exact energies).

Energies in Hartree (``_ha``), geometry in Angstrom. Integrals are in the molecular-orbital basis of
the (RO)HF reference, restricted to the active space, two-electron integrals in chemists' notation
``h2[p, q, r, s] = (pq|rs)``. The frozen core (every doubly occupied orbital below the active space)
is folded into ``e_core_ha`` and into the one-electron integrals (PySCF ``CASCI.get_h1eff``).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping
from dataclasses import dataclass
from math import comb
from typing import Any

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, ValidationError, ValidationInfo, field_validator
from pyscf import ao2mo, fci, gto, mcscf, scf
from pyscf.data import elements

from noiselab.common.errors import InputError, ProblemTooLargeError, from_validation_error

Atom = tuple[str, float, float, float]

_BASIS_HINT = "a PySCF basis name such as sto-3g, 6-31g, cc-pvdz"
MAX_DETERMINANTS = 20_000_000
#: Atoms per molecule: an exact reference energy is out of reach long before this.
MAX_ATOMS = 200
#: Largest coordinate magnitude (Angstrom): a molecule this wide is separate fragments, and a
#: larger number is a unit typo (pm, bohr) or worse.
MAX_COORDINATE_ANGSTROM = 1000.0
#: Basis functions of the whole molecule: Hartree-Fock holds about N**4 bytes of two-electron
#: integrals (500: 62 GB) and any exact reference then needs a small active space anyway.
MAX_BASIS_FUNCTIONS = 500
#: Most negative charge: more than 10 extra electrons are not bound by any molecule.
MIN_CHARGE = -10


def _element_numbers() -> dict[str, int]:
    return {sym.upper(): z for z, sym in enumerate(elements.ELEMENTS) if z > 0}


def _parse_geometry(value: Any) -> tuple[Atom, ...]:
    """Accept ``"H 0 0 0; H 0 0 0.74"`` or ``[[symbol, x, y, z], ...]``; return a tuple of atoms."""
    if isinstance(value, str):
        rows: list[list[Any]] = [
            part.replace(",", " ").split() for part in value.replace("\n", ";").split(";")
        ]
        rows = [r for r in rows if r]
    elif isinstance(value, list | tuple):
        rows = [list(r) if isinstance(r, list | tuple) else [r] for r in value]
    else:
        raise ValueError(
            "expected an atom string 'H 0 0 0; H 0 0 0.74' or a list of [symbol, x, y, z]"
        )
    if not rows:
        raise ValueError("no atoms given; allowed: at least one atom")
    if len(rows) > MAX_ATOMS:
        raise ValueError(
            f"{len(rows)} atoms; allowed: at most {MAX_ATOMS} (an exact reference energy "
            "is out of reach far below that)"
        )
    numbers = _element_numbers()
    atoms: list[Atom] = []
    for i, row in enumerate(rows):
        if len(row) != 4:
            raise ValueError(
                f"atom {i}: expected symbol and three coordinates in Angstrom, got {row!r}"
            )
        symbol = str(row[0]).strip()
        if symbol.upper() not in numbers:
            raise ValueError(
                f"atom {i}: unknown element {symbol!r}; allowed: element symbols H..Og"
            )
        try:
            xyz = [float(c) for c in row[1:]]
        except (TypeError, ValueError):
            raise ValueError(
                f"atom {i}: coordinates must be numbers (Angstrom), got {row[1:]!r}"
            ) from None
        if not all(np.isfinite(xyz)):
            raise ValueError(f"atom {i}: coordinates must be finite numbers (Angstrom)")
        if max(abs(c) for c in xyz) > MAX_COORDINATE_ANGSTROM:
            raise ValueError(
                f"atom {i}: coordinate {max(xyz, key=abs):g} Angstrom; allowed: at most "
                f"{MAX_COORDINATE_ANGSTROM:g} in magnitude (wider is not one molecule; "
                "coordinates are in Angstrom)"
            )
        atoms.append((symbol.capitalize(), xyz[0], xyz[1], xyz[2]))
    xyz_all = np.array([a[1:] for a in atoms], dtype=float)
    dist = np.linalg.norm(xyz_all[:, None, :] - xyz_all[None, :, :], axis=-1)
    close = np.argwhere(np.triu(dist < 0.1, k=1))
    if len(close):
        j, i = (int(v) for v in close[0])
        raise ValueError(f"atoms {j} and {i} are closer than 0.1 Angstrom")
    return tuple(atoms)


def _total_electrons(atoms: tuple[Atom, ...], charge: int) -> int:
    numbers = _element_numbers()
    return sum(numbers[a[0].upper()] for a in atoms) - charge


class ActiveSpace(BaseModel):
    """Active electrons and spatial orbitals; the doubly occupied orbitals below are frozen."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    electrons: int = Field(ge=0)
    orbitals: int = Field(ge=1)


class MoleculeSpec(BaseModel):
    """atoms (Angstrom), basis, charge, spin (2S = N_alpha - N_beta), active space."""

    model_config = ConfigDict(extra="forbid", frozen=True, validate_default=True)

    geometry: tuple[Atom, ...]
    basis: str = "sto-3g"
    charge: int = Field(default=0, ge=MIN_CHARGE)
    spin: int = Field(default=0, ge=0)
    active_space: ActiveSpace | None = None
    symmetry: bool = False

    @field_validator("geometry", mode="before")
    @classmethod
    def _check_geometry(cls, value: Any) -> tuple[Atom, ...]:
        return _parse_geometry(value)

    @field_validator("basis")
    @classmethod
    def _check_basis(cls, value: str, info: ValidationInfo) -> str:
        atoms = info.data.get("geometry")
        symbols = sorted({a[0] for a in atoms}) if atoms else ["H"]
        for symbol in symbols:
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    loaded = gto.basis.load(value, symbol)
            except Exception:  # PySCF raises several types for an unknown name
                loaded = None
            if not loaded:
                raise ValueError(
                    f"unknown basis {value!r} for element {symbol}; allowed: {_BASIS_HINT}"
                )
        return value

    @field_validator("spin")
    @classmethod
    def _check_spin(cls, value: int, info: ValidationInfo) -> int:
        atoms = info.data.get("geometry")
        charge = info.data.get("charge")
        if atoms is None or charge is None:
            return value
        n_elec = _total_electrons(atoms, charge)
        if n_elec < 1:
            raise ValueError(
                f"charge {charge} leaves {n_elec} electrons; allowed: at least 1 electron"
            )
        if value > n_elec or (n_elec - value) % 2:
            parity = "even" if n_elec % 2 == 0 else "odd"
            raise ValueError(
                f"{n_elec} electrons (an {parity} count) cannot have spin 2S={value}; "
                f"allowed: spin with the parity of the electron count, at most {n_elec}"
            )
        return value

    @field_validator("active_space")
    @classmethod
    def _check_active_space(
        cls, value: ActiveSpace | None, info: ValidationInfo
    ) -> ActiveSpace | None:
        data = info.data
        if value is None or any(k not in data for k in ("geometry", "basis", "charge", "spin")):
            return value
        n_elec = _total_electrons(data["geometry"], data["charge"])
        spin = data["spin"]
        n_mo = _count_orbitals(data["geometry"], data["basis"], data["charge"], spin)
        ne, no = value.electrons, value.orbitals
        if ne > n_elec:
            raise ValueError(
                f"{ne} active electrons but the molecule has {n_elec}; allowed: at most {n_elec}"
            )
        n_core_elec = n_elec - ne
        if n_core_elec % 2:
            raise ValueError(
                f"{n_core_elec} core electrons is odd; "
                f"allowed: active electrons with the parity of {n_elec}"
            )
        if ne < spin:
            raise ValueError(
                f"{ne} active electrons cannot carry spin 2S={spin}; allowed: at least {spin}"
            )
        n_core = n_core_elec // 2
        if n_core + no > n_mo:
            raise ValueError(
                f"{no} active orbitals above {n_core} core orbitals exceed the {n_mo} "
                f"orbitals of the basis; allowed: at most {n_mo - n_core}"
            )
        n_alpha = (ne + spin) // 2
        if n_alpha > no:
            raise ValueError(
                f"{ne} active electrons (spin 2S={spin}) do not fit in {no} orbitals; "
                f"allowed: at least {n_alpha} orbitals"
            )
        return value


def _count_orbitals(atoms: tuple[Atom, ...], basis: str, charge: int, spin: int) -> int:
    mol = _build_mole(atoms, basis, charge, spin, symmetry=False)
    return int(mol.nao_nr())


def count_orbitals(spec: MoleculeSpec) -> int:
    """Spatial orbitals the qubit Hamiltonian will have (active ones, or all of the basis)."""
    if spec.active_space is not None:
        return spec.active_space.orbitals
    return _count_orbitals(spec.geometry, spec.basis, spec.charge, spec.spin)


@dataclass(frozen=True)
class MoleculeSizes:
    """Sizes known before any integral: basis functions, active orbitals and electrons."""

    n_basis: int
    n_orb: int
    n_alpha: int
    n_beta: int

    @property
    def n_determinants(self) -> int:
        """Determinants of the exact (FCI/CASCI) problem in the (N_alpha, N_beta) sector."""
        return _binom(self.n_orb, self.n_alpha) * _binom(self.n_orb, self.n_beta)


def molecule_sizes(spec: MoleculeSpec) -> MoleculeSizes:
    """Basis functions, active orbitals and active alpha/beta electrons of ``spec`` (cheap:
    builds the PySCF molecule, computes no integral)."""
    n_basis = _count_orbitals(spec.geometry, spec.basis, spec.charge, spec.spin)
    n_elec = _total_electrons(spec.geometry, spec.charge)
    if spec.active_space is None:
        n_orb, ne = n_basis, n_elec
    else:
        n_orb, ne = spec.active_space.orbitals, spec.active_space.electrons
    return MoleculeSizes(n_basis, n_orb, (ne + spec.spin) // 2, (ne - spec.spin) // 2)


def _build_mole(atoms: tuple[Atom, ...], basis: str, charge: int, spin: int, symmetry: bool) -> Any:
    return gto.M(
        atom=[[a[0], (a[1], a[2], a[3])] for a in atoms],
        basis=basis,
        charge=charge,
        spin=spin,
        unit="Angstrom",
        symmetry=symmetry,
        verbose=0,
    )


def molecule_from_mapping(
    data: Mapping[str, Any], source: str | None = None, prefix: str = ""
) -> MoleculeSpec:
    """Validate a mapping (e.g. a YAML section) into a :class:`MoleculeSpec`.

    Bad input raises a one-line InputError ``<source>: <prefix>.<key>: <problem>; allowed: ...``.
    """
    try:
        return MoleculeSpec.model_validate(dict(data))
    except ValidationError as exc:
        raise from_validation_error(exc, source, prefix=prefix, model=MoleculeSpec) from None


@dataclass(frozen=True, eq=False)
class ElectronicProblem:
    """Active-space electronic Hamiltonian in the (RO)HF molecular-orbital basis (Hartree).

    ``H = e_core_ha + sum_pq h1[p,q] E_pq + 1/2 sum_pqrs h2[p,q,r,s] (E_pq E_rs - delta_qr E_ps)``
    with spin-summed excitation operators E_pq; ``h2`` in chemists' notation (pq|rs).
    ``exact_energy_ha`` is the lowest eigenvalue in the (N_alpha, N_beta) sector (FCI without an
    active space, CASCI with one); ``exact_s2`` is <S^2> of that state.
    """

    spec: MoleculeSpec
    n_orb: int
    n_alpha: int
    n_beta: int
    n_core_orbitals: int
    n_basis_orbitals: int
    h1: np.ndarray
    h2: np.ndarray
    e_core_ha: float
    nuclear_repulsion_ha: float
    hf_energy_ha: float
    exact_energy_ha: float
    exact_s2: float

    @property
    def n_electrons(self) -> int:
        """Active electrons."""
        return self.n_alpha + self.n_beta


def _readonly(a: np.ndarray) -> np.ndarray:
    a = np.ascontiguousarray(a, dtype=float)
    a.setflags(write=False)
    return a


def compute_problem(spec: MoleculeSpec, *, exact: bool = True) -> ElectronicProblem:
    """Run (RO)HF, build active-space integrals and the exact (FCI/CASCI) energy with PySCF.

    ``exact=False``: no FCI (``exact_energy_ha`` and ``exact_s2`` are NaN, no determinant cap);
    for benchmarks of sizes FCI cannot reach, never for a study, whose verdict needs it."""
    mol = _build_mole(spec.geometry, spec.basis, spec.charge, spec.spin, spec.symmetry)
    n_elec = int(mol.nelectron)
    n_mo = int(mol.nao_nr())
    if spec.active_space is None:
        n_cas, ne_cas = n_mo, n_elec
    else:
        n_cas, ne_cas = spec.active_space.orbitals, spec.active_space.electrons
    n_alpha = (ne_cas + spec.spin) // 2
    n_beta = (ne_cas - spec.spin) // 2
    n_core = (n_elec - ne_cas) // 2
    n_det = _binom(n_cas, n_alpha) * _binom(n_cas, n_beta)
    if exact and n_det > MAX_DETERMINANTS:
        raise ProblemTooLargeError(
            f"molecule.active_space: {n_cas} orbitals give {n_det} determinants for the "
            "exact energy; "
            f"allowed: at most {MAX_DETERMINANTS} (choose a smaller active_space)"
        )

    from noiselab.common.memory import available_memory_bytes

    mf = scf.RHF(mol) if spec.spin == 0 else scf.ROHF(mol)
    # PySCF keeps integrals in memory up to max_memory (MB; default 4000) and goes out of core
    # beyond: give it the memory this process may use, not a fixed guess
    mf.max_memory = max(200.0, available_memory_bytes() / 2**20)
    mf.conv_tol = 1e-12
    mf.max_cycle = 200
    mf.kernel()
    if not mf.converged:
        mf = mf.newton()
        mf.kernel()
    if not mf.converged:
        raise InputError(
            "molecule: Hartree-Fock did not converge; allowed: a geometry, charge and spin of a "
            "bound molecule (check the units, Angstrom, and the spin)"
        )

    if int(mf.mo_coeff.shape[1]) < n_core + n_cas:
        raise InputError(
            "molecule.basis: linearly dependent for this geometry (fewer orbitals than "
            "requested); allowed: a smaller basis or atoms further apart"
        )

    # Doubly occupied first, then singly occupied, then virtual (stable within each class), so the
    # active space starts right after the core and the HF determinant fills its lowest orbitals.
    order = np.argsort(-np.asarray(mf.mo_occ), kind="stable")
    mo = np.asarray(mf.mo_coeff)[:, order]

    cas = mcscf.CASCI(mf, n_cas, (n_alpha, n_beta))
    cas.mo_coeff = mo
    h1, e_core = cas.get_h1eff(mo)
    h2 = ao2mo.restore(1, cas.get_h2eff(mo), n_cas)
    exact_ha, exact_s2 = math.nan, math.nan
    if exact:
        exact_ha, exact_s2 = _fci(h1, h2, e_core, n_cas, n_alpha, n_beta, n_det)

    return ElectronicProblem(
        spec=spec,
        n_orb=n_cas,
        n_alpha=n_alpha,
        n_beta=n_beta,
        n_core_orbitals=n_core,
        n_basis_orbitals=n_mo,
        h1=_readonly(h1),
        h2=_readonly(h2),
        e_core_ha=float(e_core),
        nuclear_repulsion_ha=float(mol.energy_nuc()),
        hf_energy_ha=float(mf.e_tot),
        exact_energy_ha=exact_ha,
        exact_s2=exact_s2,
    )


def _fci(
    h1: np.ndarray, h2: np.ndarray, e_core: float, n_cas: int, n_alpha: int, n_beta: int, n_det: int
) -> tuple[float, float]:
    """(lowest FCI energy in Ha, its <S^2>) of the active space."""
    solver = fci.direct_spin1.FCI()
    solver.conv_tol = 1e-12
    solver.max_cycle = 500
    solver.nroots = min(3, n_det)
    energies, vecs = solver.kernel(h1, h2, n_cas, (n_alpha, n_beta), ecore=e_core)
    energies = np.atleast_1d(energies)
    vecs = vecs if isinstance(vecs, list) else [vecs]
    k = int(np.argmin(energies))
    s2, _ = fci.spin_op.spin_square(vecs[k], n_cas, (n_alpha, n_beta))
    return float(energies[k]), float(s2)


def _binom(n: int, k: int) -> int:
    return comb(n, k)
