"""Epi-week cells of a count table: a label, a year and week number, or a start/end date.

:func:`type_weeks` parses each distinct week text once with the parser the
column map declares and returns, per row, a code into the distinct
:class:`~sitrep.weeks.EpiWeek` values; every bad cell is an error finding.
"""

from __future__ import annotations

import datetime as dt
import re
from collections.abc import Callable, Sequence
from typing import NamedTuple

import numpy as np
import pandas as pd

from sitrep.ingest.findings import FindingCollector
from sitrep.ingest.raw_table import Col, Raw
from sitrep.weeks import EpiWeek, WeekSystem

__all__ = ["BadWeek", "WeekSpec", "type_weeks"]

_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")
_DAY_NAMES = ["Monday", "Tuesday", "Wednesday", "Thursday", "Friday", "Saturday", "Sunday"]


class BadWeek(NamedTuple):
    """A week cell that cannot be read: the rule it breaks and the message."""

    rule: str
    message: str


class WeekSpec(NamedTuple):
    """How the column map gives the week: ``label``, ``year-week``, ``start`` or ``end``,
    and the names of its columns."""

    kind: str
    columns: list[str]


Parser = Callable[[str], EpiWeek | BadWeek]


def _label_parser(system: WeekSystem) -> Parser:
    def parse(t: str) -> EpiWeek | BadWeek:
        try:
            return EpiWeek.parse(t.strip(), system)
        except ValueError as exc:
            return BadWeek("week-invalid", str(exc))

    return parse


def _year_week_parser(system: WeekSystem) -> Parser:
    def parse(t: str) -> EpiWeek | BadWeek:
        y, w = t.split("|")
        if not (re.fullmatch(r"\d{4}", y) and re.fullmatch(r"\d{1,2}", w)):
            return BadWeek(
                "week-invalid",
                f"expected a 4-digit year and a week number, got year {y!r} and week {w!r}",
            )
        try:
            return EpiWeek(int(y), int(w), system)
        except ValueError as exc:
            return BadWeek("week-invalid", str(exc))

    return parse


def _read_date(t: str, date_format: str | None) -> dt.date | BadWeek:
    """An ISO date, else one in ``input.date_format`` when declared."""
    if _DATE.match(t):
        try:
            return dt.date.fromisoformat(t)
        except ValueError as exc:
            return BadWeek("week-invalid", f"expected a valid date, got {t!r} ({exc})")
    if date_format:
        try:
            return dt.datetime.strptime(t, date_format).date()
        except ValueError:
            return BadWeek(
                "week-invalid",
                f"expected a date written as input.date_format = {date_format!r} (or ISO "
                f"YYYY-MM-DD), got {t!r}; check the declared format against the file",
            )
    return BadWeek(
        "week-invalid",
        f"expected an ISO date YYYY-MM-DD, got {t!r}; if the file writes dates another "
        "way, declare it with input.date_format (e.g. '%m/%d/%Y' for 10/07/2023)",
    )


def _date_parser(kind: str, system: WeekSystem, date_format: str | None) -> Parser:
    first_day = system.first_weekday
    last_day = (first_day + 6) % 7
    want = first_day if kind == "start" else last_day

    def parse(t: str) -> EpiWeek | BadWeek:
        t = t.strip()
        day = _read_date(t, date_format)
        if isinstance(day, BadWeek):
            return day
        if day.weekday() != want:
            return BadWeek(
                "week-date-weekday",
                f"expected a week {'start' if kind == 'start' else 'end'} date on a "
                f"{_DAY_NAMES[want]} ({system.value.upper()} weeks run {_DAY_NAMES[first_day]} "
                f"to {_DAY_NAMES[last_day]}), got {t} which is a {_DAY_NAMES[day.weekday()]}; "
                "check input.columns and weeks.system",
            )
        return EpiWeek.from_date(day, system)

    return parse


def _week_texts(raw: Raw, kind: str, pos_week: Sequence[int | None]) -> tuple[Col, int]:
    """The week cells as one text column (year and week joined by ``|``) and the position
    of the column that findings name."""
    if kind != "year-week":
        pos = pos_week[0]
        assert pos is not None
        return raw.columns[pos], pos
    py, pw = pos_week
    assert py is not None and pw is not None
    cy, cw = raw.columns[py], raw.columns[pw]
    pair_codes, pairs = pd.factorize(cy.codes * (len(cw.uniques) + 1) + cw.codes)
    texts = Col(
        pair_codes.astype(np.int64),
        np.array(
            [
                f"{str(cy.uniques[p // (len(cw.uniques) + 1)]).strip()}|"
                f"{str(cw.uniques[p % (len(cw.uniques) + 1)]).strip()}"
                for p in pairs
            ],
            dtype=object,
        ),
    )
    return texts, pw


def _report_bad(
    raw: Raw,
    texts: Col,
    column: str,
    parsed: list[EpiWeek | BadWeek],
    bad: np.ndarray,
    system: WeekSystem,
    id_at: Callable[[int], str | None],
    out: FindingCollector,
) -> None:
    """One error per cell whose week cannot be read."""
    for u in np.flatnonzero(bad):
        problem = parsed[u]
        assert isinstance(problem, BadWeek)
        rule, message = problem
        if not str(texts.uniques[u]).strip().strip("|"):
            message = "expected a week, got an empty cell; fill in the week or delete the row"
        elif rule == "week-invalid":
            message = (
                f"{message} ({system.value.upper()} system, weeks.system); "
                "give the week as declared in the column map"
            )
        for i in np.flatnonzero(texts.codes == u).tolist():
            out.error(
                rule,
                message,
                line=int(raw.lines[i]),
                column=column,
                district_id=id_at(i),
                value=texts.text(i).replace("|", " "),
            )


def type_weeks(
    raw: Raw,
    spec: WeekSpec,
    pos_week: Sequence[int | None],
    names: list[str],
    system: WeekSystem,
    id_at: Callable[[int], str | None],
    out: FindingCollector,
    date_format: str | None = None,
) -> tuple[np.ndarray | None, list[EpiWeek]]:
    """Parse the week cells; return codes into a list of distinct EpiWeeks (None: errors)."""
    texts, pos = _week_texts(raw, spec.kind, pos_week)
    if spec.kind == "label":
        parser = _label_parser(system)
    elif spec.kind == "year-week":
        parser = _year_week_parser(system)
    else:
        parser = _date_parser(spec.kind, system, date_format)
    parsed = [parser(str(u)) for u in texts.uniques]  # each distinct text once
    used = np.bincount(texts.codes, minlength=len(parsed)) > 0  # dropped blank rows
    bad = np.array([not isinstance(p, EpiWeek) for p in parsed], dtype=bool) & used
    if bad.any():
        _report_bad(raw, texts, names[pos], parsed, bad, system, id_at, out)
        return None, []
    # merge equal weeks given in different spellings (e.g. '2026-W7' and '2026-W07')
    distinct: dict[EpiWeek, int] = {}
    remap = np.array(
        [
            distinct.setdefault(p, len(distinct)) if ok and isinstance(p, EpiWeek) else -1
            for p, ok in zip(parsed, used, strict=True)
        ],
        dtype=np.int64,
    )
    return remap[texts.codes], list(distinct)
