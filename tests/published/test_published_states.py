"""Every stored stationary state lies above the numerical Hartree–Fock limit.

Numerical HF limits (Eh) are variational lower bounds for any finite-basis
single-determinant energy of the same system, excited or symmetry-broken states
included. All limits below are from memory (recalled, not read from the source),
attributed to the finite-difference HF test set of J. Kobus, Comput. Phys. Commun. 184,
799 (2013); see tests/published/SOURCES.md. Allowed slack 1e-8 Eh.
"""

from __future__ import annotations

import pytest

from harness.catalogue.cases import load_catalogue
from harness.catalogue.references import load_reference

HF_LIMITS = {
    "he-atom-cc-pvtz-rhf": -2.861679995612,  # He, commonly quoted value, from memory
    "be-atom-cc-pvtz-rhf": -14.5730231683,   # Be, from memory
    "ne-atom-cc-pvtz-rhf": -128.547098109,   # Ne, from memory
    "h2-sto-3g-rhf": -1.133629571,           # H2 at R = 1.4 bohr, from memory
}
SLACK = 1e-8


@pytest.mark.parametrize("name", sorted(HF_LIMITS))
def test_every_known_state_is_above_the_hf_limit(name):
    ref = load_reference(load_catalogue().case(name))
    assert ref.known_states, "the reference records its states"
    assert ref.known_states[0].energy == pytest.approx(ref.energy, abs=1e-9)
    for state in ref.known_states:
        # the numerical HF limit (HF_LIMITS, from memory) is a lower bound
        assert state.energy > HF_LIMITS[name] - SLACK, state


def test_the_limits_bind():
    """The bound is not vacuous: cc-pVTZ He lies within 1e-3 Eh of its limit."""
    ref = load_reference(load_catalogue().case("he-atom-cc-pvtz-rhf"))
    # HF_LIMITS (from memory): He −2.861679995612
    assert 0 < ref.energy - HF_LIMITS["he-atom-cc-pvtz-rhf"] < 1e-3
