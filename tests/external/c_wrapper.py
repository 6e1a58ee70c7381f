"""Run the C program rhf.c behind the file protocol (closed-shell cases only).

    python tests/external/c_wrapper.py --exe path/to/rhf --in {problem} --out {solution}

Reads problem.json and basis.nwchem (pyscf's NWChem parser), computes the integrals
S, H = T + V, (pq|rs) and E_nuc with pyscf (integrals only; atomic units), writes them
to ``integrals.txt`` beside problem.json and runs the C program, which does the SCF
and writes the JSON solution. Its exit status is passed on; open-shell cases exit 5.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from lab_code import FileProblem  # noqa: E402  (the same problem.json reader)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--exe", required=True)
    parser.add_argument("--in", dest="problem", type=Path, required=True)
    parser.add_argument("--out", type=Path, required=True)
    args = parser.parse_args(argv)
    problem = FileProblem(args.problem)
    if problem.method != "rhf":
        print(f"c_wrapper: the C code does closed-shell RHF only, not {problem.method}",
              file=sys.stderr)
        return 5
    mol = problem.to_pyscf()
    nao = mol.nao
    s = mol.intor("int1e_ovlp")
    h = mol.intor("int1e_kin") + mol.intor("int1e_nuc")
    eri = mol.intor("int2e").reshape(nao, nao, nao, nao)
    path = problem.folder / "integrals.txt"
    with open(path, "w") as fh:
        fh.write(f"{nao} {problem.n_alpha} {float(mol.energy_nuc())!r} {float(problem.convergence)!r}\n")
        for block in (s, h, eri):
            np.savetxt(fh, block.reshape(-1, nao), fmt="%.17g")
    return subprocess.call([args.exe, str(path), str(args.out)])


if __name__ == "__main__":
    sys.exit(main())
