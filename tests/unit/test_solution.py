"""The frozen Solution that extract makes: typed fields, absent as None, plain data only.

All numbers here are synthetic.
"""

from __future__ import annotations

import dataclasses
import pickle

import numpy as np
import pytest

import harness
from harness.contract.solution import KNOWN_KEYS, Malformed, Solution, extract


class TestSolution:
    def test_one_field_per_contract_key(self):
        """The fields are exactly the contract's keys, in its order."""
        assert tuple(f.name for f in dataclasses.fields(Solution)) == KNOWN_KEYS

    def test_extract_gives_a_frozen_solution_with_absent_fields_none(self):
        sol = extract({"energy": -1.0, "coefficients": [[1.0]], "occupations": [2]})
        assert isinstance(sol, Solution) and sol.fock is None and sol.history is None
        assert sol.energy == -1.0 and sol.occupations.dtype == np.float64
        assert sol.keys() == ("energy", "coefficients", "occupations")
        with pytest.raises(dataclasses.FrozenInstanceError):
            sol.energy = 0.0  # type: ignore[misc]

    def test_malformed_fields_are_listed_with_their_reasons(self):
        sol = extract({"energy": "x", "fock_matrix": np.eye(2)})
        assert set(sol.malformed()) == {"energy", "fock"}
        assert sol.malformed()["energy"].reason == "must be a number, got str"

    def test_dict_round_trip_and_unknown_keys(self):
        sol = Solution(energy=-1.5, density=np.eye(2), fock=Malformed("is None"))
        again = Solution.from_dict(sol.as_dict())
        assert again.keys() == sol.keys() and again.fock.reason == "is None"
        np.testing.assert_array_equal(again.density, sol.density)
        with pytest.raises(TypeError, match="^unknown solution keys: fock_matrix$"):
            Solution.from_dict({"fock_matrix": np.eye(2)})

    def test_replace_leaves_the_original(self):
        sol = Solution(energy=-1.5)
        assert sol.replace(energy=-2.0).energy == -2.0 and sol.energy == -1.5

    def test_pickles_and_is_exported(self):
        sol = extract({"energy": -1.0, "converged": True})
        assert pickle.loads(pickle.dumps(sol)).as_dict() == {"energy": -1.0, "converged": True}
        assert harness.Solution is Solution
