"""Atomic LDA total energies against the NIST atomic reference data for electronic-structure
calculations (S. Kotochigova, Z. H. Levine, E. L. Shirley, M. D. Stiles, C. W. Clark,
NIST; LDA with Slater exchange and VWN correlation fitted to the Ceperley–Alder data,
numerically exact radial solutions, non-relativistic, spin-unpolarised). Values copied in
tests/published/SOURCES.md (item "NIST atomic LDA"), marked FROM MEMORY: they were not
read from the NIST tables this session.

pyscf's "lda,vwn" is Slater + VWN5 (libxc LDA_C_VWN, the Ceperley–Alder fit: pyscf's
libxc alias table builds B3LYP5 from the same "VWN"), so the same functional. A Gaussian
basis is variational for a fixed functional: E(basis) ≥ E(complete basis) up to the grid's
integration error. So for He, Be and Ne (closed shells: RKS = the spin-unpolarised
radial problem):

    −LOWER_SLACK ≤ E(aug-cc-pV5Z) − E_NIST ≤ BASIS_FACTOR · (E(aug-cc-pVQZ) − E(aug-cc-pV5Z))

The upper bound is the remaining basis error of aug-cc-pV5Z estimated from the measured
QZ→5Z step: if the error falls as X⁻³ (the slowest form usual for correlation-consistent
sets; SCF-type energies converge faster), the error left at X = 5 is the step times
1/((5/4)³ − 1) = 1.05. Measured 2026-12-03 (pyscf 2.14, pinned grid): He 5.0e-5 vs step
9.7e-5, Be 7.6e-5 vs 6.0e-4, Ne 5.9e-4 vs 3.7e-3 Eh. VWN3 ("RPA") correlation instead of
VWN5, or a missing correlation term, moves these atoms by far more than the bound.
~45 s (five SCFs in bases up to 127 functions), so slow.
"""

from __future__ import annotations

import pytest

from harness.backend.mole import build_mole
from harness.backend.reference_scf import one_scf_energy

#: NIST atomic reference data, LDA total energies (Eh), FROM MEMORY (see SOURCES.md).
NIST_LDA = {2: -2.834836, 4: -14.447209, 10: -128.233481}
#: Residual basis error of aug-cc-pV5Z per unit QZ→5Z step under X⁻³ convergence.
BASIS_FACTOR = 1.0 / ((5 / 4) ** 3 - 1)
#: Below the NIST value by at most this (Eh): the table's last printed digit (1e-6) plus
#: the pinned grid's integration error for these atoms (level 3 vs 5 at the converged
#: density: ≤ 1.1e-9 Eh measured), with room: 1e-5.
LOWER_SLACK = 1e-5


def _energy(z: int, basis: str) -> float:
    mol = build_mole([z], [[0.0, 0.0, 0.0]], charge=0, multiplicity=1, basis=basis,
                     cartesian=False)
    return one_scf_energy(mol, "rks", "lda,vwn")


@pytest.mark.slow
@pytest.mark.parametrize("z", sorted(NIST_LDA))
def test_lda_atom_approaches_nist_from_above(z):
    e5 = _energy(z, "aug-cc-pv5z")
    e4 = _energy(z, "aug-cc-pvqz")
    error, step = e5 - NIST_LDA[z], e4 - e5
    assert step > 0, f"Z={z}: aug-cc-pVQZ {e4:.8f} below aug-cc-pV5Z {e5:.8f} Eh"
    assert -LOWER_SLACK <= error <= BASIS_FACTOR * step, (
        f"Z={z}: E(aug-cc-pV5Z) − E_NIST = {error:.2e} Eh outside "
        f"[{-LOWER_SLACK:.0e}, {BASIS_FACTOR * step:.2e}] (QZ→5Z step {step:.2e} Eh)")


@pytest.mark.slow
def test_rpa_correlation_misses_nist():
    """The same bound, for He, fails with VWN3 ('RPA' VWN) correlation: it can fail."""
    def energy(basis, functional):
        mol = build_mole([2], [[0.0, 0.0, 0.0]], charge=0, multiplicity=1, basis=basis,
                         cartesian=False)
        return one_scf_energy(mol, "rks", functional)

    e5, e4 = energy("aug-cc-pv5z", "lda,vwn3"), energy("aug-cc-pvqz", "lda,vwn3")
    error = e5 - NIST_LDA[2]
    assert not -LOWER_SLACK <= error <= BASIS_FACTOR * (e4 - e5), f"VWN3 He: {error:.2e} Eh"
