"""Planted Kohn–Sham bugs: the example code's KS loop with one classic functional mistake.

Each plug-in is :class:`harness.testing.example_scf.LabSCF` on a Kohn–Sham case with its
exact-exchange fraction, its XC evaluation or its quadrature weights changed; the code
stays self-consistent with its own mistake, so what the harness must find is the term
that differs (``harness.verdict.xc_diagnosis``). tests/quality/test_ks_planted.py asserts
the failing checks and the hints verbatim. Atomic units: bohr in, Eh out.

Load one with the plug-in spec ``harness.testing.planted.ks:<name>``.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from harness.testing.example_scf import LabSCF


class _Evaluator:
    """E_xc, V_xc like ``XCEvaluator`` but with another functional for the energy and/or
    the potential, or a closed-shell evaluation of an open-shell density."""

    def __init__(self, base, energy_functional=None, potential_functional=None,
                 unpolarised=False, weights=None):
        from harness.backend.grid import pyscf_grids

        self.base = base
        self.mol = base.mol
        self.coefficients = base.coefficients
        self.energy_functional = energy_functional or base.functional
        self.potential_functional = potential_functional or self.energy_functional
        self.unpolarised = unpolarised
        self.grids = base.grids if weights is None else pyscf_grids(
            base.mol, base.grids.coords, weights)

    def _eval(self, functional, d):
        from harness.backend.grid import xc_with_grids

        if len(d) == 2 and self.unpolarised:
            e, v = xc_with_grids(self.mol, self.grids, functional, d.sum(axis=0)[None])
            return e, np.concatenate([v, v])
        return xc_with_grids(self.mol, self.grids, functional, d)

    def __call__(self, d):
        d = np.ascontiguousarray(d, dtype=float)
        e, v = self._eval(self.energy_functional, d)
        if self.potential_functional != self.energy_functional:
            v = self._eval(self.potential_functional, d)[1]
        return e, v


class _WrongExchange(LabSCF):
    def __init__(self, problem, hyb):
        super().__init__(problem)
        self.xc.coefficients = dataclasses.replace(self.xc.coefficients, hyb=hyb)


def exchange_fraction_of_pbe0(problem) -> dict:
    """B3LYP with 25 % exact exchange (PBE0's fraction) instead of 20 %, in Fock and energy.

    The XC part is right; the fit of the code's Fock finds c_x = 0.25.
    """
    return _WrongExchange(problem, 0.25).iterate()


class _XC(LabSCF):
    """The example code with its XC evaluator replaced (:class:`_Evaluator` options)."""

    def __init__(self, problem):
        super().__init__(problem)
        self.xc = _Evaluator(self.xc, **self.options(problem))

    def options(self, problem) -> dict:
        return {}


class _NoCorrelation(_XC):
    def options(self, problem):
        from harness.backend.grid import xc_split

        return {"energy_functional": xc_split(problem.functional).exchange}


def correlation_missing(problem) -> dict:
    """Evaluates only the exchange part of the functional: no correlation potential or energy.

    The code's Fock fits H + J + V_x with a V_c coefficient of zero, and E − E[P] = −E_c.
    """
    return _NoCorrelation(problem).iterate()


class _LDAPotential(_XC):
    def options(self, problem):
        from harness.backend.grid import LDA_FUNCTIONAL

        return {"potential_functional": LDA_FUNCTIONAL}


def lda_potential_with_gga_energy(problem) -> dict:
    """The GGA energy of the functional but the LDA potential ("lda,vwn") in the Fock matrix.

    The SCF converges to the wrong density for its own energy expression.
    """
    return _LDAPotential(problem).iterate()


class _Unpolarised(_XC):
    def options(self, problem):
        return {"unpolarised": True}


def unpolarised_xc_in_uks(problem) -> dict:
    """An unrestricted code calling the closed-shell XC routine on Pα + Pβ: one V_xc for both spins.

    Exchange and Coulomb stay per spin; only the functional ignores the spin polarisation.
    """
    return _Unpolarised(problem).iterate()


class _Unpartitioned(_XC):
    def options(self, problem):
        from harness.backend.grid import unpartitioned_weights

        w = unpartitioned_weights(self.xc.mol, problem.grid.coords, problem.grid.weights)
        return {"weights": w}


def weights_without_partition(problem) -> dict:
    """Integrates the functional with each atom's own radial × angular weights, without the Becke partition.

    Space near several atoms is counted several times, so E_xc and V_xc are too large.
    """
    return _Unpartitioned(problem).iterate()


class _VWNVariant(_XC):
    def options(self, problem):
        from harness.backend.grid import vwn_variant

        return {"energy_functional": vwn_variant(problem.functional)[0]}


def other_vwn_parametrisation(problem) -> dict:
    """Builds the hybrid on the other VWN form of the local correlation (VWN5 ↔ VWN-RPA).

    The classic definition mismatch between programs under the same functional name:
    pyscf's "b3lyp" is built on VWN-RPA (VWN3-style), its "b3lyp5" on VWN5.
    """
    return _VWNVariant(problem).iterate()


def correct_ks(problem) -> dict:
    """The example code's own Kohn–Sham loop, unchanged (a correct variant)."""
    return LabSCF(problem).iterate()


#: Failing checks the Kohn–Sham mistakes share: the Fock matrix is not the functional's at
#: the code's density, E ≠ E[P] of the functional, and the energy is not the reference's.
_FAILS = ("self-consistency", "energy-consistency", "reference-energy")


def _catalogue():
    from harness.testing.planted import Planted, note_of
    from harness.verdict import xc_diagnosis as xd

    def entry(function, case, fails=_FAILS, hint=None, check="self-consistency"):
        return Planted(function.__name__, function, case, frozenset(fails), note_of(function),
                       hint=hint, hint_check=check if hint else None)

    vwn = [entry(other_vwn_parametrisation, case, hint=xd.VWN_MISMATCH, check="reference-energy")
           for case in ("water-6-31g-rks-b3lyp5", "water-6-31g-rks-b3lyp")]
    return (
        entry(exchange_fraction_of_pbe0, "water-6-31g-rks-b3lyp", hint=xd.WRONG_EXCHANGE),
        entry(correlation_missing, "water-sto-3g-rks-lda", hint=xd.MISSING_CORRELATION),
        entry(lda_potential_with_gga_energy, "water-6-31g-rks-pbe",
              ("self-consistency", "reference-energy"), hint=xd.LDA_POTENTIAL),
        entry(unpolarised_xc_in_uks, "n-atom-6-31g-uks-lda", _FAILS + ("spin-squared",),
              hint=xd.UNPOLARISED),
        entry(weights_without_partition, "water-sto-3g-rks-lda", hint=xd.UNPARTITIONED),
        *vwn,
        entry(correct_ks, "water-sto-3g-rks-lda", ()),
        entry(correct_ks, "n-atom-6-31g-uks-lda", ()),
    )


#: The planted Kohn–Sham bugs and the correct variant (see the module docstring).
CATALOGUE = _catalogue()
