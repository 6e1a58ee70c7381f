"""The quadrature grid of a Kohn–Sham problem: points (bohr) and weights, as plain data.

The harness pins one grid per case (``harness.backend.grid`` builds it with pyscf) and
hands it to the code as ``problem.grid``: a code in *pinned* mode integrates its
exchange–correlation terms on exactly these points and weights, so its V_xc and E_xc
are comparable with the harness's to the Hartree–Fock tolerances.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json

import numpy as np


def grid_hash(coords: np.ndarray, weights: np.ndarray) -> str:
    """``"sha256:<hex>"`` of the little-endian float64 bytes of coords then weights."""
    h = hashlib.sha256()
    h.update(np.ascontiguousarray(coords, dtype="<f8").tobytes())
    h.update(np.ascontiguousarray(weights, dtype="<f8").tobytes())
    return "sha256:" + h.hexdigest()


@dataclasses.dataclass(frozen=True, eq=False)
class Grid:
    """A molecular quadrature grid (read-only).

    Attributes:
        coords: grid points in **bohr**, float array (ngrid, 3).
        weights: quadrature weights (bohr³, atomic partition included), (ngrid,);
            ∫ f(r) dr ≈ Σ_g weights[g] f(coords[g]).
        description: plain words and numbers: radial scheme, radial points and angular
            order per element, atomic partition, pruning, pyscf level (a dict).
        hash: :func:`grid_hash` of coords and weights.
    """

    coords: np.ndarray
    weights: np.ndarray
    description: dict
    hash: str

    @classmethod
    def create(cls, coords, weights, description=None) -> "Grid":
        coords = np.array(coords, dtype=np.float64)
        weights = np.array(weights, dtype=np.float64)
        if coords.ndim != 2 or coords.shape[1] != 3 or weights.shape != (coords.shape[0],):
            raise ValueError(f"grid coords {coords.shape} and weights {weights.shape} do not "
                             f"match (expected (ngrid, 3) and (ngrid,))")
        coords.setflags(write=False)
        weights.setflags(write=False)
        return cls(coords=coords, weights=weights, description=dict(description or {}),
                   hash=grid_hash(coords, weights))

    @property
    def size(self) -> int:
        return int(self.weights.shape[0])

    def describe(self) -> str:
        """One line: points, level, radial scheme, partition, pruning, hash prefix."""
        d = self.description
        return (f"{self.size} points (pyscf level {d.get('level')}, {d.get('radial')} radial, "
                f"{d.get('partition')} partition, {d.get('pruning')} pruning), "
                f"{self.hash[:19]}…")

    def description_json(self) -> str:
        return json.dumps(self.description, sort_keys=True)

    def __repr__(self) -> str:
        return f"Grid({self.describe()})"
