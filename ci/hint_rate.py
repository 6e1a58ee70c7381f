"""How many caught planted bugs get a hint, and how many of those hints name the cause.

Runs every entry of every module of ``harness.testing.planted`` that defines a
``CATALOGUE`` (found by walking the package, so a new module is picked up without
editing this script) through the self-test machinery (``harness.testing.selftest.
run_entry``: the plug-in on its case, judged with the harness's checks and hints).

A *caught* bug is an entry with expected failing checks that failed at least one check.
Its expected hint is the entry's own declaration (``Planted.hint`` on
``Planted.hint_check``); an entry that declares none counts as "no hint expected". The
figure is: of the caught bugs that expect a hint, how many got the expected text on the
expected check — against the goal of GOAL. Bug classes (plug-in functions) that are
caught but get no hint at all are listed.

    python ci/hint_rate.py [--only TEXT]      # a minute or two on a quiet machine
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import sys
import time

#: Share of caught, hint-expecting bugs whose hint must name the cause (issue 14).
GOAL = 0.90


def planted_entries(only: str | None = None):
    """Every ``CATALOGUE`` entry of every module under harness.testing.planted."""
    import harness.testing.planted as package

    out = []
    for info in sorted(pkgutil.iter_modules(package.__path__), key=lambda m: m.name):
        module = importlib.import_module(f"{package.__name__}.{info.name}")
        for entry in getattr(module, "CATALOGUE", ()):
            label = f"{info.name}:{entry.name} @ {entry.case}"
            if only is None or only in label:
                out.append((info.name, label, entry))
    return out


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--only", help="run only entries whose module:function @ case "
                        "contains this text")
    args = parser.parse_args(argv)
    from harness.catalogue.cases import load_catalogue
    from harness.testing.selftest import run_entry

    t0 = time.perf_counter()
    catalogue = load_catalogue()
    caught = expected = given = named = 0
    no_hint_classes: dict[str, int] = {}
    missed: list[str] = []
    errors: list[str] = []
    for module, label, entry in planted_entries(args.only):
        if entry.correct:
            continue
        outcome = run_entry(entry, catalogue)
        if outcome.error is not None:
            errors.append(f"{label}: {outcome.error}")
            continue
        if not outcome.failed:
            continue  # not caught: the self-test reports it; no hint to count
        caught += 1
        hinted = any(outcome.hints.get(c) for c in outcome.failed)
        if not hinted:
            key = f"{module}:{entry.name}"
            no_hint_classes[key] = no_hint_classes.get(key, 0) + 1
        if entry.hint:
            expected += 1
            given += hinted
            ok = entry.hint in (outcome.hints.get(entry.hint_check) or "")
            named += ok
            if not ok:
                missed.append(f"{label}: expected '{entry.hint}' on {entry.hint_check}, "
                              f"got '{outcome.hints.get(entry.hint_check) or 'none'}'")
    rate = named / expected if expected else float("nan")
    print(f"caught planted bugs: {caught}; expecting a hint: {expected} "
          f"(the rest: no hint expected)")
    print(f"hint given: {given} of {expected}; naming the expected cause: {named} of "
          f"{expected} = {rate:.0%} (goal {GOAL:.0%}: "
          f"{'met' if rate >= GOAL else 'missed'})")
    for line in missed:
        print(f"  missed: {line}")
    if no_hint_classes:
        print("caught bug classes with no hint at all (entries): "
              + ", ".join(f"{k} ({n})" for k, n in sorted(no_hint_classes.items())))
    for line in errors:
        print(f"  error: {line}")
    print(f"({time.perf_counter() - t0:.0f} s)")
    return 0 if rate >= GOAL and not errors else 1


if __name__ == "__main__":
    sys.exit(main())
