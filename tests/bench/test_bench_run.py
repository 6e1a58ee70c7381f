"""run_bench end to end on the smoke suite, its report files, and the pieces it is made of.

Energies in Eh. The smoke-suite bench is the fast default test (< 30 s: one perturbed
guess per case); the hard suite is in test_bench_hard.py (slow).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from harness.bench import accelerators as acc
from harness.bench import runs as bench
from harness.bench.runs import RunRecord, classify_state, run_bench, verdict_lines
from harness.contract.errors import HarnessError


#: Baselines of the fast smoke bench: pyscf's EDIIS and ADIIS (a BFGS minimisation per
#: iteration, ~40% of the bench's time) are run in test_ediis_adiis_baselines instead.
FAST_BASELINES = ("roothaan", "damping", "pyscf-cdiis", "pyscf-newton")


@pytest.fixture(scope="module")
def smoke_outcome(catalogue, tmp_path_factory):
    out_dir = tmp_path_factory.mktemp("bench")
    calls = []
    outcome = run_bench("harness.bench.example_accelerator:CommutatorDIIS",
                        cases=catalogue.suite("smoke"), guesses=1, seed=0,
                        baselines=FAST_BASELINES, report_dir=out_dir,
                        progress=lambda *a: calls.append(a))
    return outcome, out_dir, calls


def test_example_accelerator_passes_on_smoke(smoke_outcome):
    """Our DIIS converges to the ground state in every run and every property holds."""
    outcome, _, _ = smoke_outcome
    mine = [r for r in outcome.records if r.method == "example-diis"]
    assert len(mine) == 4 * 2
    assert all(r.converged and r.state == "ground state" for r in mine)
    assert all(abs(r.delta_e) <= bench.GROUND_STATE_TOLERANCE for r in mine)
    assert outcome.properties_passed
    names = {p.name for p in outcome.properties}
    assert names == {"fixed-point", "determinism", "invariance", "rotation-invariance",
                     "no-nan-degenerate"}
    assert not outcome.worse and outcome.exit_status == 0


def test_every_method_ran_every_guess(smoke_outcome):
    outcome, _, calls = smoke_outcome
    assert outcome.methods == ("example-diis",) + FAST_BASELINES
    assert len(outcome.records) == 4 * 2 * len(outcome.methods)
    assert [c[0] for c in calls] == list(range(1, len(outcome.records) + 1))
    assert all(c[1] == len(outcome.records) for c in calls)
    for case in outcome.cases:
        for method in outcome.methods:
            got = sorted(r.guess for r in outcome.records
                         if r.case == case and r.method == method)
            assert got == [0, 1]


def test_summary_counts_match_records(smoke_outcome):
    outcome, _, _ = smoke_outcome
    for s in outcome.summary:
        mine = [r for r in outcome.records if r.method == s.method]
        conv = [r.fock_builds for r in mine if r.converged]
        assert s.runs == len(mine) and s.converged == len(conv)
        if conv:
            assert s.median_builds == float(np.median(conv)) and s.worst_builds == max(conv)
    roothaan = next(s for s in outcome.summary if s.method == "roothaan")
    diis = next(s for s in outcome.summary if s.method == "example-diis")
    assert diis.median_builds < roothaan.median_builds  # DIIS accelerates


def test_report_files(smoke_outcome):
    outcome, out_dir, _ = smoke_outcome
    lines = (out_dir / bench.JSONL_NAME).read_text().splitlines()
    assert len(lines) == len(outcome.records)
    first = json.loads(lines[0])
    assert first["case"] == "h2-sto-3g-rhf" and first["method"] == "example-diis"
    data = json.loads((out_dir / bench.JSON_NAME).read_text())
    assert data["exit_status"] == 0 and len(data["runs"]) == len(outcome.records)
    for case in outcome.cases:
        png = out_dir / f"convergence-{case}.png"
        assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert (out_dir / "fock-builds.png").stat().st_size > 1000
    page = (out_dir / bench.HTML_NAME).read_text()
    assert page.count("data:image/png;base64,") == len(outcome.cases) + 1
    assert "example-diis" in page and "src=\"http" not in page


def test_summary_lines(smoke_outcome):
    outcome, _, _ = smoke_outcome
    text = "\n".join(bench.summary_lines(outcome))
    assert "example-diis" in text and "pyscf-newton" in text
    assert "✓ fixed-point" in text
    assert text.splitlines()[-1].startswith("bench passed")


def test_jsonl_is_written_while_running(catalogue, tmp_path):
    """Each run is in bench.jsonl by the time progress reports it."""
    seen = []

    def progress(done, total, record):
        seen.append(len((tmp_path / bench.JSONL_NAME).read_text().splitlines()) == done)

    run_bench(acc.Roothaan, cases=[catalogue.case("h2-sto-3g-rhf")], guesses=1,
              baselines=("damping",), report_dir=tmp_path, progress=progress,
              properties=False)
    assert seen == [True] * 4


def test_same_seed_same_guesses_other_seed_other_guesses(setup):
    _, _, ham, _ = setup("water-sto-3g-rhf")
    a = bench.starting_guesses(ham, "water-sto-3g-rhf", 2, seed=0)
    b = bench.starting_guesses(ham, "water-sto-3g-rhf", 2, seed=0)
    c = bench.starting_guesses(ham, "water-sto-3g-rhf", 2, seed=1)
    assert np.array_equal(a[0].c, c[0].c)  # guess 0 is the default guess
    assert all(np.array_equal(x.c, y.c) for x, y in zip(a, b))
    assert not np.allclose(a[1].c, c[1].c)


class _Ref:
    def __init__(self, energy, known=None):
        self.energy = energy
        if known is not None:
            self.known_states = known


def test_classify_state():
    ref = _Ref(-10.0)
    assert classify_state(-10.0 + 5e-7, ref, True) == (pytest.approx(5e-7), "ground state")
    de, label = classify_state(-9.9, ref, True)
    assert label == "other state ΔE = +0.100000 Eh"
    assert classify_state(-10.2, ref, True)[1] == "other state ΔE = -0.200000 Eh"
    assert classify_state(-9.9, ref, False)[1] == "—"
    known = _Ref(-10.0, [{"energy": -10.0}, {"energy": -9.95}, {"energy": -9.9}])
    assert classify_state(-9.9 + 2e-7, known, True)[1] == "known state 2, ΔE = +0.100000 Eh"
    assert classify_state(-9.97, known, True)[1].startswith("other state")


def _rec(case, method, guess, builds, state="ground state", status="converged"):
    return RunRecord(case=case, method=method, guess=guess, status=status, reason="",
                     fock_builds=builds, seconds=0.0, energy=0.0, reference_energy=0.0,
                     delta_e=0.0, state=state)


def test_verdict_lines():
    """Worse in ground states, in convergence, or only slower (more than MEDIAN_SLACK)."""
    records = [
        _rec("a", "mine", 0, 10), _rec("a", "base", 0, 10),  # equal: no line
        _rec("b", "mine", 0, 10, state="other state ΔE = +0.1 Eh"), _rec("b", "base", 0, 12),
        _rec("c", "mine", 0, 100, state="—", status="not converged"), _rec("c", "base", 0, 30),
        _rec("d", "mine", 0, 10 + bench.MEDIAN_SLACK + 1), _rec("d", "base", 0, 10),
        _rec("e", "mine", 0, 10 + bench.MEDIAN_SLACK), _rec("e", "base", 0, 10),
    ]
    lines = verdict_lines(records, "mine", ["base"])
    assert lines == (
        "b: mine is worse than base: ground state 0/1 vs 1/1",
        "c: mine is worse than base: ground state 0/1 vs 1/1; converged 0/1 vs 1/1",
        f"d: mine is worse than base: slower: median {12 + bench.MEDIAN_SLACK - 1} Fock "
        "builds vs 10",
    )


def test_unknown_baseline_is_a_one_line_error(catalogue):
    with pytest.raises(HarnessError, match="unknown baseline 'pyscf-magic'"):
        run_bench(acc.Roothaan, cases=[catalogue.case("h2-sto-3g-rhf")],
                  baselines=("pyscf-magic",))


def test_bench_suite_hard_loads():
    cases = bench.bench_suite("hard")
    assert 1 <= len(cases) <= 10
    assert {c.method for c in cases} == {"rhf", "uhf", "rohf"}
    assert any(z > 20 for c in cases for z in c.numbers)  # a transition metal
    assert all(c.note for c in cases)
    assert bench.bench_suite("smoke")[0].name == "h2-sto-3g-rhf"


def test_ediis_adiis_baselines(catalogue):
    """pyscf's EDIIS and ADIIS through the loop reach the ground state of water from the
    default guess, more slowly than commutator DIIS (they interpolate, they do not
    extrapolate)."""
    outcome = run_bench(acc.Roothaan, cases=[catalogue.case("water-sto-3g-rhf")], guesses=0,
                        baselines=("pyscf-cdiis", "pyscf-ediis", "pyscf-adiis"),
                        properties=False)
    runs = {r.method: r for r in outcome.records}
    for name in ("pyscf-ediis", "pyscf-adiis"):
        assert runs[name].converged and runs[name].state == "ground state"
        assert runs[name].fock_builds > runs["pyscf-cdiis"].fock_builds


class _RaisesLater:
    """Fine for three steps, then raises (so the properties that replay it fail)."""

    returns = "fock"

    def reset(self, problem):
        self.calls = 0

    def step(self, it):
        self.calls += 1
        if self.calls > 3:
            raise RuntimeError("boom")
        return it.fock


def test_an_accelerator_that_raises_fails_runs_and_properties_not_the_bench(catalogue):
    """The bench goes on: the runs fail with the reason and each property the exception
    broke is failed with it."""
    outcome = run_bench(_RaisesLater, cases=[catalogue.case("water-sto-3g-rhf")], guesses=0,
                        baselines=("roothaan",))
    mine = [r for r in outcome.records if r.method == outcome.accelerator]
    assert [r.status for r in mine] == ["failed"]
    assert mine[0].reason == "step raised RuntimeError: boom at Fock build 4"
    props = {p.name: p for p in outcome.properties}
    for name in ("fixed-point", "no-nan-degenerate"):
        assert props[name].passed is False
        assert props[name].detail == "the accelerator raised RuntimeError: boom"
    assert outcome.exit_status == 1

