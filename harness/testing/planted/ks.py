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
        from pyscf.dft import numint

        ni = numint.NumInt()
        if len(d) == 1 or self.unpolarised:
            _, e, v = ni.nr_rks(self.mol, self.grids, functional, d.sum(axis=0))
            v = np.asarray(v)
            return float(e), np.stack([v] * len(d))
        _, e, v = ni.nr_uks(self.mol, self.grids, functional, d)
        return float(e), np.asarray(v)

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
    evaluator: dict = {}

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


def vwn_rpa_for_b3lyp5(problem) -> dict:
    """Builds the hybrid on the other VWN parametrisation (VWN-RPA for pyscf's "b3lyp5").

    The classic definition mismatch between programs under the same functional name.
    """
    return _VWNVariant(problem).iterate()


def correct_ks(problem) -> dict:
    """The example code's own Kohn–Sham loop, unchanged (a correct variant)."""
    return LabSCF(problem).iterate()


def _catalogue():
    from harness.testing.planted import entries

    return entries(
        caught=[
            (exchange_fraction_of_pbe0, ["water-6-31g-rks-b3lyp"],
             ["self-consistency", "energy-consistency", "reference-energy"]),
            (correlation_missing, ["water-sto-3g-rks-lda"],
             ["self-consistency", "energy-consistency", "reference-energy"]),
            (lda_potential_with_gga_energy, ["water-6-31g-rks-pbe"],
             ["self-consistency", "reference-energy"]),
            (unpolarised_xc_in_uks, ["n-atom-6-31g-uks-lda"],
             ["self-consistency", "energy-consistency", "reference-energy"]),
            (weights_without_partition, ["water-sto-3g-rks-lda"],
             ["self-consistency", "energy-consistency", "reference-energy"]),
            (vwn_rpa_for_b3lyp5, ["water-6-31g-rks-b3lyp5"],
             ["self-consistency", "energy-consistency", "reference-energy"]),
        ],
        correct=[(correct_ks, ["water-sto-3g-rks-lda", "n-atom-6-31g-uks-lda"])])


#: The planted Kohn–Sham bugs and the correct variant (see the module docstring).
CATALOGUE = _catalogue()
