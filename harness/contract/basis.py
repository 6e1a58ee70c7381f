"""The basis set of a problem as plain Python data, and as NWChem-format text.

``Problem.basis_set`` is a dict ``{element symbol: (Shell, ...)}`` in order of first
appearance in the molecule; each :class:`Shell` is a named tuple ``(l, exponents,
coefficients)``: the angular momentum (0 = s, 1 = p, ...), the primitive exponents
(bohr⁻²) and the contraction coefficients, one tuple per contracted function
(``coefficients[k][i]`` multiplies primitive ``i`` in contracted function ``k``; a
general contraction has several). The values are those the reference is computed with,
at full precision, as pyscf read them from its basis library *before* its own
normalisation of the contracted functions (the coefficients are those of normalised
primitives, as basis-set files list them).

:func:`nwchem_text` writes the same data in NWChem's text format: the ``basis.nwchem``
file ``--command`` writes into every scratch directory and ``Problem.basis_nwchem``.
No pyscf here: the data come through ``harness.backend.mole.basis_set``.
"""

from __future__ import annotations

from typing import Mapping, NamedTuple

#: Shell letters by angular momentum, as NWChem writes them.
SHELL_LETTERS = "SPDFGHIKLM"


class Shell(NamedTuple):
    """One shell: angular momentum ``l``, exponents (bohr⁻²) and contraction coefficients
    (one tuple per contracted function, each as long as ``exponents``). A plain tuple:
    it compares equal to ``(l, exponents, coefficients)`` and pickles and serialises as one."""

    l: int
    exponents: tuple[float, ...]
    coefficients: tuple[tuple[float, ...], ...]

    @classmethod
    def from_rows(cls, l: int, rows) -> "Shell":
        """A shell from rows ``[exponent, c1, c2, ...]`` (one per primitive: the layout of
        basis-set files and of pyscf's internal format)."""
        rows = [tuple(float(x) for x in row) for row in rows]
        width = max((len(r) for r in rows), default=1)
        if any(len(r) != width for r in rows) or width < 2:
            raise ValueError(f"shell l={l}: rows of unequal length or no coefficient")
        exponents = tuple(r[0] for r in rows)
        coefficients = tuple(tuple(r[k] for r in rows) for k in range(1, width))
        return cls(int(l), exponents, coefficients)

    def rows(self) -> list[list[float]]:
        """``[[exponent, c1, c2, ...], ...]``, one row per primitive."""
        return [[e, *(c[i] for c in self.coefficients)] for i, e in enumerate(self.exponents)]

    @property
    def n_contracted(self) -> int:
        """Number of contracted functions (columns) in this shell."""
        return len(self.coefficients)


#: The type of ``Problem.basis_set``.
BasisSet = Mapping[str, tuple[Shell, ...]]


def nwchem_text(basis_set: BasisSet, *, cartesian: bool, title: str = "") -> str:
    """``basis_set`` in NWChem's text format, at full precision (``repr`` of each float).

    A ``BASIS "ao basis" SPHERICAL|CARTESIAN PRINT`` header, then per element a
    ``#BASIS SET: <symbol>`` comment and per shell a line ``<symbol> <S|P|D|...>`` and one
    line per primitive ``exponent c1 c2 ...`` (general contractions keep their columns);
    ``END`` closes it. ``title`` becomes a leading ``#`` comment. pyscf's NWChem parser
    reads it back to the same data (tests/unit/test_basis_set.py).
    """
    out = []
    if title:
        out.append(f"# {title}")
    out.append(f'BASIS "ao basis" {"CARTESIAN" if cartesian else "SPHERICAL"} PRINT')
    for symbol, shells in basis_set.items():
        out.append(f"#BASIS SET: {symbol}")
        for shell in shells:
            out.append(f"{symbol:<2}    {SHELL_LETTERS[shell.l]}")
            for row in shell.rows():
                out.append("  " + "  ".join(repr(float(x)) for x in row))
    out.append("END")
    return "\n".join(out) + "\n"


def as_rows(basis_set: BasisSet) -> dict[str, list]:
    """``{symbol: [[l, [exponent, c1, ...], ...], ...]}``: the layout of pyscf's own basis
    dictionaries (the form the reference input hash has always hashed)."""
    return {symbol: [[shell.l, *shell.rows()] for shell in shells]
            for symbol, shells in basis_set.items()}
