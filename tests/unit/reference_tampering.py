"""Edits of a stored reference file for the tampering tests (tests/unit/test_references.py,
tests/cli/test_tampered_references.py, tests/plugin/test_pytest_plugin.py): H2/STO-3G's
stored file with one value changed and its content hashes left as they were. The
energy shifts are synthetic (1e-3 Eh, far above every tolerance)."""

import json
from pathlib import Path

from harness.catalogue import references as refs

H2 = "h2-sto-3g-rhf"


def tamper(catalogue, folder: Path, edit) -> tuple[Path, object]:
    """A copy of H2's stored reference in ``folder`` with ``edit(data)`` applied (hashes
    left as they are); returns the file and the case."""
    case = catalogue.case(H2)
    path = folder / f"{H2}.json"
    data = json.loads(refs.reference_path(case).read_text())
    edit(data)
    path.write_text(json.dumps(data, indent=1))
    return path, case


def edit_total(data):
    data["energies"]["total"] -= 1e-3


def edit_total_and_nuclear(data):
    data["energies"]["total"] -= 1e-3
    data["energies"]["nuclear"] -= 1e-3


def edit_orbital_energy(data):
    data["orbital_energies"][0] += 1e-3


#: What each edit of H2's file makes verify, certify and the pytest plug-in say after
#: "reference tampered or corrupted: <file>: ".
TAMPERINGS = {
    "total": (edit_total, "content hash differs for energies.total; energy terms sum to "
              "{terms!r} Eh, the total is {total!r} Eh (difference -1.0e-03 Eh > 1e-10)"),
    "total-and-nuclear": (edit_total_and_nuclear,
                          "content hash differs for energies.nuclear, energies.total"),
    "orbital-energy": (edit_orbital_energy, "content hash differs for orbital_energies"),
}


def tampered_reason(path: Path, kind: str) -> str:
    """The verbatim reason for TAMPERINGS[kind] applied to H2's stored file at ``path``."""
    data = json.loads(path.read_text())
    e = data["energies"]
    terms = e["nuclear"] + e["one_electron"] + e["coulomb"] + e["exchange"]
    return (f"reference tampered or corrupted: {path}: "
            + TAMPERINGS[kind][1].format(terms=terms, total=e["total"]))
