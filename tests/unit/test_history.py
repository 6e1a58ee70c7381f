"""The history check: each failure mode fires on a history built to show it, by the planted
amount, and stays quiet on the nearby harmless history. Energies in Eh.
"""

from __future__ import annotations

import numpy as np
import pytest

from harness.contract.solution import Solution
from harness.checks import history as hi
from harness.contract.results import CheckResult, Status

CASE = "water-sto-3g-rhf"
CONV = 1e-6


def converging(n: int = 12, e_final: float = -74.942, ratio: float = 0.25) -> np.ndarray:
    """A DIIS-like history: error ε_k = 1e-1 · ratio^k, energy approaching from above."""
    err = 1e-1 * ratio ** np.arange(n)
    return np.column_stack([e_final + 0.5 * err ** 2 + 1e-3 * err, err])


def check(history, *, converged=True, value=3e-7, tolerance=1e-5):
    return hi.history_check(history, converged=converged, stationarity_value=value,
                            stationarity_tolerance=tolerance, convergence=CONV, case=CASE)


class TestPasses:
    def test_converging_history(self):
        h = converging()
        r = check(h)
        assert r.status is Status.PASSED and r.value == pytest.approx(h[-1, 1])
        assert r.message == ("history: 12 iterations, final error 2.4e-08, energy monotone "
                             "over the last 12 (water-sto-3g-rhf)")

    def test_not_applicable_without_history(self):
        r = check(None)
        assert r.status is Status.NOT_APPLICABLE
        assert r.message == "history: not applicable (water-sto-3g-rhf): no 'history' key"

    def test_no_error_measure(self):
        h = converging(6)
        h[:, 1] = np.nan
        r = check(h)
        assert r.status is Status.PASSED and r.value is None
        assert "no error measure" in r.message

    def test_decaying_alternation_is_not_an_oscillation(self):
        """ΔE alternating in sign but shrinking 10× per step converges: no oscillation."""
        steps = 1e-2 * (-0.1) ** np.arange(6)
        e = -74.9 + np.concatenate([[0.0], np.cumsum(steps)])
        assert hi.oscillation(e) is None


class TestFalseConvergence:
    def test_message(self):
        r = check(converging(2, ratio=0.5), value=3.1e-3, tolerance=1e-5)
        assert r.status is Status.FAILED
        assert r.value == 3.1e-3 and r.tolerance == 1e-5
        assert r.message == ("history: false convergence: the code claims convergence but "
                             "max|X(FPS − SPF)X| = 3.1e-03 > 1.0e-05 (water-sto-3g-rhf); its "
                             "own last error is 5.0e-02 after 2 iterations")

    def test_not_claimed_is_not_false(self):
        assert check(converging(), converged=False, value=3.1e-3).status is Status.PASSED

    def test_at_tolerance_passes(self):
        assert check(converging(), value=1e-5, tolerance=1e-5).status is Status.PASSED


class TestOscillation:
    def two_states(self, n_tail: int, amplitude: float = 1e-2) -> np.ndarray:
        head = converging(8, e_final=-74.9, ratio=0.5)
        e = -74.9 + amplitude * (np.arange(n_tail) % 2)
        tail = np.column_stack([e, np.full(n_tail, 3e-2)])
        return np.vstack([head, tail])

    def test_two_state_oscillation(self):
        r = check(self.two_states(6), converged=False)
        assert r.status is Status.FAILED and r.value == pytest.approx(1e-2)
        assert r.message == (
            "history: oscillation: the energy alternates between -74.900000 and -74.890000 Eh "
            "(steps ≥ 1.0e-02 > 1.0e-06) over the last 6 iterations (water-sto-3g-rhf) "
            "(also: stalled error)")

    def test_three_energies_are_not_enough(self):
        """E alternating over 3 iterations only (fewer than OSCILLATION_ITERATIONS)."""
        e = np.array([-74.0, -74.5, -74.6, -74.7, -74.69, -74.7])
        assert hi.oscillation(e) is None
        assert hi.oscillation(np.append(e, -74.69)) == (4, pytest.approx(1e-2))

    def test_below_amplitude_is_noise(self):
        tail = -74.9 + 5e-7 * (np.arange(8) % 2)
        assert hi.oscillation(tail) is None
        assert hi.oscillation(-74.9 + 5e-6 * (np.arange(8) % 2)) is not None


class TestEnergyRise:
    def test_rise_while_claiming_convergence(self):
        h = converging()
        h[-1, 0] = h[-2, 0] + 2e-5
        r = check(h)
        assert r.status is Status.FAILED and r.value == pytest.approx(2e-5, rel=1e-6)
        assert r.message == ("history: energy rising at the end: the last step raises E by "
                             "2.0e-05 > 1.0e-06 Eh while the code claims convergence "
                             "(water-sto-3g-rhf)")

    def test_rise_without_claim_or_below_threshold(self):
        h = converging()
        h[-1, 0] = h[-2, 0] + 2e-5
        assert check(h, converged=False).status is Status.PASSED
        h[-1, 0] = h[-2, 0] + 5e-7
        r = check(h)
        assert r.status is Status.PASSED
        assert r.message.endswith("energy not monotone in the last step (water-sto-3g-rhf)")


class TestStalled:
    def test_stalled_error(self):
        err = np.concatenate([1e-1 * 0.5 ** np.arange(5), 3.0e-3 * 0.98 ** np.arange(12)])
        e = -74.9 + err
        r = check(np.column_stack([e, err]), converged=False)
        assert r.status is Status.FAILED
        # 3e-3·0.98 = 2.94e-3 ten iterations before the last, 3e-3·0.98¹¹ = 2.40e-3 last
        assert r.message == ("history: stalled error: the code's error went from 2.9e-03 to "
                             "2.4e-03 over the last 10 iterations (less than 2× smaller) and "
                             "is still > 1.0e-06 (water-sto-3g-rhf)")

    def test_slow_but_moving_is_not_stalled(self):
        """Linear convergence at 0.8 per iteration shrinks the error 9.3× in 10 iterations."""
        err = 1e-2 * 0.8 ** np.arange(20)
        assert hi.stalled(err, CONV) is None
        assert hi.stalled(1e-2 * 0.95 ** np.arange(20), CONV) is not None

    def test_below_convergence_is_not_stalled(self):
        assert hi.stalled(np.full(20, 5e-7), CONV) is None
        assert hi.stalled(np.full(20, 5e-6), CONV) == (5e-6, 5e-6)


class TestSeveral:
    def test_first_named_others_listed(self):
        h = TestOscillation().two_states(12)
        r = check(h, converged=True, value=1e-1, tolerance=1e-5)
        assert r.message.startswith("history: false convergence: ")
        # the tail ends on a rise of 1e-2 Eh, so the late rise is listed too
        assert r.message.endswith("(also: oscillation; energy rising at the end; stalled error)")


class TestFromResults:
    def results(self, stat_value):
        return {"stationarity": CheckResult("stationarity", Status.FAILED, stat_value, 1e-5,
                                            f"stationarity: max|X(FPS − SPF)X| = "
                                            f"{stat_value:.1e} > 1.0e-05 ({CASE})"),
                "self-consistency": CheckResult("self-consistency", Status.PASSED, 1e-8, 1e-5,
                                                "self-consistency: max|X(FPS − SPF)X| = ...")}

    def test_uses_the_codes_own_fock_measure(self):
        sol = {"history": converging(), "converged": True}
        r = hi.history_from_results(Solution.from_dict(sol), self.results(4e-4),
                convergence=CONV, case=CASE)
        assert r.status is Status.FAILED and r.value == 4e-4

    def test_falls_back_to_rebuilt_fock(self):
        res = self.results(4e-4)
        res["stationarity"] = CheckResult("stationarity", Status.NOT_APPLICABLE, None, None, "")
        sol = {"history": converging(), "converged": True}
        r = hi.history_from_results(Solution.from_dict(sol), res, convergence=CONV, case=CASE)
        assert r.status is Status.PASSED

    def test_trailing_monotone_counts_energies(self):
        assert hi.trailing_monotone(np.array([-1.0, -2.0, -1.5, -1.6, -1.7])) == 3
        assert hi.trailing_monotone(np.array([np.nan, -1.0, -1.1])) == 2


class TestNonFinite:
    """A convergence claim with a NaN energy, a NaN error after finite ones, or an
    infinite error fails, naming the record (0-based) and the field."""

    def test_nan_energy(self):
        h = converging()
        h[5, 0] = np.nan
        r = check(h)
        assert r.status is Status.FAILED
        assert r.message == ("history: non-finite value: record 5 of 12 has 'energy' = NaN "
                             "(or missing) while the code claims convergence "
                             "(water-sto-3g-rhf)")

    def test_nan_last_error(self):
        h = converging()
        h[-1, 1] = np.nan
        r = check(h)
        assert r.status is Status.FAILED
        assert r.message == ("history: non-finite value: record 11 of 12 has 'error' = NaN "
                             "(or missing) while the code claims convergence "
                             "(water-sto-3g-rhf)")

    def test_infinite_errors_counted(self):
        h = converging()
        h[3:6, 1] = np.inf
        r = check(h)
        assert r.status is Status.FAILED
        assert r.message == ("history: non-finite value: record 3 of 12 has 'error' = inf "
                             "while the code claims convergence (water-sto-3g-rhf); 2 more "
                             "records like it")

    def test_infinite_first_error(self):
        h = converging()
        h[0, 1] = np.inf
        assert "record 0 of 12 has 'error' = inf" in check(h).message

    def test_leading_nan_errors_pass(self):
        """Iteration 0 of a ΔE or ΔD error measure has no error: not a failure."""
        h = converging()
        h[0, 1] = np.nan
        assert check(h).status is Status.PASSED

    def test_without_convergence_claim_passes(self):
        h = converging()
        h[5, 0] = np.nan
        h[6, 1] = np.inf
        assert check(h, converged=False).status is Status.PASSED
