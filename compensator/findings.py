"""Findings: warnings and notes as records, not strings.

A library check that finds something a user should know (a loop near its
robustness bound, a cold plate below the dew point, a fit with an improbable
chi-square) returns a :class:`Finding`; commands print ``finding.message`` and
put the record in their JSON, and tests classify findings by ``code`` without
repeating the check.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import Enum

__all__ = ["Severity", "Finding", "worst_severity"]


class Severity(str, Enum):
    """How much a finding matters, from least to most."""

    INFO = "info"
    WARNING = "warning"
    DANGER = "danger"

    @property
    def rank(self) -> int:
        """0 for info, 1 for warning, 2 for danger."""
        return list(Severity).index(self)


@dataclass(frozen=True, kw_only=True)
class Finding:
    """One thing a check found.

    Attributes
    ----------
    code : str
        Stable machine-readable identifier, snake_case (e.g. ``"ms_above_bound"``).
    severity : Severity
        ``info``, ``warning`` or ``danger`` (danger: people or hardware at risk).
    message : str
        One line for people, with the numbers that matter.
    """

    code: str
    severity: Severity
    message: str

    def __post_init__(self):
        object.__setattr__(self, "severity", Severity(self.severity))

    def __str__(self) -> str:
        return f"{self.severity.value}: {self.message}"


def worst_severity(findings) -> Severity | None:
    """The most severe of ``findings`` (``None`` when there are none).

    Parameters
    ----------
    findings : iterable of Finding
        The findings to rank.
    """
    worst = None
    for f in findings:
        if worst is None or f.severity.rank > worst.rank:
            worst = f.severity
    return worst
