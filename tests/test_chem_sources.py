"""A study's own problem: FCIDUMP integrals, a qubit-operator file, geometry from an XYZ file."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from pyscf import fci, gto, mcscf, scf
from pyscf.tools import fcidump

from noiselab.chem.encode import encode
from noiselab.chem.molecule import compute_problem, molecule_from_mapping
from noiselab.chem.operator_file import OPERATOR_FORMAT, operator_problem, operator_source
from noiselab.chem.sources import build_problem, fcidump_problem, fcidump_source
from noiselab.common.errors import InputError
from noiselab.study.spec import load_study

H2O = "O 0 0 0.1173; H 0 0.7572 -0.4692; H 0 -0.7572 -0.4692"
H2 = "H 0 0 0; H 0 0 0.735"

DEVICE = """\
device:
  schema_version: 1
  name: sources-chip
  qubit_count: 8
  links: [[0, 1], [1, 2], [2, 3], [3, 4], [4, 5], [5, 6], [6, 7]]
  native_gates: {single_qubit: [rz, sx, x], two_qubit: cz}
  durations: {single_qubit_ns: 35, two_qubit_ns: 300, readout_ns: 1500}
  qubits:
    default: {t1_us: 100, t2_us: 90, gate_error: 3.0e-4, flip_0to1: 0.015, flip_1to0: 0.03}
  couplers:
    default: {gate_error: 8.0e-3}
shots: 100000
seed: 1
recipes:
  raw: []
"""


@pytest.fixture(scope="module")
def h2o_fcidump(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, float, float]:
    """(FCIDUMP written by PySCF for H2O / STO-3G in a (4e, 4o) space, CASCI energy, RHF)."""
    mol = gto.M(atom=H2O, basis="sto-3g", verbose=0)
    mf = scf.RHF(mol)
    mf.conv_tol = 1e-12
    mf.kernel()
    mc = mcscf.CASCI(mf, 4, 4)
    mc.verbose = 0
    e_cas = float(mc.kernel()[0])
    path = tmp_path_factory.mktemp("fcidump") / "h2o.fcidump"
    fcidump.from_mcscf(mc, str(path))
    return path, e_cas, float(mf.e_tot)


def test_fcidump_h2o_gives_the_casci_energy(h2o_fcidump) -> None:
    path, e_cas, e_rhf = h2o_fcidump
    src = fcidump_source({"fcidump": path.name}, path.parent, "study.yaml")
    assert (src.n_orb, src.n_alpha, src.n_beta) == (4, 2, 2)  # NELEC 4, MS2 0 from the file
    problem = fcidump_problem(src)
    # source: PySCF CASCI (mcscf.CASCI(mf, 4, 4).kernel()) on the same molecule
    assert problem.exact_energy_ha == pytest.approx(e_cas, abs=1e-8)
    # the molecule route (PySCF integrals, our active space) agrees to 1e-8 Ha
    spec = molecule_from_mapping(
        {"geometry": H2O, "basis": "sto-3g", "active_space": {"electrons": 4, "orbitals": 4}}
    )
    assert problem.exact_energy_ha == pytest.approx(compute_problem(spec).exact_energy_ha, abs=1e-8)
    # the lowest determinant of the CAS orbitals is the RHF determinant; source: PySCF RHF
    assert problem.hf_energy_ha == pytest.approx(e_rhf, abs=1e-8)


def test_fcidump_study_encodes_to_the_same_exact_energy(h2o_fcidump, tmp_path: Path) -> None:
    path, e_cas, _ = h2o_fcidump
    study = tmp_path / "h2o.yaml"
    study.write_text(
        f"name: h2o-fcidump\nintegrals: {{fcidump: {path}}}\nencoding: parity\n"
        "drop_fixed_parity_qubits: true\nansatz: {kind: uccsd}\n" + DEVICE,
        encoding="utf-8",
    )
    s = load_study(study)
    assert s.num_qubits == 6
    _, qp = build_problem(s.molecule, s.encoding, s.drop_fixed_parity_qubits)
    assert qp.num_qubits == 6
    # source: PySCF CASCI; the qubit Hamiltonian's sector ground energy equals it
    assert qp.exact_energy_ha == pytest.approx(e_cas, abs=1e-8)


def test_fcidump_file_changed_after_reading_is_refused(h2o_fcidump, tmp_path: Path) -> None:
    copy = tmp_path / "c.fcidump"
    copy.write_bytes(h2o_fcidump[0].read_bytes())
    src = fcidump_source({"fcidump": str(copy)}, tmp_path, "study.yaml")
    copy.write_bytes(copy.read_bytes() + b"\n")
    with pytest.raises(InputError, match="changed after the study was read"):
        fcidump_problem(src)


def _h2_operator_file(path: Path, *, sector: bool = True, exact: float | None = None) -> Path:
    """H2 / STO-3G under Jordan-Wigner, written in the qubit-operator format."""
    qp = encode(compute_problem(molecule_from_mapping({"geometry": H2})), "jordan_wigner")

    def terms(op) -> dict[str, float]:
        return {lab: float(c.real) for lab, c in zip(op.paulis.to_labels(), op.coeffs, strict=True)}

    data: dict = {
        "format": OPERATOR_FORMAT,
        "num_qubits": qp.num_qubits,
        "terms": terms(qp.hamiltonian),
        "reference_bitstring": "".join(str(b) for b in reversed(qp.hf_bitstring)),
    }
    if sector:
        data["sector"] = {
            "number": {"terms": terms(qp.number_op), "value": 2},
            "sz": {"terms": terms(qp.sz_op), "value": 0},
        }
    if exact is not None:
        data["exact_energy_ha"] = exact
    path.write_text(json.dumps(data, indent=1), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def h2_reference() -> tuple[float, float]:
    """(FCI, RHF) energies of H2 / STO-3G at 0.735 Angstrom straight from PySCF."""
    mf = scf.RHF(gto.M(atom=H2, basis="sto-3g", verbose=0))
    mf.conv_tol = 1e-12
    mf.kernel()
    return float(fci.FCI(mf).kernel()[0]), float(mf.e_tot)


def test_operator_file_for_h2_gives_the_fci_energy(tmp_path: Path, h2_reference) -> None:
    e_fci, e_rhf = h2_reference
    path = _h2_operator_file(tmp_path / "h2.json")
    src = operator_source({"file": path.name}, tmp_path, "study.yaml")
    qp = operator_problem(src)
    assert qp.num_qubits == 4 and (qp.n_alpha, qp.n_beta) == (1, 1)
    assert qp.exact_energy_ha == pytest.approx(e_fci, abs=1e-8)  # source: PySCF FCI
    assert qp.hf_energy_ha == pytest.approx(e_rhf, abs=1e-8)  # source: PySCF RHF
    # an explicit exact energy without the sector operators is taken as given
    given = _h2_operator_file(tmp_path / "given.json", sector=False, exact=e_fci)
    qp2 = operator_problem(operator_source({"file": str(given)}, tmp_path, "s"))
    assert qp2.exact_energy_ha == e_fci and qp2.number_op is None


def test_operator_study_runs_assess(tmp_path: Path, h2_reference) -> None:
    from tests.test_hardening import run_main

    e_fci, _ = h2_reference
    _h2_operator_file(tmp_path / "h2.json")
    study = tmp_path / "h2op.yaml"
    study.write_text(
        "name: h2-operator\nhamiltonian: {file: h2.json}\nansatz: {kind: layered, layers: 1}\n"
        + DEVICE,
        encoding="utf-8",
    )
    s = load_study(study)
    assert s.num_qubits == 4
    code, out, err = run_main(["assess", str(study), "--out", str(tmp_path / "out")])
    assert code == 0, err
    summary = json.loads((tmp_path / "out" / "assess.json").read_text())
    assert summary["exact_energy"] == pytest.approx(e_fci, abs=1e-8)  # source: PySCF FCI
    assert summary["encoding"] == "qubit_operator" and summary["exact_spin_squared"] is None
    assert "Verdict" in out


def test_geometry_from_xyz_equals_the_inline_geometry(tmp_path: Path) -> None:
    (tmp_path / "water.xyz").write_text(
        "3\nwater, Angstrom\nO 0 0 0.1173\nH 0 0.7572 -0.4692\nH 0 -0.7572 -0.4692\n",
        encoding="utf-8",
    )
    for name, geometry in (("a", "{xyz: water.xyz}"), ("b", f'"{H2O}"')):
        (tmp_path / f"{name}.yaml").write_text(
            f"name: water-{name}\nmolecule:\n  geometry: {geometry}\n"
            "  active_space: {electrons: 4, orbitals: 4}\nansatz: {kind: uccsd}\n" + DEVICE,
            encoding="utf-8",
        )
    a, b = load_study(tmp_path / "a.yaml"), load_study(tmp_path / "b.yaml")
    assert a.molecule == b.molecule
    assert np.allclose([x[1:] for x in a.molecule.geometry], [x[1:] for x in b.molecule.geometry])
