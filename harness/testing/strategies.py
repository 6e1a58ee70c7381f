"""Hypothesis strategies for SCF problems: transformed molecules, charge/spin, guesses.

For property tests of an SCF code (see :mod:`harness.testing.metamorphic`):

* :func:`variants` / :func:`molecules` draw a catalogue case (or one of yours), then
  apply bounded bond-length perturbations, an atom permutation, a rotation and a
  translation, and optionally another basis. Every transformation parameter is drawn so
  that 0 is the identity, and the cases are ordered by size, so hypothesis shrinks a
  failure toward the smallest molecule, in the smallest basis, with as few
  transformations as possible.
* :func:`charge_multiplicity` draws (charge, multiplicity) pairs consistent with an
  electron count.
* :func:`guesses` draws problems whose ``initial_density`` is a core-Hamiltonian guess
  rotated by a bounded random orbital rotation.

Profiles ``dev`` (10 examples) and ``ci`` (50 examples) are registered with hypothesis
when this module is imported (on top of any profile of the same name already registered,
such as hypothesis's own derandomized ``ci``); both have ``deadline=None``, because an SCF run's duration varies, and ``print_blob=True``, so
a failure prints the ``@reproduce_failure`` line. Select one with
``pytest --hypothesis-profile=ci`` (import this module in your conftest.py so the profile
exists when pytest starts). Every drawn molecule is also reported with
``hypothesis.note`` together with the Python expression that rebuilds it
(:func:`transform`), and counted with ``hypothesis.event``.

Atomic units throughout: coordinates and translations in bohr, angles in radians.
"""

from __future__ import annotations

import dataclasses
import math
from typing import Sequence

import numpy as np
from hypothesis import assume, event, note, settings
from hypothesis import strategies as st
from hypothesis.errors import InvalidArgument

from harness.catalogue.cases import Case

#: Largest rotation-vector component drawn (rad): the rotation axis × angle, so every
#: rotation up to a half turn about any axis can be drawn.
MAX_ROTATION = math.pi
#: Largest translation component drawn (bohr).
MAX_TRANSLATION = 5.0
#: Largest ``max_stretch`` accepted (relative change of an interatomic distance).
STRETCH_LIMIT = 0.25
#: No two atoms of a drawn molecule are closer than this fraction of the sum of their
#: covalent radii (pyscf's table), so that a stretched molecule stays sensible.
CLOSEST_CONTACT = 0.5
#: Charges drawn by :func:`charge_multiplicity` lie in [−MAX_CHARGE, MAX_CHARGE].
MAX_CHARGE = 2
#: Multiplicities drawn by :func:`charge_multiplicity` are at most this.
MAX_MULTIPLICITY = 4
#: Largest ``max_angle`` accepted by :func:`guesses` (rad): a quarter turn mixes an
#: occupied orbital completely into a virtual one.
GUESS_ANGLE_LIMIT = math.pi / 2

#: Hypothesis profiles registered on import: name → (max_examples, reason).
PROFILES = {
    "dev": 10,   # a quick local run while editing the code
    "ci": 50,    # the CI gate: more examples, still minutes for sto-3g cases
}


def _register_profiles() -> None:
    """Register PROFILES. A profile already registered under the same name (hypothesis
    ships a "ci" profile: derandomized, no example database) is kept as the parent, so
    its other settings carry over; the example count and deadline are ours."""
    for name, examples in PROFILES.items():
        try:
            parent = settings.get_profile(name)
        except InvalidArgument:
            parent = None
        settings.register_profile(name, parent=parent, max_examples=examples,
                                  deadline=None, print_blob=True)


_register_profiles()


# --------------------------------------------------------------------------- geometry


def rotation_matrix(vector) -> np.ndarray:
    """R = exp([v]×) for the rotation vector v (axis × angle, rad), by Rodrigues' formula
    R = 1 + sin θ K + (1 − cos θ) K², θ = |v|, K = [v/θ]×; the identity for v = 0."""
    v = np.asarray(vector, dtype=float)
    theta = float(np.linalg.norm(v))
    if theta == 0.0:
        return np.eye(3)
    kx, ky, kz = v / theta
    k = np.array([[0.0, -kz, ky], [kz, 0.0, -kx], [-ky, kx, 0.0]])
    return np.eye(3) + math.sin(theta) * k + (1.0 - math.cos(theta)) * (k @ k)


def nearest_distances(coordinates) -> np.ndarray:
    """Distance (bohr) from each atom to its nearest neighbour (inf for a single atom)."""
    r = np.asarray(coordinates, dtype=float)
    d = np.linalg.norm(r[:, None, :] - r[None, :, :], axis=-1)
    np.fill_diagonal(d, np.inf)
    return d.min(axis=1)


def closest_contact(numbers, coordinates) -> float:
    """min over atom pairs of R_AB / (r_A + r_B), covalent radii r from pyscf (bohr);
    inf for a single atom. Compare with CLOSEST_CONTACT."""
    from harness.backend.mole import covalent_radii

    r = np.asarray(coordinates, dtype=float)
    if len(r) < 2:
        return math.inf
    cov = covalent_radii()[np.asarray(numbers)]
    d = np.linalg.norm(r[:, None, :] - r[None, :, :], axis=-1)
    ratio = d / (cov[:, None] + cov[None, :])
    np.fill_diagonal(ratio, np.inf)
    return float(ratio.min())


def permutation_from_code(code: Sequence[int], n: int) -> tuple[int, ...]:
    """The permutation of n atoms with Lehmer code ``code`` (entry i in 0..n−1−i): new
    atom i is the code[i]-th of the atoms not yet taken. All zeros is the identity."""
    remaining = list(range(n))
    out = []
    for k in list(code) + [0] * (n - len(code)):
        out.append(remaining.pop(k))
    return tuple(out)


def applied(case: Case, *, displacements=None, permutation=None, rotation=(0.0, 0.0, 0.0),
            translation=(0.0, 0.0, 0.0), basis: str | None = None) -> tuple[str, ...]:
    """Which of :func:`transform`'s changes these parameters make, in the order applied:
    a subset of ("stretch", "perm", "rot", "shift", "basis")."""
    n = len(case.numbers)
    kinds = []
    if displacements is not None and np.any(np.asarray(displacements, dtype=float) != 0):
        kinds.append("stretch")
    if permutation is not None and tuple(int(i) for i in permutation) != tuple(range(n)):
        kinds.append("perm")
    if np.any(np.asarray(rotation, dtype=float) != 0):
        kinds.append("rot")
    if np.any(np.asarray(translation, dtype=float) != 0):
        kinds.append("shift")
    if basis is not None and str(basis).strip().lower() != case.basis:
        kinds.append("basis")
    return tuple(kinds)


def transform(case: Case, *, displacements=None, permutation=None, rotation=(0.0, 0.0, 0.0),
              translation=(0.0, 0.0, 0.0), basis: str | None = None) -> Case:
    """A transformed copy of ``case`` (all lengths in bohr, angles in rad).

    In this order: each atom i of ``case`` moves by ``displacements[i]``; the atoms are
    reordered, new atom i being old atom ``permutation[i]``; the molecule is rotated by
    R = :func:`rotation_matrix` (``rotation``) about its centroid c (the mean of the
    nuclear positions) and translated by ``translation``: r' = R (r − c) + c + t.
    ``basis`` replaces the basis. The name gets one
    suffix per applied transformation: ``~stretch``, ``~perm``, ``~rot``, ``~shift``,
    ``~basis-NAME`` (e.g. ``water-sto-3g-rhf~rot``); unchanged parts add none.
    """
    n = len(case.numbers)
    kinds = applied(case, displacements=displacements, permutation=permutation,
                    rotation=rotation, translation=translation, basis=basis)
    if not kinds:
        return case
    r = np.array(case.coordinates, dtype=float)
    numbers = tuple(case.numbers)
    if "stretch" in kinds:
        r = r + np.asarray(displacements, dtype=float).reshape(n, 3)
    if "perm" in kinds:
        perm = [int(i) for i in permutation]
        if sorted(perm) != list(range(n)):
            raise ValueError(f"permutation {tuple(perm)} is not a permutation of {n} atoms")
        r = r[perm]
        numbers = tuple(numbers[i] for i in perm)
    if "rot" in kinds:
        centre = r.mean(axis=0)
        r = (r - centre) @ rotation_matrix(rotation).T + centre
    if "shift" in kinds:
        r = r + np.asarray(translation, dtype=float)
    new_basis = str(basis).strip().lower() if "basis" in kinds else case.basis
    name = case.name + "".join(f"~basis-{new_basis}" if k == "basis" else f"~{k}"
                               for k in kinds)
    return dataclasses.replace(case, name=name, numbers=numbers, coordinates=r,
                               basis=new_basis, geometry_file="",
                               note=(case.note + " (transformed)").strip())


@dataclasses.dataclass(frozen=True)
class Variant:
    """A drawn molecule: the catalogue ``base`` case, the transformed ``case`` and the
    parameters of :func:`transform` that turn one into the other (bohr, rad)."""

    base: Case
    case: Case
    displacements: tuple[tuple[float, float, float], ...]
    permutation: tuple[int, ...]
    rotation: tuple[float, float, float]
    translation: tuple[float, float, float]
    basis: str
    #: The applied transformations (see :func:`applied`), e.g. ("perm", "rot").
    kinds: tuple[str, ...] = ()

    @property
    def same_molecule(self) -> bool:
        """True when only the frame or the atom order changed (energies must not)."""
        return not (set(self.kinds) & {"stretch", "basis"})

    def code(self) -> str:
        """A Python expression that rebuilds ``case`` (for a reproduce note)."""
        args = [f"load_catalogue().case({self.base.name!r})"]
        if "stretch" in self.kinds:
            args.append(f"displacements={_floats(self.displacements)}")
        if "perm" in self.kinds:
            args.append(f"permutation={self.permutation}")
        if "rot" in self.kinds:
            args.append(f"rotation={_floats(self.rotation)}")
        if "shift" in self.kinds:
            args.append(f"translation={_floats(self.translation)}")
        if "basis" in self.kinds:
            args.append(f"basis={self.basis!r}")
        return f"harness.testing.strategies.transform({', '.join(args)})"

    def describe(self) -> str:
        """One line: the drawn case and its transformation parameters."""
        parts = [self.case.name]
        if "perm" in self.kinds:
            parts.append(f"atom order {self.permutation}")
        if "rot" in self.kinds:
            parts.append(f"rotation vector {_floats(self.rotation)} rad")
        if "shift" in self.kinds:
            parts.append(f"translation {_floats(self.translation)} bohr")
        if "stretch" in self.kinds:
            parts.append(f"largest displacement "
                         f"{float(np.abs(self.displacements).max()):.3g} bohr")
        return ", ".join(parts)


def _floats(values) -> str:
    arr = np.asarray(values, dtype=float)
    return repr(tuple(float(x) for x in arr.ravel())) if arr.ndim == 1 else \
        repr(tuple(tuple(float(x) for x in row) for row in arr))


# --------------------------------------------------------------------------- molecules


def catalogue_cases(*, suite: str | None = None, basis: str | None = None,
                    method: str | None = None) -> tuple[Case, ...]:
    """Catalogue cases for ``cases=``: those of ``suite`` (default: all), with this
    ``basis`` and ``method`` when given, e.g. ``catalogue_cases(basis="sto-3g",
    method="rhf")`` for fast closed-shell property tests."""
    from harness.catalogue.cases import load_catalogue

    catalogue = load_catalogue()
    pool = catalogue.suite(suite) if suite is not None else catalogue.cases
    return tuple(c for c in pool if (basis is None or c.basis == basis.lower())
                 and (method is None or c.method == method.lower()))


def _nao(case: Case, basis: str | None = None) -> int | None:
    from harness.backend.mole import build_mole

    try:
        return int(build_mole(case.numbers, case.coordinates, charge=case.charge,
                              multiplicity=case.multiplicity,
                              basis=case.basis if basis is None else basis,
                              cartesian=case.cartesian).nao)
    except Exception:  # pyscf has no such basis for these elements
        return None


def _check_int(name: str, value, low: int) -> None:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
        raise InvalidArgument(f"{name}={value!r} must be an integer ≥ {low}")


def _check_flag(name: str, value) -> None:
    if not isinstance(value, bool):
        raise InvalidArgument(f"{name}={value!r} must be True or False")


def variants(*, cases: Sequence[Case] | None = None, min_atoms: int = 1,
             max_atoms: int | None = None, bases: Sequence[str] | None = None,
             rotate: bool = True, translate: bool = True, permute: bool = True,
             max_stretch: float = 0.05) -> st.SearchStrategy[Variant]:
    """Like :func:`molecules`, but draws the whole :class:`Variant` (base case, transformed
    case and parameters), for properties that compare the two."""
    for name, value in (("rotate", rotate), ("translate", translate), ("permute", permute)):
        _check_flag(name, value)
    _check_int("min_atoms", min_atoms, 1)
    if max_atoms is not None:
        _check_int("max_atoms", max_atoms, 1)
        if max_atoms < min_atoms:
            raise InvalidArgument(f"max_atoms={max_atoms} must be ≥ min_atoms={min_atoms}")
    if isinstance(max_stretch, bool) or not isinstance(max_stretch, (int, float)) \
            or not (0 <= max_stretch <= STRETCH_LIMIT):
        raise InvalidArgument(f"max_stretch={max_stretch!r} must be a number in "
                              f"[0, {STRETCH_LIMIT}] (relative change of a bond length)")
    if bases is not None:
        if isinstance(bases, str) or not all(isinstance(b, str) and b.strip() for b in bases):
            raise InvalidArgument(f"bases={bases!r} must be a list of basis names")
        bases = [b.strip().lower() for b in bases]
    if cases is None:
        from harness.catalogue.cases import load_catalogue

        cases = load_catalogue().cases
    else:
        cases = list(cases)
        if not cases or not all(isinstance(c, Case) for c in cases):
            raise InvalidArgument("cases must be a non-empty list of harness.catalogue.cases.Case")
    pool = [c for c in cases if len(c.numbers) >= min_atoms
            and (max_atoms is None or len(c.numbers) <= max_atoms)]
    if not pool:
        raise InvalidArgument(f"no case has between {min_atoms} and "
                              f"{max_atoms if max_atoms is not None else 'any number of'} atoms")
    sized = []
    for case in pool:
        options = sorted({case.basis, *(bases or [])}, key=lambda b: (_nao(case, b) or 0, b))
        options = [b for b in options if _nao(case, b) is not None]
        sized.append(((_nao(case) or 0, len(case.numbers), case.name), case, tuple(options)))
    sized.sort(key=lambda item: item[0])
    ordered = [(case, options) for _, case, options in sized]
    return _draw_variant(ordered, float(max_stretch), rotate, translate, permute,
                         bases is not None)


@st.composite
def _draw_variant(draw, ordered, max_stretch, rotate, translate, permute, choose_basis
                  ) -> Variant:
    # One boolean per enabled transformation, drawn for every case (also where it cannot
    # apply, e.g. no permutation of one atom): then the untransformed variants of all
    # cases are equally simple for hypothesis, and the case index, ordered by size,
    # decides which one a failure shrinks to.
    base, options = ordered[draw(st.integers(0, len(ordered) - 1))]
    n = len(base.numbers)
    unit = st.floats(-1.0, 1.0, allow_nan=False)
    displacements = np.zeros((n, 3))
    if max_stretch > 0 and draw(st.booleans()) and n > 1:
        raw = np.array(draw(st.lists(st.tuples(unit, unit, unit), min_size=n, max_size=n)))
        # |δ_i| ≤ ½ s d_i with d_i the nearest-neighbour distance, so every distance
        # R_ij changes by at most |δ_i| + |δ_j| ≤ s R_ij (relative stretch ≤ s).
        scale = 0.5 * max_stretch * nearest_distances(base.coordinates) / math.sqrt(3.0)
        displacements = raw * scale[:, None]
    permutation = tuple(range(n))
    if permute and draw(st.booleans()) and n > 1:
        code = [draw(st.integers(0, n - 1 - i)) for i in range(n - 1)]
        permutation = permutation_from_code(code, n)
    angle = st.floats(-MAX_ROTATION, MAX_ROTATION, allow_nan=False)
    shift = st.floats(-MAX_TRANSLATION, MAX_TRANSLATION, allow_nan=False)
    rotation = translation = (0.0, 0.0, 0.0)
    if rotate and draw(st.booleans()):
        rotation = draw(st.tuples(angle, angle, angle))
    if translate and draw(st.booleans()):
        translation = draw(st.tuples(shift, shift, shift))
    basis = base.basis
    if choose_basis:
        basis = options[draw(st.integers(0, max(0, len(options) - 1)))]
    case = transform(base, displacements=displacements, permutation=permutation,
                     rotation=rotation, translation=translation, basis=basis)
    assume(closest_contact(case.numbers, case.coordinates) >= CLOSEST_CONTACT)
    variant = Variant(base=base, case=case,
                      displacements=tuple(tuple(float(x) for x in row) for row in displacements),
                      permutation=permutation, rotation=tuple(float(x) for x in rotation),
                      translation=tuple(float(x) for x in translation), basis=basis,
                      kinds=applied(base, displacements=displacements,
                                    permutation=permutation, rotation=rotation,
                                    translation=translation, basis=basis))
    note(f"scf-harness molecule: {variant.describe()}")
    note(f"scf-harness rebuild: {variant.code()}")
    event(f"scf-harness base case: {base.name}")
    return variant


def molecules(*, cases: Sequence[Case] | None = None, min_atoms: int = 1,
              max_atoms: int | None = None, bases: Sequence[str] | None = None,
              rotate: bool = True, translate: bool = True, permute: bool = True,
              max_stretch: float = 0.05) -> st.SearchStrategy[Case]:
    """Cases drawn from ``cases`` (default: the catalogue) and transformed.

    ``min_atoms``/``max_atoms`` restrict the atom count. Each drawn case may get: bond
    lengths perturbed (every interatomic distance changes by at most the relative
    ``max_stretch``, in [0, STRETCH_LIMIT]; no two atoms closer than CLOSEST_CONTACT ×
    the sum of their covalent radii), its atoms permuted (``permute``), a rotation about
    its centroid (``rotate``) and a translation of up to MAX_TRANSLATION bohr per axis
    (``translate``), and one of ``bases`` (or its own basis). The returned Case has
    coordinates in bohr and a name with one suffix per transformation
    (``water-sto-3g-rhf~perm~rot``). Shrinks toward the smallest case (by number of basis
    functions), the smallest basis and no transformation. Invalid arguments raise
    ``hypothesis.errors.InvalidArgument``.
    """
    return variants(cases=cases, min_atoms=min_atoms, max_atoms=max_atoms, bases=bases,
                    rotate=rotate, translate=translate, permute=permute,
                    max_stretch=max_stretch).map(lambda v: v.case)


# --------------------------------------------------------------------------- charge, spin


def charge_multiplicity(numbers, *, max_charge: int = MAX_CHARGE,
                        max_multiplicity: int = MAX_MULTIPLICITY,
                        nao: int | None = None) -> st.SearchStrategy[tuple[int, int]]:
    """(charge, multiplicity) pairs possible for nuclei with atomic numbers ``numbers``.

    charge in [−max_charge, max_charge] leaving at least one electron; N = ΣZ − charge;
    multiplicity 2S + 1 ≤ min(max_multiplicity, N + 1) with N − 2S even. With ``nao``
    (the number of basis functions) the basis must hold the electrons: N ≤ 2·nao and
    n_α = (N + 2S)/2 ≤ nao. Shrinks toward the neutral molecule in its lowest
    multiplicity (1 for even N, 2 for odd N).
    """
    try:
        z = [int(x) for x in numbers]
    except (TypeError, ValueError):
        raise InvalidArgument(f"numbers={numbers!r} must be a list of atomic numbers") from None
    if not z or any(x < 1 or x > 118 for x in z):
        raise InvalidArgument(f"numbers={numbers!r} must be atomic numbers in 1..118")
    _check_int("max_charge", max_charge, 0)
    _check_int("max_multiplicity", max_multiplicity, 1)
    if nao is not None:
        _check_int("nao", nao, 1)
    total = sum(z)

    def lowest(n: int) -> int:
        return 1 if n % 2 == 0 else 2

    def highest(n: int) -> int:  # largest 2S + 1 for n electrons
        top = min(max_multiplicity, n + 1)
        return top if nao is None else min(top, 2 * nao - n + 1)

    # neutral first, then +1, −1, +2, ...: sampled_from shrinks toward the first entry
    charges = sorted((c for c in range(-max_charge, min(max_charge, total - 1) + 1)
                      if lowest(total - c) <= highest(total - c)),
                     key=lambda c: (abs(c), -c))
    if not charges:
        raise InvalidArgument(f"no charge in [-{max_charge}, {max_charge}] allows a "
                              f"multiplicity ≤ {max_multiplicity} for {total} protons")

    @st.composite
    def pairs(draw):
        charge = draw(st.sampled_from(charges))
        n = total - charge
        top = highest(n)
        multiplicity = lowest(n) + 2 * draw(st.integers(0, (top - lowest(n)) // 2))
        return charge, multiplicity

    return pairs()


# --------------------------------------------------------------------------- guesses


def core_guess(problem):
    """Orbitals of the core-Hamiltonian guess: H C = S C ε with H = T + V (pyscf
    integrals, Eh), S-orthonormal. Returns (ε, C), C of shape (nao, nmo)."""
    import scipy.linalg

    from harness.backend.integrals import integrals_for

    ints = integrals_for(problem)
    return scipy.linalg.eigh(ints.h, ints.s)


def occupation_classes(problem, nmo: int) -> list[np.ndarray]:
    """Aufbau classes of ``nmo`` orbitals per density component, as integer labels
    (0 doubly/singly occupied, 1 open, 2 empty): RHF one array, UHF two (α, β) with
    0 occupied / 2 empty, ROHF one array with closed 0, open 1, virtual 2."""
    labels = np.full(nmo, 2)
    if problem.method == "rhf":
        labels[:problem.n_electrons // 2] = 0
        return [labels]
    if problem.method == "uhf":
        a, b = labels.copy(), labels.copy()
        a[:problem.n_alpha] = 0
        b[:problem.n_beta] = 0
        return [a, b]
    labels[:problem.n_alpha] = 1
    labels[:problem.n_beta] = 0
    return [labels]


def rotation_pairs(labels: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Index pairs (i, j), i < j, of orbitals in different classes (labels[i] < labels[j]):
    the rotations that change the density."""
    i, j = np.nonzero(labels[:, None] < labels[None, :])
    return i, j


def rotated_density(problem, orbitals, angles) -> np.ndarray:
    """The density of the guess orbitals C rotated by U = exp(A), C' = C U.

    ``angles``: one sequence per class array of :func:`occupation_classes`, with one
    value per pair of :func:`rotation_pairs` (A_ij = −A_ji = value); all zeros leave C
    as it is. RHF: P = 2 C'_occ C'_occᵀ (nao, nao); UHF: (Pα, Pβ) from their own
    rotations; ROHF: Pα on closed + open, Pβ on closed orbitals, (2, nao, nao).
    """
    import scipy.linalg

    c = np.asarray(orbitals, dtype=float)
    rotated = []
    for labels, values in zip(occupation_classes(problem, c.shape[1]), angles):
        i, j = rotation_pairs(labels)
        a = np.zeros((c.shape[1], c.shape[1]))
        a[i, j] = np.asarray(values, dtype=float)
        rotated.append((c @ scipy.linalg.expm(a - a.T), labels))
    if problem.method == "rhf":
        cr, labels = rotated[0]
        occ = cr[:, labels == 0]
        return 2.0 * occ @ occ.T
    if problem.method == "uhf":
        return np.stack([cr[:, labels == 0] @ cr[:, labels == 0].T for cr, labels in rotated])
    cr, labels = rotated[0]
    alpha, beta = cr[:, labels <= 1], cr[:, labels == 0]
    return np.stack([alpha @ alpha.T, beta @ beta.T])


def scaled_angles(values, max_angle: float) -> list[np.ndarray]:
    """Scale raw values (each in [−1, 1]) by max_angle / √m, m = their number, so that
    ‖A‖_F ≤ √2 max_angle: no orbital turns by more than ``max_angle`` rad (the rotation
    angles θ_k of exp(A) satisfy Σθ_k² = ½‖A‖_F²)."""
    return [np.asarray(v, dtype=float) * (max_angle / math.sqrt(max(1, len(v))))
            for v in values]


def guesses(problem, *, max_angle: float = 0.3):
    """Problems equal to ``problem`` with ``initial_density`` set to a perturbed guess.

    The guess is the core-Hamiltonian one (:func:`core_guess`), occupied by aufbau, then
    rotated between occupation classes by at most ``max_angle`` rad
    (:func:`rotated_density`, :func:`scaled_angles`); all-zero rotations give the plain
    core guess, toward which hypothesis shrinks. The density has the layout of
    ``Problem.initial_density``: (nao, nao) total for RHF, (2, nao, nao) α, β
    otherwise. Codes may ignore it. Invalid arguments raise InvalidArgument.
    """
    from harness.contract.problem import Problem

    if not isinstance(problem, Problem):
        raise InvalidArgument(f"problem must be a harness.contract.problem.Problem, got "
                              f"{type(problem).__name__}")
    if isinstance(max_angle, bool) or not isinstance(max_angle, (int, float)) \
            or not (0 <= max_angle <= GUESS_ANGLE_LIMIT):
        raise InvalidArgument(f"max_angle={max_angle!r} must be a number of radians in "
                              f"[0, {GUESS_ANGLE_LIMIT:.4f}]")
    _, c = core_guess(problem)
    sizes = [len(rotation_pairs(labels)[0])
             for labels in occupation_classes(problem, c.shape[1])]
    unit = st.floats(-1.0, 1.0, allow_nan=False)
    raw = st.tuples(*(st.lists(unit, min_size=m, max_size=m) for m in sizes))

    def build(values):
        d = rotated_density(problem, c, scaled_angles(values, float(max_angle)))
        d.setflags(write=False)
        note(f"scf-harness guess: core-Hamiltonian guess of {problem.name} rotated by "
             f"at most {max_angle:g} rad")
        # the problem is already validated and d has its layout: no need to rebuild it
        return dataclasses.replace(problem, initial_density=d)

    return raw.map(build)
