"""A plug-in module that prints one line at import, then returns a constant answer."""

print("import_prints: imported")


def solve(problem):
    """A fixed answer for H2/STO-3G (two AOs); energy in Eh."""
    return {"energy": -1.1167, "coefficients": [[0.5489, 1.2114], [0.5489, -1.2114]],
            "occupations": [2.0, 0.0], "converged": True}
