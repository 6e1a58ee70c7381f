"""The run defaults shared by the library, the CLI and the pytest plug-in, defined once.

Standard library only (the pytest plug-in and ``harness.ui.config`` import it at start-up,
before numpy or pyscf). Units: the convergence is dimensionless (the largest element of
X(FPS − SPF)X in Eh-based atomic units), the timeout in seconds.
"""

from __future__ import annotations

#: Default stationarity asked of a plug-in: the largest element of the commutator
#: X^T (F P S - S P F) X in the Löwdin-orthonormal basis (see README, "stationarity").
DEFAULT_CONVERGENCE = 1e-6

#: Default per-case timeout of the plug-in call, in seconds: ten minutes is far more than
#: any shipped case needs from a working code, and ends a hung one.
DEFAULT_TIMEOUT = 600.0

#: Stability analyses of the code's solution: "internal" (within its method), "external"
#: (RHF also against UHF) or "off" (``harness.verdict.states``).
STABILITY_MODES = ("internal", "external", "off")

#: The stability analysis run when none is asked for.
DEFAULT_STABILITY = "internal"
