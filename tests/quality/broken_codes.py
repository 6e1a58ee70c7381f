"""The planted-bug plug-ins, importable from tests as ``broken_codes`` (they live in
``harness.testing.planted.core`` so that ``scf-harness selftest`` can run them too)."""

from harness.testing.planted.core import *  # noqa: F401,F403
from harness.testing.planted.core import degenerate_sets, stationarity_of  # noqa: F401
