"""Result objects: what a check measured and what became of a case.

A check never returns a bare tuple: it returns a :class:`CheckResult` that says its
name, its status, the measured value, the tolerance and a one-line message whose first
words say what failed, by how much and where.
"""

from __future__ import annotations

import dataclasses
import enum
import math
from typing import Any


#: Numbers of this magnitude or more are written with an exponent in messages (an energy
#: of 1e308 written with ``:.10f`` has 300+ digits).
EXPONENT_FROM = 1e6


def fixed(x: float, decimals: int = 10, *, sign: bool = False) -> str:
    """``x`` with ``decimals`` decimals (``:.{decimals}f``) when |x| < EXPONENT_FROM, else
    with an exponent and as many decimals in the mantissa (``:.{decimals}e``), so a
    value from a solution never floods a message. ``sign``: always write the sign."""
    x = float(x)
    spec = ("+" if sign else "") + f".{decimals}"
    return format(x, spec + ("e" if math.isfinite(x) and abs(x) >= EXPONENT_FROM else "f"))


class Status(str, enum.Enum):
    PASSED = "passed"
    FAILED = "failed"
    NOT_APPLICABLE = "not applicable"  #: the solution lacks the inputs of this check
    SKIPPED = "skipped"  #: not run because an earlier check (well-formed) failed

    def __str__(self) -> str:
        return self.value


@dataclasses.dataclass(frozen=True)
class Measurement:
    """What a check kernel measured: a non-negative deviation and where it is largest.

    ``quantity`` is how the value is written in messages, e.g. ``"max|CᵀSC − 1|"``;
    ``where`` locates the worst element, e.g. ``"alpha, element (3, 5)"``.
    """

    value: float
    quantity: str
    where: str = ""


@dataclasses.dataclass(frozen=True)
class CheckResult:
    """The verdict of one check on one case."""

    name: str
    status: Status
    value: float | None
    tolerance: float | None
    message: str
    hint: str | None = None

    @property
    def passed(self) -> bool | None:
        """True, False, or None for not applicable / skipped."""
        if self.status is Status.PASSED:
            return True
        if self.status is Status.FAILED:
            return False
        return None

    def to_json(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "passed": self.passed,
            "status": self.status.value,
            "value": _json_float(self.value),
            "tolerance": _json_float(self.tolerance),
            "message": self.message,
            "hint": self.hint,
        }

    @classmethod
    def from_json(cls, data: dict[str, Any]) -> "CheckResult":
        return cls(name=data["name"], status=Status(data["status"]), value=data.get("value"),
                   tolerance=data.get("tolerance"), message=data.get("message", ""),
                   hint=data.get("hint"))

    def __repr__(self) -> str:
        return f"CheckResult({self.name!r}, {self.status.value}: {self.message})"


def _json_float(x: float | None):
    if x is None:
        return None
    x = float(x)
    if math.isnan(x) or math.isinf(x):
        return repr(x)  # JSON has no NaN/inf: keep it visible as a string
    return x


def judge(name: str, measurement: Measurement, tolerance: float, case: str) -> CheckResult:
    """Compare a measurement with its tolerance and word the one-line message.

    Message form: ``"<check>: <quantity> = <value> > <tolerance> (<case>), <where>"``.
    A NaN measurement always fails.
    """
    value = float(measurement.value)
    ok = bool(value <= tolerance)  # False for NaN
    relation = "≤" if ok else ">"
    where = f", {measurement.where}" if measurement.where and not ok else ""
    message = (f"{name}: {measurement.quantity} = {value:.1e} {relation} {tolerance:.1e} "
               f"({case}){where}")
    return CheckResult(name=name, status=Status.PASSED if ok else Status.FAILED, value=value,
                       tolerance=tolerance, message=message)


def failed(name: str, message: str, value: float | None = None,
           tolerance: float | None = None) -> CheckResult:
    return CheckResult(name=name, status=Status.FAILED, value=value, tolerance=tolerance,
                       message=message)


def not_applicable(name: str, reason: str, case: str) -> CheckResult:
    return CheckResult(name=name, status=Status.NOT_APPLICABLE, value=None, tolerance=None,
                       message=f"{name}: not applicable ({case}): {reason}")


def skipped(name: str, reason: str, case: str) -> CheckResult:
    return CheckResult(name=name, status=Status.SKIPPED, value=None, tolerance=None,
                       message=f"{name}: skipped ({case}): {reason}")


#: What became of a case (``CaseResult.status``, ``"status"`` in the JSON report).
CASE_STATUSES = ("passed", "failed", "unsupported")


@dataclasses.dataclass(frozen=True)
class CaseResult:
    """Everything the harness learned about one case.

    ``error`` is set when the plug-in itself failed (exception, timeout, crash,
    unreadable return value); then ``checks`` may be empty and the case failed.
    ``unsupported`` is the reason the code gave for not running the case at all
    (``harness.Unsupported``, or a command's exit status / ``unsupported.txt``): the
    case then has no checks and is neither passed nor failed (:attr:`status`).
    Energies in Eh, times in seconds.
    """

    name: str
    method: str
    basis: str
    checks: tuple[CheckResult, ...] = ()
    error: str | None = None
    energy: float | None = None
    reference_energy: float | None = None
    plugin_seconds: float | None = None
    check_seconds: float | None = None
    reference_source: str | None = None  #: "stored", "computed" or "written" (computed, stored)
    unsupported: str | None = None  #: the code's reason for not running the case
    analysis: dict = dataclasses.field(default_factory=dict, compare=False)

    @property
    def passed(self) -> bool:
        """True when the case ran and passed (False for an unsupported case too)."""
        if self.error is not None or self.unsupported is not None:
            return False
        return all(c.status is not Status.FAILED for c in self.checks) and any(
            c.status is Status.PASSED for c in self.checks)

    @property
    def failed(self) -> bool:
        """True when the case failed (``status == "failed"``): not passed, and not
        unsupported (an unsupported case with an ``error``, under require-all, failed)."""
        return self.status == "failed"

    @property
    def status(self) -> str:
        """``"passed"``, ``"failed"`` or ``"unsupported"`` (CASE_STATUSES)."""
        if self.unsupported is not None and self.error is None:
            return "unsupported"
        return "passed" if self.passed else "failed"

    @property
    def failures(self) -> tuple[CheckResult, ...]:
        return tuple(c for c in self.checks if c.status is Status.FAILED)

    def check(self, name: str) -> CheckResult:
        for c in self.checks:
            if c.name == name:
                return c
        raise KeyError(name)

    def to_json(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "passed": self.passed,
            "status": self.status,
            "unsupported": self.unsupported,
            "method": self.method,
            "basis": self.basis,
            "error": self.error,
            "energy": _json_float(self.energy),
            "reference_energy": _json_float(self.reference_energy),
            "reference_source": self.reference_source,
            "timings": {"plugin_seconds": self.plugin_seconds,
                        "check_seconds": self.check_seconds},
            "checks": [c.to_json() for c in self.checks],
            "analysis": self.analysis,
        }

    @classmethod
    def from_json(cls, data: dict[str, Any]) -> "CaseResult":
        timings = data.get("timings", {})
        return cls(name=data["name"], method=data.get("method", ""), basis=data.get("basis", ""),
                   checks=tuple(CheckResult.from_json(c) for c in data.get("checks", [])),
                   error=data.get("error"), energy=data.get("energy"),
                   reference_energy=data.get("reference_energy"),
                   plugin_seconds=timings.get("plugin_seconds"),
                   check_seconds=timings.get("check_seconds"),
                   reference_source=data.get("reference_source"),
                   unsupported=data.get("unsupported"),
                   analysis=data.get("analysis") or {})
