"""AO conventions: find how a code's basis functions map onto the reference (pyscf) ones.

Codes differ from pyscf's AO order (``mol.ao_labels()`` for the case's basis and
cartesian flag) in the order of the functions within a shell (p as x, y, z or y, z, x;
spherical d in m = −2 … +2 or 0, +1, −1, +2, −2; cartesian d in other orders), in the
signs of some real solid harmonics, in the normalisation of cartesian functions (pyscf
normalises cartesian l ≥ 2 only radially: the self-overlap of dxx is 2.51, of dxy 0.84;
other codes normalise each function to 1) and in the order of the shells of one atom.

Model. The code's functions are χ_code = χ_ref M, where M (nao × nao) is a signed,
scaled permutation that keeps every function on its atom: column i of M holds one
non-zero, ``factor[i]`` (sign × positive scale), in row ``source[i]``, i.e.

    χ_code_i = factor_i · χ_ref_{source_i}.

Then S_code = Mᵀ S_ref M; orbital coefficients and densities transform contravariantly,
C_ref = M C_code and P_ref = M P_code Mᵀ; one-electron matrices (F, S, H, T, V)
covariantly, A_ref = M⁻ᵀ A_code M⁻¹; two-electron integrals (μν|λσ) covariantly in
each of the four indices. Orbital energies, occupations and energies do not change.

Entry points: :func:`detect_convention` (from the overlap a code reports) and
:func:`named_convention` (for a code that reports none). Both return a
:class:`Convention`; detection returns a :class:`BasisMismatch` when no such M exists.
Atomic units throughout (bohr; overlaps are dimensionless, matrices in Eh).

Named conventions (:data:`NAMED`):

* ``pyscf`` — the reference order, signs and normalisation (identity).
* ``molden`` — the AO order and normalisation of the Molden file format: spherical d,
  f, g in m = 0, +1, −1, +2, −2, … order; cartesian d as xx, yy, zz, xy, xz, yz, f as
  xxx, yyy, zzz, xyy, xxy, xxz, xzz, yzz, yyz, xyz, g as xxxx, yyyy, zzzz, xxxy, xxxz,
  yyyx, yyyz, zzzx, zzzy, xxyy, xxzz, yyzz, xxyz, yyxz, zzxy, every cartesian function
  normalised to unit self-overlap; s and p as in pyscf; no sign changes (as pyscf's own
  Molden writer, ``pyscf.tools.molden``, uses them).
* ``p-yzx`` — p functions in m = −1, 0, +1 order, i.e. (y, z, x); all else as pyscf.
* ``p-zxy`` — p functions as (z, x, y); all else as pyscf.
* ``unit-cartesian`` — pyscf's order, every cartesian function normalised to unit
  self-overlap (identity for spherical bases).
"""

from __future__ import annotations

import dataclasses
from typing import Any, Mapping

import numpy as np

from harness.contract.errors import HarnessError
from harness.contract.solution import Solution

#: max|Mᵀ S_ref M − S_code| for a mapping to count as found (and max|S_code − S_ref| for
#: the identity); ``--tol basis=`` overrides it. Analytic overlap integrals of the same
#: basis agree to ~1e-14 between programs, so 1e-8 already admits looser primitive
#: screening; a different basis misses by ≥ 1e-4. (An overlap in pyscf's order that
#: misses only at integral accuracy, e.g. rounded basis data, is the code's own metric:
#: the overlap check weighs its energy effect.)
CONVENTION_MATCH = 1e-8

#: Candidate pairs (code function, reference function) are pre-selected by comparing the
#: sorted absolute values of their unit-diagonal overlap rows, with this multiple of
#: CONVENTION_MATCH / (smallest self-overlap): a loose, safe filter (each entry of the
#: unit-diagonal overlap moves by ≤ ~2 × tolerance / self-overlap when S moves by the
#: tolerance); the mapping itself is verified at CONVENTION_MATCH.
FINGERPRINT_SLACK = 10.0

#: The mapping search gives up (and reports a basis mismatch) after this many
#: assignments per basis function; a consistent basis needs one each, symmetric
#: molecules a few more.
SEARCH_BUDGET_PER_FUNCTION = 50

#: Where symmetry lets several mappings reproduce S, up to this many are compared and the
#: plainest kept (see :func:`_plainness`): in a linear molecule x and y are
#: interchangeable, and "p as (y, z, x)" is a code's convention where "p as (x, z, y)
#: with cartesian d reordered to match" is not.
MAPPINGS_COMPARED = 16

#: Overlap-spectrum distances below this mean the code's functions span the same space as
#: the reference's, mixed otherwise than by order, sign or scale (said in the reason).
SAME_SPECTRUM = 1e-6

#: Scale factors whose squares are within this of 1 are described by how far the code's
#: norms are off ("norms off by up to 3.0e-08") rather than by the factors themselves,
#: which print as 1 at three digits.
NEAR_UNIT_SCALE = 1e-3

_LETTERS = "spdfghik"
_MINUS = "\u2212"

#: Molden's cartesian orders (the file-format standard) as exponent strings, l = 2, 3, 4.
MOLDEN_CARTESIAN = {
    2: ("xx", "yy", "zz", "xy", "xz", "yz"),
    3: ("xxx", "yyy", "zzz", "xyy", "xxy", "xxz", "xzz", "yzz", "yyz", "xyz"),
    4: ("xxxx", "yyyy", "zzzz", "xxxy", "xxxz", "yyyx", "yyyz", "zzzx", "zzzy",
        "xxyy", "xxzz", "yyzz", "xxyz", "yyxz", "zzxy"),
}

#: The names :func:`named_convention` knows.
NAMED = ("pyscf", "molden", "p-yzx", "p-zxy", "unit-cartesian")

# solution keys by how they transform
_CONTRAVARIANT_ROWS = ("coefficients",)
_CONTRAVARIANT_BOTH = ("density",)
_COVARIANT = ("fock", "overlap", "core_hamiltonian", "kinetic", "nuclear_attraction")
_FOUR_INDEX = ("two_electron",)
_UNCHANGED = ("energy", "orbital_energies", "occupations", "converged", "iterations",
              "history")
AO_KEYS = _CONTRAVARIANT_ROWS + _CONTRAVARIANT_BOTH + _COVARIANT + _FOUR_INDEX


# ------------------------------------------------------------------------- the basis

def _cartesian_names(l: int) -> tuple[str, ...]:
    """pyscf's cartesian order: x^a y^b z^c for a = l … 0, b = l − a … 0."""
    names = []
    for a in range(l, -1, -1):
        for b in range(l - a, -1, -1):
            names.append("x" * a + "y" * b + "z" * (l - a - b))
    return tuple(names)


def _signed(m: int) -> str:
    return "0" if m == 0 else (f"+{m}" if m > 0 else f"{_MINUS}{-m}")


@dataclasses.dataclass(frozen=True)
class _Basis:
    """Per-function facts of the reference basis (pyscf order): atom, l, shell, component.

    A shell is one contracted function of one pyscf basis entry (an entry with
    ``nctr`` contractions gives ``nctr`` shells). ``comp`` indexes the function within
    its shell in pyscf's order.
    """

    atom: np.ndarray
    l: np.ndarray
    shell: np.ndarray
    comp: np.ndarray
    shell_start: np.ndarray
    shell_size: np.ndarray
    shell_atom: np.ndarray
    shell_l: np.ndarray
    cart: bool
    symbols: tuple[str, ...]

    @property
    def nao(self) -> int:
        return int(self.atom.size)


def _basis(mol) -> _Basis:
    from harness.backend.integrals import shell_structure

    shells = shell_structure(mol)
    cart = shells.cart
    loc = shells.ao_loc  # consistent with mol.cart
    atom, ls, shell, comp = [], [], [], []
    starts, sizes, satom, sl = [], [], [], []
    for b, (l, a, nctr) in enumerate(zip(shells.l, shells.atom, shells.nctr)):
        ncomp = (l + 1) * (l + 2) // 2 if cart else 2 * l + 1
        for c in range(nctr):
            start = int(loc[b]) + c * ncomp
            starts.append(start), sizes.append(ncomp), satom.append(a), sl.append(l)
            atom += [a] * ncomp
            ls += [l] * ncomp
            shell += [len(starts) - 1] * ncomp
            comp += list(range(ncomp))
    order = np.argsort(np.concatenate([np.arange(s, s + n) for s, n in zip(starts, sizes)]))
    arr = lambda x: np.asarray(x, dtype=int)[order]  # noqa: E731  (functions in AO order)
    return _Basis(atom=arr(atom), l=arr(ls), shell=arr(shell), comp=arr(comp),
                  shell_start=np.asarray(starts), shell_size=np.asarray(sizes),
                  shell_atom=np.asarray(satom), shell_l=np.asarray(sl), cart=cart,
                  symbols=shells.symbols)


def _kind(l: int, cart: bool) -> str:
    if l <= 1:
        return _LETTERS[l]
    return f"{'cartesian' if cart else 'spherical'} {_LETTERS[l]}"


def _component_name(l: int, comp: int, cart: bool) -> str:
    """x, y, z for p; the exponent string for cartesian l ≥ 2; m for spherical l ≥ 2."""
    if l == 0:
        return "s"
    if l == 1:
        return "xyz"[comp]
    if cart:
        return _cartesian_names(l)[comp]
    return f"m = {_signed(comp - l)}"


# ------------------------------------------------------------------------ the objects

@dataclasses.dataclass(frozen=True)
class Convention:
    """A code's AO convention: χ_code_i = factor_i · χ_ref_{source_i} (see module doc).

    ``source`` (nao ints) and ``factor`` (nao floats, sign × scale) are the compact
    form of M; :attr:`m` is the dense matrix. ``description`` is the plain one-line
    account returned by :meth:`describe`.
    """

    source: tuple[int, ...]
    factor: tuple[float, ...]
    description: str

    @property
    def nao(self) -> int:
        return len(self.source)

    @property
    def is_identity(self) -> bool:
        return (self.source == tuple(range(self.nao))
                and all(f == 1.0 for f in self.factor))

    @property
    def m(self) -> np.ndarray:
        """M with χ_code = χ_ref M: M[source_i, i] = factor_i, zero elsewhere."""
        m = np.zeros((self.nao, self.nao))
        m[list(self.source), np.arange(self.nao)] = self.factor
        return m

    def describe(self) -> str:
        """One line in plain words, e.g. "p shells ordered (z, x, y)"."""
        return self.description

    def _arrays(self):
        src = np.asarray(self.source, dtype=int)
        return src, np.asarray(self.factor, dtype=float), np.argsort(src)

    def to_reference(self, key: str, array):
        """``array`` (solution key ``key``, code convention) in the reference convention.

        coefficients (nao, nmo) or (2, nao, nmo): C_ref = M C_code; density (…, nao, nao):
        P_ref = M P Mᵀ; fock, overlap, core_hamiltonian, kinetic, nuclear_attraction
        (…, nao, nao): A_ref = M⁻ᵀ A M⁻¹; two_electron (nao,)⁴: each index covariant.
        energy, orbital_energies, occupations, converged, iterations, history: unchanged.
        Raises HarnessError for an unknown key or AO axes that are not nao long.
        """
        return self._transform(key, array, forward=False)

    def from_reference(self, key: str, array):
        """The inverse of :meth:`to_reference`: a reference-convention array in the code's."""
        return self._transform(key, array, forward=True)

    def solution_to_reference(self, extracted: Solution) -> Solution:
        """An extracted :class:`~harness.contract.solution.Solution` with every AO-indexed
        field in the reference convention. Values that are not arrays of the right shape
        (malformed markers, wrong sizes) are passed through unchanged for the well-formed
        check."""
        changes = {}
        for key, value in extracted.as_dict().items():
            if key in AO_KEYS and isinstance(value, np.ndarray):
                try:
                    changes[key] = self.to_reference(key, value)
                except HarnessError:
                    pass
        return extracted.replace(**changes)

    def _transform(self, key: str, array, forward: bool):
        if key in _UNCHANGED:
            return array
        if key not in AO_KEYS:
            raise HarnessError(f"unknown solution key {key!r} (known: "
                               f"{', '.join(AO_KEYS + _UNCHANGED)})", field="convention")
        a = np.asarray(array, dtype=float)
        n = self.nao
        axes = {"coefficients": (a.ndim - 2,), "two_electron": (0, 1, 2, 3)}.get(
            key, (a.ndim - 2, a.ndim - 1))
        if (min(axes) < 0 or any(a.shape[ax] != n for ax in axes)
                or (key == "two_electron" and a.ndim != 4)):
            raise HarnessError(f"shape {a.shape} does not have {n} basis functions on its "
                               f"AO axes", field=key)
        if self.is_identity:
            return a.copy()
        src, fac, inv = self._arrays()
        # to_reference: contravariant index (C, P) multiplied by factor_i, covariant ones
        # divided, and code position i moved to reference position source_i;
        # from_reference the inverse.
        contravariant = key in _CONTRAVARIANT_ROWS + _CONTRAVARIANT_BOTH
        w = fac if contravariant != forward else 1.0 / fac
        out = a
        for ax in axes:
            shape = [1] * a.ndim
            shape[ax] = n
            if forward:  # reference → code: gather rows source_i, then weight
                out = np.take(out, src, axis=ax) * w.reshape(shape)
            else:        # code → reference: weight, then scatter to source_i
                out = np.take(out * w.reshape(shape), inv, axis=ax)
        return out


@dataclasses.dataclass(frozen=True)
class BasisMismatch:
    """No convention maps the code's functions onto the reference basis.

    ``reason``: one line starting "basis differs: "; ``evidence``: the numbers behind it
    (nao_code, nao_reference, spectrum_distance, …).
    """

    reason: str
    evidence: Mapping[str, float]

    def describe(self) -> str:
        return self.reason


# ------------------------------------------------------------------------- describing

def _describe(src: np.ndarray, fac: np.ndarray, basis: _Basis, s_code_diag=None,
              tolerance: float = CONVENTION_MATCH) -> str:
    """Plain words for χ_code_i = fac_i χ_ref_{src_i}; clauses joined by "; "."""
    n = basis.nao
    if np.array_equal(src, np.arange(n)) and np.all(fac == 1.0):
        return "pyscf AO order, signs and normalisation"
    cart = basis.cart
    clauses: list[str] = []
    # positions of each reference shell's functions in the code
    positions = [np.flatnonzero(basis.shell[src] == sh) for sh in range(basis.shell_start.size)]

    # 1. order within shells, by kind
    kinds: dict[tuple[int, str], list] = {}
    for sh, pos in enumerate(positions):
        l = int(basis.shell_l[sh])
        if l == 0:
            continue
        order = tuple(int(basis.comp[src[i]]) for i in pos)
        kinds.setdefault((l, _kind(l, cart)), []).append(order)
    for (l, kind), orders in sorted(kinds.items()):
        identity = tuple(range(len(orders[0])))
        changed = [o for o in orders if o != identity]
        if not changed:
            continue
        if len(changed) == len(orders) and len(set(changed)) == 1:
            order = changed[0]
            if l >= 2 and not cart:
                ms = ", ".join(_signed(c - l) for c in order)
                clauses.append(f"{kind} shells in m = {ms} order")
            else:
                names = ", ".join(_component_name(l, c, cart) for c in order)
                clauses.append(f"{kind} shells ordered ({names})")
        else:
            clauses.append(f"functions reordered within {len(changed)} of {len(orders)} "
                           f"{kind} shells")

    # 2. signs
    flipped = np.flatnonzero(fac < 0)
    if flipped.size:
        parts: dict[tuple, list[int]] = {}
        for i in flipped:
            j = src[i]
            l, c = int(basis.l[j]), int(basis.comp[j])
            parts.setdefault((l, c), []).append(int(i))
        items = []
        for (l, c), members in sorted(parts.items()):
            total = int(np.count_nonzero((basis.l == l) & (basis.comp == c)))
            label = _kind(l, cart) if l == 0 else f"{_kind(l, cart)} {_component_name(l, c, cart)}"
            items.append(f"{label}: {len(members)} of {total}")
        word = "sign" if flipped.size == 1 else "signs"
        noun = "function" if flipped.size == 1 else "functions"
        clauses.append(f"{word} flipped on {flipped.size} {noun} ({'; '.join(items)})")

    # 3. scaling
    scale = np.abs(fac)
    scaled = scale != 1.0
    if np.any(scaled):
        unit, other = [], []
        for l in sorted(set(basis.l[src[scaled]].tolist())):
            of_l = basis.l[src] == l
            diag = s_code_diag[of_l] if s_code_diag is not None else None
            if (np.all(scaled[of_l]) and diag is not None
                    and np.all(np.abs(diag - 1.0) <= tolerance)):
                unit.append(_LETTERS[l])
            else:
                f = scale[of_l & scaled]
                off = float(np.max(np.abs(f ** 2 - 1.0)))
                size = (f"norms off by up to {off:.1e}" if off < NEAR_UNIT_SCALE
                        else f"factors {f.min():.3g} to {f.max():.3g}")
                other.append(f"{int(np.count_nonzero(of_l & scaled))} of "
                             f"{int(np.count_nonzero(of_l))} {_kind(l, cart)} functions "
                             f"rescaled ({size})")
        if unit:
            head = "cartesian " if cart else ""
            clauses.append(f"{head}{' and '.join(unit)} functions normalised to unit "
                           f"self-overlap")
        clauses += other

    # 4. shells moved within their atom
    moved: dict[int, int] = {}
    interleaved: set[int] = set()
    for sh, pos in enumerate(positions):
        start, size = int(basis.shell_start[sh]), int(basis.shell_size[sh])
        if not np.array_equal(pos, np.arange(start, start + size)):
            a = int(basis.shell_atom[sh])
            moved[a] = moved.get(a, 0) + 1
            if pos.size and pos[-1] - pos[0] != size - 1:
                interleaved.add(a)
    for a in sorted(moved):
        if a in interleaved:
            clauses.append(f"functions of atom {a} ({basis.symbols[a]}) interleaved "
                           f"across shells")
        else:
            noun = "shell" if moved[a] == 1 else "shells"
            clauses.append(f"{moved[a]} {noun} of atom {a} ({basis.symbols[a]}) reordered")
    return "; ".join(clauses)


def _convention(src, fac, basis: _Basis, s_code_diag=None,
                tolerance: float = CONVENTION_MATCH) -> Convention:
    src = np.asarray(src, dtype=int)
    fac = np.asarray(fac, dtype=float)
    return Convention(source=tuple(int(x) for x in src), factor=tuple(float(x) for x in fac),
                      description=_describe(src, fac, basis, s_code_diag, tolerance))


# ---------------------------------------------------------------------------- detection

def _unit_diagonal(s: np.ndarray) -> np.ndarray:
    """N = D^(−½) S D^(−½), D = diag(S): the overlap of the unit-normalised functions."""
    d = 1.0 / np.sqrt(np.diag(s))
    return s * d[:, None] * d[None, :]


def spectrum_distance(s_code: np.ndarray, s_ref: np.ndarray) -> float:
    """max_k |λ_k(N_code) − λ_k(N_ref)| over the ascending eigenvalues of the
    unit-diagonal overlaps N = D^(−½) S D^(−½); zero for any signed, scaled permutation,
    so it measures how far the two bases are apart whatever their conventions."""
    a = np.linalg.eigvalsh(_unit_diagonal(s_code))
    b = np.linalg.eigvalsh(_unit_diagonal(s_ref))
    return float(np.max(np.abs(a - b)))


def _candidates(s_code, s_ref, basis: _Basis, tolerance: float) -> np.ndarray:
    """Boolean (nao, nao): reference function j may be code function i's source.

    Same atom (by position: the code keeps the atoms' blocks where the reference has
    them) and equal sorted |row| of the unit-diagonal overlaps (a fingerprint invariant
    under order, sign and scale), within FINGERPRINT_SLACK × tolerance / min self-overlap.
    """
    n = basis.nao
    small = min(float(np.min(np.diag(s_code))), float(np.min(np.diag(s_ref))), 1.0)
    slack = FINGERPRINT_SLACK * tolerance / small
    fc = np.sort(np.abs(_unit_diagonal(s_code)), axis=1)
    fr = np.sort(np.abs(_unit_diagonal(s_ref)), axis=1)
    ok = np.zeros((n, n), dtype=bool)
    for a in np.unique(basis.atom):
        idx = np.flatnonzero(basis.atom == a)
        dist = np.max(np.abs(fc[idx][:, None, :] - fr[idx][None, :, :]), axis=2)
        ok[np.ix_(idx, idx)] = dist <= slack
    return ok


def _search(s_code, s_ref, allowed, tolerance: float):
    """Yield signed, scaled permutations (src, fac) with |fac_i fac_k S_ref[src_i, src_k]
    − S_code[i, k]| ≤ tolerance for all i, k (none if there is none).

    Depth-first: the next code function is the unassigned one with an overlap
    > tolerance with an assigned function (else, the start of a new connected piece)
    that has the fewest candidates; its sign follows from its largest overlap with the
    assigned functions (a new piece starts with +1: nothing fixes its sign); candidates
    are tried in the order "same position first, then by position", so a code in pyscf's
    order within a symmetric molecule keeps pyscf's order. Where symmetry lets several
    mappings reproduce S equally well, further ones are found by backtracking from the
    last choice; every one is a valid reading of the code's functions. Stops after
    SEARCH_BUDGET_PER_FUNCTION × nao assignments.
    """
    n = s_code.shape[0]
    dc, dr = np.diag(s_code), np.diag(s_ref)
    scale = np.sqrt(dc[:, None] / dr[None, :])
    scale[np.abs(dc[:, None] - dr[None, :]) <= tolerance] = 1.0
    counts = allowed.sum(axis=1)
    strong = np.abs(s_code) > tolerance
    src = np.full(n, -1)
    fac = np.zeros(n)
    used = np.zeros(n, dtype=bool)
    order: list[int] = []
    stack: list[tuple[int, int, list]] = []  # (len(order) before, code function, options)
    budget = SEARCH_BUDGET_PER_FUNCTION * n
    steps = 0

    def options_for(i):
        cands = np.flatnonzero(allowed[i] & ~used)
        if cands.size == 0:
            return []
        cands = np.concatenate([cands[cands == i], cands[cands != i]])
        if not order:
            return [(int(j), 1.0) for j in cands]
        k = np.asarray(order)
        target = s_code[i, k]
        pred = scale[i, cands][:, None] * fac[k][None, :] * s_ref[cands][:, src[k]]
        big = int(np.argmax(np.abs(target)))
        if abs(target[big]) > tolerance:
            sign = np.sign(pred[:, big] * target[big])
        else:
            sign = np.ones(cands.size)
        err = np.max(np.abs(target[None, :] - sign[:, None] * pred), axis=1)
        good = (err <= tolerance) & (sign != 0)
        return [(int(j), float(sg)) for j, sg in zip(cands[good], sign[good])]

    def assign(i, j, sign):
        src[i], fac[i], used[j] = j, sign * scale[i, j], True
        order.append(i)

    def undo(length):
        while len(order) > length:
            i = order.pop()
            used[src[i]] = False
            src[i], fac[i] = -1, 0.0

    while True:
        if len(order) == n:
            yield src.copy(), fac.copy()
            if not stack:
                return
            length, i, opts = stack.pop()
            undo(length)
            j, sign = opts[0]
            if len(opts) > 1:
                stack.append((len(order), i, opts[1:]))
            assign(i, j, sign)
            continue
        steps += 1
        if steps > budget:
            return
        free = src < 0
        touched = free & strong[np.asarray(order)].any(axis=0) if order else free & False
        pool = np.flatnonzero(touched if touched.any() else free)
        i = int(pool[np.argmin(counts[pool])])
        opts = options_for(i)
        while not opts:  # backtrack to the last choice with alternatives left
            if not stack:
                return
            length, i, opts = stack.pop()
            undo(length)
        j, sign = opts[0]
        if len(opts) > 1:
            stack.append((len(order), i, opts[1:]))
        assign(i, j, sign)


def _prefer_positive(src, fac, s_code, s_ref, tolerance: float):
    """Flip the sign of each connected piece (overlaps > tolerance) whose functions are
    mostly flipped: its overall sign is not fixed by S, and fewer flips read plainer.
    A flip is kept only if the mapping still reproduces S within the tolerance."""
    n = s_code.shape[0]
    strong = np.abs(s_code) > tolerance
    piece = np.full(n, -1)
    for start in range(n):
        if piece[start] >= 0:
            continue
        piece[start] = start
        front = [start]
        while front:
            nxt = np.flatnonzero(strong[front].any(axis=0) & (piece < 0))
            piece[nxt] = start
            front = list(nxt)
    fac = fac.copy()
    for p in np.unique(piece):
        members = piece == p
        if np.count_nonzero(fac[members] < 0) * 2 > np.count_nonzero(members):
            trial = fac.copy()
            trial[members] *= -1.0
            if _mapping_error(src, trial, s_code, s_ref) <= tolerance:
                fac = trial
    return fac


def _mapping_error(src, fac, s_code, s_ref) -> float:
    """max|Mᵀ S_ref M − S_code| = max_ik |fac_i fac_k S_ref[src_i, src_k] − S_code[i, k]|."""
    mapped = s_ref[np.ix_(src, src)] * fac[:, None] * fac[None, :]
    return float(np.max(np.abs(mapped - s_code)))


def _known_orders(l: int, cart: bool) -> set[tuple[int, ...]]:
    """Within-shell orders of the named conventions for shells of angular momentum l."""
    n = (l + 1) * (l + 2) // 2 if cart else 2 * l + 1
    known = {tuple(range(n))}
    if l == 1:
        known |= {(1, 2, 0), (2, 0, 1)}
    elif l >= 2 and (l in MOLDEN_CARTESIAN or not cart):
        known.add(tuple(_molden_order(l, cart)))
    return known


def _plainness(src, fac, basis: _Basis) -> tuple[int, ...]:
    """How plainly a mapping reads; smaller is plainer, all zero for the identity.

    (kinds whose shells do not all share one within-shell order and sign pattern,
    kinds whose pattern is not one of a named convention's, shells changed, signs
    flipped, functions moved). A code uses one convention per kind of shell, so among
    mappings that reproduce S equally well the consistent, known one is its own.
    """
    patterns: dict[int, set] = {}
    changed = 0
    for sh in range(basis.shell_start.size):
        pos = np.flatnonzero(basis.shell[src] == sh)
        start, size = int(basis.shell_start[sh]), int(basis.shell_size[sh])
        order = tuple(int(basis.comp[src[i]]) for i in pos)
        signs = tuple(bool(fac[i] < 0) for i in pos)
        if not np.array_equal(pos, np.arange(start, start + size)) or \
                order != tuple(range(size)) or any(signs):
            changed += 1
        patterns.setdefault(int(basis.shell_l[sh]), set()).add((order, signs))
    inconsistent = sum(len(p) > 1 for p in patterns.values())
    unknown = sum(any(o not in _known_orders(l, basis.cart) or any(s) for o, s in p)
                  for l, p in patterns.items())
    return (inconsistent, unknown, changed, int(np.count_nonzero(fac < 0)),
            int(np.count_nonzero(src != np.arange(src.size))))


def _count_hint(n_code: int, mol) -> str:
    from harness.backend.integrals import shell_structure

    shells = shell_structure(mol)
    if n_code != shells.nao_other:
        return ""
    high = sorted({l for l in shells.l if l >= 2})
    return f" (cartesian vs spherical {'/'.join(_LETTERS[l] for l in high)}?)"


def rescaling(s_code, s_ref, basis: _Basis | None = None,
              tolerance: float = CONVENTION_MATCH, mol=None) -> Convention | None:
    """The code's functions in pyscf's order and signs, each rescaled: χ_code_i = f_i χ_ref_i
    with f_i = sqrt(S_code_ii / S_ref_ii), when that reproduces the overlap,
    max_ik |f_i f_k S_ref_ik − S_code_ik| ≤ tolerance; else None.

    A code whose contracted functions are normalised only to some accuracy (norms off by
    1e-10 … 1e-1) differs from pyscf by exactly such factors. Factors within 1e-14 of 1
    are taken as 1. ``basis`` (or ``mol``, the reference Mole) describes the functions.
    """
    s_code = np.asarray(s_code, dtype=float)
    s_ref = np.asarray(s_ref, dtype=float)
    if s_code.shape != s_ref.shape or s_code.ndim != 2:
        return None
    dc, dr = np.diag(s_code), np.diag(s_ref)
    if np.any(dc <= 0) or np.any(dr <= 0):
        return None
    fac = np.sqrt(dc / dr)
    fac[np.abs(fac - 1.0) < 1e-14] = 1.0
    src = np.arange(s_code.shape[0])
    if _mapping_error(src, fac, s_code, s_ref) > tolerance:
        return None
    basis = basis if basis is not None else _basis(mol)
    return _convention(src, fac, basis, dc, tolerance)


def detect_convention(s_code, mol, *, tolerance: float = CONVENTION_MATCH,
                      s_ref: np.ndarray | None = None):
    """The code's AO convention, read from its overlap matrix ``s_code`` (code order).

    ``mol``: the case's pyscf Mole (the reference basis). Returns the identity
    :class:`Convention` when max|S_code − S_ref| ≤ tolerance; otherwise the signed,
    scaled, per-atom permutation M with max|Mᵀ S_ref M − S_code| ≤ tolerance (scales
    from the diagonals, m_i = sqrt(S_code_ii / S_ref_jj); order and signs by a search
    over the overlaps with functions already matched, see :func:`_search`). Where the
    molecule's symmetry lets two mappings reproduce S equally well (a reflection
    plane through every atom flips the odd functions; x and y are interchangeable in
    a linear molecule; an atom alone can be rotated), either is acceptable — both are
    valid readings, the checks give the same verdict with either — and of up to
    MAPPINGS_COMPARED found the plainest is returned (one within-shell order per kind of
    shell, a named convention's if possible, fewest changes; see :func:`_plainness`). Returns a :class:`BasisMismatch` for a different
    number of functions or when no such M exists.

    ``s_ref``: the reference overlap of ``mol`` if already computed (else pyscf's
    ``int1e_ovlp``). Raises HarnessError (field "overlap") for an overlap that is not a
    finite square matrix. Cost: O(nao²) per matched function, a few ms at nao ~ 100–200.
    """
    s_code = np.asarray(s_code, dtype=float)
    if s_code.ndim != 2 or s_code.shape[0] != s_code.shape[1]:
        raise HarnessError(f"shape {s_code.shape} is not a square matrix", field="overlap")
    if not np.all(np.isfinite(s_code)):
        raise HarnessError("contains NaN or inf", field="overlap")
    from harness.backend.integrals import overlap, shell_structure

    n_ref = shell_structure(mol).nao
    n_code = s_code.shape[0]
    if n_code != n_ref:
        return BasisMismatch(
            reason=f"basis differs: the code has {n_code} functions, the reference "
                   f"{n_ref}{_count_hint(n_code, mol)}",
            evidence={"nao_code": float(n_code), "nao_reference": float(n_ref)})
    s_ref = overlap(mol) if s_ref is None else np.asarray(s_ref, float)
    basis = _basis(mol)
    identity_error = float(np.max(np.abs(s_code - s_ref)))
    if identity_error <= tolerance:
        return _convention(np.arange(n_ref), np.ones(n_ref), basis)
    rescaled = rescaling(s_code, s_ref, basis, tolerance)
    if rescaled is not None:
        return rescaled
    diag = np.diag(s_code)
    if np.any(diag <= 0):
        i = int(np.argmin(diag))
        return BasisMismatch(
            reason=f"basis differs: the code's overlap has a non-positive self-overlap "
                   f"{diag[i]:.3g} at function {i}",
            evidence={"nao_code": float(n_code), "nao_reference": float(n_ref),
                      "identity_error": identity_error})
    best = None
    allowed = _candidates(s_code, s_ref, basis, tolerance)
    for k, (src, fac) in enumerate(_search(s_code, s_ref, allowed, tolerance)):
        fac = _prefer_positive(src, fac, s_code, s_ref, tolerance)
        if _mapping_error(src, fac, s_code, s_ref) > tolerance:
            continue
        score = _plainness(src, fac, basis)
        if best is None or score < best[0]:
            best = (score, src, fac)
        if not any(score) or k + 1 >= MAPPINGS_COMPARED:
            break
    if best is not None:
        return _convention(best[1], best[2], basis, diag, tolerance)
    distance = spectrum_distance(s_code, s_ref)
    same = (": the same space of functions, mixed otherwise than by order, sign or scale"
            if distance <= SAME_SPECTRUM else "")
    return BasisMismatch(
        reason=f"basis differs: no per-shell reordering, sign or scaling maps the code's "
               f"overlap onto the reference (overlap-spectrum distance {distance:.1e}{same})",
        evidence={"nao_code": float(n_code), "nao_reference": float(n_ref),
                  "identity_error": identity_error, "spectrum_distance": distance})


# ---------------------------------------------------------------------- named conventions

def _shell_orders(basis: _Basis, order_for) -> np.ndarray:
    """src with the functions of every shell permuted by ``order_for(l)`` (pyscf
    component indices in the code's order; None keeps pyscf's)."""
    src = np.arange(basis.nao)
    for start, size, l in zip(basis.shell_start, basis.shell_size, basis.shell_l):
        order = order_for(int(l))
        if order is not None:
            src[start:start + size] = start + np.asarray(order)
    return src


def _molden_order(l: int, cart: bool):
    if l < 2:
        return None
    if not cart:
        return [l] + [l + s * k for k in range(1, l + 1) for s in (1, -1)]
    if l not in MOLDEN_CARTESIAN:
        raise HarnessError(f"the Molden format defines no order for cartesian "
                           f"{_LETTERS[l]} functions", field="convention")
    names = _cartesian_names(l)
    return [names.index("".join(sorted(x))) for x in MOLDEN_CARTESIAN[l]]


def named_convention(name: str, mol) -> Convention:
    """The convention called ``name`` (one of :data:`NAMED`, see the module doc) for the
    basis of the pyscf Mole ``mol``; for codes that report no overlap.

    Raises HarnessError (one line, listing the names) for an unknown name.
    """
    key = str(name).strip().lower()
    if key not in NAMED:
        raise HarnessError(f"unknown AO convention {name!r} (known: {', '.join(NAMED)})",
                           field="convention")
    basis = _basis(mol)
    n = basis.nao
    src, fac = np.arange(n), np.ones(n)
    if key == "p-yzx":
        src = _shell_orders(basis, lambda l: [1, 2, 0] if l == 1 else None)
    elif key == "p-zxy":
        src = _shell_orders(basis, lambda l: [2, 0, 1] if l == 1 else None)
    elif key == "molden":
        src = _shell_orders(basis, lambda l: _molden_order(l, basis.cart))
    unit = key in ("molden", "unit-cartesian") and basis.cart
    diag = None
    if unit:
        from harness.backend.integrals import overlap

        s_diag = np.diag(overlap(mol))[src]
        fac = np.where(np.abs(s_diag - 1.0) <= CONVENTION_MATCH, 1.0, 1.0 / np.sqrt(s_diag))
        diag = s_diag * fac ** 2
    return _convention(src, fac, basis, diag)


#: Two bases of one name span "the same space of functions" when each one's functions
#: lie in the other's span up to this squared norm (max entry of S_bb − S_baS_aa⁻¹S_ab,
#: both ways). Rounded basis data (digits at 1e-7 of the coefficients) leave ~1e-13;
#: a different exponent or primitive (Li cc-pVDZ, pyscf's vs the exchange's) ~1e-3.
#: Functions 1e-5 outside the other basis (squared 1e-10) move E by far less than
#: the reference tolerance only when the spaces are this close.
SAME_SPACE = 1e-10


def outside_space(s_aa: np.ndarray, s_bb: np.ndarray, s_ab: np.ndarray) -> float:
    """How far two bases of the same atoms are from spanning the same space.

    With S_aa, S_bb their overlaps and S_ab = ⟨χ_a|χ_b⟩ the cross-overlap, the part of
    χ_b outside span(χ_a) has Gram matrix R_b = S_bb − S_abᵀ S_aa⁻¹ S_ab (positive
    semidefinite, zero iff every χ_b lies in span(χ_a)); likewise R_a with a and b
    swapped. Returns max(max|R_a|, max|R_b|): 0 when the spans are equal (any
    contraction, order, sign or normalisation of the same primitives). Dimensionless.
    """
    r_b = s_bb - s_ab.T @ np.linalg.solve(s_aa, s_ab)
    r_a = s_aa - s_ab @ np.linalg.solve(s_bb, s_ab.T)
    return float(max(np.max(np.abs(r_a)), np.max(np.abs(r_b))))
