"""The ``scheduler`` key of [tool.scf-harness] and the ``--scf-scheduler`` flag."""

from __future__ import annotations

import pytest

from harness.ui import config


def test_scheduler_key_and_flag():
    keys = config.parse_table({"plugin": "m:f", "scheduler": "local:2"}, "/p/pyproject.toml")
    assert keys["scheduler"] == "local:2"
    flags = config.parse_flags(scheduler="tcp://10.0.0.5:8786")
    settings = config.resolve(flags, keys)
    assert settings.scheduler == "tcp://10.0.0.5:8786"  # the flag wins
    assert config.resolve({}, keys).scheduler == "local:2"
    assert config.resolve({}, {}).scheduler is None


@pytest.mark.parametrize("value, message", [
    ("cluster", "expected tcp://HOST:PORT (a running Dask scheduler) or local:N (N worker "
                "processes on this machine), got 'cluster'"),
    (2, "expected tcp://HOST:PORT or local:N, got 2"),
    ("local:0", "local:N needs N >= 1 worker processes, got 'local:0'"),
])
def test_bad_scheduler_is_one_line(value, message):
    with pytest.raises(config.ConfigError) as err:
        config.parse_table({"scheduler": value}, "/p/pyproject.toml")
    assert str(err.value) == f"/p/pyproject.toml: [tool.scf-harness]: scheduler: {message}"
    if isinstance(value, str):
        with pytest.raises(config.ConfigError) as err:
            config.parse_flags(scheduler=value)
        assert str(err.value) == f"--scf-scheduler: {message}"
