"""The aufbau principle: occupied orbitals are the lowest ones (orbital energies in Eh)."""

from __future__ import annotations

import numpy as np

from harness.checks.spin import spin_names
from harness.contract.results import Measurement, fixed


def aufbau(e: np.ndarray, occ: np.ndarray) -> Measurement:
    """max over spins of ε_HOMO − ε_LUMO (negative when there is a gap).

    e and occ are (ns, nmo); an orbital counts as occupied when its occupation > ½.
    A positive value means an empty orbital lies below an occupied one.
    """
    best = (-np.inf, "")
    for spin, es, ns in zip(spin_names(len(e)), e, occ):
        occupied, empty = es[ns > 0.5], es[ns <= 0.5]
        if occupied.size == 0 or empty.size == 0:
            continue
        homo, lumo = float(occupied.max()), float(empty.min())
        value = homo - lumo
        if np.isnan(value) or value > best[0]:
            i = int(np.flatnonzero(ns > 0.5)[np.argmax(occupied)])
            a = int(np.flatnonzero(ns <= 0.5)[np.argmin(empty)])
            head = f"{spin}, " if spin else ""
            best = (value, f"{head}occupied orbital {i} (ε = {fixed(homo, 6)}) above empty "
                           f"orbital {a} (ε = {fixed(lumo, 6)})")
    value, where = best  # -inf when no spin has both occupied and empty orbitals
    return Measurement(float(value), "ε_HOMO − ε_LUMO", where)
