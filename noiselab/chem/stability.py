"""Hartree-Fock stability at a geometry (PySCF's stability analysis).

RHF (closed shells): internal stability (a lower RHF solution nearby) and external stability
towards a spin-unrestricted solution (the RHF -> UHF instability that appears as a bond is
stretched past the Coulson-Fischer point). When RHF is externally unstable, a UHF calculation
started from PySCF's unstable direction gives how far the broken-symmetry solution lies below
RHF. ROHF (open shells): internal stability only. The exact energy does not depend on any of
this; what changes is the reference the ansatz and the active space start from.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from pyscf import scf
from pyscf.scf import stability

from noiselab.chem.molecule import MoleculeSpec, _build_mole

#: an eigenvalue of the orbital Hessian below -this counts as an instability (PySCF's default)
STABILITY_TOL = 1e-4


@dataclass(frozen=True)
class HFStability:
    """Stability of the (RO)HF solution at one geometry (energies in mHa)."""

    reference: str  # "RHF" or "ROHF"
    internal_stable: bool
    external_stable: bool | None  # RHF -> UHF; None for ROHF (not analysed)
    uhf_below_rhf_mha: float | None  # E(RHF) - E(UHF) when externally unstable, else None

    @property
    def stable(self) -> bool:
        return self.internal_stable and self.external_stable is not False

    def words(self) -> str:
        """What changed, in a few words (empty when stable)."""
        parts = []
        if not self.internal_stable:
            parts.append(f"{self.reference} internally unstable (a lower {self.reference} exists)")
        if self.external_stable is False:
            lower = self.uhf_below_rhf_mha
            parts.append(
                "RHF unstable towards UHF"
                + ("" if lower is None else f" (UHF {lower:.3g} mHa lower)")
            )
        return "; ".join(parts)


def hf_stability(spec: MoleculeSpec) -> HFStability:
    """Run (RO)HF at ``spec``'s geometry and analyse its stability (see the module docstring)."""
    mol = _build_mole(spec.geometry, spec.basis, spec.charge, spec.spin, False)
    closed = spec.spin == 0
    mf = scf.RHF(mol) if closed else scf.ROHF(mol)
    mf.conv_tol = 1e-10
    mf.max_cycle = 200
    mf.kernel()
    if not closed:
        internal = stability.rohf_stability(
            mf, internal=True, external=False, return_status=True, tol=STABILITY_TOL
        )[2]
        return HFStability("ROHF", bool(internal), None, None)
    _, mo_ext, internal, external = stability.rhf_stability(
        mf, internal=True, external=True, return_status=True, tol=STABILITY_TOL
    )
    lower = None
    if not external:
        uhf = scf.UHF(mol)
        uhf.conv_tol = 1e-10
        uhf.max_cycle = 200
        occ = np.asarray(mf.mo_occ > 0, dtype=float)
        uhf.kernel(dm0=uhf.make_rdm1(mo_ext, (occ, occ)))
        lower = max(0.0, float(mf.e_tot - uhf.e_tot) * 1000.0)
    return HFStability("RHF", bool(internal), bool(external), lower)
