"""Molecule -> integrals -> qubit Hamiltonian, exact reference energies, trial-state circuits.

Nothing in this layer knows about noise."""
