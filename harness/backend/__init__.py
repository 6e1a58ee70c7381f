"""backend: the only package of the harness that imports pyscf.

Everything else reaches pyscf through it, as plain functions returning numpy arrays or
plain data: molecules, element data and versions (:mod:`.mole`), integrals and J/K
(:mod:`.integrals`), the orbital-Hessian stability analysis (:mod:`.stability`), the
reference SCF driver (:mod:`.reference_scf`) and the bench's pyscf baselines
(:mod:`.baselines`). ``tests/unit/test_backend_boundary.py`` holds the line.
"""
