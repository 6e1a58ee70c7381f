"""LDA (Dirac–Slater) exchange of an analytic density on the harness's pinned grid vs the
closed-form value.

Dirac's exchange energy of the uniform electron gas, applied pointwise (the local density
approximation): E_x[ρ] = −(3/4)(3/π)^(1/3) ∫ ρ(r)^(4/3) dr (Dirac 1930; the formula is
derived, not read from a source this session). For the hydrogen 1s density
ρ(r) = e^(−2r)/π:
    ∫ ρ^(4/3) dr = π^(−4/3) · 4π ∫ r² e^(−8r/3) dr = π^(−4/3) · 4π · 2/(8/3)³ = (27/64) π^(−1/3),
    E_x = −(3/4)(3/π)^(1/3) (27/64) π^(−1/3) = −(81/256) 3^(1/3) / π^(2/3) ≈ −0.21274 Eh.
libxc's Slater exchange ("lda,", spin-unpolarised) integrated on the pinned grid of an H
atom must give it to the grid's integration error.
"""

from __future__ import annotations

import math

import numpy as np

from harness.backend.grid import xc_energy_of_density
from harness.contract.problem import Problem

#: Closed form above (Eh), derived.
DIRAC_H1S = -(81 / 256) * 3 ** (1 / 3) / math.pi ** (2 / 3)
#: The pinned grid (pyscf level 3: 50 radial × ≤ 302 angular points for H) integrates a
#: smooth exponential far better than this; 1e-6 Eh is the reference-energy tolerance, the
#: size at which a grid error would matter to a verdict.
GRID_INTEGRATION = 1e-6


def _h_atom_grid():
    p = Problem.create(name="h-atom", numbers=[1], coordinates=[[0, 0, 0]], basis="sto-3g",
                       method="uks", functional="lda,vwn", multiplicity=2)
    return p.grid


def test_dirac_exchange_of_hydrogen_density():
    g = _h_atom_grid()
    r = np.linalg.norm(g.coords, axis=1)
    rho = np.exp(-2 * r) / math.pi
    assert abs(float(np.sum(g.weights * rho)) - 1.0) < GRID_INTEGRATION  # one electron
    e = xc_energy_of_density("lda,", rho, g.weights)
    assert abs(e - DIRAC_H1S) < GRID_INTEGRATION, (e, DIRAC_H1S)


def test_wrong_prefactor_would_fail():
    """The comparison can fail: correlation added (LDA exchange + VWN) misses by far more."""
    g = _h_atom_grid()
    rho = np.exp(-2 * np.linalg.norm(g.coords, axis=1)) / math.pi
    e = xc_energy_of_density("lda,vwn", rho, g.weights)
    assert abs(e - DIRAC_H1S) > 100 * GRID_INTEGRATION
