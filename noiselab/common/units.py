"""Physical constants and the chemical-accuracy target.

1 Hartree = 627.5095 kcal/mol (CODATA-derived, common practice); chemical accuracy is 1 kcal/mol.
"""

HARTREE_TO_KCAL_PER_MOL = 627.5095
KCAL_PER_MOL_TO_MHA = 1000.0 / HARTREE_TO_KCAL_PER_MOL
CHEMICAL_ACCURACY_MHA = 1.0 * KCAL_PER_MOL_TO_MHA  # 1.5936 mHa
BOHR_TO_ANGSTROM = 0.529177210903  # CODATA 2018
HA_TO_MHA = 1000.0
