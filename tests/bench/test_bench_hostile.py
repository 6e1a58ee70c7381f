"""The bench against hostile accelerators: whatever one raises, returns or declares, the
bench finishes (summary, bench.json), fails the affected run or property with a one-line
reason and exits 1 — or, for what is wrong at load time, exits 2 with one line naming the
accelerator spec. Energies in Eh, times in s.
"""

from __future__ import annotations

import json
import time
import warnings

import numpy as np
import pytest

from harness.bench import accelerators as acc
from harness.bench import runs as bench
from harness.ui.cli import main
from harness.contract.errors import HarnessError, PluginLoadError, first_line

ERROR = "scf-harness: error: "

#: The accelerators of the bad-input hunt, written to a file for ``path.py:NAME`` specs.
BAD = '''
import sys, time
import numpy as np


class Base:
    returns = "fock"

    def reset(self, problem):
        pass

    def step(self, it):
        return it.fock


class CtorRaises(Base):
    def __init__(self):
        raise RuntimeError("ctor boom")


class CtorNeedsArgs(Base):
    def __init__(self, size):
        self.size = size


instance = Base()


def function(it):
    return it.fock


def factory_fn():
    return Base()


class AttrGetattr:
    def __getattr__(self, n):
        raise RuntimeError("getattr boom " + n)


attr_getattr = AttrGetattr()


class RetNone(Base):
    returns = None


class RetInt(Base):
    returns = 5


class RetUpper(Base):
    returns = "Fock"


class RetArr(Base):
    returns = np.array(["fock", "density"])


class RetProp(Base):
    @property
    def returns(self):
        raise RuntimeError("returns property boom")


class StepExit0(Base):
    def step(self, it):
        sys.exit(0)


class NameNewline(Base):
    name = "my\\nacc\\x1b[31mRED"


class NameLong(Base):
    name = "x" * 500
'''


@pytest.fixture(scope="module")
def bad(tmp_path_factory):
    path = tmp_path_factory.mktemp("hunt") / "bad.py"
    path.write_text(BAD, encoding="utf-8")
    return path


def run_main(capsys, *args: str) -> tuple[int, str, str]:
    code = main(list(args))
    out = capsys.readouterr()
    return code, out.out, out.err


def one_line_error(code: int, err: str) -> str:
    assert code == 2
    assert err.startswith(ERROR) and err.count("\n") == 1 and "Traceback" not in err
    return err[len(ERROR):].rstrip("\n")


class _Base:
    returns = "fock"

    def reset(self, problem):
        pass

    def step(self, it):
        return it.fock


class _MyBase(BaseException):
    pass


def _raising(where: str, exc: BaseException):
    class Raises(_Base):
        def reset(self, problem):
            if where == "reset":
                raise exc

        def step(self, it):
            raise exc

    return Raises()


# --------------------------------------------------------------------------- 1. BaseException


@pytest.mark.parametrize("where, exc, reason", [
    ("step", SystemExit(0), "step raised SystemExit: 0 at Fock build 1"),
    ("step", SystemExit(3), "step raised SystemExit: 3 at Fock build 1"),
    ("reset", SystemExit(3), "reset raised SystemExit: 3"),
    ("reset", SystemExit("bye"), "reset raised SystemExit: bye"),
    ("step", _MyBase("custom base"), "step raised _MyBase: custom base at Fock build 1"),
    ("step", GeneratorExit("ge"), "step raised GeneratorExit: ge at Fock build 1"),
    ("reset", GeneratorExit("ge"), "reset raised GeneratorExit: ge"),
])
def test_base_exceptions_fail_the_run(setup, where, exc, reason):
    _, problem, ham, start = setup("water-sto-3g-rhf")
    run = acc.run_scf(ham, _raising(where, exc), start, convergence=problem.convergence,
                      problem=problem)
    assert run.status == "failed"
    assert run.reason == reason


def test_keyboard_interrupt_still_stops(setup):
    _, problem, ham, start = setup("water-sto-3g-rhf")
    with pytest.raises(KeyboardInterrupt):
        acc.run_scf(ham, _raising("step", KeyboardInterrupt()), start,
                    convergence=problem.convergence, problem=problem)
    with pytest.raises(KeyboardInterrupt):
        bench._guarded("determinism", lambda: (_ for _ in ()).throw(KeyboardInterrupt()))


def test_base_exceptions_fail_properties(setup):
    """_guarded: a BaseException raised by the accelerator fails the property."""
    for exc, words in ((SystemExit(0), "SystemExit: 0"), (_MyBase("b"), "_MyBase: b"),
                       (GeneratorExit("ge"), "GeneratorExit: ge")):
        def compute(exc=exc):
            raise exc
        p = bench._guarded("fixed-point", compute)
        assert p.passed is False and p.detail == f"the accelerator raised {words}"


def test_sys_exit_0_in_step_fails_the_bench_on_the_command_line(capsys, tmp_path, bad):
    """sys.exit(0) in step: the bench finishes, prints its summary, writes bench.json and
    exits 1 (it used to end silently with exit 0)."""
    code, out, err = run_main(capsys, "bench", f"{bad}:StepExit0", "--suite", "smoke",
                              "--guesses", "0", "--baselines", "roothaan",
                              "--report", str(tmp_path / "rep"))
    assert code == 1, out + err
    assert "Traceback" not in out + err
    assert ("[3/8] water-sto-3g-rhf guess 0 StepExit0: failed (step raised SystemExit: 0 at "
            "Fock build 1), 1 Fock builds, —") in out.splitlines()
    assert out.splitlines()[-1].startswith("bench failed")
    report = json.loads((tmp_path / "rep" / "bench.json").read_text())
    assert report["exit_status"] == 1 and len(report["runs"]) == 8


# --------------------------------------------------------------------------- 2. time limit


def test_timeout_is_not_an_exception():
    assert issubclass(acc.AcceleratorTimeout, BaseException)
    assert not issubclass(acc.AcceleratorTimeout, Exception)


class _SwallowsException(_Base):
    def step(self, it):
        try:
            time.sleep(5)
        except Exception:
            pass
        return it.fock


class _SwallowsEverything(_Base):
    def step(self, it):
        try:
            time.sleep(5)
        except BaseException:
            pass
        return it.fock


@pytest.mark.parametrize("cls", [_SwallowsException, _SwallowsEverything])
def test_a_swallowed_timeout_still_fails_the_run(setup, cls):
    """``except Exception`` cannot catch the time limit; a step that catches even
    BaseException and returns is failed when it returns."""
    _, problem, ham, start = setup("water-sto-3g-rhf")
    started = time.monotonic()
    run = acc.run_scf(ham, acc.time_limited(cls, 0.2)(), start,
                      convergence=problem.convergence, problem=problem)
    assert run.status == "failed"
    assert run.reason == ("step raised AcceleratorTimeout: step took longer than 0.2 s at "
                          "Fock build 1")
    limit = 4.0 if cls is _SwallowsException else 6.0  # the first step only, not 5 s each
    assert time.monotonic() - started < limit


def test_too_long_call_limit_is_refused(catalogue, capsys):
    with pytest.raises(HarnessError, match=r"call_limit: expected seconds in \(0, 1e\+06\]"):
        bench.run_bench(acc.Roothaan, cases=[catalogue.case("h2-sto-3g-rhf")], guesses=0,
                        baselines=(), properties=False, call_limit=1e10)
    with pytest.raises(ValueError, match="not in"):
        acc.time_limited(acc.Roothaan, 1e10)
    code, out, err = run_main(capsys, "bench", "harness.bench.example_accelerator:CommutatorDIIS",
                              "--call-timeout", "1e10")
    assert one_line_error(code, err) == ("argument --call-timeout: expected at most 1e+06 s, "
                                         "got 1e+10")
    assert out == ""


# --------------------------------------------------------------------------- 3. loading


@pytest.mark.parametrize("name, why", [
    ("CtorRaises", "creating it raised RuntimeError: ctor boom"),
    ("CtorNeedsArgs", "creating it raised TypeError: CtorNeedsArgs.__init__() missing 1 "
                      "required positional argument: 'size'"),
    ("function", "it is a function, not an accelerator: give a class or an instance with "
                 "reset and step methods (see harness.bench.accelerators)"),
    ("factory_fn", "it is a function, not an accelerator: give a class or an instance with "
                   "reset and step methods (see harness.bench.accelerators)"),
    ("instance.step", "it is a method, not an accelerator: give a class or an instance with "
                      "reset and step methods (see harness.bench.accelerators)"),
    ("AttrGetattr", "class AttrGetattr lacks reset and step (see harness.bench.accelerators)"),
    ("attr_getattr", "reading its name attribute raised RuntimeError: getattr boom name"),
    ("RetNone", "declares returns=None, expected 'fock' or 'density'"),
    ("RetInt", "declares returns=5, expected 'fock' or 'density'"),
    ("RetUpper", "declares returns='Fock', expected 'fock' or 'density'"),
    ("RetArr", "declares returns of type ndarray, expected 'fock' or 'density'"),
    ("RetProp", "reading its returns attribute raised RuntimeError: returns property boom"),
])
def test_load_errors_name_the_spec(bad, capsys, name, why):
    spec = f"{bad}:{name}"
    with pytest.raises(PluginLoadError) as info:
        acc.load_accelerator(spec)
    assert str(info.value) == f"accelerator {spec!r}: {why}"
    code, out, err = run_main(capsys, "bench", spec, "--suite", "smoke")
    assert one_line_error(code, err) == f"accelerator {spec!r}: {why}"
    assert out == ""


@pytest.mark.parametrize("spec, why", [
    ("numpy:linalg", "it is a module, not an accelerator"),
    ("math:pi", "it is an object of type float, not an accelerator"),
    ("builtins:print", "it is a function, not an accelerator"),
])
def test_load_names_the_spec_and_calls_nothing(capsys, spec, why):
    with pytest.raises(PluginLoadError) as info:
        acc.load_accelerator(spec)
    assert str(info.value).startswith(f"accelerator {spec!r}: {why}: ")
    assert capsys.readouterr().out == ""  # builtins:print was not called


def test_spec_errors_speak_of_accelerators(bad):
    with pytest.raises(PluginLoadError) as info:
        acc.load_accelerator("bad.py")
    assert str(info.value) == ("accelerator 'bad.py': no colon; expected MODULE:ACCELERATOR "
                               "or path/to/file.py:ACCELERATOR")
    with pytest.raises(PluginLoadError) as info:
        acc.load_accelerator(f"{bad}:")
    assert str(info.value) == (f"accelerator '{bad}:': no accelerator after the colon; "
                               "expected MODULE:ACCELERATOR or path/to/file.py:ACCELERATOR")
    with pytest.raises(PluginLoadError) as info:
        acc.load_accelerator(f"{bad.parent / 'missing.py'}:X")
    assert str(info.value).startswith(f"accelerator '{bad.parent / 'missing.py'}:X': file "
                                      "not found")


def test_classes_and_instances_still_load(bad):
    name, make = acc.load_accelerator(f"{bad}:instance")
    assert name == "Base" and make() is make()
    name, make = acc.load_accelerator(f"{bad}:Base")
    assert name == "Base" and make() is not make()


# --------------------------------------------------------------------------- 4. constructor


def test_a_constructor_failing_later_fails_runs_not_the_bench(catalogue, tmp_path):
    calls = []

    class FailsLater(_Base):
        def __init__(self):
            calls.append(1)
            if len(calls) > 2:  # load-time check, the h2 run; then it breaks
                raise RuntimeError(f"ctor boom #{len(calls)}")

    outcome = bench.run_bench(FailsLater, cases=[catalogue.case("h2-sto-3g-rhf"),
                                                 catalogue.case("water-sto-3g-rhf")],
                              guesses=0, baselines=("roothaan",), properties=False,
                              report_dir=tmp_path)
    mine = [r for r in outcome.records if r.method == "FailsLater"]
    assert [r.status for r in mine] == ["converged", "failed"]
    assert mine[1].reason == "creating the accelerator raised RuntimeError: ctor boom #3"
    assert outcome.exit_status == 1
    assert json.loads((tmp_path / bench.JSON_NAME).read_text())["exit_status"] == 1


# --------------------------------------------------------------------------- 5. step output


class _Weird:
    def __array__(self, dtype=None, copy=None):
        raise RuntimeError("array conversion boom")


def _returning(value, returns="fock"):
    class Returns(_Base):
        def step(self, it):
            return value(it)

    Returns.returns = returns
    return Returns()


@pytest.mark.parametrize("value, returns, reason", [
    (lambda it: _Weird(), "fock", "accelerator returned _Weird, not a numeric fock array "
                                  "(RuntimeError: array conversion boom) at Fock build 1"),
    (lambda it: [[10**400]], "fock", "accelerator returned list, not a numeric fock array "
                                     "(OverflowError: int too large to convert to float) at "
                                     "Fock build 1"),
    (lambda it: it.fock.astype(complex) * (1 + 1e-3j), "fock",
     "accelerator returned a complex fock at Fock build 1"),
    (lambda it: it.density * (1 + 1j), "density",
     "accelerator returned a complex density at Fock build 1"),
])
def test_unconvertible_and_complex_output_fails_the_run(setup, value, returns, reason):
    _, problem, ham, start = setup("water-sto-3g-rhf")
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no ComplexWarning either
        run = acc.run_scf(ham, _returning(value, returns), start,
                          convergence=problem.convergence, problem=problem)
    assert run.status == "failed"
    assert run.reason == reason


# --------------------------------------------------------------------------- 6. first_line


def test_first_line_of_an_unprintable_exception():
    class E(Exception):
        def __str__(self):
            raise RuntimeError("str boom")

    class F(Exception):
        def __str__(self):
            return 42

    assert first_line(E()) == "E: <unprintable message>"
    assert first_line(F()) == "F: <unprintable message>"
    assert first_line(ValueError("one\ntwo")) == "ValueError: one"


# --------------------------------------------------------------------------- 7. options


def test_negative_seed_is_a_usage_error(capsys):
    code, out, err = run_main(capsys, "bench", "harness.bench.example_accelerator:CommutatorDIIS",
                              "--seed", "-1")
    assert one_line_error(code, err).startswith("argument --seed: expected an integer >= 0, "
                                                "got '-1'")


def test_repeated_baselines_run_once(catalogue):
    outcome = bench.run_bench(acc.Roothaan, cases=[catalogue.case("water-sto-3g-rhf")],
                              guesses=0, baselines=("roothaan", "roothaan"), properties=False)
    assert outcome.methods == ("roothaan (yours)", "roothaan")
    assert [r.method for r in outcome.records] == ["roothaan (yours)", "roothaan"]
    assert outcome.verdicts == () and outcome.exit_status == 0


@pytest.mark.parametrize("inside", ["index.html", "fock-builds.png", "bench.json",
                                    "convergence-h2-sto-3g-rhf.png"])
def test_report_folder_is_checked_before_any_run(catalogue, tmp_path, inside):
    (tmp_path / inside).mkdir()
    done = []
    with pytest.raises(HarnessError) as info:
        bench.run_bench(acc.Roothaan, cases=[catalogue.case("h2-sto-3g-rhf")], guesses=0,
                        baselines=(), properties=False, report_dir=tmp_path,
                        progress=lambda *a: done.append(a))
    assert str(info.value) == (f"report folder: {tmp_path / inside} is a folder; remove it "
                               f"or give another folder")
    assert done == []


def test_report_on_a_file_says_it_is_not_a_folder(capsys, tmp_path):
    afile = tmp_path / "afile"
    afile.write_text("x")
    code, out, err = run_main(capsys, "bench", "harness.bench.example_accelerator:CommutatorDIIS",
                              "--suite", "smoke", "--report", str(afile))
    assert one_line_error(code, err) == f"report folder: {afile} is not a folder (it is a file)"
    assert out == ""


def test_a_plotting_failure_loses_neither_summary_nor_bench_json(capsys, tmp_path,
                                                                   monkeypatch):
    def broken(outcome, directory):
        raise IsADirectoryError(21, "Is a directory", str(directory))

    monkeypatch.setattr(bench, "write_plots", broken)
    rep = tmp_path / "rep"
    code, out, err = run_main(capsys, "bench", "harness.bench.example_accelerator:CommutatorDIIS",
                              "--suite", "smoke", "--guesses", "0", "--baselines",
                              "roothaan", "--report", str(rep))
    message = one_line_error(code, err)
    assert message.startswith("--report: the plots and index.html could not be written "
                              "(IsADirectoryError: ")
    assert out.splitlines()[-1].startswith("bench passed")
    assert json.loads((rep / bench.JSON_NAME).read_text())["exit_status"] == 0


# --------------------------------------------------------------------------- 8. properties


class _FailsFirstStep(_Base):
    def step(self, it):
        raise RuntimeError("boom")


def test_properties_of_an_accelerator_whose_runs_fail_are_failed(setup):
    """determinism and invariance fail (not hold, not n.a.) when the runs failed."""
    case, problem, ham, start = setup("water-sto-3g-rhf")
    props = {p.name: p for p in bench.accelerator_properties(_FailsFirstStep, problem, ham,
                                                             start, problem.convergence)}
    reason = "step raised RuntimeError: boom at Fock build 1"
    assert props["determinism"].passed is False
    assert props["determinism"].detail == f"a run failed: {reason}"
    for name, label in (("invariance", "random orthonormal basis"),
                        ("rotation-invariance", "rotated molecule")):
        assert props[name].passed is False
        assert props[name].detail == f"{label}: a run failed: {reason}"


class _ShapeWrong(_Base):
    def step(self, it):
        return np.asarray(it.fock)[0, :-1, :-1]


def test_wrong_shape_in_properties_is_not_called_raised(setup):
    _, problem, ham, start = setup("water-sto-3g-rhf")
    props = {p.name: p for p in bench.accelerator_properties(_ShapeWrong, problem, ham,
                                                             start, problem.convergence)}
    for name in ("fixed-point", "no-nan-degenerate"):
        assert props[name].passed is False
        assert props[name].detail == "returned a fock of shape (6, 6), expected (1, 7, 7)"


def test_degenerate_property_uses_the_loop_conversion(setup):
    _, problem, ham, start = setup("water-sto-3g-rhf")
    it = acc.converged_iterate(ham, acc.run_scf(ham, acc.Roothaan(), start,
                                                convergence=problem.convergence), 1e-6)
    p = bench._guarded("no-nan-degenerate", lambda: acc.degenerate_subspace(
        lambda: _returning(lambda it: "F"), problem, ham, it))
    assert p.passed is False and p.detail == "returned str, not a numeric fock array"


def test_fixed_point_checks_the_declared_kind(setup):
    _, problem, ham, start = setup("water-sto-3g-rhf")
    run = acc.run_scf(ham, acc.Roothaan(), start, convergence=problem.convergence)
    final = acc.converged_iterate(ham, run, problem.convergence)
    p = bench._guarded("fixed-point", lambda: acc.fixed_point(
        lambda: _returning(lambda it: it.fock, returns=None), problem, ham, [final]))
    assert p.passed is False
    assert p.detail == "declares returns=None, expected 'fock' or 'density'"


def test_a_property_not_applicable_anywhere_is_not_ticked():
    props = tuple(bench.CaseProperty(c, "invariance", None, 0.0, "n.a.: neither run "
                                     "converged") for c in ("a", "b"))
    outcome = bench.BenchOutcome(accelerator="mine", methods=("mine",), cases=("a", "b"),
                                 guesses=0, seed=0, records=(), summary=(), per_case={},
                                 verdicts=(), properties=props, seconds=0.0)
    lines = bench.summary_lines(outcome)
    assert "  – invariance: not applicable on 2/2 cases; a: n.a.: neither run converged" in lines
    assert not any("✓ invariance" in line for line in lines)


# --------------------------------------------------------------------------- 9. names


def test_displayed_names_are_one_short_line(bad):
    name, _ = acc.load_accelerator(f"{bad}:NameNewline")
    assert name == "my accRED"
    name, _ = acc.load_accelerator(f"{bad}:NameLong")
    assert name == "x" * (acc.NAME_LENGTH - 1) + "…"
    assert acc.display_name("a\tb\u202ec\x00d") == "a bcd"


def test_plots_of_a_hostile_name_give_no_warnings(catalogue, tmp_path, bad):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        outcome = bench.run_bench(f"{bad}:NameNewline", cases=[catalogue.case("h2-sto-3g-rhf")],
                                  guesses=0, baselines=("roothaan",), properties=False,
                                  report_dir=tmp_path)
    assert outcome.accelerator == "my accRED"
    assert "my accRED" in (tmp_path / bench.HTML_NAME).read_text()
