"""Tests of harness.run.plugins.load_plugin, in process (the CLI tests cover the same errors
as a user sees them)."""

from __future__ import annotations

import sys

import pytest

from harness.contract.errors import PluginLoadError
from harness.run.plugins import load_plugin, split_spec


@pytest.fixture
def folder(tmp_path, monkeypatch):
    """A scratch folder as the current directory; sys.path and sys.modules restored."""
    monkeypatch.chdir(tmp_path)
    monkeypatch.setattr(sys, "path", list(sys.path))
    before = set(sys.modules)
    yield tmp_path
    for name in set(sys.modules) - before:
        del sys.modules[name]


class TestSplitSpec:
    def test_last_colon_splits(self):
        """The last colon separates target and function."""
        assert split_spec("pkg.mod:solve") == ("pkg.mod", "solve")
        assert split_spec("dir/a.py:Solver.run") == ("dir/a.py", "Solver.run")


class TestLoadPlugin:
    def test_file_with_sibling_import(self, folder):
        """A file plug-in can import a module beside it; the function is returned."""
        sub = folder / "lab"
        sub.mkdir()
        (sub / "helpers.py").write_text("FACTOR = 3\n")
        (sub / "code.py").write_text("import helpers\n\n\ndef solve(problem):\n"
                                     "    return helpers.FACTOR * problem\n")
        solve = load_plugin("lab/code.py:solve")
        assert solve(2) == 6
        assert sys.path[0] == str(sub.resolve())

    def test_module_from_current_directory(self, folder):
        """MODULE:FUNCTION finds a module in the current directory."""
        (folder / "labcode_cwd.py").write_text("def solve(problem):\n    return problem + 1\n")
        assert load_plugin("labcode_cwd:solve")(1) == 2

    def test_dotted_attribute(self, folder):
        """module:Class.method resolves attribute by attribute."""
        (folder / "labcode_dotted.py").write_text(
            "class Solver:\n    @staticmethod\n    def run(problem):\n        return -problem\n")
        assert load_plugin("labcode_dotted:Solver.run")(4) == -4

    def test_file_named_like_a_loaded_module(self, folder):
        """A file called json.py does not replace (or get replaced by) the json module."""
        import json

        (folder / "json.py").write_text("def solve(problem):\n    return 'mine'\n")
        assert load_plugin("./json.py:solve")(None) == "mine"
        assert sys.modules["json"] is json

    def test_error_raised_while_importing(self, folder):
        """An exception at import time: one line with its type and message."""
        (folder / "labcode_raises.py").write_text("raise RuntimeError('no licence\\nsecond')\n")
        with pytest.raises(PluginLoadError) as info:
            load_plugin("labcode_raises.py:solve")
        assert str(info.value) == ("plug-in 'labcode_raises.py:solve': importing "
                                   "labcode_raises.py failed: RuntimeError: no licence")
        assert "labcode_raises" not in sys.modules

    def test_sys_exit_at_import(self, folder):
        """sys.exit() at import time is a load error, not an exit of the harness."""
        (folder / "labcode_exits.py").write_text("import sys\nsys.exit(3)\n")
        with pytest.raises(PluginLoadError) as info:
            load_plugin("labcode_exits:solve")
        assert str(info.value) == ("plug-in 'labcode_exits:solve': importing labcode_exits "
                                   "failed: SystemExit: 3")

    def test_missing_submodule(self, folder):
        """A missing submodule of an existing package is named."""
        with pytest.raises(PluginLoadError) as info:
            load_plugin("harness.no_such_part:solve")
        assert str(info.value) == ("plug-in 'harness.no_such_part:solve': module "
                                   "'harness.no_such_part' not found (searched the current "
                                   "directory and sys.path)")
