"""Write the synthetic n-alkane geometries of the `large` suite (references/suites/large.toml).

Usage: python ci/make_alkanes.py  (rewrites references/suites/large-data/alkane-cNN.xyz)

Synthetic geometries, built here from standard values (from memory, not from a cited
source this session): all-trans zig-zag carbon chain in the xy plane, C–C 1.54 Å,
C–H 1.09 Å, every bond angle tetrahedral (arccos(−1/3) = 109.47°). Each carbon's two
hydrogens lie in the plane through the carbon perpendicular to the chain plane,
bisected by the outward bisector of its C–C bonds; the terminal carbons get a third
hydrogen where the next carbon of the zig-zag would be. Ångström. In cc-pVDZ
(spherical) C_nH_(2n+2) has 24n + 10 basis functions: n = 8, 16, 33 give 202, 394, 802.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

CC, CH = 1.54, 1.09
THETA = np.arccos(-1.0 / 3.0)
SIZES = (8, 16, 33)
OUT = Path(__file__).resolve().parents[1] / "references" / "suites" / "large-data"


def alkane(n: int) -> list[tuple[str, np.ndarray]]:
    """Atoms (symbol, position in Å) of all-trans C_nH_(2n+2)."""
    dx, dy = CC * np.sin(THETA / 2), CC * np.cos(THETA / 2)
    chain = [np.array([k * dx, (k % 2) * dy, 0.0]) for k in range(-1, n + 1)]  # with ghosts
    atoms = [("C", chain[k]) for k in range(1, n + 1)]
    z = np.array([0.0, 0.0, 1.0])
    half = THETA / 2
    for k in range(1, n + 1):
        c, a, b = chain[k], chain[k - 1], chain[k + 1]
        u = (c - a) / np.linalg.norm(c - a) + (c - b) / np.linalg.norm(c - b)
        u /= np.linalg.norm(u)
        for sign in (1.0, -1.0):
            atoms.append(("H", c + CH * (np.cos(half) * u + sign * np.sin(half) * z)))
    for end, ghost in ((1, 0), (n, n + 1)):
        c, g = chain[end], chain[ghost]
        atoms.append(("H", c + CH * (g - c) / np.linalg.norm(g - c)))
    return atoms


def main() -> None:
    OUT.mkdir(parents=True, exist_ok=True)
    for n in SIZES:
        atoms = alkane(n)
        lines = [str(len(atoms)),
                 f"n-C{n}H{2 * n + 2} all-trans, synthetic geometry from standard bond lengths "
                 f"and tetrahedral angles (ci/make_alkanes.py)"]
        lines += [f"{s:2s} {x:14.8f} {y:14.8f} {zz:14.8f}" for s, (x, y, zz) in atoms]
        (OUT / f"alkane-c{n:02d}.xyz").write_text("\n".join(lines) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
