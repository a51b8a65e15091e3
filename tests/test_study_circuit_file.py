"""A study's trial circuit from a file (QPY, OpenQASM 3) instead of a built-in ansatz."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from pyscf import fci, gto, scf
from qiskit import QuantumCircuit, qasm3, qpy
from qiskit.circuit import Parameter
from qiskit.quantum_info import Statevector

from noiselab.common.errors import InputError
from noiselab.study.context import build_context
from noiselab.study.spec import load_study

H2 = "H 0 0 0; H 0 0 0.735"
STUDY = """\
name: h2-circuit-file
molecule:
  geometry: "H 0 0 0; H 0 0 0.735"
  basis: sto-3g
encoding: parity
drop_fixed_parity_qubits: true
CIRCUIT
device: cobaltgrid-12
shots: 100000
seed: 1
recipes:
  raw: []
"""


def write_study(folder: Path, circuit_key: str) -> Path:
    path = folder / "study.yaml"
    path.write_text(STUDY.replace("CIRCUIT", circuit_key), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def h2_fci() -> float:
    mf = scf.RHF(gto.M(atom=H2, basis="sto-3g", verbose=0))
    mf.conv_tol = 1e-12
    mf.kernel()
    return float(fci.FCI(mf).kernel()[0])


def test_qpy_circuit_with_a_parameter_is_optimized_to_fci(tmp_path: Path, h2_fci: float) -> None:
    """Two qubits (parity, fixed qubits dropped): ry(theta) then cx spans the sector's two
    determinants with real amplitudes, so the noiseless optimum is the FCI energy."""
    theta = Parameter("theta")
    qc = QuantumCircuit(2)
    qc.x(0)
    qc.ry(theta, 1)
    qc.cx(1, 0)
    with open(tmp_path / "trial.qpy", "wb") as fh:
        qpy.dump(qc, fh)
    study = load_study(write_study(tmp_path, "circuit: {file: trial.qpy, starts: 2}"))
    assert study.ansatz.num_parameters == 1 and study.num_qubits == 2
    ctx = build_context(study)
    assert ctx.ansatz_energy_ha == pytest.approx(h2_fci, abs=1e-7)  # source: PySCF FCI
    assert ctx.exact_energy_ha == pytest.approx(h2_fci, abs=1e-8)


def test_qasm3_bound_circuit_energy_is_its_expectation(tmp_path: Path) -> None:
    qc = QuantumCircuit(2)
    qc.x(0)
    qc.ry(0.3, 1)
    qc.cx(1, 0)
    (tmp_path / "trial.qasm").write_text(qasm3.dumps(qc), encoding="utf-8")
    study = load_study(write_study(tmp_path, "circuit: {file: trial.qasm}"))
    assert study.ansatz.num_parameters == 0
    ctx = build_context(study)
    h = ctx.qubit_problem.hamiltonian
    expected = float(np.real(Statevector(qc).expectation_value(h)))  # qiskit.quantum_info
    assert ctx.ansatz_energy_ha == pytest.approx(expected, abs=1e-10)


@pytest.mark.parametrize(
    ("content", "name", "expect"),
    [
        ("OPENQASM 3.0;\nqubit[2] q;\nbit[2] c;\nc = measure q;\n", "m.qasm", "measurements"),
        (
            'OPENQASM 3.0;\ninclude "stdgates.inc";\nqubit[3] q;\nx q[0];\n',
            "w.qasm",
            "the circuit has 3 qubits, the problem 2",
        ),
        ("this is not a circuit", "bad.qasm", "not a readable QASM3 circuit"),
        ("x", "trial.txt", "unknown circuit format '.txt'"),
    ],
)
def test_bad_circuit_files_are_refused(tmp_path: Path, content: str, name: str, expect: str):
    (tmp_path / name).write_text(content, encoding="utf-8")
    with pytest.raises(InputError) as exc:
        load_study(write_study(tmp_path, f"circuit: {{file: {name}}}"))
    msg = str(exc.value)
    assert expect in msg and "\n" not in msg and msg.startswith(str(tmp_path / "study.yaml"))


def test_ansatz_and_circuit_together_are_refused(tmp_path: Path) -> None:
    (tmp_path / "t.qasm").write_text("OPENQASM 3.0;\nqubit[2] q;\n", encoding="utf-8")
    with pytest.raises(InputError, match="ansatz: both given"):
        load_study(write_study(tmp_path, "ansatz: {kind: uccsd}\ncircuit: {file: t.qasm}"))
