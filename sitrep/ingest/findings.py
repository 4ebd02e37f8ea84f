"""Gathering findings: the collector the readers fill, the stable order, message helpers.

The readers (:mod:`sitrep.ingest.read`, :mod:`sitrep.ingest.geometry`) add
findings to a :class:`FindingCollector` as they parse; the value rules
(:mod:`sitrep.ingest.rules`) return :class:`Hit` records that the validator
turns into findings with the rule id and severity of the registry.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import Any

from sitrep.model import Finding, Severity, ValidationReport

__all__ = ["FindingCollector", "Hit", "line_list", "sort_findings"]


class FindingCollector:
    """Accumulates the findings for one file (shared by the readers and the rules)."""

    def __init__(self, file: str) -> None:
        self.file = file
        self.items: list[Finding] = []

    def add(self, severity: Severity, rule: str, message: str, **where: Any) -> None:
        self.items.append(Finding(severity, rule, message, file=self.file, **where))

    def error(self, rule: str, message: str, **where: Any) -> None:
        self.add(Severity.ERROR, rule, message, **where)

    @property
    def has_errors(self) -> bool:
        return any(f.severity is Severity.ERROR for f in self.items)

    def report(self) -> ValidationReport:
        return ValidationReport(sort_findings(self.items))


@dataclasses.dataclass(frozen=True)
class Hit:
    """Where a value rule fired and what it says: a finding without its rule id and severity.

    The registry (:data:`sitrep.ingest.rules.REGISTRY`) holds those, so each
    rule's id and severity are written down once. ``file`` is the checked
    table's file unless given (a note about the boundary file names that).
    """

    message: str
    line: int | None = None
    column: str | None = None
    district_id: str | None = None
    value: str | None = None
    file: str | None = None

    def finding(self, severity: Severity, rule: str, file: str) -> Finding:
        """The finding of ``rule`` at this place (``file`` unless the hit names its own)."""
        return Finding(
            severity,
            rule,
            self.message,
            file=self.file if self.file is not None else file,
            line=self.line,
            column=self.column,
            district_id=self.district_id,
            value=self.value,
        )


def sort_findings(findings: Sequence[Finding]) -> tuple[Finding, ...]:
    """Return findings in the project's stable order: file, line, column, rule.

    File-level findings (no line) come before line findings of the same file;
    district id and value break remaining ties so the order never depends on
    the order in which rules ran.
    """
    return tuple(
        sorted(
            findings,
            key=lambda f: (
                f.file,
                -1 if f.line is None else f.line,
                f.column or "",
                f.rule,
                f.district_id or "",
                f.value or "",
                f.message,
            ),
        )
    )


def line_list(lines: Sequence[int], limit: int = 20) -> str:
    """``2, 5, 9`` or ``2, 5, 9, ... and 40 more`` (for messages)."""
    shown = ", ".join(str(x) for x in lines[:limit])
    return shown + (f" and {len(lines) - limit} more" if len(lines) > limit else "")
