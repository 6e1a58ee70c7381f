"""Certificates record the options that change what the checks compute (--stability,
--ao-convention) and ``verify-certificate --recompute`` re-runs the checks with them;
damaged certificate files are reported in one line each, never with a traceback.

Commands run in this process through ``harness.ui.cli.main`` (certify still runs the
plug-in in its own process). Energies in hartree (Eh).
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest

from harness.report.certificate import (EVALUATION_KEY, HASH_KEY, MAX_LISTED_PROBLEMS, _digests,
                                 _whole_hash, sidecar_path, verify_certificate)
from harness.ui.cli import main
from harness.checks.tolerances import CHECK_NAMES

H2 = "h2-sto-3g-rhf"
WATER = "water-sto-3g-rhf"
ERROR = "scf-harness: error: "

#: A correct code in the p-yzx AO convention (harness.testing.planted.conventions) that reports
#: no overlap, so only --ao-convention p-yzx tells the harness its AO order.
YZX_PLUGIN = '''
from harness.testing.planted.conventions import p_shells_yzx


def solve(problem):
    out = p_shells_yzx(problem)
    out.pop("overlap")
    return out
'''


def run_main(capsys, *args: str) -> tuple[int, str, str]:
    code = main(list(args))
    out = capsys.readouterr()
    return code, out.out, out.err


@pytest.fixture(scope="module")
def certified(tmp_path_factory) -> dict[str, Path]:
    """Certificates of certify runs with non-default evaluation options, by label."""
    folder = tmp_path_factory.mktemp("certified")
    plugin = folder / "yzx_code.py"
    plugin.write_text(YZX_PLUGIN, encoding="utf-8")
    runs = {
        "default": ["--case", H2],
        "stability-off": ["--case", H2, "--stability", "off"],
        "stability-external": ["--case", H2, "--stability", "external"],
        "ao-convention": [f"{plugin}:solve", "--case", WATER, "--ao-convention", "p-yzx"],
    }
    out = {}
    for label, args in runs.items():
        path = folder / f"{label}.json"
        assert main(["certify", *args, "--certificate", str(path), "--quiet"]) == 0, label
        out[label] = path
    return out


def copy_of(source: Path, folder: Path) -> Path:
    """The certificate and its sidecar copied into ``folder`` (same names: the
    certificate records its sidecar's)."""
    target = folder / source.name
    shutil.copy(source, target)
    shutil.copy(sidecar_path(source), sidecar_path(target))
    return target


def rewrite(path: Path, change, rehash: bool = False) -> None:
    data = json.loads(path.read_text(encoding="utf-8"))
    change(data)
    if rehash:
        data["digests"] = _digests(data)
        data[HASH_KEY] = _whole_hash(data)
    path.write_text(json.dumps(data), encoding="utf-8")


class TestOptionsRecorded:
    @pytest.mark.parametrize("label, recorded", [
        ("default", {"ao_convention": None, "stability": "internal"}),
        ("stability-off", {"ao_convention": None, "stability": "off"}),
        ("stability-external", {"ao_convention": None, "stability": "external"}),
        ("ao-convention", {"ao_convention": "p-yzx", "stability": "internal"}),
    ])
    def test_recorded_and_reproduced(self, capsys, certified, label, recorded):
        """Each run's options are in the certificate and --recompute reproduces it."""
        data = json.loads(certified[label].read_text(encoding="utf-8"))
        assert data[EVALUATION_KEY] == recorded
        assert data["passed"] is True
        code, out, err = run_main(capsys, "verify-certificate", str(certified[label]),
                                  "--recompute")
        assert (code, err) == (0, ""), out + err
        assert out == f"certificate {certified[label]}: intact and reproduced (1 case)\n"

    def test_the_options_changed_the_checks(self, certified):
        """The certified stability checks differ: off is not applicable, external
        judges the RHF→UHF Hessian (lowest eigenvalue 0.807 against 4.51 internal)."""
        def stability(label):
            data = json.loads(certified[label].read_text(encoding="utf-8"))
            return next(c for c in data["cases"][0]["checks"] if c["name"] == "stability")

        assert stability("stability-off")["status"] == "not applicable"
        internal, external = stability("default")["value"], stability("stability-external")[
            "value"]
        assert internal == pytest.approx(4.5147, abs=1e-3)
        assert external == pytest.approx(0.8073, abs=1e-3)

    @pytest.mark.parametrize("label, change", [
        ("stability-off", lambda d: d[EVALUATION_KEY].__setitem__("stability", "internal")),
        ("ao-convention", lambda d: d[EVALUATION_KEY].__setitem__("ao_convention", None)),
        ("stability-external", lambda d: d.pop(EVALUATION_KEY)),
    ])
    def test_editing_an_option_breaks_integrity(self, capsys, tmp_path, certified, label,
                                                change):
        path = copy_of(certified[label], tmp_path)
        rewrite(path, change)
        issues = verify_certificate(path).issues
        assert issues[0] == f"{HASH_KEY}: does not match the certificate's content (edited)"
        assert issues[1].startswith(f"{EVALUATION_KEY}: "), issues
        assert len(issues) == 2
        code, out, _ = run_main(capsys, "verify-certificate", str(path))
        assert code == 1 and f"  {EVALUATION_KEY}: " in out

    def test_a_rehashed_option_is_caught_by_recompute(self, tmp_path, certified):
        """Options forged with every hash recomputed: the recomputed checks differ."""
        path = copy_of(certified["stability-off"], tmp_path)
        rewrite(path, lambda d: d[EVALUATION_KEY].__setitem__("stability", "internal"),
                rehash=True)
        assert verify_certificate(path).ok
        issues = verify_certificate(path, recompute=True).issues
        assert len(issues) == 1
        assert issues[0].startswith(f"cases/{H2}/checks/stability: certified not "
                                    "applicable, recomputed passed")

    def test_an_unknown_recorded_option_is_one_issue(self, tmp_path, certified):
        path = copy_of(certified["default"], tmp_path)
        rewrite(path, lambda d: d[EVALUATION_KEY].__setitem__("stability", "sideways"),
                rehash=True)
        assert verify_certificate(path, recompute=True).issues == (
            f"{EVALUATION_KEY}: stability 'sideways' is not one of internal, external, off",)

    def test_older_certificate_recomputes_with_the_defaults(self, tmp_path, certified):
        """No recorded options (certificates made before they were): the defaults, so a
        default run reproduces and a --stability off run shows its stability check."""
        def old(d):
            d.pop(EVALUATION_KEY)

        path = copy_of(certified["default"], tmp_path)
        rewrite(path, old, rehash=True)
        assert verify_certificate(path, recompute=True).issues == ()
        path = copy_of(certified["stability-off"], tmp_path)
        rewrite(path, old, rehash=True)
        issues = verify_certificate(path, recompute=True).issues
        assert len(issues) == 1
        assert issues[0].startswith(f"cases/{H2}/checks/stability: certified not applicable, "
                                    "recomputed passed")

    def test_check_result_stability_off(self, capsys, tmp_path):
        from harness.catalogue.cases import load_catalogue
        from harness.testing.example_scf import solve

        case = load_catalogue().case(H2)
        raw = solve(case.problem())
        np.savez(tmp_path / "s.npz", **{k: np.asarray(v) for k, v in raw.items()
                                        if isinstance(v, (np.ndarray, float, int, bool))})
        cert = tmp_path / "cert.json"
        code, out, err = run_main(capsys, "check-result", str(tmp_path / "s.npz"),
                                  "--geometry", str(case.geometry_file), "--basis", "sto-3g",
                                  "--method", "rhf", "--name", H2, "--stability", "off",
                                  "--certificate", str(cert), "--quiet")
        assert code == 0, out + err
        assert json.loads(cert.read_text())[EVALUATION_KEY]["stability"] == "off"
        code, out, err = run_main(capsys, "verify-certificate", str(cert), "--recompute")
        assert code == 0, out + err
        assert out == f"certificate {cert}: intact and reproduced (1 case)\n"


class TestDamagedFiles:
    @pytest.fixture
    def cert(self, tmp_path, certified) -> Path:
        return copy_of(certified["default"], tmp_path)

    def one_line(self, capsys, path, expected_code=1) -> str:
        code, out, err = run_main(capsys, "verify-certificate", str(path), "--markdown",
                                  str(path.parent / "summary.md"))
        assert code == expected_code, out + err
        assert "Traceback" not in out + err
        lines = out.splitlines()
        assert len(lines) == 2 and lines[1].startswith("summary: not written"), out
        return lines[0]

    def test_bare_nan_token(self, capsys, cert):
        text = cert.read_text(encoding="utf-8")
        assert '"passed": true' in text
        cert.write_text(text.replace('"passed": true', '"passed": NaN', 1), encoding="utf-8")
        assert self.one_line(capsys, cert) == (
            f"certificate {cert}: not a readable JSON file (NaN is not JSON)")

    def test_deeply_nested_json(self, capsys, tmp_path):
        path = tmp_path / "deep.json"
        path.write_text("[" * 100000 + "]" * 100000, encoding="utf-8")
        assert self.one_line(capsys, path) == (
            f"certificate {path}: not a readable JSON file (nested too deeply)")

    def test_not_an_object(self, capsys, tmp_path):
        path = tmp_path / "list.json"
        path.write_text("[1, 2]", encoding="utf-8")
        assert self.one_line(capsys, path) == (
            f"certificate {path}: not a JSON object (a list), not a certificate")

    def test_directory(self, capsys, tmp_path):
        folder = tmp_path / "cert.json"
        folder.mkdir()
        code, out, err = run_main(capsys, "verify-certificate", str(folder))
        assert (code, out) == (2, "")
        assert err == f"{ERROR}{folder}: is a directory, not a certificate file\n"
        assert verify_certificate(folder).issues == ("is a directory",)

    def test_cases_not_a_list(self, capsys, cert):
        """One structural edit: two problems, each printed once."""
        rewrite(cert, lambda d: d.__setitem__("cases", "x"))
        code, out, err = run_main(capsys, "verify-certificate", str(cert), "--recompute")
        assert (code, err) == (1, "")
        assert out.splitlines() == [
            f"certificate {cert}: 2 problems:",
            f"  {HASH_KEY}: does not match the certificate's content (edited)",
            "  cases: not a list of cases (edited after the certificate was made)"]

    @pytest.mark.parametrize("change, named", [
        (lambda d: d.__setitem__("cases", 5), "cases: not a list of cases"),
        (lambda d: d["cases"][0].__setitem__("solution", "x"),
         f"cases/{H2}/solution: not a solution record"),
        (lambda d: d["cases"][0]["solution"].__setitem__("keys", 7),
         f"cases/{H2}/solution: not a solution record"),
        (lambda d: d["cases"].__setitem__(0, 3), "cases/(list): edited"),
        (lambda d: d["cases"][0].__setitem__("inputs", None), f"cases/{H2}/inputs: edited"),
        (lambda d: d["cases"][0].__setitem__("checks", "x"),
         f"cases/{H2}/checks: not a list of checks"),
        (lambda d: d.__setitem__("tolerances", 7), "tolerances: edited"),
    ])
    def test_structural_edit_is_named(self, cert, change, named):
        """Edits of the structure are named like any other, with or without --recompute."""
        rewrite(cert, change)
        for recompute in (False, True):
            issues = verify_certificate(cert, recompute=recompute).issues
            assert issues[0] == f"{HASH_KEY}: does not match the certificate's content " \
                                "(edited)"
            assert any(i.startswith(named) for i in issues), issues
            assert len(issues) == len(set(issues)) <= 4, issues

    def test_a_removed_case_is_one_line(self, cert):
        rewrite(cert, lambda d: d["cases"].append(dict(d["cases"][0], name="twin",
                                                               solution=None)),
                rehash=True)
        rewrite(cert, lambda d: d["cases"].pop(0))
        issues = verify_certificate(cert).issues
        assert issues == (f"{HASH_KEY}: does not match the certificate's content (edited)",
                          "cases/(list): edited after the certificate was made (digest "
                          "mismatch)",
                          f"cases/{H2}: removed after the certificate was made")

    def test_long_lists_are_cut(self, capsys, cert):
        """Every check's message edited: the first MAX_LISTED_PROBLEMS are listed, then
        how many were not."""
        def every_message(d):
            for check in d["cases"][0]["checks"]:
                check["message"] += " (edited)"

        rewrite(cert, every_message)
        n = 1 + len(CHECK_NAMES)  # the whole hash and each check
        assert n > MAX_LISTED_PROBLEMS
        assert len(verify_certificate(cert).issues) == n
        code, out, _ = run_main(capsys, "verify-certificate", str(cert))
        lines = out.splitlines()
        assert code == 1
        assert lines[0] == f"certificate {cert}: {n} problems:"
        assert len(lines) == 1 + MAX_LISTED_PROBLEMS + 1
        assert lines[-1] == f"  ... and {n - MAX_LISTED_PROBLEMS} more not listed"
        assert len(set(lines)) == len(lines)
