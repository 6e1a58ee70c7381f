"""Units. Everything inside the harness is in atomic units: bohr and hartree (Eh).

Conversions happen only at the edges (reading XYZ files in ångström, printing eV).
"""

#: Bohr radius in ångström, CODATA 2018 (a0 = 0.529177210903 Å).
BOHR_IN_ANGSTROM = 0.529177210903
#: 1 Å in bohr.
ANGSTROM_IN_BOHR = 1.0 / BOHR_IN_ANGSTROM
#: Hartree in electronvolt, CODATA 2018.
HARTREE_IN_EV = 27.211386245988
