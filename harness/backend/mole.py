"""pyscf molecules, element data, versions and thread settings, as plain values.

The rest of the harness reaches pyscf only through ``harness.backend``; this module is
where a case becomes a pyscf ``Mole``. Units: bohr.
"""

from __future__ import annotations


def build_mole(numbers, coordinates, *, charge: int, multiplicity: int, basis: str,
               cartesian: bool):
    """Build the pyscf ``Mole`` for a case: coordinates in bohr, symmetry off, quiet.

    This is the single place where a case becomes a pyscf molecule; the references,
    the integrals used by the checks and ``Problem.to_pyscf`` all go through it.
    """
    from pyscf import gto

    atom = [(int(z), tuple(float(x) for x in xyz)) for z, xyz in zip(numbers, coordinates)]
    mol = gto.Mole()
    mol.atom = atom
    mol.unit = "Bohr"
    mol.basis = basis
    mol.cart = bool(cartesian)
    mol.charge = int(charge)
    mol.spin = int(multiplicity) - 1
    mol.symmetry = False
    mol.verbose = 0
    mol.output = None
    mol.max_memory = 4000
    mol.build(parse_arg=False, dump_input=False)
    return mol


def mole_for(problem):
    """The pyscf ``Mole`` of a :class:`harness.contract.problem.Problem` (bohr)."""
    return build_mole(problem.numbers, problem.coordinates, charge=problem.charge,
                      multiplicity=problem.multiplicity, basis=problem.basis,
                      cartesian=problem.cartesian)


def basis_set(mol):
    """The basis a ``Mole`` uses, per element in order of first appearance:
    ``{symbol: (Shell, ...)}`` (``harness.contract.basis.Shell``: l, exponents in
    bohr⁻², contraction coefficients per contracted function), read from pyscf's
    formatted basis at full precision (the values of its basis library, before pyscf
    normalises the contracted functions). A relativistic ``kappa`` entry of a shell is
    dropped (non-relativistic SCF does not use it). The only reader of ``mol._basis``."""
    from harness.contract.basis import Shell

    order = []
    for i in range(mol.natm):
        symbol = mol.atom_symbol(i)
        if symbol not in order:
            order.append(symbol)
    order += [s for s in mol._basis if s not in order]
    out = {}
    for symbol in order:
        shells = []
        for shell in mol._basis[symbol]:
            rows = list(shell[1:])
            if rows and not isinstance(rows[0], (list, tuple)):
                rows = rows[1:]  # kappa
            shells.append(Shell.from_rows(int(shell[0]), rows))
        out[symbol] = tuple(shells)
    return out


def parse_nwchem_basis(text: str, symbol: str):
    """pyscf's NWChem parser on ``text`` for element ``symbol``, as ``(Shell, ...)``
    (for round-trip tests of ``harness.contract.basis.nwchem_text``)."""
    from pyscf.gto.basis import parse_nwchem

    from harness.contract.basis import Shell

    return tuple(Shell.from_rows(int(sh[0]), sh[1:])
                 for sh in parse_nwchem.parse(text, symbol))


def element_symbols() -> tuple[str, ...]:
    """Element symbols indexed by atomic number (index 0 is pyscf's ghost "X")."""
    from pyscf.data import elements

    return tuple(elements.ELEMENTS)


def covalent_radii():
    """Covalent radii (bohr) indexed by atomic number, pyscf's table, as a numpy array."""
    import numpy as np
    from pyscf.data import radii

    return np.asarray(radii.COVALENT)


def pyscf_version() -> str:
    """pyscf's version string."""
    import pyscf

    return str(pyscf.__version__)


def set_threads(n: int) -> None:
    """Number of OpenMP threads pyscf's library uses."""
    from pyscf import lib

    lib.num_threads(n)


def load_molden(path):
    """pyscf's Molden reader: ``(mol, mo_energy, mo_coeff, mo_occ)`` of the file (its
    own ``Mole``, bohr); raises whatever pyscf's parser raises on a broken file."""
    from pyscf.tools import molden

    mol, mo_energy, mo_coeff, mo_occ, _, _ = molden.load(str(path))
    return mol, mo_energy, mo_coeff, mo_occ
