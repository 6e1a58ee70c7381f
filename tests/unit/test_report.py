"""Tests of harness.report.terminal: progress lines, the verdict table, the summary line, JSON."""

from __future__ import annotations

import io
import json
import re

import pytest

from harness.report import terminal as report
from harness.contract.results import CaseResult, CheckResult, Status, judge, Measurement
from harness.run.runner import RunOutcome
from harness.checks.tolerances import CHECK_NAMES, Tolerances

ANSI = re.compile(r"\x1b\[")


def passing_case(name="h2-sto-3g-rhf") -> CaseResult:
    checks = [CheckResult("well-formed", Status.PASSED, 0.0, None, "well-formed: ok"),
              judge("stationarity", Measurement(2.3e-8, "max|X(FPS−SPF)X|"), 1e-5, name),
              CheckResult("overlap", Status.NOT_APPLICABLE, None, None,
                          "overlap: not applicable"),
              CheckResult("aufbau", Status.SKIPPED, None, None, "aufbau: skipped")]
    return CaseResult(name=name, method="rhf", basis="sto-3g", checks=tuple(checks),
                      energy=-1.1167, plugin_seconds=1.23, check_seconds=0.1)


def failing_case(name="water-sto-3g-rhf") -> CaseResult:
    bad = judge("reference-energy", Measurement(3.4e-3, "|E − E_ref|"), 1e-6, name)
    bad = CheckResult(bad.name, bad.status, bad.value, bad.tolerance, bad.message,
                      hint="is the nuclear repulsion included?")
    checks = [CheckResult("well-formed", Status.PASSED, 0.0, None, "well-formed: ok"), bad]
    return CaseResult(name=name, method="rhf", basis="sto-3g", checks=tuple(checks),
                      plugin_seconds=0.4)


def crashed_case(name="oh-sto-3g-uhf") -> CaseResult:
    return CaseResult(name=name, method="uhf", basis="sto-3g",
                      error="plug-in process died from SIGSEGV without sending a result")


def outcome(*cases, interrupted=False) -> RunOutcome:
    return RunOutcome(cases=tuple(cases), interrupted=interrupted, seconds=2.5)


def rendered(out, **kw) -> str:
    buf = io.StringIO()
    console = report.make_console(buf, width=120)
    report.render(out, console, **kw)
    return buf.getvalue()


class TestRender:
    def test_summary_is_last_line_alone(self):
        """The last line is exactly 'N passed, M failed'."""
        text = rendered(outcome(passing_case(), failing_case(), crashed_case()))
        assert text.splitlines()[-1] == "1 passed, 2 failed"

    def test_table_cells(self):
        """Measured values in .0e with a mark; n.a. and skip shown; headers short."""
        full = CaseResult(name="lih-sto-3g-rhf", method="rhf", basis="sto-3g", checks=(
            judge("overlap", Measurement(1e-16, "max|S − S_ref|"), 1e-8, "lih-sto-3g-rhf"),
            judge("aufbau", Measurement(-0.3, "ε_HOMO − ε_LUMO"), 1e-6, "lih-sto-3g-rhf")))
        cases = (passing_case(), failing_case(), full)
        text = rendered(outcome(*cases))
        header = next(line for line in text.splitlines() if line.startswith("case"))
        ran = {c.name for r in cases for c in r.checks if c.passed is not None}
        assert header.split() == ["case"] + [report.SHORT_NAMES[n] for n in CHECK_NAMES
                                             if n in ran]
        row = next(line for line in text.splitlines() if line.startswith("h2-sto-3g-rhf"))
        assert "2e-08✓" in row and "n.a." in row and "skip" in row
        bad = next(line for line in text.splitlines() if line.startswith("water-sto-3g-rhf"))
        assert "3e-03✗" in bad

    def test_columns_of_checks_that_never_ran_are_hidden(self):
        """A check that is n.a. or skipped on every case gets no column."""
        text = rendered(outcome(passing_case(), failing_case()))
        header = next(line for line in text.splitlines() if line.startswith("case")).split()
        ran = {c.name for r in (passing_case(), failing_case()) for c in r.checks
               if c.passed is not None}
        hidden = [n for n in CHECK_NAMES if n not in ran]
        assert hidden and all(report.SHORT_NAMES.get(n, n) not in header for n in hidden)

    def test_table_fits_120_columns(self):
        """A long case name and all thirteen columns fit a 120-column CI log."""
        case = passing_case("stretched-h2-6-31g-uhf-long-name")
        text = rendered(outcome(case))
        assert max(len(line) for line in text.splitlines()) <= 120

    def test_failures_listed_with_hints(self):
        """Each failed case lists its failing messages and hints, and a crash its error."""
        lines = rendered(outcome(passing_case(), failing_case(), crashed_case())).splitlines()
        i = lines.index("water-sto-3g-rhf (rhf/sto-3g)")
        assert lines[i + 1].strip().startswith("reference-energy: |E − E_ref| = 3.4e-03 > 1.0e-06")
        assert lines[i + 2].strip() == "hint: is the nuclear repulsion included?"
        j = lines.index("oh-sto-3g-uhf (uhf/sto-3g)")
        assert lines[j + 1].strip() == "plug-in process died from SIGSEGV without sending a result"
        assert "h2-sto-3g-rhf (rhf/sto-3g)" not in lines

    def test_quiet_has_no_table(self):
        """quiet: no table, but failures and the summary remain."""
        text = rendered(outcome(passing_case(), failing_case()), quiet=True)
        assert not any(line.startswith("case ") for line in text.splitlines())
        assert "water-sto-3g-rhf (rhf/sto-3g)" in text
        assert text.splitlines()[-1] == "1 passed, 1 failed"

    def test_interrupted_is_said(self):
        """An interrupted run says so before the summary line."""
        lines = rendered(outcome(passing_case(), interrupted=True)).splitlines()
        assert lines[-2].startswith("interrupted")
        assert lines[-1] == "1 passed, 0 failed"

    def test_messages_with_brackets_are_not_markup(self):
        """A message containing [brackets] is printed verbatim, not as rich markup."""
        case = CaseResult(name="x", method="rhf", basis="sto-3g",
                          error="ValueError: bad index [bold]3[/bold]")
        assert "ValueError: bad index [bold]3[/bold]" in rendered(outcome(case))


class TestProgress:
    def test_pass_and_fail_lines(self):
        """✓ name  1.2 s for a pass; ✗ name  time  first failure for a fail."""
        assert report.progress_line(passing_case()).plain == "✓ h2-sto-3g-rhf  1.2 s"
        line = report.progress_line(crashed_case()).plain
        assert line == ("✗ oh-sto-3g-uhf  -  plug-in process died from SIGSEGV without "
                        "sending a result")
        first = failing_case().failures[0].message
        assert report.progress_line(failing_case()).plain == f"✗ water-sto-3g-rhf  0.4 s  {first}"

    def test_computed_reference_is_announced(self):
        """A reference computed during the run is mentioned on the progress line."""
        case = CaseResult(**{**passing_case().__dict__, "reference_source": "computed"})
        assert report.progress_line(case).plain.endswith(
            "(reference computed with pyscf now, not stored)")
        case = CaseResult(**{**passing_case().__dict__, "reference_source": "written"})
        assert report.progress_line(case).plain.endswith(
            "(reference computed with pyscf now and stored)")


class FakeTTY(io.StringIO):
    def isatty(self):
        return True


class TestConsole:
    def test_no_colour_when_not_a_tty(self, monkeypatch):
        """A plain file gets no escape codes and the CI width."""
        monkeypatch.delenv("NO_COLOR", raising=False)
        monkeypatch.delenv("COLUMNS", raising=False)
        buf = io.StringIO()
        console = report.make_console(buf)
        assert console.width == report.PLAIN_WIDTH
        report.render(outcome(passing_case(), failing_case()), console)
        assert not ANSI.search(buf.getvalue())

    def test_colour_on_a_tty_unless_no_color(self, monkeypatch):
        """A TTY gets colour; NO_COLOR removes it."""
        monkeypatch.delenv("NO_COLOR", raising=False)
        buf = FakeTTY()
        report.render(outcome(failing_case()), report.make_console(buf, width=120))
        assert ANSI.search(buf.getvalue())
        monkeypatch.setenv("NO_COLOR", "1")
        buf = FakeTTY()
        report.render(outcome(failing_case()), report.make_console(buf, width=120))
        assert not ANSI.search(buf.getvalue())


class TestJson:
    def data(self):
        return report.to_json(outcome(passing_case(), failing_case()), plugin="m:f",
                              suite_names=["smoke"],
                              tolerances_table=Tolerances().table(1e-6),
                              versions=report.collect_versions())

    def test_fields(self):
        """The documented top-level fields, units and verdicts."""
        data = self.data()
        assert data["passed"] is False and data["interrupted"] is False
        assert data["plugin"] == "m:f" and data["suites"] == ["smoke"]
        assert data["units"]["energy"] == "hartree" and data["units"]["length"] == "bohr"
        assert set(data["versions"]) == {"harness", "pyscf", "numpy", "python"}
        assert data["tolerances"]["stationarity"] == pytest.approx(1e-5)
        assert [c["passed"] for c in data["cases"]] == [True, False]
        h2 = {c["name"]: c["passed"] for c in data["cases"][0]["checks"]}
        assert h2["overlap"] is None and h2["aufbau"] is None and h2["stationarity"] is True

    def test_write_json_is_atomic_and_round_trips(self, tmp_path):
        """write_json leaves exactly the target file, and it reads back equal."""
        path = tmp_path / "sub" / "results.json"
        data = self.data()
        report.write_json(path, data)
        assert json.loads(path.read_text()) == json.loads(json.dumps(data))
        assert sorted(p.name for p in path.parent.iterdir()) == ["results.json"]

    def test_failed_write_keeps_the_old_file(self, tmp_path):
        """A value JSON cannot hold aborts the write; the old file and no temp file remain."""
        path = tmp_path / "results.json"
        path.write_text('{"old": true}')
        with pytest.raises(TypeError):
            report.write_json(path, {"bad": object()})
        assert path.read_text() == '{"old": true}'
        assert [p.name for p in tmp_path.iterdir()] == ["results.json"]


def test_json_report_is_strict_json(tmp_path):
    """NaN and infinities (a value the checks could not compute) become null: JSON has no
    NaN, and strict readers reject the bare token."""
    path = report.write_json(tmp_path / "r.json", {"a": float("nan"), "b": [1.0, float("inf")],
                                                   "c": {"d": -float("inf"), "e": 2}})
    text = path.read_text()
    assert "NaN" not in text and "Infinity" not in text
    assert json.loads(text) == {"a": None, "b": [1.0, None], "c": {"d": None, "e": 2}}
