"""Stationarity of the SCF energy: the commutator, the ROHF conditions, Roothaan–Hall.

All in the Löwdin-orthonormal basis X = S^(-1/2) (see ``harness.checks.orthonormal``),
where F' = X F X and P' = S^(1/2) P S^(1/2), so that X (F P S − S P F) X = F'P' − P'F'.
Fock matrices in Eh.
"""

from __future__ import annotations

import numpy as np

from harness.checks.orthonormal import Lowdin, locate, worst
from harness.checks.spin import spin_names
from harness.results import Measurement


def commutator(f: np.ndarray, d: np.ndarray, s: np.ndarray, low: Lowdin,
               labels=None) -> Measurement:
    """max |X (F P S − S P F) X| over spin components (RHF: total P; UHF: Pσ with Fσ).

    f, d are (ns, nao, nao). Vanishes at any stationary point of the SCF energy; this is
    the measure ``problem.convergence`` asks a code to bring below its threshold.
    """
    best = (0.0, (), "")
    for spin, fs, ds in zip(spin_names(len(f)), f, d):
        r = low.x @ (fs @ ds @ s - s @ ds @ fs) @ low.x
        value, idx = worst(r)
        if not value <= best[0]:
            best = (value, idx, spin)
    value, idx, spin = best
    return Measurement(value, "max|X(FPS − SPF)X|",
                       locate(spin, "Löwdin element", idx, labels) if idx else "")


def rohf_conditions(f: np.ndarray, d: np.ndarray, low: Lowdin, labels=None) -> Measurement:
    """Convention-free ROHF stationarity, with Dc = Pβ, Do = Pα − Pβ, Dv = 1 − Pα.

    In the Löwdin basis (D' = S^½ D S^½, F' = X F X, 1 the kept-space projector) the
    three blocks that every ROHF canonicalisation leaves invariant must vanish:
    Dc'(F'α + F'β)Dv' (closed–virtual), Dc' F'β Do' (closed–open),
    Do' F'α Dv' (open–virtual). The value is the largest element of the three.
    f and d are (2, nao, nao): alpha and beta Fock matrices and densities.
    """
    r = low.root
    dc = r @ d[1] @ r
    do = r @ (d[0] - d[1]) @ r
    dv = low.projector - r @ d[0] @ r
    fa, fb = low.x @ f[0] @ low.x, low.x @ f[1] @ low.x
    blocks = (("closed–virtual block of Fα+Fβ", dc @ (fa + fb) @ dv),
              ("closed–open block of Fβ", dc @ fb @ do),
              ("open–virtual block of Fα", do @ fa @ dv))
    best = (0.0, (), "")
    for name, block in blocks:
        value, idx = worst(block)
        if not value <= best[0]:
            best = (value, idx, name)
    value, idx, name = best
    return Measurement(value, "max ROHF gradient block",
                       locate(name, "Löwdin element", idx, labels) if idx else "")


def roothaan_hall(f: np.ndarray, c: np.ndarray, e: np.ndarray, low: Lowdin) -> Measurement:
    """max |X (F C − S C ε)| per spin: the orbitals are eigenvectors of the Fock matrix.

    f (ns, nao, nao), c (ns, nao, nmo), e (ns, nmo) orbital energies in Eh. In the
    Löwdin basis this is the residual F' C' − C' ε of an ordinary eigenproblem.
    """
    best = (0.0, (), "")
    for spin, fs, cs, es in zip(spin_names(len(f)), f, c, e):
        r = low.x @ fs @ cs - low.root @ cs * es
        value, idx = worst(r)
        if not value <= best[0]:
            best = (value, idx, spin)
    value, idx, spin = best
    where = ""
    if idx:
        where = f"{spin + ', ' if spin else ''}orbital {idx[1]} (ε = {e[spin_names(len(f)).index(spin)][idx[1]]:.6f} Eh)"
    return Measurement(value, "max|X(FC − SCε)|", where)
