"""Epidemiological weeks: the Sunday-start (MMWR) convention and ISO 8601.

A shared leaf module (like ``model``): every stage may import it, it imports
nothing from sitrep. Weeks are keyed by ``(epi_year, week)`` in a declared
system, never by calendar year.

Rule used for both systems (equivalent to the published definitions and
checked day by day against the ``epiweeks`` package in the tests): week 1 of
epi year *Y* is the week, starting on the system's first weekday, that contains
4 January of *Y*. MMWR weeks run Sunday to Saturday; ISO weeks Monday to Sunday.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import enum
import re

__all__ = ["EpiWeek", "WeekSystem", "season_of", "season_start"]


class WeekSystem(enum.Enum):
    """Which week-numbering convention the tables use."""

    MMWR = "mmwr"
    """Sunday to Saturday; week 1 holds at least four days of January."""
    ISO = "iso"
    """ISO 8601: Monday to Sunday; week 1 holds the year's first Thursday."""

    @property
    def label(self) -> str:
        """Human-readable name used in the report."""
        return (
            "MMWR (Sunday to Saturday)"
            if self is WeekSystem.MMWR
            else "ISO 8601 (Monday to Sunday)"
        )

    @property
    def first_weekday(self) -> int:
        """Python weekday number (Monday = 0) on which a week starts."""
        return 6 if self is WeekSystem.MMWR else 0


def _week1_start(year: int, system: WeekSystem) -> dt.date:
    jan4 = dt.date(year, 1, 4)
    return jan4 - dt.timedelta(days=(jan4.weekday() - system.first_weekday) % 7)


_LABEL = re.compile(r"^\s*(\d{4})\s*-?\s*W\s*(\d{1,2})\s*$", re.IGNORECASE)


@dataclasses.dataclass(frozen=True, order=True)
class EpiWeek:
    """One epidemiological week, e.g. ``EpiWeek(2026, 47, WeekSystem.MMWR)``.

    Parameters
    ----------
    year : int
        Epi year (may differ from the calendar year of some of its days).
    week : int
        1..52, or 53 in years that have a week 53 in this system.
    system : WeekSystem
        The numbering convention.

    Examples
    --------
    >>> w = EpiWeek.from_date(dt.date(2015, 1, 1), WeekSystem.MMWR)
    >>> str(w), w.start.isoformat(), w.end.isoformat()
    ('2014-W53', '2014-12-28', '2015-01-03')
    >>> str(EpiWeek(2020, 53, WeekSystem.MMWR) + 1)
    '2021-W01'
    """

    year: int
    week: int
    system: WeekSystem = WeekSystem.MMWR

    def __post_init__(self) -> None:
        if not 1 <= self.week <= weeks_in_year(self.year, self.system):
            raise ValueError(
                f"{self.year} has {weeks_in_year(self.year, self.system)} weeks in the "
                f"{self.system.value.upper()} system; week {self.week} does not exist"
            )

    @classmethod
    def from_date(cls, day: dt.date, system: WeekSystem = WeekSystem.MMWR) -> EpiWeek:
        """Return the epi week that contains ``day``."""
        for year in (day.year + 1, day.year, day.year - 1):
            start = _week1_start(year, system)
            if start <= day:
                return cls(year, (day - start).days // 7 + 1, system)
        raise AssertionError("unreachable: week 1 of the previous year always starts earlier")

    @classmethod
    def parse(cls, label: str, system: WeekSystem = WeekSystem.MMWR) -> EpiWeek:
        """Parse a label such as ``2026-W47``, ``2026W47`` or ``2026-W7``.

        Raises
        ------
        ValueError
            If the label is not of that form or the week does not exist.
        """
        match = _LABEL.match(str(label))
        if not match:
            raise ValueError(f"expected an epi-week label like 2026-W47, got {label!r}")
        return cls(int(match.group(1)), int(match.group(2)), system)

    @property
    def start(self) -> dt.date:
        """First day of the week."""
        return _week1_start(self.year, self.system) + dt.timedelta(weeks=self.week - 1)

    @property
    def end(self) -> dt.date:
        """Last day of the week."""
        return self.start + dt.timedelta(days=6)

    def __add__(self, weeks: int) -> EpiWeek:
        return EpiWeek.from_date(self.start + dt.timedelta(weeks=weeks), self.system)

    def __sub__(self, other: int) -> EpiWeek:
        return self + (-other)

    def weeks_since(self, other: EpiWeek) -> int:
        """Number of weeks from ``other`` to ``self`` (positive when self is later)."""
        if other.system is not self.system:
            raise ValueError("cannot compare weeks of different systems")
        return (self.start - other.start).days // 7

    def __str__(self) -> str:
        return f"{self.year}-W{self.week:02d}"

    @property
    def label(self) -> str:
        """The week label, e.g. ``2026-W47``."""
        return str(self)


def weeks_in_year(year: int, system: WeekSystem) -> int:
    """Return 52 or 53: the number of weeks of epi year ``year``.

    Examples
    --------
    >>> weeks_in_year(2025, WeekSystem.MMWR), weeks_in_year(2026, WeekSystem.ISO)
    (53, 53)
    """
    return (_week1_start(year + 1, system) - _week1_start(year, system)).days // 7


def season_start(season_year: int, system: WeekSystem, start_week: int = 40) -> EpiWeek:
    """First week of the season that starts in epi year ``season_year``."""
    return EpiWeek(season_year, start_week, system)


def season_of(week: EpiWeek, start_week: int = 40) -> tuple[str, int]:
    """Return the season label and the 1-based season-week index of ``week``.

    A season runs from ``start_week`` of one epi year to the week before
    ``start_week`` of the next; the index is counted from dates, so a week 53
    simply makes that season one week longer.

    Examples
    --------
    >>> season_of(EpiWeek(2015, 39, WeekSystem.MMWR))
    ('2014-15', 53)
    >>> season_of(EpiWeek(2020, 53, WeekSystem.MMWR))
    ('2020-21', 14)
    """
    year = week.year if week.week >= start_week else week.year - 1
    first = season_start(year, week.system, start_week)
    return f"{year}-{(year + 1) % 100:02d}", week.weeks_since(first) + 1
