"""Plug-ins that hand the harness objects whose ``__str__`` raises."""

from collections.abc import Mapping


class Unprintable(Exception):
    """An exception that cannot be turned into text."""

    def __str__(self):
        raise RuntimeError("no text for you")


def raises_unprintable(problem):
    """Raises an exception whose message cannot be read."""
    raise Unprintable("hidden")  # line asserted by the tests


class Booby(Mapping):
    """A mapping that claims an energy but raises Unprintable when it is read."""

    def __getitem__(self, key):
        raise Unprintable(key)

    def __iter__(self):
        return iter(["energy"])

    def __len__(self):
        return 1


def returns_booby(problem):
    """Returns a mapping whose items raise an unprintable exception."""
    return Booby()
