"""Value rules of one count table: duplicates, impossible counts, weeks, supplied rates.

Each rule is a pure function of :class:`~sitrep.ingest.facts.TableFacts`
that yields a :class:`~sitrep.ingest.findings.Hit` per finding; its rule id
and severity are in :data:`sitrep.ingest.rules.REGISTRY`. Methods follow
docs/methods.md section 9.4 (common practice).
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
import pandas as pd

from sitrep.ingest.facts import TableFacts, fmt
from sitrep.ingest.findings import Hit, line_list
from sitrep.weeks import season_of

__all__ = [
    "count_ili_exceeds_total",
    "count_negative",
    "count_not_integer",
    "count_zero_total",
    "district_no_visits",
    "rate_mismatch",
    "row_duplicate",
    "week_future",
    "week_gap",
    "week_mixed",
]


def row_duplicate(t: TableFacts) -> Iterator[Hit]:
    """More than one row for a district and week: one finding per extra row, listing every
    line of that key."""
    a = t.a
    key = a.id_codes.astype(np.int64) * max(len(a.weeks), 1) + a.week_codes
    dup = pd.Series(key).duplicated(keep=False).to_numpy()
    if not dup.any():
        return
    rows = np.flatnonzero(dup)
    groups: dict[int, list[int]] = {}
    for i in rows[np.lexsort((a.lines[rows], key[rows]))]:
        groups.setdefault(int(key[i]), []).append(int(i))
    for members in groups.values():
        all_lines = ", ".join(str(a.lines[i]) for i in members)
        first = members[0]
        for i in members[1:]:
            yield Hit(
                f"expected one row for district {a.ids[i]} in {a.weeks[a.week_codes[i]]}, "
                f"got rows on lines {all_lines}; keep one row (counts would be doubled)",
                line=a.line(i),
                column=a.columns.district_id,
                district_id=str(a.ids[i]),
                value=f"first on line {a.lines[first]}",
            )


def _count_columns(t: TableFacts) -> tuple[tuple[np.ndarray, str], ...]:
    a = t.a
    return (
        (a.ili, a.columns.ili_visits),
        (a.total, a.columns.total_visits),
        (a.sites, a.columns.reporting_sites),
    )


def count_negative(t: TableFacts) -> Iterator[Hit]:
    """A cell of ``ili_visits``, ``total_visits`` or ``reporting_sites`` below zero."""
    for values, column in _count_columns(t):
        for i in np.flatnonzero(np.isfinite(values) & (values < 0)):
            yield Hit(
                f"expected a count of 0 or more, got {fmt(values[i])}; correct the count",
                line=t.a.line(i),
                column=column,
                district_id=str(t.a.ids[i]),
                value=fmt(values[i]),
            )


def count_not_integer(t: TableFacts) -> Iterator[Hit]:
    """A fractional value of ``ili_visits``, ``total_visits`` or ``reporting_sites`` in a
    table typed elsewhere (the reader reports fractional cells itself)."""
    for values, column in _count_columns(t):
        for i in np.flatnonzero(np.isfinite(values) & (values != np.round(values))):
            yield Hit(
                f"expected a whole number, got {fmt(values[i])}; counts cannot be fractional",
                line=t.a.line(i),
                column=column,
                district_id=str(t.a.ids[i]),
                value=fmt(values[i]),
            )


def count_ili_exceeds_total(t: TableFacts) -> Iterator[Hit]:
    """``ili_visits > total_visits``."""
    a = t.a
    for i in np.flatnonzero(a.ili > a.total):
        yield Hit(
            f"expected ILI visits ({fmt(a.ili[i])}) to be at most total visits "
            f"({fmt(a.total[i])}); ILI visits are part of all visits. Check whether the two "
            "columns were swapped or a count mistyped",
            line=a.line(i),
            column=a.columns.ili_visits,
            district_id=str(a.ids[i]),
            value=f"{fmt(a.ili[i])} > {fmt(a.total[i])}",
        )


def count_zero_total(t: TableFacts) -> Iterator[Hit]:
    """``total_visits == 0`` and ``ili_visits > 0``."""
    a = t.a
    for i in np.flatnonzero((a.total == 0) & (a.ili > 0)):
        yield Hit(
            f"expected total visits above 0 when ILI visits are {fmt(a.ili[i])}, got 0; "
            "enter the total visits (the ILI% would be undefined)",
            line=a.line(i),
            column=a.columns.total_visits,
            district_id=str(a.ids[i]),
            value="0",
        )


def week_mixed(t: TableFacts) -> Iterator[Hit]:
    """Only when the file is declared (or inferred) to hold one week: one finding per week
    other than the latest, at its first line."""
    a = t.a
    if not t.weekly_file or len(a.weeks) <= 1:
        return
    counts = np.bincount(a.week_codes, minlength=len(a.weeks))
    listing = ", ".join(f"{w} ({counts[k]} rows)" for k, w in enumerate(a.weeks))
    declared = (
        "because last week's file (input.prior_table) held one week, this file is taken as "
        "one week too; set input.weekly_file = false if it is a season-to-date extract"
        if t.weekly_inferred
        else "input.weekly_file = true declares one week; send one file per week or set "
        "input.weekly_file = false for a season-to-date extract"
    )
    for k, w in enumerate(a.weeks[:-1]):
        i = t.first_of_week[k]
        week_lines = sorted(int(x) for x in a.lines[a.week_codes == k])
        yield Hit(
            f"expected one week in this file, got {listing}; the rows of {w} are on "
            f"line{'s' if len(week_lines) != 1 else ''} {line_list(week_lines)} ({declared})",
            line=a.line(i),
            column=a.columns.week,
            district_id=str(a.ids[i]),
            value=str(w),
        )


def week_future(t: TableFacts) -> Iterator[Hit]:
    """Only when today's date is given: a week whose first day is after it."""
    a, today = t.a, t.today
    if today is None:
        return
    for k, w in enumerate(a.weeks):
        if w.start > today:
            i = t.first_of_week[k]
            yield Hit(
                f"expected weeks that have started by today ({today.isoformat()}), got {w} "
                f"which starts on {w.start.isoformat()}; check the week column and "
                "weeks.system",
                line=a.line(i),
                column=a.columns.week,
                district_id=str(a.ids[i]),
                value=str(w),
            )


def week_gap(t: TableFacts) -> Iterator[Hit]:
    """Not for a one-week file: inside one season (``weeks.season_start_week`` to the week before
    it next year, :func:`sitrep.weeks.season_of`), weeks missing between the first and last
    week present. Gaps between seasons are normal."""
    a = t.a
    if t.weekly_file:
        return
    by_season: dict[str, list[int]] = {}
    for k, w in enumerate(a.weeks):
        by_season.setdefault(season_of(w, t.season_start_week)[0], []).append(k)
    for season, ks in by_season.items():
        for prev, nxt in zip(ks, ks[1:], strict=False):
            missing = a.weeks[nxt].weeks_since(a.weeks[prev]) - 1
            if missing <= 0:
                continue
            gap = (
                str(a.weeks[prev] + 1)
                if missing == 1
                else f"{a.weeks[prev] + 1} to {a.weeks[nxt] - 1}"
            )
            yield Hit(
                f"expected consecutive weeks within season {season}, got no rows for "
                f"{gap} ({missing} week{'s' if missing > 1 else ''}) between "
                f"{a.weeks[prev]} and {a.weeks[nxt]}; check that the extract is complete",
                line=a.line(t.first_of_week[nxt]),
                column=a.columns.week,
                value=str(a.weeks[nxt]),
            )


def rate_mismatch(t: TableFacts) -> Iterator[Hit]:
    """Where a rate column was supplied and ``total > 0``: ``|rate - 100 * ili / total| >
    validation.rate_tolerance_pp`` (the rate is in percent, converted by the reader)."""
    a, tolerance = t.a, t.settings.rate_tolerance_pp
    if a.rate is None:
        return
    with np.errstate(divide="ignore", invalid="ignore"):
        computed = np.where(a.total > 0, 100.0 * a.ili / np.where(a.total > 0, a.total, 1), np.nan)
    diff = np.abs(a.rate - computed)
    for i in np.flatnonzero(np.isfinite(diff) & (diff > tolerance + 1e-9)):
        yield Hit(
            f"expected the supplied rate to match 100 * ILI / total = {computed[i]:.2f}% "
            f"within {tolerance:g} pp, got {a.rate[i]:.4g}% (read in "
            "percent); sitrep uses the counts. Check the rate column and its declared scale "
            "(columns.rate_scale)",
            line=a.line(i),
            column=a.columns.rate_percent,
            district_id=str(a.ids[i]),
            value=f"{a.rate[i]:g}",
        )


def district_no_visits(t: TableFacts) -> Iterator[Hit]:
    """A district with 0 total and 0 ILI visits in the latest week; the message says whether
    its reporting sites were 0 (a closed site), above 0, or not supplied."""
    a = t.a
    last = len(a.weeks) - 1
    for i in np.flatnonzero(t.in_latest & (a.total == 0) & (a.ili == 0)).tolist():
        sites = a.sites[i]
        if np.isfinite(sites) and sites == 0:
            why = "and 0 reporting sites: its sites were probably closed or did not report"
        elif np.isfinite(sites):
            why = f"although {fmt(sites)} site{'s' if sites != 1 else ''} reported"
        else:
            why = "(no reporting-sites column to tell a closed site from a quiet week)"
        yield Hit(
            f"district {a.ids[i]} has 0 visits in {a.weeks[last]} {why}; it is left out of the "
            "statistics (no ILI% can be computed), not shown as 0% ILI. Ask the district whether "
            "data are missing",
            line=a.line(i),
            column=a.columns.total_visits,
            district_id=str(a.ids[i]),
            value="0",
        )
