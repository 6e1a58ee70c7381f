"""The declared table of checks (``harness.checks.table``): the one source of the check
names, the terminal's column headers, the tolerances ``--tol`` accepts and docs/checks.md.

Energies in hartree (Eh); the solutions are pyscf's converged ones from conftest.py.
"""

from __future__ import annotations

import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import harness
from harness.checks import table
from harness.checks import tolerances as tolmod
from harness.checks.history import history_check
from harness.checks.tolerances import CHECK_NAMES, Tolerances, parse_override
from harness.contract.errors import ToleranceError
from harness.contract.results import Status
from harness.contract.solution import extract
from harness.report import terminal
from harness.verdict.judge import JudgeSettings, judge

REPO = Path(__file__).resolve().parents[2]


class TestTheTable:
    def test_docs_checks_md_is_the_generated_table(self):
        """docs/checks.md is exactly what ``python -m harness.checks.table --markdown``
        prints; regenerate it with that command after editing the table."""
        run = subprocess.run([sys.executable, "-m", "harness.checks.table", "--markdown"],
                             capture_output=True, text=True, check=True, cwd=REPO)
        assert run.stdout == table.markdown()
        assert (REPO / "docs" / "checks.md").read_text(encoding="utf-8") == run.stdout

    def test_markdown_has_one_row_per_check(self):
        rows = [line for line in table.markdown().splitlines() if line.startswith("| `")]
        assert [r.split("`")[1] for r in rows] == list(CHECK_NAMES)
        header = "| check | applies to | needs | tolerance | reason | what it checks |"
        assert header in table.markdown().splitlines()

    def test_check_names_are_derived_from_the_table(self):
        assert CHECK_NAMES == tuple(c.name for c in table.CHECKS)
        assert harness.CHECK_NAMES is CHECK_NAMES
        assert len(set(CHECK_NAMES)) == len(CHECK_NAMES)
        assert CHECK_NAMES[:3] == ("basis", "well-formed", "converged-flag")
        assert CHECK_NAMES[-1] == "history"

    def test_entries_are_complete(self):
        """Every entry has a column, known methods and keys, a reason and a summary."""
        from harness.contract.solution import KNOWN_KEYS
        for c in table.CHECKS:
            assert c.column and c.reason and c.summary, c.name
            assert c.methods and set(c.methods) <= set(table.ALL_METHODS), c.name
            assert set(c.needs) <= set(KNOWN_KEYS), c.name

    def test_every_check_with_a_threshold_has_a_tolerance_entry(self):
        """Each named constant resolves to a positive number; Tolerances gives it (fixed)
        or the convergence rule (derived); only converged-flag has none."""
        tol = Tolerances()
        assert [c.name for c in table.CHECKS if c.tolerance is None] == ["converged-flag"]
        for c in table.CHECKS:
            for constant in c.also:
                assert table.resolve(constant) > 0, constant
            if c.tolerance is None:
                continue
            value = tol.for_check(c.name, 1e-6)
            assert value > 0 and math.isfinite(value), c.name
            if isinstance(c.tolerance, table.Fixed):
                assert value == table.resolve(c.tolerance.constant), c.name
                assert tol.for_check(c.name, 1e-3) == value, c.name
            else:
                assert value == pytest.approx(tolmod.CONVERGENCE_FACTOR * 1e-6), c.name
                assert tol.for_check(c.name, 1e-3) == pytest.approx(
                    tolmod.CONVERGENCE_FACTOR * 1e-3), c.name
        assert table.TOLERANCE_NAMES == tuple(c.name for c in table.CHECKS
                                              if c.tolerance is not None)

    def test_the_values_are_today_s(self):
        """The table names the constants the checks have always used, with their values."""
        tol = Tolerances()
        # overlap, kinetic, …: energy effects within INTEGRAL_ENERGY_EFFECT (issue 11)
        expected = {"basis": 1e-8, "well-formed": 1e-8, "overlap": 1e-7, "kinetic": 1e-7,
                    "two-electron": 1e-7,
                    "reference-energy": 1e-6, "aufbau": 1e-6, "stability": 1e-5,
                    "spin-squared": 1e-3, "energy-error-bound": 1e-6, "history": 1e-6,
                    "two-electron-symmetry": 1e-10, "overlap-definite": 1e-10}
        assert {n: tol.for_check(n, 1e-6) for n in expected} == expected

    def test_terminal_columns_come_from_the_table(self):
        assert terminal.SHORT_NAMES == {c.name: c.column for c in table.CHECKS}
        assert set(terminal.SHORT_NAMES) == set(CHECK_NAMES)


class TestOverrides:
    def test_every_check_with_a_tolerance_can_be_overridden(self):
        for name in table.TOLERANCE_NAMES:
            tol = Tolerances().override(dict([parse_override(f"{name}=3e-4")]))
            assert tol.for_check(name, 1e-6) == 3e-4, name

    def test_unknown_and_tolerance_free_checks_are_refused(self):
        with pytest.raises(ToleranceError) as err:
            parse_override("nosuch=1")
        assert str(err.value) == ("--tol: unknown check 'nosuch' (known: "
                                  + ", ".join(table.TOLERANCE_NAMES) + ")")
        with pytest.raises(ToleranceError) as err:
            Tolerances(overrides={"converged-flag": 1.0})
        assert str(err.value) == ("--tol: check 'converged-flag' has no tolerance (a flag: "
                                  "nothing to tolerate)")

    def test_cli_accepts_basis_and_refuses_nosuch(self):
        """``--tol basis=1e-6`` parses to the basis tolerance; ``--tol nosuch=1`` is one
        line on stderr, exit 2."""
        from harness.ui import cli
        args = cli.build_parser().parse_args(["certify", "--tol", "basis=1e-6"])
        assert cli._tolerances(args).for_check("basis", 1e-6) == 1e-6
        run = subprocess.run([sys.executable, "-m", "harness", "certify", "--tol", "nosuch=1"],
                             capture_output=True, text=True, cwd=REPO, timeout=120,
                             env={**__import__("os").environ, "NO_COLOR": "1"})
        assert run.returncode == 2
        assert run.stderr.strip().splitlines() == [
            "scf-harness: error: --tol: unknown check 'nosuch' (known: basis, well-formed, "
            "overlap, orthonormality, idempotency, electron-count, density-consistency, "
            "stationarity, self-consistency, roothaan-hall, energy-consistency, "
            "reference-energy, aufbau, stability, spin-squared, energy-error-bound, kinetic, "
            "nuclear-attraction, core-hamiltonian, overlap-definite, kinetic-definite, "
            "two-electron, two-electron-symmetry, two-electron-schwarz, "
            "two-electron-definite, history)"]

    def test_basis_override_changes_the_mapping_tolerance(self, water_rhf):
        """An overlap off pyscf's by 1e-7 (above CONVENTION_MATCH = 1e-8) is the code's own
        metric in pyscf's order by default (basis passes with the size stated); with
        ``--tol basis=1e-6`` it is pyscf's own overlap (basis passes, value 0)."""
        sol = water_rhf.solution()
        sol["overlap"] = sol["overlap"] + 1e-7 * (1.0 - np.eye(len(sol["overlap"])))

        def basis(tolerances):
            r = judge(water_rhf.problem, extract(sol), None,
                    JudgeSettings(tolerances=tolerances, stability="off"),
                    integrals=water_rhf.ints).checks
            return next(c for c in r if c.name == "basis")

        default = basis(None)
        assert default.status is Status.PASSED and default.value == pytest.approx(1e-7)
        assert default.message == (
            "basis: pyscf's AO order; the code's overlap differs from pyscf's by up to "
            "1.0e-07, judged in the code's own metric (the overlap check weighs the "
            "difference) (water-sto-3g-rhf)")
        loose = basis(Tolerances(overrides=dict([parse_override("basis=1e-6")])))
        assert loose.status is Status.PASSED and loose.value == 0.0
        assert loose.message == ("basis: the code's overlap is pyscf's, same AO order "
                                 "(water-sto-3g-rhf)")

    def test_well_formed_override_reaches_the_symmetry_test(self, water_rhf):
        sol = water_rhf.solution()
        sol["fock"] = sol["fock"].copy()
        sol["fock"][0, 1] += 1e-7
        results = {r.name: r for r in judge(water_rhf.problem, extract(sol), None,
                JudgeSettings(stability="off"), integrals=water_rhf.ints).checks}
        assert results["well-formed"].status is Status.FAILED
        assert "max|A − Aᵀ| = 1.0e-07 > 1e-08" in results["well-formed"].message
        loose = Tolerances(overrides={"well-formed": 1e-6})
        results = {r.name: r for r in judge(water_rhf.problem, extract(sol), None,
                JudgeSettings(tolerances=loose, stability="off"), integrals=water_rhf.ints).checks}
        assert results["well-formed"].status is Status.PASSED

    def test_state_overrides_reach_the_state_checks(self, water_rhf):
        """stability and energy-error-bound report the overridden tolerance."""
        tight = Tolerances(overrides={"stability": 2e-5, "energy-error-bound": 3e-7})
        results = {r.name: r for r in judge(water_rhf.problem, extract(water_rhf.solution()),
                None, JudgeSettings(tolerances=tight), integrals=water_rhf.ints).checks}
        assert results["stability"].tolerance == 2e-5
        assert results["energy-error-bound"].tolerance == 3e-7
        default = {r.name: r for r in judge(water_rhf.problem, extract(water_rhf.solution()),
                None, integrals=water_rhf.ints).checks}
        assert default["stability"].tolerance == 1e-5
        assert default["energy-error-bound"].tolerance == 1e-6

    def test_history_override_reaches_the_history_check(self, water_rhf):
        """A last-step rise of 1e-7 Eh passes the default 1e-6 and fails history=1e-8,
        through evaluate."""
        sol = water_rhf.solution()
        e = sol["energy"]
        sol["history"] = [{"energy": e - 1e-3, "error": 1e-2},
                          {"energy": e - 1e-7, "error": 1e-8}, {"energy": e, "error": 1e-9}]
        default = {r.name: r for r in judge(water_rhf.problem, extract(sol), None,
                JudgeSettings(stability="off"), integrals=water_rhf.ints).checks}
        assert default["history"].status is Status.PASSED
        tight = Tolerances(overrides={"history": 1e-8})
        results = {r.name: r for r in judge(water_rhf.problem, extract(sol), None,
                JudgeSettings(tolerances=tight, stability="off"), integrals=water_rhf.ints).checks}
        assert results["history"].status is Status.FAILED
        assert results["history"].message.startswith(
            "history: energy rising at the end: the last step raises E by 1.0e-07 > 1.0e-08 Eh "
            "while the code claims convergence (water-sto-3g-rhf)")

    def test_history_override_sets_the_oscillation_amplitude_too(self):
        energies = [-1.0, -1.0 + 2e-7, -1.0, -1.0 + 2e-7, -1.0]
        h = np.column_stack([energies, [1e-3] * 5])
        kw = dict(converged=False, stationarity_value=None, stationarity_tolerance=None,
                  convergence=1e-6, case="x")
        assert history_check(h, **kw).status is Status.PASSED
        r = history_check(h, energy_step=1e-7, **kw)
        assert r.status is Status.FAILED and r.message.startswith("history: oscillation:")
        assert "> 1.0e-07)" in r.message
