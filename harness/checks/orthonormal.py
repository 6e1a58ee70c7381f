"""Lowdin orthonormalisation and the orthonormality of orbitals.

All matrices in the AO basis of the case; lengths in bohr.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from harness.checks.spin import spin_names
from harness.contract.results import Measurement

#: Overlap eigenvalues below this are treated as linear dependencies and projected out
#: of the orthonormal basis (the same order as common SCF codes use for dropping
#: near-dependent combinations); the bases shipped have smallest eigenvalues ≥ 1e-4.
LINEAR_DEPENDENCE = 1e-8


@dataclasses.dataclass(frozen=True)
class Lowdin:
    """X = S^(-1/2) and S^(1/2) on the space of overlap eigenvalues ≥ LINEAR_DEPENDENCE.

    With S = U s Uᵀ and the kept eigenvalues s_k: X = U_k s_k^(-1/2) U_kᵀ,
    root = U_k s_k^(1/2) U_kᵀ and projector = U_k U_kᵀ (the identity when nothing is
    dropped). Then Xᵀ S X = projector.
    """

    x: np.ndarray
    root: np.ndarray
    projector: np.ndarray
    n_dropped: int


def lowdin(s: np.ndarray, threshold: float = LINEAR_DEPENDENCE) -> Lowdin:
    """Symmetric (Löwdin) orthonormalising transformation of the overlap matrix ``s``."""
    w, u = np.linalg.eigh(s)
    keep = w >= threshold
    uk, wk = u[:, keep], w[keep]
    x = (uk * wk ** -0.5) @ uk.T
    root = (uk * wk ** 0.5) @ uk.T
    return Lowdin(x=x, root=root, projector=uk @ uk.T, n_dropped=int((~keep).sum()))


#: Elements within this relative distance of the largest one count as tied for the place
#: named in a message, and the first of them (lowest index) is named. Symmetry-equivalent
#: elements (the two H of water) differ only by round-off, ~1e-15 relative; without this the
#: place named would depend on the last bits of the BLAS in use. Not a tolerance of any check:
#: the value reported is always the largest element itself.
LOCATION_TIE = 1e-9


def worst(a: np.ndarray) -> tuple[float, tuple[int, ...]]:
    """Largest absolute element of ``a`` and its index (NaN counts as largest).

    Of elements tied within :data:`LOCATION_TIE` (relative) the first is named."""
    a = np.abs(a)
    if np.isnan(a).any():
        return float("nan"), tuple(int(i) for i in np.argwhere(np.isnan(a))[0])
    if a.size == 0:
        return 0.0, ()
    top = float(a.max())
    flat = int(np.flatnonzero(a.ravel() >= top * (1.0 - LOCATION_TIE))[0])
    idx = np.unravel_index(flat, a.shape)
    return top, tuple(int(i) for i in idx)


def worst_of(named) -> tuple[float, tuple[int, ...], str]:
    """The largest absolute element over several ``(label, array)`` pairs.

    Returns (value, index, label) of the worst one; NaN anywhere wins.
    """
    best = (0.0, (), "")
    for label, a in named:
        value, idx = worst(a)
        if not value <= best[0]:
            best = (value, idx, label)
    return best


def locate(spin: str, kind: str, index: tuple[int, ...], labels=None) -> str:
    """Word a location: ``"alpha, AO element (3, 5) = (O 2pz, H 1s)"``."""
    head = f"{spin}, " if spin else ""
    text = f"{head}{kind} ({', '.join(str(i) for i in index)})"
    if labels is not None and index and all(i < len(labels) for i in index):
        text += " = (" + ", ".join(" ".join(str(labels[i]).split()) for i in index) + ")"
    return text


def orthonormality(c: np.ndarray, s: np.ndarray) -> Measurement:
    """max |Cᵀ S C − 1| over spin components; c is (ns, nao, nmo), s the overlap (nao, nao).

    Zero for orbitals orthonormal in the overlap metric; the worst MO pair is reported.
    """
    value, idx, spin = worst_of((spin, cs.T @ s @ cs - np.eye(cs.shape[1]))
                                for spin, cs in zip(spin_names(len(c)), c))
    return Measurement(value, "max|CᵀSC − 1|", locate(spin, "MO pair", idx) if idx else "")


def matrix_difference(a: np.ndarray, b: np.ndarray, quantity: str, labels=None) -> Measurement:
    """max |A − B| for two AO matrices of the same shape, worst AO element located."""
    value, idx = worst(np.asarray(a) - np.asarray(b))
    where = locate("", "AO element", idx, labels) if idx and not value == 0 else ""
    return Measurement(value, quantity, where)
