"""The plug-in contract, input side: the read-only ``Problem`` handed to an SCF code.

All quantities are in atomic units: coordinates in bohr, energies in hartree (Eh).
"""

from __future__ import annotations

import dataclasses
import numpy as np

from harness.contract import defaults as _defaults
from harness.contract.errors import CaseError

METHODS = ("rhf", "uhf", "rohf", "rks", "uks", "roks")
#: Kohn–Sham methods: need ``functional``; get a pinned ``grid`` (docs/kohn-sham.md).
KS_METHODS = ("rks", "uks", "roks")
#: The Hartree–Fock method with the same orbital structure (shapes, occupations, checks).
HF_SHAPE = {"rhf": "rhf", "uhf": "uhf", "rohf": "rohf", "rks": "rhf", "uks": "uhf",
            "roks": "rohf"}

#: Default stationarity asked of a plug-in (``harness.contract.defaults``).
DEFAULT_CONVERGENCE = _defaults.DEFAULT_CONVERGENCE


def _frozen_array(values, dtype, shape_name: str, case: str) -> np.ndarray:
    try:
        arr = np.array(values, dtype=dtype)
    except (TypeError, ValueError) as exc:
        raise CaseError(f"not a numeric array ({exc})", case=case, field=shape_name) from None
    arr.setflags(write=False)
    return arr


#: Largest |charge| accepted (a molecule's charge; larger values are typing errors).
MAX_CHARGE = 1000
#: Nuclei closer than this (bohr) coincide: pyscf cannot build such a molecule. (Files
#: are held to a far larger bound, ``harness.catalogue.cases.CLOSEST_NUCLEI``; programs may build
#: nearly coincident nuclei on purpose, e.g. to make a basis nearly linearly dependent.)
COINCIDENT_NUCLEI = 1e-6
#: Largest |coordinate| accepted (bohr): far beyond any molecule, small enough that
#: distances and the nuclear repulsion stay finite in floating point.
MAX_COORDINATE = 1.0e4


def closest_pair(coordinates: np.ndarray) -> tuple[int, int, float]:
    """(i, j, R_ij) of the two nuclei closest to each other (i < j; bohr in, bohr out);
    (0, 0, inf) for a single atom."""
    if len(coordinates) < 2:
        return 0, 0, float("inf")
    diff = coordinates[:, None, :] - coordinates[None, :, :]
    dist = np.sqrt((diff ** 2).sum(-1)) + np.diag(np.full(len(coordinates), np.inf))
    i, j = sorted(int(k) for k in np.unravel_index(int(np.argmin(dist)), dist.shape))
    return i, j, float(dist[i, j])


def _check_geometry(coordinates: np.ndarray, name: str) -> None:
    """One-line CaseError for coordinates out of range or coinciding nuclei
    (coordinates in bohr, shape (natm, 3))."""
    big = float(np.abs(coordinates).max())
    if big > MAX_COORDINATE:
        raise CaseError(f"|x| = {big:.3g} bohr exceeds {MAX_COORDINATE:g} bohr (far beyond "
                        f"any molecule)", case=name, field="coordinates")
    i, j, r = closest_pair(coordinates)
    if r < COINCIDENT_NUCLEI:
        raise CaseError(f"atoms {i + 1} and {j + 1} coincide ({r:.3g} bohr apart)",
                        case=name, field="coordinates")


def build_mole(numbers, coordinates, *, charge: int, multiplicity: int, basis: str,
               cartesian: bool):
    """Build the pyscf ``Mole`` for a case: coordinates in bohr, symmetry off, quiet
    (:func:`harness.backend.mole.build_mole`)."""
    from harness.backend.mole import build_mole as backend_build_mole

    return backend_build_mole(numbers, coordinates, charge=charge, multiplicity=multiplicity,
                              basis=basis, cartesian=cartesian)


def _check_functional(method: str, functional, name: str) -> str | None:
    """The functional name, lower-case, checked with pyscf/libxc; None for HF methods."""
    if method not in KS_METHODS:
        if functional not in (None, ""):
            raise CaseError(f"is only for Kohn–Sham methods (rks, uks, roks), got "
                            f"{functional!r} with {method}", case=name, field="functional")
        return None
    if not isinstance(functional, str) or not functional.strip():
        raise CaseError(f"{method} needs an exchange–correlation functional (a libxc name "
                        f"as pyscf spells it, e.g. 'pbe'), got {functional!r}", case=name,
                        field="functional")
    from harness.backend.grid import check_functional

    functional = functional.strip().lower()
    why = check_functional(functional)
    if why is not None:
        raise CaseError(f"{functional!r}: {why}", case=name, field="functional")
    return functional


@dataclasses.dataclass(frozen=True)
class Problem:
    """One SCF problem: a molecule, a basis, a method and the stationarity asked for.

    Attributes (read-only):
        name: case id, e.g. ``"water-cc-pvdz-rhf"``.
        numbers: atomic numbers, int array (natm,).
        coordinates: nuclear positions in **bohr**, float array (natm, 3).
        charge: total charge.
        multiplicity: 2S + 1.
        basis: a basis name pyscf knows ("sto-3g", "6-31g*", "cc-pvdz").
        cartesian: True for cartesian (6D, 10F) shells, False for spherical harmonics.
        method: "rhf", "uhf", "rohf" (Hartree–Fock) or "rks", "uks", "roks" (Kohn–Sham;
            shapes and occupations as for rhf, uhf, rohf).
        convergence: the stationarity the code must reach: max |X^T (F P S - S P F) X|
            with X = S^(-1/2) (see README).
        ao_labels: the AO order the harness expects (pyscf's for this basis and flag).
        initial_density: optional starting density a code may use or ignore (None).
        functional: Kohn–Sham only: the exchange–correlation functional, a libxc name as
            pyscf spells it ("lda,vwn", "pbe", "b3lyp", "pbe0", "wb97x"); None for HF.
        grid: Kohn–Sham only: the pinned quadrature grid
            (:class:`harness.contract.grid.Grid`: ``coords`` bohr (ngrid, 3), ``weights``
            (ngrid,), ``description``, ``hash``); None for HF.

    Properties computed on request: ``basis_set`` (the exact basis the reference uses,
    as plain data: ``{symbol: (Shell(l, exponents, coefficients), ...)}``, see
    ``harness.contract.basis``) and ``basis_nwchem`` (the same as NWChem-format text);
    ``n_electrons``, ``n_alpha``, ``n_beta``, ``nao``.
    """

    name: str
    numbers: np.ndarray
    coordinates: np.ndarray
    charge: int
    multiplicity: int
    basis: str
    cartesian: bool
    method: str
    convergence: float = DEFAULT_CONVERGENCE
    ao_labels: tuple[str, ...] = ()
    initial_density: np.ndarray | None = None
    functional: str | None = None
    grid: object | None = None

    @classmethod
    def create(cls, *, name: str, numbers, coordinates, charge: int = 0,
               multiplicity: int = 1, basis: str, cartesian: bool = False,
               method: str = "rhf", convergence: float = DEFAULT_CONVERGENCE,
               initial_density=None, functional: str | None = None,
               grid=None) -> "Problem":
        """Validate the inputs, compute the AO labels with pyscf, return a Problem.

        ``coordinates`` are in bohr. Raises ``CaseError`` naming the case and field.
        """
        numbers = _frozen_array(numbers, np.int64, "numbers", name)
        coordinates = _frozen_array(coordinates, np.float64, "coordinates", name)
        if numbers.ndim != 1 or numbers.size == 0:
            raise CaseError("must be a non-empty list of atomic numbers", case=name, field="numbers")
        if np.any(numbers < 1) or np.any(numbers > 118):
            raise CaseError(f"atomic numbers must lie in 1..118, got {numbers.tolist()}",
                            case=name, field="numbers")
        if coordinates.shape != (numbers.size, 3):
            raise CaseError(f"shape {coordinates.shape} does not match {numbers.size} atoms "
                            f"(expected ({numbers.size}, 3))", case=name, field="coordinates")
        if not np.all(np.isfinite(coordinates)):
            raise CaseError("contains NaN or inf", case=name, field="coordinates")
        method = str(method).lower()
        if method not in METHODS:
            raise CaseError(f"must be one of {', '.join(METHODS)}, got {method!r}",
                            case=name, field="method")
        if not isinstance(multiplicity, (int, np.integer)) or multiplicity < 1:
            raise CaseError(f"must be a positive integer, got {multiplicity!r}",
                            case=name, field="multiplicity")
        if not isinstance(charge, (int, np.integer)):
            raise CaseError(f"must be an integer, got {charge!r}", case=name, field="charge")
        n_electrons = int(numbers.sum()) - int(charge)
        spin = int(multiplicity) - 1
        if n_electrons < 1:
            raise CaseError(f"charge {charge} leaves {n_electrons} electrons", case=name,
                            field="charge")
        if (n_electrons - spin) % 2 != 0 or spin > n_electrons:
            raise CaseError(f"multiplicity {multiplicity} is impossible with {n_electrons} "
                            f"electrons", case=name, field="multiplicity")
        if method in ("rhf", "rks") and spin != 0:
            other = "uhf or rohf" if method == "rhf" else "uks or roks"
            raise CaseError(f"{method} needs a singlet, got multiplicity {multiplicity} "
                            f"(use {other})", case=name, field="method")
        functional = _check_functional(method, functional, name)
        if not (isinstance(convergence, (int, float)) and 0 < convergence < 1):
            raise CaseError(f"must be a number in (0, 1), got {convergence!r}", case=name,
                            field="convergence")
        basis = str(basis).strip().lower()
        if not basis:
            raise CaseError("must name a basis pyscf knows, got ''", case=name, field="basis")
        if abs(int(charge)) > MAX_CHARGE:
            raise CaseError(f"must lie in −{MAX_CHARGE}..{MAX_CHARGE}, got {charge}",
                            case=name, field="charge")
        _check_geometry(coordinates, name)
        try:
            mol = build_mole(numbers, coordinates, charge=int(charge),
                             multiplicity=int(multiplicity), basis=basis,
                             cartesian=bool(cartesian))
        except Exception as exc:  # pyscf raises many kinds for an unknown basis
            raise CaseError(f"pyscf cannot build {basis!r} for this molecule "
                            f"({type(exc).__name__}: {exc})".splitlines()[0],
                            case=name, field="basis") from None
        if n_electrons > 2 * mol.nao:
            raise CaseError(f"charge {charge} gives {n_electrons} electrons; {basis} holds at "
                            f"most {2 * mol.nao} ({mol.nao} functions)", case=name,
                            field="charge")
        if (n_electrons + spin) // 2 > mol.nao:
            raise CaseError(f"multiplicity {multiplicity} needs {(n_electrons + spin) // 2} "
                            f"alpha orbitals; {basis} has {mol.nao} functions", case=name,
                            field="multiplicity")
        if initial_density is not None:
            initial_density = _frozen_array(initial_density, np.float64, "initial_density", name)
        if functional is not None and grid is None:
            from harness.backend.grid import pinned_grid

            grid = pinned_grid(mol)
        elif functional is None:
            grid = None
        return cls(name=name, numbers=numbers, coordinates=coordinates, charge=int(charge),
                   multiplicity=int(multiplicity), basis=basis, cartesian=bool(cartesian),
                   method=method, convergence=float(convergence),
                   ao_labels=tuple(mol.ao_labels()), initial_density=initial_density,
                   functional=functional, grid=grid)

    @property
    def is_kohn_sham(self) -> bool:
        return self.method in KS_METHODS

    @property
    def shape_method(self) -> str:
        """The HF method with this method's orbital structure (rks → rhf, uks → uhf,
        roks → rohf)."""
        return HF_SHAPE[self.method]

    @property
    def n_electrons(self) -> int:
        return int(self.numbers.sum()) - self.charge

    @property
    def n_alpha(self) -> int:
        return (self.n_electrons + self.multiplicity - 1) // 2

    @property
    def n_beta(self) -> int:
        return (self.n_electrons - self.multiplicity + 1) // 2

    @property
    def nao(self) -> int:
        return len(self.ao_labels)

    @property
    def basis_set(self) -> dict:
        """The exact basis the reference uses, per element in order of first appearance:
        ``{"H": (Shell(l=0, exponents=(3.42525091, ...), coefficients=((0.15432897,
        ...),)), ...), ...}`` (exponents in bohr⁻², coefficients of normalised
        primitives, one tuple per contracted function; full precision, as pyscf's basis
        library has them). A new dict each time (its shells are tuples)."""
        from harness.backend.mole import basis_set

        return basis_set(self.to_pyscf())

    @property
    def basis_nwchem(self) -> str:
        """:attr:`basis_set` in NWChem's text format (SPHERICAL or CARTESIAN as the
        problem): the ``basis.nwchem`` file a ``--command`` code finds in its folder."""
        from harness.contract.basis import nwchem_text

        title = (f"scf-harness: basis {self.basis!r} "
                 f"({'cartesian' if self.cartesian else 'spherical'}) of case {self.name}, "
                 f"exactly as the reference uses it")
        return nwchem_text(self.basis_set, cartesian=self.cartesian, title=title)

    def to_pyscf(self):
        """A pyscf ``Mole`` built exactly as the reference builds it (bohr, symmetry off)."""
        from harness.backend.mole import mole_for

        return mole_for(self)

    def replace(self, **changes) -> "Problem":
        """A copy with some fields changed (re-validated)."""
        fields = {f.name: getattr(self, f.name) for f in dataclasses.fields(self)
                  if f.name != "ao_labels"}
        fields.update(changes)
        return Problem.create(**fields)

    def __repr__(self) -> str:
        return (f"Problem({self.name!r}, {self.method}"
                f"{'(' + self.functional + ')' if self.functional else ''}/{self.basis}"
                f"{' cartesian' if self.cartesian else ''}, charge={self.charge}, "
                f"multiplicity={self.multiplicity}, nao={self.nao}, "
                f"convergence={self.convergence:g})")
