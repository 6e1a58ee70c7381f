"""Stationarity of the SCF energy: the commutator, the ROHF conditions, Roothaan–Hall.

All in the Löwdin-orthonormal basis X = S^(-1/2) (see ``harness.checks.orthonormal``),
where F' = X F X and P' = S^(1/2) P S^(1/2), so that X (F P S − S P F) X = F'P' − P'F'.
Fock matrices in Eh.
"""

from __future__ import annotations

import numpy as np

from harness.checks.orthonormal import Lowdin, locate, worst_of
from harness.checks.spin import spin_names
from harness.contract.results import Measurement, fixed


def commutator(f: np.ndarray, d: np.ndarray, s: np.ndarray, low: Lowdin,
               labels=None) -> Measurement:
    """max |X (F P S − S P F) X| over spin components (RHF: total P; UHF: Pσ with Fσ).

    f, d are (ns, nao, nao). Vanishes at any stationary point of the SCF energy; this is
    the measure ``problem.convergence`` asks a code to bring below its threshold.
    """
    value, idx, spin = worst_of((spin, low.x @ (fs @ ds @ s - s @ ds @ fs) @ low.x)
                                for spin, fs, ds in zip(spin_names(len(f)), f, d))
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
    value, idx, name = worst_of(blocks)
    return Measurement(value, "max ROHF gradient block",
                       locate(name, "Löwdin element", idx, labels) if idx else "")


def roothaan_hall(f: np.ndarray, c: np.ndarray, e: np.ndarray, low: Lowdin) -> Measurement:
    """max |X (F C − S C ε)| per spin: the orbitals are eigenvectors of the Fock matrix.

    f (ns, nao, nao), c (ns, nao, nmo), e (ns, nmo) orbital energies in Eh. In the
    Löwdin basis this is the residual F' C' − C' ε of an ordinary eigenproblem.
    """
    names = spin_names(len(f))
    value, idx, spin = worst_of((spin, low.x @ fs @ cs - low.root @ cs * es)
                                for spin, fs, cs, es in zip(names, f, c, e))
    where = ""
    if idx:
        eps = e[names.index(spin)][idx[1]]
        where = f"{spin + ', ' if spin else ''}orbital {idx[1]} (ε = {fixed(eps, 6)} Eh)"
    return Measurement(value, "max|X(FC − SCε)|", where)
