"""The harness's bundled reference data, installed as the package ``harness.catalogue.data``.

This folder stays the repository's top-level ``references/``; pyproject.toml maps it to
the package ``harness.catalogue.data`` so a wheel ships it as package data and
:func:`harness.catalogue.cases.default_reference_dir` finds it with importlib.resources.
No code lives here.
"""
