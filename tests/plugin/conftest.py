"""pytester drives small example projects that use the scf-harness pytest plug-in.

In-process pytester runs restore ``sys.modules`` afterwards, and numpy's and pyscf's
extension modules cannot be imported twice in one process; so everything an inner run
imports is imported here first, and survives each restore.
"""

import harness.ui.cli  # noqa: F401
import harness.verdict.evaluate  # noqa: F401
import harness.testing.example_scf  # noqa: F401
import harness.catalogue.references  # noqa: F401
import harness.report.terminal  # noqa: F401
import harness.run.runner  # noqa: F401
import pyscf.ao2mo  # noqa: F401
import pyscf.scf  # noqa: F401
import scipy.linalg  # noqa: F401
from harness.catalogue.cases import load_catalogue

load_catalogue()  # imports what reading the catalogue needs (pyscf.data, basis parsers)


def pytest_configure(config):
    """Enable pytester for these tests. (``pytest_plugins = ["pytester"]`` is refused in a
    conftest below the rootdir; this is the same registration, done when this conftest
    is loaded.)"""
    if not config.pluginmanager.has_plugin("pytester"):
        config.pluginmanager.import_plugin("pytester")
