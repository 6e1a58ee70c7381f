"""An SCF program run as a separate process: the lab's code behind the file protocol.

    python tests/external/lab_code.py --in problem.json --out solution.npz

It reads ``problem.json`` (format scf-harness-problem/1, coordinates in bohr) and the
basis from ``basis.nwchem`` (pyscf's NWChem parser, used for the integrals only), runs
the bundled example SCF code (``harness.testing.example_scf.LabSCF``: numpy Hartree–Fock,
or Kohn–Sham on the pinned grid of ``grid.npz`` with the functional of problem.json) and
writes the result as ``.npz``, ``.json`` or ``.h5`` by the output's suffix (energies in
hartree). It refuses to run (exit status 4) if pyscf's AO order for that basis is not
the one in ``ao_order.txt``. ``--fail-with N`` exits with status N after writing
nothing (for the tests of failing codes).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np

FORMAT = "scf-harness-problem/1"


class _Grid:
    """The pinned quadrature grid of a Kohn–Sham problem (coords bohr, weights)."""

    def __init__(self, coords, weights):
        self.coords, self.weights = coords, weights


class FileProblem:
    """The attributes the example SCF code reads, built from problem.json (bohr)."""

    def __init__(self, path: Path):
        doc = json.loads(path.read_text(encoding="utf-8"))
        if doc.get("format") != FORMAT:
            raise SystemExit(f"lab_code: {path}: expected format {FORMAT}, got {doc.get('format')!r}")
        self.folder = path.parent
        self.doc = doc
        self.name = doc["name"]
        self.method = doc["method"]
        self.n_alpha = int(doc["n_alpha"])
        self.n_beta = int(doc["n_beta"])
        self.convergence = float(doc["convergence"])
        density = doc["files"].get("initial_density")
        self.initial_density = np.load(self.folder / density) if density else None
        # Kohn–Sham: the functional and the pinned grid (grid.npz: coords bohr, weights)
        self.functional = doc.get("functional") or None
        self.grid = None
        if self.functional:
            with np.load(self.folder / doc["files"]["grid"]) as grid:
                self.grid = _Grid(np.array(grid["coords"]), np.array(grid["weights"]))
        self.shape_method = {"rks": "rhf", "uks": "uhf", "roks": "rohf"}.get(
            self.method, self.method)
        # what harness.backend.mole.mole_for reads (the XC evaluation builds a molecule)
        self.numbers = list(doc["numbers"])
        self.coordinates = np.asarray(doc["coordinates_bohr"], dtype=float)
        self.charge = int(doc["charge"])
        self.multiplicity = int(doc["multiplicity"])
        self.cartesian = bool(doc["cartesian"])
        self.basis = self._basis_dict()

    def _basis_dict(self) -> dict:
        from pyscf.data import elements
        from pyscf.gto.basis import parse_nwchem

        symbols = {elements.ELEMENTS[z] for z in self.doc["numbers"]}
        basis_file = str(self.folder / self.doc["files"]["basis"])
        return {s: parse_nwchem.load(basis_file, s) for s in symbols}

    def to_pyscf(self):
        """pyscf Mole from the coordinates (bohr) and the NWChem basis file."""
        from pyscf import gto
        from pyscf.data import elements
        from pyscf.gto.basis import parse_nwchem

        symbols = [elements.ELEMENTS[z] for z in self.doc["numbers"]]
        basis_file = str(self.folder / self.doc["files"]["basis"])
        basis = {s: parse_nwchem.load(basis_file, s) for s in set(symbols)}
        mol = gto.Mole()
        mol.atom = [(s, tuple(xyz)) for s, xyz in zip(symbols, self.doc["coordinates_bohr"])]
        mol.unit = "Bohr"
        mol.basis = basis
        mol.cart = bool(self.doc["cartesian"])
        mol.charge = int(self.doc["charge"])
        mol.spin = int(self.doc["multiplicity"]) - 1
        mol.verbose = 0
        mol.build()
        return mol


def write(result: dict, out: Path) -> None:
    if out.suffix == ".npz":
        np.savez(out, **{k: np.asarray(v) for k, v in result.items()})
    elif out.suffix == ".json":
        doc = {"format": "scf-harness-solution/1", "units": {"energy": "hartree"}}
        doc.update({k: (np.asarray(v).tolist() if isinstance(v, np.ndarray) else v)
                    for k, v in result.items()})
        out.write_text(json.dumps(doc), encoding="utf-8")
    elif out.suffix in (".h5", ".hdf5"):
        import h5py

        with h5py.File(out, "w") as fh:
            for k, v in result.items():
                fh[k] = np.asarray(v)
    else:
        raise SystemExit(f"lab_code: unknown output suffix {out.suffix!r}")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--in", dest="problem", type=Path, required=True)
    parser.add_argument("--out", type=Path, required=True)
    parser.add_argument("--fail-with", type=int, default=0)
    args = parser.parse_args(argv)
    if args.fail_with:
        print(f"lab_code: asked to fail with status {args.fail_with}", file=sys.stderr)
        return args.fail_with
    problem = FileProblem(args.problem)
    mol = problem.to_pyscf()
    expected = (problem.folder / problem.doc["files"]["ao_order"]).read_text().split("\n")
    labels = [" ".join(label.split()) for label in mol.ao_labels()]
    if labels != [line for line in expected if line]:
        print("lab_code: the AO order of basis.nwchem differs from ao_order.txt", file=sys.stderr)
        return 4
    from harness.testing.example_scf import LabSCF

    result = LabSCF(problem).iterate()
    write(result, args.out)
    print(f"lab_code: {problem.name}: E = {result['energy']:.10f} Eh, "
          f"converged={result['converged']} after {result['iterations']} iterations")
    return 0


if __name__ == "__main__":
    sys.exit(main())
