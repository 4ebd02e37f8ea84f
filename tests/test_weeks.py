"""Epi weeks against the epiweeks package, the standard library's ISO calendar and published examples."""

from __future__ import annotations

import datetime as dt

import epiweeks
import pytest

from sitrep.weeks import EpiWeek, WeekSystem, season_of, weeks_in_year

MMWR, ISO = WeekSystem.MMWR, WeekSystem.ISO

# Date -> (MMWR week, ISO week): docs/methods.md §1.2 table, [LIB] epiweeks 2.4.0 and date.isocalendar agree.
TABLE = [
    ("2014-12-27", "2014-W52", "2014-W52"),
    ("2014-12-28", "2014-W53", "2014-W52"),
    ("2015-01-01", "2014-W53", "2015-W01"),
    ("2015-01-03", "2014-W53", "2015-W01"),
    ("2015-01-04", "2015-W01", "2015-W01"),
    ("2016-01-02", "2015-W52", "2015-W53"),
    ("2016-01-03", "2016-W01", "2015-W53"),
    ("2017-01-01", "2017-W01", "2016-W52"),
    ("2019-12-29", "2020-W01", "2019-W52"),
    ("2020-01-05", "2020-W02", "2020-W01"),
    ("2020-12-27", "2020-W53", "2020-W52"),
    ("2020-12-31", "2020-W53", "2020-W53"),
    ("2021-01-02", "2020-W53", "2020-W53"),
    ("2021-01-03", "2021-W01", "2020-W53"),
    ("2021-01-04", "2021-W01", "2021-W01"),
    ("2024-12-29", "2025-W01", "2024-W52"),
    ("2025-12-28", "2025-W53", "2025-W52"),
    ("2026-01-03", "2025-W53", "2026-W01"),
    ("2027-01-03", "2027-W01", "2026-W53"),
]


@pytest.mark.parametrize(("day", "mmwr", "iso"), TABLE)
def test_date_to_week_table(day: str, mmwr: str, iso: str) -> None:
    d = dt.date.fromisoformat(day)
    assert str(EpiWeek.from_date(d, MMWR)) == mmwr
    assert str(EpiWeek.from_date(d, ISO)) == iso


# Published ISO examples (PostgreSQL EXTRACT(week) documentation, per docs/methods.md §1.2 [PUB]).
@pytest.mark.parametrize(
    ("day", "iso"),
    [
        ("2005-01-01", "2004-W53"),
        ("2006-01-01", "2005-W52"),
        ("2012-12-31", "2013-W01"),
        ("1970-01-01", "1970-W01"),
    ],
)
def test_published_iso_examples(day: str, iso: str) -> None:
    assert str(EpiWeek.from_date(dt.date.fromisoformat(day), ISO)) == iso


def test_every_day_agrees_with_references() -> None:
    """Every day 1990-2040 against epiweeks (CDC and ISO) and date.isocalendar [LIB]."""
    day = dt.date(1990, 1, 1)
    while day <= dt.date(2040, 12, 31):
        m = EpiWeek.from_date(day, MMWR)
        ref = epiweeks.Week.fromdate(day, system="cdc")
        assert (m.year, m.week) == (ref.year, ref.week), day
        i = EpiWeek.from_date(day, ISO)
        iso = day.isocalendar()
        assert (i.year, i.week) == (iso.year, iso.week), day
        assert m.start <= day <= m.end
        day += dt.timedelta(days=1)


def test_53_week_years() -> None:
    # docs/methods.md §1.1 [LIB]: 53-week years 1990-2040.
    mmwr = [y for y in range(1990, 2041) if weeks_in_year(y, MMWR) == 53]
    iso = [y for y in range(1990, 2041) if weeks_in_year(y, ISO) == 53]
    assert mmwr == [1992, 1997, 2003, 2008, 2014, 2020, 2025, 2031, 2036]
    assert iso == [1992, 1998, 2004, 2009, 2015, 2020, 2026, 2032, 2037]


def test_arithmetic_across_year_ends() -> None:
    assert str(EpiWeek(2025, 53, MMWR) + 1) == "2026-W01"
    assert str(EpiWeek(2026, 1, MMWR) - 1) == "2025-W53"
    assert str(EpiWeek(2026, 53, ISO) + 1) == "2027-W01"
    assert EpiWeek(2027, 1, ISO).weeks_since(EpiWeek(2026, 52, ISO)) == 2
    with pytest.raises(ValueError, match="week 53 does not exist"):
        EpiWeek(2026, 53, MMWR)


def test_week_dates() -> None:
    # MMWR 2020-W53 = 2020-12-27..2021-01-02 (docs/methods.md §1.2)
    w = EpiWeek(2020, 53, MMWR)
    assert (w.start, w.end) == (dt.date(2020, 12, 27), dt.date(2021, 1, 2))
    assert EpiWeek(2026, 47, MMWR).start == dt.date(2026, 11, 22)


@pytest.mark.parametrize(
    ("label", "season", "index"),
    # docs/methods.md §1.3 check values [LIB, epiweeks]
    [
        ("2014-W53", "2014-15", 14),
        ("2015-W01", "2014-15", 15),
        ("2015-W39", "2014-15", 53),
        ("2015-W40", "2015-16", 1),
        ("2019-W52", "2019-20", 13),
        ("2020-W20", "2019-20", 33),
        ("2020-W53", "2020-21", 14),
    ],
)
def test_season_labels(label: str, season: str, index: int) -> None:
    assert season_of(EpiWeek.parse(label, MMWR)) == (season, index)


@pytest.mark.parametrize("bad", ["2026W", "W47", "2026-47", "", "2026-W00"])
def test_parse_rejects(bad: str) -> None:
    with pytest.raises(ValueError):
        EpiWeek.parse(bad)
