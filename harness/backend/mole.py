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


def parse_nwchem(text: str, symbols) -> dict:
    """pyscf's internal basis of each element in ``symbols`` from NWChem-format ``text``
    (``pyscf.gto.basis.parse``). Raises ValueError (one line) naming the element when the
    text has no shells for it or does not parse."""
    from pyscf import gto

    out = {}
    for symbol in sorted(set(symbols)):
        block = _element_block(text, symbol)
        if not block:
            raise ValueError(f"has no shells for {symbol}")
        try:
            shells = gto.basis.parse(block)
        except Exception as exc:  # pyscf raises several kinds on broken text
            raise ValueError(f"does not parse for {symbol} ({type(exc).__name__}: "
                             f"{exc})".splitlines()[0]) from None
        if not shells:
            raise ValueError(f"has no shells for {symbol}")
        out[symbol] = shells
    return out


def _element_block(text: str, symbol: str) -> str:
    """The shells of one element from NWChem text holding several (pyscf's parser wants
    one element per block): each header line "<symbol> <S|P|SP|D|…>" of that element
    with the number lines that follow it; comments, BASIS and END lines dropped."""
    keep, mine = [], False
    for line in text.splitlines():
        words = line.split()
        if not words or words[0].startswith("#") or words[0].upper() in ("BASIS", "END"):
            continue
        if words[0][0].isalpha():
            mine = len(words) >= 2 and words[0].lower() == symbol.lower()
        if mine:
            keep.append(line)
    return "\n".join(keep)


def named_basis_shells(name: str, symbol: str) -> list:
    """pyscf's built-in basis ``name`` of element ``symbol`` as its internal list of
    shells ``[l, [exponent, c1, c2, …], …]`` (plain Python data)."""
    from pyscf import gto

    return gto.basis.load(name, symbol)


def mole_in_basis(problem, text: str):
    """The pyscf ``Mole`` of ``problem`` (its geometry in bohr, charge, spin, cartesian
    flag) in the basis given as NWChem-format ``text`` instead of the named one."""
    symbols = [element_symbols()[int(z)] for z in problem.numbers]
    return build_mole(problem.numbers, problem.coordinates, charge=problem.charge,
                      multiplicity=problem.multiplicity, basis=parse_nwchem(text, symbols),
                      cartesian=problem.cartesian)


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
