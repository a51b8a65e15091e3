"""Noiseless optimization: UCCSD reaches the exact energy where it must; layered is variational."""

from __future__ import annotations

import json

import numpy as np
import pytest

from noiselab.chem.ansatz import layered_circuit, uccsd_circuit
from noiselab.chem.encode import encode
from noiselab.chem.molecule import MoleculeSpec, compute_problem
from noiselab.chem.optimize import noiseless_energy, optimize_noiseless
from noiselab.common.errors import InputError


@pytest.fixture(scope="module")
def h2():
    return compute_problem(MoleculeSpec(geometry="H 0 0 0; H 0 0 0.7414"))


@pytest.mark.parametrize(("encoding", "reduced"), [("jordan_wigner", False), ("parity", True)])
def test_uccsd_reaches_h2_fci(h2, encoding, reduced):
    from pyscf import fci, gto, scf

    qp = encode(h2, encoding, drop_fixed_parity_qubits=reduced)
    res = optimize_noiseless(qp, uccsd_circuit(qp))
    mol = gto.M(atom="H 0 0 0; H 0 0 0.7414", basis="sto-3g", verbose=0)
    e_fci = fci.FCI(scf.RHF(mol).run(conv_tol=1e-12)).kernel()[0]
    # source: PySCF FCI; for two electrons UCCSD spans the exact ground state (REFERENCES.md)
    assert res.energy_ha == pytest.approx(e_fci, abs=1e-6)
    assert abs(res.ansatz_error_mha) < 1e-3
    assert res.converged
    assert res.parameters.shape == (3,)
    assert noiseless_energy(qp, uccsd_circuit(qp), res.parameters) == pytest.approx(res.energy_ha)


def test_uccsd_two_electron_active_space_is_exact():
    from pyscf import gto, mcscf, scf

    spec = MoleculeSpec(
        geometry="Li 0 0 0; H 0 0 1.595", active_space={"electrons": 2, "orbitals": 3}
    )
    qp = encode(compute_problem(spec), "bravyi_kitaev")
    res = optimize_noiseless(qp, uccsd_circuit(qp), method="L-BFGS-B")
    mf = scf.RHF(gto.M(atom="Li 0 0 0; H 0 0 1.595", basis="sto-3g", verbose=0)).run()
    # source: PySCF mcscf.CASCI(2e, 3o); two active electrons: UCCSD is exact (REFERENCES.md)
    assert res.energy_ha == pytest.approx(mcscf.CASCI(mf, 3, 2).kernel()[0], abs=1e-6)


def test_layered_circuit_is_variational(h2):
    qp = encode(h2, "parity", drop_fixed_parity_qubits=True)
    h_full_min = np.linalg.eigvalsh(qp.hamiltonian.to_matrix())[0]
    # numpy eigvalsh: for H2 the neutral singlet is the lowest state of the whole qubit space,
    # so any state's energy is bounded below by the sector energy (variational principle)
    assert h_full_min == pytest.approx(h2.exact_energy_ha, abs=1e-10)
    qc = layered_circuit(qp.num_qubits, 1, initial_bitstring=qp.hf_bitstring)
    res = optimize_noiseless(qp, qc, starts=3, seed=11)
    assert qc.num_parameters == 2 * 2 * 2
    assert res.energy_ha >= h2.exact_energy_ha - 1e-9
    assert res.energy_ha <= h2.hf_energy_ha + 1e-9
    assert len(res.start_energies_ha) == 3
    assert res.energy_ha == min(res.start_energies_ha)
    again = optimize_noiseless(qp, qc, starts=3, seed=11)
    assert np.array_equal(again.parameters, res.parameters)  # deterministic for a fixed seed


def test_bad_optimizer_options(h2):
    qp = encode(h2, "jordan_wigner")
    qc = uccsd_circuit(qp)
    with pytest.raises(InputError, match=r"optimizer\.method"):
        optimize_noiseless(qp, qc, method="nelder")
    with pytest.raises(InputError, match=r"optimizer\.starts"):
        optimize_noiseless(qp, qc, starts=0)
    with pytest.raises(InputError, match=r"optimizer\.initial"):
        optimize_noiseless(qp, qc, initial=np.zeros(5))
    with pytest.raises(InputError, match="ansatz"):
        optimize_noiseless(qp, layered_circuit(3, 1))


# ---- trustworthy optimum: stationary starts replaced, adaptive starts, warnings

LAYERED_H2_STUDY = {
    "name": "layered-h2",
    "molecule": {"geometry": "H 0 0 0; H 0 0 0.7414", "basis": "sto-3g"},
    "encoding": "jordan_wigner",
    "ansatz": {"kind": "layered", "layers": 2},
    "device": {
        "schema_version": 1,
        "name": "test-chip",
        "qubit_count": 4,
        "links": [[0, 1], [1, 2], [2, 3]],
        "native_gates": {"single_qubit": ["rz", "sx", "x"], "two_qubit": "cz"},
        "durations": {"single_qubit_ns": 35, "two_qubit_ns": 300, "readout_ns": 1500},
        "qubits": {
            "default": {
                "t1_us": 100,
                "t2_us": 90,
                "gate_error": 3.0e-4,
                "flip_0to1": 0.015,
                "flip_1to0": 0.03,
            }
        },
        "couplers": {"default": {"gate_error": 8.0e-3}},
    },
    "shots": 100000,
    "recipes": {"raw": []},
}


def _pyscf_fci(atom: str) -> float:
    from pyscf import fci, gto, scf

    mol = gto.M(atom=atom, basis="sto-3g", verbose=0)
    return float(fci.FCI(scf.RHF(mol).run(conv_tol=1e-12)).kernel()[0])


def test_layered_h2_study_reaches_fci_for_every_seed(h2):
    from noiselab.study.context import ansatz_circuit, optimize, optimum_checks
    from noiselab.study.spec import study_from_mapping

    e_fci = _pyscf_fci("H 0 0 0; H 0 0 0.7414")
    qp = encode(h2, "jordan_wigner")
    reached = 0
    for seed in range(8):
        data = {**LAYERED_H2_STUDY, "seed": 100 + seed}
        data["ansatz"] = {**data["ansatz"], "start_seed": seed}
        study = study_from_mapping(data, "layered-h2.yaml")
        res = optimize(study, qp, ansatz_circuit(study, qp), cache=None)
        # source: PySCF FCI (two electrons, 2 layers of the layered circuit span the ground state)
        reached += abs(res.energy_ha - e_fci) < 1e-6
        exact_s2, warnings = optimum_checks(study, qp, res)
        assert warnings == ()
        # source: PySCF fci spin_square of the H2 ground state is 0 (tests/test_chem_spin.py)
        assert abs(res.spin_squared - exact_s2) < 1e-4
    assert reached == 8


def test_stationary_start_is_replaced_and_single_starts_are_flagged(h2):
    from noiselab.chem.optimize import optimum_warnings
    from noiselab.chem.statevector import compile_statevector

    qp = encode(h2, "jordan_wigner")
    qc = layered_circuit(qp.num_qubits, 2, initial_bitstring=qp.hf_bitstring)
    hmat = qp.hamiltonian.to_matrix(sparse=True)
    e0, g0 = compile_statevector(qc).expectation_and_gradient(hmat, np.zeros(qc.num_parameters))
    # all-zero parameters: the Hartree-Fock state (PySCF's RHF energy) with zero gradient
    assert e0 == pytest.approx(h2.hf_energy_ha, abs=1e-10)
    assert np.max(np.abs(g0)) < 1e-12
    stuck = 0
    for seed in range(8):
        one = optimize_noiseless(qp, qc, starts=1, max_starts=1, seed=seed)
        assert one.replaced_starts == 1 and one.starts == 1
        warnings = optimum_warnings(one, qp, 1.5936, 0.0)
        if abs(one.energy_ha - h2.hf_energy_ha) < 1e-6:
            stuck += 1
            assert any("Hartree-Fock" in w for w in warnings)
        else:
            assert one.energy_ha == pytest.approx(h2.exact_energy_ha, abs=1e-6)
    assert stuck >= 1  # a single start does fall back to Hartree-Fock: the case to detect


def test_optimum_warnings_name_each_failure(h2):
    from noiselab.chem.optimize import OptimizationResult, optimum_warnings

    qp = encode(h2, "jordan_wigner")

    def result(energy: float, spread: float | None, s2: float) -> OptimizationResult:
        return OptimizationResult(
            parameters=np.zeros(3),
            energy_ha=energy,
            ansatz_error_mha=(energy - qp.exact_energy_ha) * 1000,
            n_evaluations=1,
            converged=True,
            starts=4,
            start_energies_ha=(energy,),
            seconds=0.0,
            method="BFGS",
            spread_mha=spread,
            spin_squared=s2,
        )

    assert optimum_warnings(result(qp.exact_energy_ha, 30.0, 0.0), qp, 1.6, 0.0) == ()
    mid = qp.exact_energy_ha + 0.001  # 1 mHa above exact: under the 1.6 mHa target
    (w,) = optimum_warnings(result(mid, 2.0, 0.0), qp, 1.6, 0.0)
    assert "two lowest of 4 starts differ by 2 mHa" in w
    assert optimum_warnings(result(mid, 1.0, 0.0), qp, 1.6, 0.0) == ()
    (w,) = optimum_warnings(result(qp.hf_energy_ha, 0.0, 0.0), qp, 1.6, 0.0)
    assert "Hartree-Fock" in w
    (w,) = optimum_warnings(result(mid, 0.0, 2.0), qp, 1.6, 0.0)
    assert "<S^2> is 2.000" in w and "0.000" in w
    assert optimum_warnings(result(mid, 0.0, 2.0), qp, 1.6, None) == ()
    (w,) = optimum_warnings(result(qp.exact_energy_ha - 0.01, 0.0, 0.0), qp, 1.6, 0.0)
    assert "10 mHa below the exact energy" in w and "left that sector" in w
    # 5 mHa above exact, over the target: the share of the correlation energy recovered is
    # (E_HF - E) / (E_HF - E_FCI), with E_HF and E_FCI from PySCF's RHF and FCI (h2 fixture)
    far = qp.exact_energy_ha + 0.005
    share = 100.0 * (h2.hf_energy_ha - far) / (h2.hf_energy_ha - h2.exact_energy_ha)
    (w,) = optimum_warnings(result(far, 0.0, 0.0), qp, 1.6, 0.0)
    assert "5 mHa above the exact energy" in w and f"recovers {share:.0f} %" in w
    assert "no mitigation removes that part" in w


def test_stuck_optimum_is_warned_in_json_table_and_verdict(tmp_path, capsys) -> None:
    import yaml

    from noiselab.cli.app import main
    from noiselab.study.context import ansatz_circuit, optimize
    from noiselab.study.spec import study_from_mapping

    data = {**LAYERED_H2_STUDY, "ansatz": {"kind": "layered", "layers": 2, "starts": 1}}
    study = study_from_mapping(data, "x.yaml")
    qp = encode(compute_problem(study.molecule), "jordan_wigner")
    for seed in range(16):  # a start seed whose single start falls back to Hartree-Fock
        data["ansatz"] = {**data["ansatz"], "max_starts": 1, "start_seed": seed}
        study = study_from_mapping(data, "x.yaml")
        res = optimize(study, qp, ansatz_circuit(study, qp), cache=None)
        if abs(res.energy_ha - qp.hf_energy_ha) < 1e-6:
            break
    else:
        pytest.skip("no single start stopped at Hartree-Fock")
    path = tmp_path / "stuck.yaml"
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    with pytest.raises(SystemExit) as info:
        main(["assess", str(path), "--json", "--no-cache"])
    assert info.value.code in (0, None)
    out = json.loads(capsys.readouterr().out)
    assert any("Hartree-Fock" in w for w in out["warnings"])
    assert "Caveat: the noiseless optimum is in doubt" in out["verdict"]
    with pytest.raises(SystemExit):
        main(["assess", str(path), "--no-cache", "-q"])
    text = capsys.readouterr().out
    assert "Warning: optimizer: the noiseless optimum equals the Hartree-Fock energy" in text
