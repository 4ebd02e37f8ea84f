"""Plain typed values shared by every stage (no logic beyond checks).

Data flows one way, ``ingest -> analysis -> render -> deliver``; the values
defined here are the ones that cross more than one seam. Values that belong
to one stage's output (for example the week's analysis) live in that stage.
"""

from __future__ import annotations

import dataclasses
import enum
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sitrep.weeks import EpiWeek, WeekSystem

if TYPE_CHECKING:
    import geopandas as gpd
    import pandas as pd

__all__ = [
    "COUNT_COLUMNS",
    "ChangeClass",
    "ClusterLabel",
    "CountTable",
    "Districts",
    "Finding",
    "FindingGroup",
    "InputFile",
    "Severity",
    "SourceColumns",
    "ValidationReport",
]


class Severity(enum.Enum):
    """How much a validation finding matters."""

    ERROR = "error"
    """The run stops: nothing is archived or sent."""
    WARNING = "warning"
    """The report goes out and shows the finding in its data-quality section."""
    INFO = "info"
    """Recorded in validation.json only."""


class ClusterLabel(enum.Enum):
    """Local Moran's I category of a district (the one registry of these strings)."""

    HIGH_HIGH = "high-high"
    LOW_LOW = "low-low"
    HIGH_LOW = "high-low"
    LOW_HIGH = "low-high"
    NOT_SIGNIFICANT = "not significant"
    NO_NEIGHBOURS = "no neighbours"
    NO_DATA = "no data"
    NOT_ASSESSABLE = "not assessable"


class ChangeClass(enum.Enum):
    """Week-over-week change class of an ILI percentage."""

    INCREASE = "increase"
    DECREASE = "decrease"
    SIMILAR = "similar"
    NOT_ASSESSABLE = "not assessable"


@dataclasses.dataclass(frozen=True)
class InputFile:
    """One input file as read, for provenance and the manifest."""

    role: str
    path: Path
    sha256: str
    size_bytes: int


@dataclasses.dataclass(frozen=True)
class Finding:
    """One validation finding, pointing at a file position where it has one.

    ``line`` is 1-based with the header as line 1; ``column`` is the column
    name in the file (not the internal name).
    """

    severity: Severity
    rule: str
    message: str
    file: str = ""
    line: int | None = None
    column: str | None = None
    district_id: str | None = None
    value: str | None = None

    def as_dict(self) -> dict[str, Any]:
        """Machine-readable form (validation.json, ``sitrep check --json``)."""
        out = dataclasses.asdict(self)
        out["severity"] = self.severity.value
        return out

    def location(self) -> str:
        """``file:line, column 'c'`` as far as known."""
        parts = [self.file] if self.file else []
        if self.line is not None:
            parts.append(f"line {self.line}")
        if self.column:
            parts.append(f"column '{self.column}'")
        return ", ".join(parts)


@dataclasses.dataclass(frozen=True)
class ValidationReport:
    """All findings of one validation run, in a stable order."""

    findings: tuple[Finding, ...] = ()

    @property
    def errors(self) -> tuple[Finding, ...]:
        """Error-level findings (they block the run)."""
        return tuple(f for f in self.findings if f.severity is Severity.ERROR)

    @property
    def warnings(self) -> tuple[Finding, ...]:
        """Warning-level findings (shown in the report)."""
        return tuple(f for f in self.findings if f.severity is Severity.WARNING)

    @property
    def blocked(self) -> bool:
        """True when any error-level finding exists."""
        return bool(self.errors)

    def merged(self, other: ValidationReport) -> ValidationReport:
        """Both reports' findings, this one's first."""
        return ValidationReport(self.findings + other.findings)

    def grouped(self) -> tuple[FindingGroup, ...]:
        """The findings gathered per severity, rule, file and column, in first-seen order.

        A systematic problem (the same rule firing on every row of a column)
        becomes one group; the per-cell findings stay in :attr:`findings`.
        """
        groups: dict[tuple[Severity, str, str, str], list[Finding]] = {}
        for f in self.findings:
            groups.setdefault((f.severity, f.rule, f.file, f.column or ""), []).append(f)
        return tuple(FindingGroup(tuple(members)) for members in groups.values())


SHOWN_PER_GROUP = 5
"""How many locations a grouped finding shows (terminal and PDF); the rest are in validation.json."""


@dataclasses.dataclass(frozen=True)
class FindingGroup:
    """Findings of one rule on one file and column, shown as one line."""

    members: tuple[Finding, ...]

    @property
    def first(self) -> Finding:
        """The first finding of the group (lowest line)."""
        return self.members[0]

    @property
    def count(self) -> int:
        """Number of findings in the group."""
        return len(self.members)

    @property
    def severity(self) -> Severity:
        """Severity shared by the group."""
        return self.first.severity

    @property
    def rule(self) -> str:
        """Rule id shared by the group."""
        return self.first.rule

    def lines(self) -> tuple[int, ...]:
        """Distinct lines of the group, ascending."""
        return tuple(sorted({f.line for f in self.members if f.line is not None}))

    def span(self) -> str:
        """Where the group lies: ``lines 2-241`` when contiguous, else ``lines 2 to 900``."""
        lines = self.lines()
        if not lines:
            return ""
        if len(lines) == 1:
            return f"line {lines[0]}"
        joined = "-" if lines[-1] - lines[0] + 1 == len(lines) else " to "
        return f"lines {lines[0]}{joined}{lines[-1]}"

    def location(self) -> str:
        """``file, line(s), column 'c'`` of the whole group."""
        if self.count == 1:
            return self.first.location()
        f = self.first
        parts = [f.file] if f.file else []
        if self.span():
            parts.append(self.span())
        if f.column:
            parts.append(f"column '{f.column}'")
        return ", ".join(parts)

    def districts(self) -> tuple[str, ...]:
        """Distinct district ids of the group, in order of appearance."""
        return tuple(dict.fromkeys(f.district_id for f in self.members if f.district_id))

    def message(
        self,
        shown: int = SHOWN_PER_GROUP,
        *,
        span: bool = True,
        full_list: str = "validation.json (and check --json)",
    ) -> str:
        """One sentence for the whole group: the count, the span and the first locations.

        ``span=False`` leaves the line span out (when the location column shows it);
        ``full_list`` names where every finding of the group is listed.
        """
        if self.count == 1:
            return self.first.message
        ids = self.districts()
        if len(ids) == self.count:
            what = "districts"  # one finding per district (e.g. per unknown id)
        elif self.first.column and self.lines():
            what = "cells"
        else:
            what = "findings"
        head = f"{self.count} {what}" + (f", {self.span()}" if span and self.span() else "")
        first = self.members[:shown]
        spots = "; ".join(_spot(f) for f in first)
        tail = (
            f"first {len(first)} shown, all {self.count} in {full_list}"
            if self.count > len(first)
            else "all shown"
        )
        return f"{head}: {self.first.message} [{spots}; {tail}]"


def _spot(f: Finding) -> str:
    where = f"line {f.line}" if f.line is not None else (f.district_id or "")
    value = f.value if f.value is not None else ""
    if where and value:
        return f"{where}: {value}"
    return where or value or "-"


COUNT_COLUMNS = ("district_id", "week", "reporting_sites", "ili_visits", "total_visits")
"""Internal column names of :attr:`CountTable.frame` (plus ``district_name``, ``line``)."""


@dataclasses.dataclass(frozen=True)
class SourceColumns:
    """The names a count table's file gives its columns, which findings point at.

    Each field holds the header cell read as that internal column of
    :attr:`CountTable.frame` (``week`` lists the week columns, comma-separated);
    a column the file does not have keeps its internal name.
    """

    district_id: str = "district_id"
    district_name: str = "district_name"
    week: str = "week"
    reporting_sites: str = "reporting_sites"
    ili_visits: str = "ili_visits"
    total_visits: str = "total_visits"
    rate_percent: str = "rate_percent"


@dataclasses.dataclass(frozen=True, eq=False)
class CountTable:
    """Weekly counts in long form: one row per district and epi week.

    ``frame`` columns: ``district_id`` (str), ``district_name`` (str, may be
    empty), ``week`` (ordered categorical of :class:`~sitrep.weeks.EpiWeek`),
    optional ``rate_percent`` (a supplied rate converted to percent), ``reporting_sites``
    (float, NaN when not supplied), ``ili_visits`` and ``total_visits``
    (int64), ``line`` (1-based line in the source file, header = 1).
    Rows are sorted by week, then district id. ``columns`` names the columns
    as in the file; ``numeric_id_lines`` are the lines whose id cell was stored
    as a whole number (XLSX, Parquet) and read as its digits.
    """

    frame: pd.DataFrame
    system: WeekSystem
    source: InputFile
    columns: SourceColumns = SourceColumns()
    numeric_id_lines: tuple[int, ...] = ()

    @property
    def weeks(self) -> tuple[EpiWeek, ...]:
        """Distinct weeks in the table, oldest first."""
        week = self.frame["week"]
        if hasattr(week, "cat"):
            present = week.cat.remove_unused_categories().cat.categories
            return tuple(sorted(present))
        return tuple(sorted(set(week)))

    @property
    def latest_week(self) -> EpiWeek:
        """The most recent week in the table."""
        week = self.frame["week"]
        latest: EpiWeek = week.max() if hasattr(week, "cat") and week.cat.ordered else max(week)
        return latest


@dataclasses.dataclass(frozen=True, eq=False)
class Districts:
    """District boundaries with checked ids and a known CRS.

    ``frame`` is a GeoDataFrame with columns ``district_id`` (str),
    ``district_name`` (str) and ``geometry``, sorted by ``district_id``, in
    the CRS of the file (contiguity is found on it). ``projected`` is the same
    frame in the projected CRS used for maps and distances (``frame`` itself
    when that is the file's CRS); ``projection`` says which CRS that is and
    how it was chosen (one sentence for the methods note and the manifest).
    ``id_column`` is the file's id field and ``numeric_ids`` says whether the
    file stored it as numbers (read as their digits).
    """

    frame: gpd.GeoDataFrame
    source: InputFile
    projected: gpd.GeoDataFrame | None = None
    projection: str = ""
    id_column: str = "district_id"
    numeric_ids: bool = False

    @property
    def map_frame(self) -> gpd.GeoDataFrame:
        """The districts in the projected CRS of the maps and distances."""
        return self.frame if self.projected is None else self.projected

    @property
    def ids(self) -> tuple[str, ...]:
        """District ids in row order."""
        return tuple(self.frame["district_id"])

    @property
    def names(self) -> dict[str, str]:
        """District id to display name."""
        return dict(zip(self.frame["district_id"], self.frame["district_name"], strict=True))
