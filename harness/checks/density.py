"""Density checks: idempotency in the overlap metric, electron count, consistency.

Densities carry a leading spin axis (see ``harness.checks.spin``): RHF one total
density with occupations up to 2, UHF/ROHF alpha and beta densities.
"""

from __future__ import annotations

import numpy as np

from harness.checks.orthonormal import locate, worst_of
from harness.checks.spin import spin_names
from harness.contract.results import Measurement


def idempotency(d: np.ndarray, s: np.ndarray, scale: float = 1.0, labels=None) -> Measurement:
    """max |D S D − D| per spin, D = P / scale (scale 2 for an RHF total density).

    A one-determinant density is a projector in the overlap metric, so this vanishes;
    a mixture of two densities (damping left in) or fractional occupations do not.
    """
    value, idx, spin = worst_of((spin, (ds / scale) @ s @ (ds / scale) - ds / scale)
                                for spin, ds in zip(spin_names(len(d)), d))
    quantity = "max|(P/2)S(P/2) − P/2|" if scale == 2.0 else "max|PσSPσ − Pσ|"
    return Measurement(value, quantity, locate(spin, "AO element", idx, labels) if idx else "")


def electron_count(d: np.ndarray, s: np.ndarray, n: np.ndarray) -> Measurement:
    """max over spin components of |Tr(P S) − N| (electrons).

    ``n`` holds the expected count per component: (N,) for RHF, (Nα, Nβ) otherwise.
    """
    counts = np.einsum("spq,qp->s", d, s)
    dev = np.abs(counts - np.asarray(n, dtype=float))
    k = int(np.nanargmax(dev)) if not np.isnan(dev).any() else int(np.argwhere(np.isnan(dev))[0][0])
    spin = spin_names(len(d))[k]
    where = f"{spin + ', ' if spin else ''}Tr(PS) = {counts[k]:.10g}, expected {n[k]:g}"
    return Measurement(float(dev[k]), "|Tr(PS) − N|", where)


def density_consistency(d_reported: np.ndarray, d_built: np.ndarray, labels=None) -> Measurement:
    """max |P_reported − C n Cᵀ| per spin: the reported density is the one the orbitals give."""
    value, idx, spin = worst_of((spin, a - b) for spin, a, b in
                                zip(spin_names(len(d_built)), d_reported, d_built))
    return Measurement(value, "max|P − CnCᵀ|", locate(spin, "AO element", idx, labels) if idx else "")
