"""``scf-harness selftest``: filtering, the table, the per-check summary, exit codes.

The core planted entries (harness.testing.planted.core) must all match; the mismatch and error
paths are exercised with a fake catalogue (monkeypatched), so they do not depend on which
other planted modules are wired into evaluate yet.
"""

from __future__ import annotations

import importlib
import io
import pkgutil
import subprocess
import sys

import pytest

from harness.testing import planted
from harness.testing import selftest as st
from harness.ui.cli import main
from harness.testing.planted import Planted
from harness.testing.planted import core
from harness.report.terminal import make_console

from test_cli import environment

RHF = "water-sto-3g-rhf"


def console_text():
    buffer = io.StringIO()
    return buffer, make_console(buffer, width=200)


@pytest.fixture(scope="module")
def core_run():
    buffer, console = console_text()
    outcome = st.run_selftest(console, only="core")
    return outcome, buffer.getvalue()


class TestCore:
    """The self-test over the core entries. Whether each core entry's expectation is
    up to date is tests/quality/test_planted_bugs.py's business; here the verdict of the
    self-test must agree with the failing set evaluate produced, entry by entry."""

    def test_verdicts_agree_with_the_failing_sets(self, core_run):
        outcome, text = core_run
        assert len(outcome.entries) == len(core.CATALOGUE)
        for o in outcome.entries:
            assert o.error is None
            assert o.matched == (o.failed == o.entry.fails), o.entry.name
        assert outcome.n_passed == len(core.CATALOGUE)  # every core entry is up to date
        assert outcome.exit_code == (0 if outcome.n_failed == 0 else 1)
        assert text.rstrip().splitlines()[-1] == (
            f"{outcome.n_passed} passed, {outcome.n_failed} failed")

    def test_summary_counts_the_planted_bugs_per_check(self, core_run):
        outcome, text = core_run
        meant = [o for o in outcome.entries if "stationarity" in o.entry.fails]
        caught = sum("stationarity" in o.failed for o in meant)
        assert meant
        assert f"stationarity: caught {caught} of {len(meant)} planted bugs meant for it" in text
        correct = [o for o in outcome.entries if o.entry.correct]
        assert (f"correct variants: {sum(o.matched for o in correct)} of {len(correct)} pass"
                in text)

    def test_table_rows(self, core_run):
        _, text = core_run
        row = next(line for line in text.splitlines()
                   if line.startswith(f"wrong_exchange_factor @ {RHF}"))
        assert "✓ caught" in row and "energy-consistency," in row
        row = next(line for line in text.splitlines()
                   if line.startswith(f"random_mo_phases @ {RHF}"))
        assert "(none)" in row and "✓ passes" in row


#: Cases whose reached state depends on the frame LAPACK picks inside a degenerate π set
#: (the same set as tests/quality/test_states.py).
FRAME_DEPENDENT = {"n2-stretched-6-31g-uhf"}


def _planted_modules():
    """Every module under harness/testing/planted/ that defines a self-test ``CATALOGUE``
    (found on disk, not taken from ``planted.MODULES``)."""
    out = {}
    for info in pkgutil.iter_modules(planted.__path__):
        module = importlib.import_module(f"{planted.__name__}.{info.name}")
        if hasattr(module, "CATALOGUE"):
            out[info.name] = module
    return out


def _label(entry):
    return f"{entry.spec} @ {entry.case}"


class TestWholeCatalogue:
    """Every entry of every planted catalogue module is run and matches its expectation
    (entries on a frame-dependent case excepted, see FRAME_DEPENDENT)."""

    def test_modules_on_disk_are_the_wired_ones(self):
        assert set(_planted_modules()) == set(planted.MODULES)

    @pytest.mark.slow  # runs every planted entry
    def test_every_entry_matches(self):
        expected = sorted(_label(e) for m in _planted_modules().values() for e in m.CATALOGUE)
        assert expected
        outcome = st.run_selftest(None)
        assert sorted(_label(o.entry) for o in outcome.entries) == expected
        errors = {_label(o.entry): o.error for o in outcome.entries if o.error is not None}
        assert errors == {}
        # The entries on FRAME_DEPENDENT cases may land on another state on another
        # LAPACK build (tests/quality/test_states.py: non-strict xfail); every other entry
        # must match.
        free = {label for label in expected
                if label.rsplit(" @ ", 1)[1] not in FRAME_DEPENDENT}
        mismatched = {_label(o.entry): o.mismatches for o in outcome.entries
                      if not o.matched and _label(o.entry) in free}
        assert mismatched == {}
        assert {_label(o.entry) for o in outcome.entries if o.matched} >= free


def _checks_named(note: str) -> set[str]:
    """Check names a note mentions outside quotation marks (quoted text is a hint's or a
    message's wording), as whole hyphenated words."""
    import re

    from harness.checks.tolerances import CHECK_NAMES

    text = re.sub(r'"[^"]*"', "", note)
    return {n for n in CHECK_NAMES if re.search(rf"(?<![\w-]){re.escape(n)}(?![\w-])", text)}


class TestWhatItPlants:
    """The "what it plants" column (each entry's note) agrees with the entry's expected
    failing checks: a check it names must be one the entry expects to fail."""

    def test_named_checks_are_expected_to_fail(self):
        wrong = {_label(e): sorted(_checks_named(e.note) - e.fails)
                 for e in planted.catalogue() if _checks_named(e.note) - e.fails}
        assert wrong == {}

    def test_notes_are_whole_sentences(self):
        for e in planted.catalogue():
            assert e.note and e.note.count('"') % 2 == 0, _label(e)
            assert e.note.count("(") == e.note.count(")"), _label(e)
            assert not e.note.endswith((":", ",")), _label(e)

    def test_the_comparison_can_fail(self):
        """The note of the old one_electron_too_many said electron-count catches it while
        only well-formed is expected: that disagreement is found."""
        note = "Occupations sum to N + 1: electron-count catches it."
        assert _checks_named(note) - {"well-formed"} == {"electron-count"}
        assert _checks_named('hint "kinetic energy missing" on self-consistency') == {
            "self-consistency"}
        assert _checks_named("maximum-overlap following; the overlap-definite check") == {
            "overlap-definite"}

    def test_note_is_the_first_paragraph(self):
        def f(problem):
            """First line that wraps
            onto a second line.

            Details."""

        assert planted.note_of(f) == "First line that wraps onto a second line."


def _boom(problem):
    raise RuntimeError("planted crash")


FAKE = (
    Planted("energies_in_ev", core.energies_in_ev, RHF, frozenset({"roothaan-hall"}),
            "eV energies"),
    Planted("wrong_exchange_factor", core.wrong_exchange_factor, RHF,
            frozenset({"aufbau", "self-consistency"}), "wrong expectation"),
    Planted("random_mo_phases", core.random_mo_phases, RHF, frozenset(), "needs a hint",
            hint="no such hint", hint_check="stationarity"),
    Planted("boom", _boom, RHF, frozenset(), "raises"),
)


class TestMismatch:
    def test_mismatches_and_errors_reported(self, monkeypatch):
        monkeypatch.setattr(planted, "catalogue", lambda: FAKE)
        buffer, console = console_text()
        outcome = st.run_selftest(console)
        text = buffer.getvalue()
        assert [o.matched for o in outcome.entries] == [True, False, False, False]
        assert outcome.exit_code == 1
        assert text.rstrip().splitlines()[-1] == "1 passed, 3 failed"
        assert outcome.entries[1].mismatches == (
            "also failed: energy-consistency, reference-energy", "did not fail: aufbau")
        assert outcome.entries[2].mismatches == (
            "hint on stationarity: expected 'no such hint', got none",)
        assert outcome.entries[3].error.startswith("RuntimeError: planted crash (")
        assert "aufbau: caught 0 of 1 planted bug meant for it" in text
        assert "hint on stationarity: given in 0 of 1 planted bug meant for it" in text

    def test_convention_expected_without_basis_check(self):
        entry = Planted("x", core.random_mo_phases, RHF, frozenset(), "n", convention="y,z,x")
        assert st.compare(entry, {}) == ("no basis check to report the AO convention",)

    def test_main_exit_code_one(self, monkeypatch, capsys):
        monkeypatch.setattr(planted, "catalogue", lambda: FAKE)
        assert main(["selftest", "--only", "wrong_exchange"]) == 1
        lines = capsys.readouterr().out.rstrip().splitlines()
        assert lines[-1] == "0 passed, 1 failed"

    def test_only_by_module_and_substring(self):
        entries = planted.catalogue()
        by_module = st.select(entries, "core")
        assert by_module and all(e.solve.__module__ == "harness.testing.planted.core" for e in by_module)
        water = st.select(entries, "@ oh-sto-3g-uhf")
        assert water and {e.case for e in water} == {"oh-sto-3g-uhf"}


class TestCommandLine:
    def run(self, *args, cwd):
        return subprocess.run([sys.executable, "-m", "harness", "selftest", *args], cwd=cwd,
                              env=environment(), capture_output=True, text=True, timeout=300)

    def test_filtered_run_exit_zero(self, tmp_path):
        result = self.run("--only", "planted.core:energies_in_ev", cwd=tmp_path)
        assert result.returncode == 0, result.stdout + result.stderr
        lines = result.stdout.rstrip().splitlines()
        assert lines[-1] == "2 passed, 0 failed"
        assert "roothaan-hall: caught 2 of 2 planted bugs meant for it" in result.stdout

    def test_no_match_is_a_usage_error(self, tmp_path):
        result = self.run("--only", "no-such-entry", cwd=tmp_path)
        assert result.returncode == 2
        assert result.stderr.strip() == ("scf-harness: error: --only: no planted entry "
                                         "matches 'no-such-entry'")
        assert result.stdout == ""


class TestKohnSham:
    """The planted Kohn–Sham bugs (harness.testing.planted.ks) are shown by the self-test
    like the others: one row with the note from the docstring and the expected checks."""

    def test_a_ks_row(self):
        buffer, console = console_text()
        outcome = st.run_selftest(console, only="planted.ks:correlation_missing")
        text = buffer.getvalue()
        assert [o.entry.name for o in outcome.entries] == ["correlation_missing"]
        assert outcome.n_passed == 1 and outcome.exit_code == 0
        row = next(line for line in text.splitlines()
                   if line.startswith("correlation_missing @ water-sto-3g-rks-lda"))
        assert "✓ caught" in row
        assert "Evaluates only the exchange part of the functional" in text
        assert "hint on self-consistency: given in 1 of 1 planted bug" in text
