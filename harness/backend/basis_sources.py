"""Where named basis sets come from: pyscf's built-in copies (default) or the
``basis_set_exchange`` library (optional: ``pip install "scf-harness[bse]"``).

The exchange's data differ from pyscf's copies (more digits in STO-3G, cc-pVXZ contracted
differently, Li cc-pVDZ a different set, issue 11); a code that takes its bases from the
exchange is compared like for like when the reference is built from the same data.
"""

from __future__ import annotations

from harness.contract.errors import HarnessError

#: The accepted values of ``--basis-source``.
BASIS_SOURCES = ("pyscf", "bse")
DEFAULT_BASIS_SOURCE = "pyscf"


class BasisSourceError(HarnessError):
    """A basis source that cannot be used (unknown, library missing, basis not there)."""


def check_basis_source(source: str) -> str:
    """``source`` if usable; a one-line BasisSourceError naming how to install the
    exchange's library when ``bse`` is asked for without it."""
    if source not in BASIS_SOURCES:
        raise BasisSourceError(f"must be one of {', '.join(BASIS_SOURCES)}, got {source!r}",
                               field="--basis-source")
    if source == "bse":
        try:
            import basis_set_exchange  # noqa: F401
        except ImportError:
            raise BasisSourceError("bse needs the basis_set_exchange library: pip install "
                                   "'scf-harness[bse]' (or pip install basis-set-exchange)",
                                   field="--basis-source") from None
    return source


def bse_version() -> str:
    """The installed basis_set_exchange version."""
    import basis_set_exchange

    return str(basis_set_exchange.version())


def bse_basis(name: str, numbers) -> str:
    """NWChem-format text of basis ``name`` for the atomic numbers ``numbers`` from the
    basis_set_exchange library (``get_basis(name, elements, fmt="nwchem")``)."""
    check_basis_source("bse")
    import basis_set_exchange

    elements = sorted({int(z) for z in numbers})
    try:
        return basis_set_exchange.get_basis(name, elements=elements, fmt="nwchem",
                                            header=False)
    except Exception as exc:  # KeyError / RuntimeError for unknown names or elements
        raise BasisSourceError(f"the basis set exchange has no {name!r} for elements "
                               f"{elements} ({type(exc).__name__}: {exc})".splitlines()[0],
                               field="basis") from None


def cross_overlap(mol_a, mol_b):
    """⟨χ_a|χ_b⟩ (nao_a, nao_b) between the functions of two pyscf molecules with the same
    atoms (bohr), in each one's own AO layout (pyscf's ``intor_cross("int1e_ovlp")``)."""
    from pyscf import gto

    return gto.intor_cross("int1e_ovlp", mol_a, mol_b)


def contraction_columns(text: str) -> int:
    """The largest number of contraction columns of one shell of one angular momentum
    in NWChem-format basis ``text`` (1: segmented; more: a general contraction, as the
    exchange gives cc-pVXZ); SP (L) shells, one s and one p column, count as 1."""
    letter, most = None, 0
    for line in text.splitlines():
        words = line.split()
        if len(words) == 2 and words[0][:1].isalpha() and words[1].isalpha():
            letter = words[1].upper()
            continue
        if len(words) >= 2 and letter is not None:
            try:
                [float(w.replace("D", "E").replace("d", "e")) for w in words]
            except ValueError:
                continue
            most = max(most, 1 if letter in ("SP", "L") else len(words) - 1)
    return most


def other_source_basis(problem):
    """(NWChem text, label) of ``problem``'s named basis as the basis_set_exchange gives
    it, or None when the library is not installed or has no such basis."""
    try:
        text = bse_basis(problem.basis, problem.numbers)
    except BasisSourceError:
        return None
    return text, f"{problem.basis} from basis_set_exchange {bse_version()}"


def bse_installed() -> bool:
    try:
        import basis_set_exchange  # noqa: F401
    except ImportError:
        return False
    return True
