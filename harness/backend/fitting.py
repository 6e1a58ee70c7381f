"""Density-fitted Coulomb and exchange matrices of a *small* density difference.

Used only for J/K(ΔP), ΔP = P_code − P_ref, on top of the exact J/K(P_ref) stored with a
reference (``harness.verdict.coulomb`` decides when; the exact build stays the fallback).
pyscf supplies the three- and two-centre integrals of its default J/K-fitting auxiliary
basis for the orbital basis (``pyscf.df.make_auxbasis``: cc-pVXZ-JKFIT for cc-pVXZ,
def2-universal-JKFIT or even-tempered functions otherwise). Units: Eh, bohr.

Robust Coulomb-metric fitting, with (L|pq) the three-centre integrals and
(L|M) = Lc Lcᵀ the Cholesky factor of the two-centre metric, B = Lc⁻¹ (L|pq):

    J̃[D]_pq = Σ_L B_L,pq Σ_rs B_L,rs D_rs
    K̃[D]_pq = Σ_L Σ_rs B_L,pr D_rs B_L,sq = Σ_i w_i Σ_L (B_L u_i)_p (B_L u_i)_q

with D = Σ_i w_i u_i u_iᵀ (eigenpairs of D with |w_i| > RANK_CUTOFF; ΔP of two
idempotent densities has rank ≤ 2 N_occ). Both are linear in D, so J̃[ΔP] carries the
fitting error of ΔP only, not of P. Memory: the fitted tensor B, naux × n(n+1)/2 doubles
(FITTING_MAX_BYTES caps it); no n⁴ array.
"""

from __future__ import annotations

import numpy as np

#: Eigenvalues of a density difference with |w| at or below this are dropped before the
#: exchange build: their contribution to any J/K element is below ~1e-14 Eh (elements of
#: (pq|rs) are O(1) Eh and the eigenvectors are normalised), far under every tolerance,
#: and rounding noise of P − P_ref (~1e-17 per element) produces such eigenvalues.
RANK_CUTOFF = 1e-14

#: Largest fitted three-centre tensor (bytes) the checks build; above it the exact
#: (integral-direct) J/K build is used. 1 GiB: benzene/cc-pVDZ needs 29 MB, ~200 AO
#: ~0.2 GB; the cap keeps a shared 2-core machine's memory for the plug-ins.
FITTING_MAX_BYTES = 1 << 30

#: Bytes of the unpacked (block, n, n) slab of B the exchange build holds at once.
_SLAB_BYTES = 128 << 20


def auxiliary_size(mol) -> int:
    """Number of auxiliary functions pyscf's default J/K-fitting basis gives ``mol``."""
    from pyscf import df

    return int(df.addons.make_auxmol(mol, df.make_auxbasis(mol)).nao_nr())


def fitting_bytes(mol) -> int:
    """Bytes of the fitted tensor B for ``mol``: naux × n(n+1)/2 doubles."""
    n = int(mol.nao_nr())
    return auxiliary_size(mol) * (n * (n + 1) // 2) * 8


class FittedJK:
    """J̃ and K̃ (see the module docstring) for one pyscf ``Mole``; B is built once."""

    def __init__(self, mol):
        import scipy.linalg
        from pyscf import df

        auxmol = df.addons.make_auxmol(mol, df.make_auxbasis(mol))
        self.nao = int(mol.nao_nr())
        self.naux = int(auxmol.nao_nr())
        int3 = df.incore.aux_e2(mol, auxmol, "int3c2e", aosym="s2ij")  # (npair, naux)
        metric = auxmol.intor("int2c2e", hermi=1)
        lc = scipy.linalg.cholesky(metric, lower=True)
        # B = Lc⁻¹ (L|pq), (naux, npair), in place on the transposed (C-order) view
        self.b = scipy.linalg.solve_triangular(lc, np.asarray(int3).T, lower=True,
                                               overwrite_b=True, check_finite=False)
        del int3
        self._tril = np.tril_indices(self.nao)

    def _packed(self, d: np.ndarray) -> np.ndarray:
        """Σ_rs over packed pairs: the lower triangle of D + Dᵀ − diag(D)."""
        sym = d + d.T
        sym[np.diag_indices(self.nao)] *= 0.5
        return sym[self._tril]

    def _unpack(self, packed: np.ndarray) -> np.ndarray:
        out = np.zeros((self.nao, self.nao))
        out[self._tril] = packed
        out = out + out.T
        out[np.diag_indices(self.nao)] *= 0.5
        return out

    def j(self, d: np.ndarray) -> np.ndarray:
        """J̃[D] of one symmetric (nao, nao) density, Eh."""
        gamma = self.b @ self._packed(np.asarray(d, dtype=float))
        return self._unpack(gamma @ self.b)

    def k(self, d: np.ndarray) -> np.ndarray:
        """K̃[D] of one symmetric (nao, nao) density, Eh (blocked over auxiliary functions)."""
        from pyscf import lib

        n = self.nao
        w, u = np.linalg.eigh(0.5 * (d + d.T))
        keep = np.abs(w) > RANK_CUTOFF
        w, u = w[keep], np.ascontiguousarray(u[:, keep])
        out = np.zeros((n, n))
        r = len(w)
        if r == 0:
            return out
        step = max(1, _SLAB_BYTES // (8 * n * n))
        wt = None
        for a0 in range(0, self.naux, step):
            blk = lib.unpack_tril(self.b[a0:a0 + step])  # (nb, n, n)
            nb = blk.shape[0]
            t = (blk.reshape(nb * n, n) @ u).reshape(nb, n, r)   # (B_L u_i)_p
            t = t.transpose(1, 0, 2).reshape(n, nb * r)
            if wt is None or wt.size != nb * r:
                wt = np.tile(w, nb)
            out += (t * wt) @ t.T
        return 0.5 * (out + out.T)

    def jk_components(self, dd: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """J̃ and K̃ of each component of ``dd`` (leading spin axis): (ns, nao, nao) each."""
        dd = np.asarray(dd, dtype=float)
        return (np.stack([self.j(x) for x in dd]), np.stack([self.k(x) for x in dd]))
