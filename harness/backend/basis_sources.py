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
