"""The [tool.scf-harness] table and the --scf-… flags: parsing, precedence, errors.

No SCF runs here: these are the rules of harness.ui.config. Units: tolerances absolute
(Eh for energies), timeout in seconds.
"""

from __future__ import annotations

import pytest

from harness.ui import config
from harness.ui.config import ConfigError, Settings


def write(tmp_path, text: str):
    path = tmp_path / "pyproject.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_defaults_match_the_modules_they_mirror():
    from harness.ui import cli
    from harness.contract import defaults, problem
    from harness.run import runner
    from harness.verdict import evaluate, states
    assert config.DEFAULT_SUITE == cli.DEFAULT_SUITE
    # one definition each (harness.contract.defaults), re-exported under the old names
    assert config.DEFAULT_TIMEOUT is runner.DEFAULT_TIMEOUT is defaults.DEFAULT_TIMEOUT
    assert config.DEFAULT_CONVERGENCE is problem.DEFAULT_CONVERGENCE \
        is defaults.DEFAULT_CONVERGENCE
    assert config.STABILITY_CHOICES is evaluate.STABILITY_MODES is states.MODES \
        is defaults.STABILITY_MODES
    parsed = cli.build_parser().parse_args(["certify"])
    assert config.DEFAULT_STABILITY == parsed.stability == defaults.DEFAULT_STABILITY
    assert parsed.timeout == defaults.DEFAULT_TIMEOUT


def test_cases_file_key_is_relative_to_the_pyproject(tmp_path):
    (tmp_path / "tests").mkdir()
    mine = tmp_path / "tests" / "mine.toml"
    mine.write_text("", encoding="utf-8")
    s = config.load_settings(write(tmp_path, """
[tool.scf-harness]
plugin = "a:b"
cases_file = "tests/mine.toml"
"""), {})
    assert s.cases_file == mine.resolve()
    assert s.suites == ()  # a cases file alone runs only its cases
    both = config.load_settings(write(tmp_path, """
[tool.scf-harness]
plugin = "a:b"
cases_file = "tests/mine.toml"
suite = "smoke"
"""), {})
    assert both.suites == ("smoke",) and both.cases_file == mine.resolve()


def test_cases_file_flag_is_relative_to_where_pytest_started(tmp_path):
    (tmp_path / "mine.toml").write_text("", encoding="utf-8")
    flags = config.parse_flags(cases_file="mine.toml", base=tmp_path)
    assert flags == {"cases_file": (tmp_path / "mine.toml").resolve()}
    with pytest.raises(ConfigError, match=r"^--scf-cases-file: file not found: .*nope.toml$"):
        config.parse_flags(cases_file="nope.toml", base=tmp_path)


def test_reproduce_command_names_cases_file_and_stability(tmp_path):
    s = Settings(plugin="mycode:solve", cases_file=tmp_path / "my cases.toml",
                 stability="external")
    assert s.reproduce_command("h2-mine") == (
        f"scf-harness certify mycode:solve --cases-file '{tmp_path}/my cases.toml' "
        "--case h2-mine --stability external")
    assert Settings(plugin="m:f").reproduce_command("x") == "scf-harness certify m:f --case x"


def test_table_is_read_and_validated(tmp_path):
    path = write(tmp_path, """
[tool.scf-harness]
plugin = "mypkg.scf:solve"
suite = ["smoke", "standard", "smoke"]
tolerances = { stationarity = 1e-5, "reference-energy" = 2e-6 }
timeout = 30
convergence = 1e-7
stability = "Internal"
""")
    s = config.load_settings(path, {})
    assert s.plugin == "mypkg.scf:solve"
    assert s.suites == ("smoke", "standard")
    assert s.tolerances == {"stationarity": 1e-5, "reference-energy": 2e-6}
    assert (s.timeout, s.convergence, s.stability) == (30.0, 1e-7, "internal")
    assert s.source == str(path) and s.active


def test_no_table_means_defaults(tmp_path):
    s = config.load_settings(write(tmp_path, "[project]\nname = 'x'\n"), {})
    assert s == Settings(source=s.source)
    assert not s.active and s.suites == (config.DEFAULT_SUITE,)


def test_flag_wins_over_key_and_tolerances_merge_per_check(tmp_path):
    path = write(tmp_path, """
[tool.scf-harness]
plugin = "a:solve"
suite = "standard"
tolerances = { stationarity = 1e-5, "reference-energy" = 2e-6 }
timeout = 30
""")
    flags = config.parse_flags(plugin="b:solve", suites=["smoke"],
                               tolerances=["reference-energy=1e-4"], timeout="5")
    s = config.load_settings(path, flags)
    assert s.plugin == "b:solve" and s.suites == ("smoke",) and s.timeout == 5.0
    assert s.tolerances == {"stationarity": 1e-5, "reference-energy": 1e-4}
    assert s.from_flags == {"plugin", "suite", "tolerances", "timeout"}


@pytest.mark.parametrize("table, words", [
    ('plugn = "a:b"', "plugn: unknown key (did you mean 'plugin'?)"),
    ('plugin = "no-colon"', "plugin: expected MODULE:FUNCTION"),
    ('suite = []', "suite: expected a suite name or a list of suite names"),
    ('timeout = -1', "timeout: expected a positive number of seconds, got -1"),
    ('timeout = true', "timeout: expected a number, got True"),
    ('convergence = 2', "convergence: expected a number in (0, 1), got 2"),
    ('stability = "sometimes"', "stability: expected one of internal, external, off"),
    ('cases_file = "nope.toml"', "cases_file: file not found: "),
    ('cases_file = 3', "cases_file: expected the path of a TOML suite file, got 3"),
    ('tolerances = { stationarty = 1e-5 }', "tolerances: unknown check 'stationarty'"),
    ('tolerances = { stationarity = -1 }', "tolerances: tolerance for stationarity must be "
                                           "positive and finite, got -1"),
])
def test_bad_keys_give_one_line_naming_file_and_key(tmp_path, table, words):
    path = write(tmp_path, f"[tool.scf-harness]\n{table}\n")
    with pytest.raises(ConfigError) as info:
        config.load_settings(path, {})
    message = str(info.value)
    assert "\n" not in message
    assert message.startswith(f"{path}: [tool.scf-harness]: ")
    assert words in message


def test_bad_flags_name_the_flag():
    with pytest.raises(ConfigError, match=r"^--scf-timeout: expected a number, got 'soon'$"):
        config.parse_flags(timeout="soon")
    with pytest.raises(ConfigError, match=r"^--scf-tol: expected NAME=VALUE"):
        config.parse_flags(tolerances=["stationarity"])
    with pytest.raises(ConfigError, match=r"^--scf-convergence: expected a number in"):
        config.parse_flags(convergence="1.5")


def test_invalid_toml_is_one_line(tmp_path):
    path = write(tmp_path, "[tool.scf-harness\nplugin = 1\n")
    with pytest.raises(ConfigError, match="not valid TOML") as info:
        config.read_table(path)
    assert "\n" not in str(info.value)


def test_pyproject_is_found_from_pytest_paths_never_the_cwd(tmp_path, monkeypatch):
    here = tmp_path / "cwd"
    here.mkdir()
    write(here, "[tool.scf-harness]\nplugin = 'a:b'\n")
    root = tmp_path / "root"
    root.mkdir()
    monkeypatch.chdir(here)
    assert config.pyproject_for(root, None) is None
    ini = root / "pytest.ini"
    ini.write_text("[pytest]\n")
    assert config.pyproject_for(root, ini) is None
    own = write(root, "[project]\nname = 'x'\n")
    assert config.pyproject_for(root, ini) == own
    other = tmp_path / "elsewhere" / "pyproject.toml"
    assert config.pyproject_for(root, other) == other


def test_reproduce_command_carries_the_non_default_settings():
    s = Settings(plugin="path/my scf.py:solve", tolerances={"stationarity": 1e-5,
                                                            "aufbau": 2e-6},
                 convergence=1e-7, timeout=30.0)
    assert s.reproduce_command("water-sto-3g-rhf") == (
        "scf-harness certify 'path/my scf.py:solve' --case water-sto-3g-rhf "
        "--tol aufbau=2e-06 --tol stationarity=1e-05 --convergence 1e-07 --timeout 30")
    assert Settings(plugin="m:f").reproduce_command("h2-sto-3g-rhf") == \
        "scf-harness certify m:f --case h2-sto-3g-rhf"


def test_reproduce_command_is_accepted_by_the_cli():
    """Every part of the command parses with scf-harness's own parser."""
    import shlex

    from harness.ui.cli import build_parser

    s = Settings(plugin="m:f", tolerances={"stationarity": 1e-5}, convergence=1e-7,
                 timeout=30.0)
    args = build_parser().parse_args(shlex.split(s.reproduce_command("h2-sto-3g-rhf"))[1:])
    assert (args.plugin, args.case_names, args.tol, args.convergence, args.timeout) == (
        "m:f", ["h2-sto-3g-rhf"], ["stationarity=1e-05"], 1e-7, 30.0)


def test_a_boolean_tolerance_is_refused(tmp_path):
    """true in TOML is not a number: it must not become a tolerance of 1.0."""
    path = write(tmp_path, "[tool.scf-harness]\ntolerances = { stationarity = true }\n")
    with pytest.raises(ConfigError, match="tolerances: tolerance for stationarity must be a "
                                          "number, got True"):
        config.load_settings(path, {})
