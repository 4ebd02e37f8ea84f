"""The e-mail subject line and the short texts of the e-mail body."""

from __future__ import annotations

import datetime as dt

__all__ = ["ATTACHED", "email_subject_text"]

_MONTHS = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec")
"""English month abbreviations (fixed, so the subject does not depend on the locale)."""

ATTACHED = "The full report is attached as a PDF."


def _day(day: dt.date, *, year: bool) -> str:
    text = f"{day.day} {_MONTHS[day.month - 1]}"
    return f"{text} {day.year}" if year else text


def email_subject_text(
    *,
    jurisdiction: str,
    week_number: int,
    week_year: int,
    start: dt.date,
    end: dt.date,
    version: int = 1,
    supersedes: str | None = None,
) -> str:
    """``'<jurisdiction>: ILI situation report, week <w> <year> (<first day> to <last day>)'``.

    The first day carries its own year only when it differs from the last
    day's; a reissue adds ``', version <k>, supersedes <v>'``.

    >>> email_subject_text(jurisdiction="X", week_number=52, week_year=2026,
    ...                    start=dt.date(2026, 12, 27), end=dt.date(2027, 1, 2))
    'X: ILI situation report, week 52 2026 (27 Dec 2026 to 2 Jan 2027)'
    """
    span = f"{_day(start, year=start.year != end.year)} to {_day(end, year=True)}"
    subject = f"{jurisdiction}: ILI situation report, week {week_number} {week_year} ({span})"
    if supersedes:
        subject += f", version {version}, supersedes {supersedes}"
    return subject
