"""Timing of the chemistry layer: PySCF problem, encodings, noiseless UCCSD optimization.

Run: python benchmarks/chem_timing.py
Not part of the test suite (timings depend on the machine and its load). Prints one line per
case: qubits, Pauli terms, UCCSD parameters and CNOTs, seconds per stage, ansatz error (mHa).
"""

from __future__ import annotations

import time


def main() -> None:
    from noiselab.chem.ansatz import circuit_summary, uccsd_circuit
    from noiselab.chem.encode import encode
    from noiselab.chem.molecule import MoleculeSpec, compute_problem
    from noiselab.chem.optimize import optimize_noiseless

    cases = {
        "H2 0.7414 A": MoleculeSpec(geometry="H 0 0 0; H 0 0 0.7414"),
        "LiH (2e,3o)": MoleculeSpec(
            geometry="Li 0 0 0; H 0 0 1.595", active_space={"electrons": 2, "orbitals": 3}
        ),
        "LiH (2e,5o)": MoleculeSpec(
            geometry="Li 0 0 0; H 0 0 1.595", active_space={"electrons": 2, "orbitals": 5}
        ),
        "LiH full": MoleculeSpec(geometry="Li 0 0 0; H 0 0 1.595"),
    }
    variants = [("jordan_wigner", False), ("bravyi_kitaev", False), ("parity", True)]
    for name, spec in cases.items():
        t0 = time.perf_counter()
        prob = compute_problem(spec)
        t_problem = time.perf_counter() - t0
        for encoding, reduced in variants:
            t0 = time.perf_counter()
            qp = encode(prob, encoding, drop_fixed_parity_qubits=reduced)
            t_encode = time.perf_counter() - t0
            circuit = uccsd_circuit(qp)
            summary = circuit_summary(circuit)
            res = optimize_noiseless(qp, circuit)
            print(
                f"{name:12s} {encoding:13s} red={reduced!s:5s} qubits={qp.num_qubits:2d} "
                f"terms={qp.num_terms:4d} params={summary['num_parameters']:3d} "
                f"cx={summary['two_qubit_gates']:5d} pyscf={t_problem:.2f}s "
                f"encode={t_encode:.3f}s optimize={res.seconds:.2f}s "
                f"evals={res.n_evaluations} error={res.ansatz_error_mha:.2e} mHa"
            )


if __name__ == "__main__":
    main()
