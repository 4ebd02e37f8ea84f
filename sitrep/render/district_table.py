"""The district table as laid out in the report: shown columns, sort order, key.

Takes the district rows of :mod:`sitrep.render.context` (display strings)
and decides, for one set of rows (all districts in the HTML report, the top
districts in the PDF):

- which columns to show: a column whose cells are all empty or a dash is left
  out (the district name, id and ILI% always stay);
- the order of the rows: district ids in natural order (``D2`` before
  ``D10``), or the order given (the PDF lists the highest ILI% first);
- each cell's position in its column's natural order (``order``), which the
  HTML report's sort script uses, so that terciles sort low, middle, high and
  ids naturally instead of alphabetically, and numbers by value;
- the key printed under the table (:func:`sitrep.render.wording.tables.table_key`).
"""

from __future__ import annotations

import dataclasses
import math
import re
from collections.abc import Callable, Sequence
from typing import Any, Literal, Protocol

from sitrep.render.wording import tables as words
from sitrep.render.wording.formats import MINUS

__all__ = [
    "Cell",
    "Column",
    "DistrictTable",
    "TableRow",
    "district_table",
    "natural_key",
]

EMPTY = frozenset({"", "—", "-"})
"""Cell texts that count as empty when deciding whether a column is shown."""

ALWAYS = ("name", "district_id", "ili_pct")
NUMERIC = frozenset({"sites", "ili_visits", "total_visits", "ili_pct", "ci", "change"})


class _Row(Protocol):
    """What the table reads of a row besides the columns' display strings (a DistrictRow)."""

    @property
    def district_id(self) -> str: ...

    @property
    def name(self) -> str: ...

    @property
    def sort_pct(self) -> float: ...

    @property
    def suppressed(self) -> bool: ...


@dataclasses.dataclass(frozen=True)
class Column:
    """One shown column."""

    key: str
    heading: str
    numeric: bool


@dataclasses.dataclass(frozen=True)
class Cell:
    """One cell: its text and its position (0 = first) in its column's natural order."""

    text: str
    order: int
    numeric: bool = False


@dataclasses.dataclass(frozen=True)
class TableRow:
    """One district: the name cell (a row heading) and the other shown cells."""

    name: Cell
    cells: tuple[Cell, ...]
    muted: bool
    """No value shown (suppressed or not reported): printed in grey italics."""


@dataclasses.dataclass(frozen=True)
class DistrictTable:
    """Columns (the first is the district name), rows and the key under the table."""

    columns: tuple[Column, ...]
    rows: tuple[TableRow, ...]
    key: tuple[str, ...]


def natural_key(text: str) -> tuple[tuple[int, int, str], ...]:
    """Sort key that orders runs of digits by value: 'D2' < 'D10', '007' < '12'.

    >>> sorted(["D10", "D2", "d1"], key=natural_key)
    ['d1', 'D2', 'D10']
    """
    parts = re.split(r"(\d+)", text)
    return tuple((1, int(p), p) if p.isdigit() else (0, 0, p.casefold()) for p in parts if p != "")


_NUMBER = re.compile(r"[+\-\u2212±]?\d[\d,]*(?:\.\d+)?")


def _number(text: str) -> float:
    """The number a display string stands for, NaN if none.

    '+1.5 pp' -> 1.5, '−0.3 pp' -> -0.3, '1,338' -> 1338, an interval
    '2.1–2.6%' -> its lower bound 2.1, 'from 0 to 2.1%' -> 2.1 (the change
    from zero is the new value).
    """
    found = _NUMBER.findall(text)
    if not found:
        return math.nan
    pick = found[-1] if text.startswith("from ") else found[0]
    return float(pick.replace(",", "").replace(MINUS, "-").replace("±", ""))


def _class_rank(order: Sequence[str]) -> Callable[[str], tuple[int, str]]:
    position = {word: i for i, word in enumerate(order)}

    def rank(text: str) -> tuple[int, str]:
        return (position.get(text, len(position) + (1 if text in EMPTY else 0)), text.casefold())

    return rank


def _sort_key(key: str) -> Callable[[Any], Any]:
    """The natural order of column ``key`` over the row objects (missing values last)."""
    if key == "name":
        return lambda r: (r.name.casefold(), natural_key(r.district_id))
    if key == "district_id":
        return lambda r: natural_key(r.district_id)
    if key == "ili_pct":
        return lambda r: (math.isnan(r.sort_pct), r.sort_pct if not math.isnan(r.sort_pct) else 0.0)
    if key in words.CLASS_ORDERS:
        rank = _class_rank(words.CLASS_ORDERS[key])
        return lambda r: rank(str(getattr(r, key)))
    if key in NUMERIC:

        def number(r: Any) -> tuple[bool, float]:
            x = _number(str(getattr(r, key)))
            return (math.isnan(x), 0.0 if math.isnan(x) else x)

        return number
    if key == "flags":
        return lambda r: (str(r.flags) in EMPTY, -len(str(r.flags).split(",")), str(r.flags))
    return lambda r: (str(getattr(r, key)) in EMPTY, str(getattr(r, key)).casefold())


def district_table(
    rows: Sequence[_Row],
    *,
    confidence_label: str,
    order: Literal["id", "given"] = "id",
    min_visits: int | None = None,
) -> DistrictTable:
    """Lay out ``rows`` (objects with the attributes named in :data:`~sitrep.render.wording.tables.HEADINGS`).

    Parameters
    ----------
    rows : sequence of DistrictRow
        The districts to show.
    confidence_label : str
        The interval's coverage for the CI heading, e.g. '95%'.
    order : {'id', 'given'}
        Rows in natural district-id order, or as given.
    min_visits : int, optional
        The display minimum, named in the key when a value is suppressed.
    """
    keys = [
        k
        for k in words.HEADINGS
        if k in ALWAYS or any(str(getattr(r, k)) not in EMPTY for r in rows)
    ]
    listed = list(rows) if order == "given" else sorted(rows, key=_sort_key("district_id"))
    positions: dict[str, dict[int, int]] = {}
    for k in keys:
        column_key = _sort_key(k)
        ranked = sorted(range(len(listed)), key=lambda i: (column_key(listed[i]), i))  # noqa: B023 - used at once
        positions[k] = {i: p for p, i in enumerate(ranked)}
    columns = tuple(
        Column(k, words.HEADINGS[k].format(confidence=confidence_label), k in NUMERIC) for k in keys
    )
    out = []
    for i, r in enumerate(listed):
        cells = [Cell(str(getattr(r, k)), positions[k][i], k in NUMERIC) for k in keys]
        out.append(TableRow(name=cells[0], cells=tuple(cells[1:]), muted=bool(r.suppressed)))
    any_suppressed = any(
        r.suppressed and str(getattr(r, "ili_pct", "")) == "suppressed" for r in listed
    )
    key = words.table_key(keys, min_visits=min_visits if any_suppressed else None)
    return DistrictTable(columns=columns, rows=tuple(out), key=key)
