"""What the value rules look at: numpy views of the count tables and the run's options.

:func:`arrays` turns a :class:`~sitrep.model.CountTable` into
:class:`TableArrays` (integer codes for districts and weeks, so rules group
fast). A rule of one table receives :class:`TableFacts`, a rule comparing
two tables :class:`PairFacts`; both are built once per validation call and
never changed, so every rule is a pure function of them.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import functools

import numpy as np
import pandas as pd

from sitrep.config import ValidationSettings
from sitrep.model import CountTable, Districts, SourceColumns
from sitrep.weeks import EpiWeek, WeekSystem

__all__ = [
    "EPOCH",
    "PairFacts",
    "TableArrays",
    "TableFacts",
    "arrays",
    "first_index",
    "fmt",
    "keys",
    "lookup",
    "pct",
]

EPOCH = dt.date(1970, 1, 4)  # a Sunday; week ordinals are only compared within one system


@dataclasses.dataclass(frozen=True, eq=False)
class TableArrays:
    """Numpy views of a CountTable, with integer week codes (fast grouping)."""

    file: str
    ids: np.ndarray  # object str
    id_codes: np.ndarray
    id_uniques: list[str]
    week_codes: np.ndarray  # index into weeks (sorted)
    weeks: list[EpiWeek]
    ordinal: np.ndarray  # per row: week start in weeks since EPOCH
    ili: np.ndarray  # float64 (NaN never: counts are required)
    total: np.ndarray
    sites: np.ndarray
    lines: np.ndarray  # int64; 0 when unknown
    names: np.ndarray
    rate: np.ndarray | None
    columns: SourceColumns
    system: WeekSystem
    numeric_id_lines: tuple[int, ...]

    def line(self, i: int | np.integer) -> int | None:
        value = int(self.lines[i])
        return value if value > 0 else None


def _week_codes(week: pd.Series) -> tuple[np.ndarray, list[EpiWeek]]:
    """Per row, the index of its week among the table's distinct weeks sorted oldest first."""
    if isinstance(week.dtype, pd.CategoricalDtype):
        codes = week.cat.codes.to_numpy().astype(np.int64)
        cats = list(week.cat.categories)
    else:
        codes, uniq = pd.factorize(week)
        cats = list(uniq)
    order = sorted(range(len(cats)), key=cats.__getitem__)
    rank = np.empty(len(cats), dtype=np.int64)
    rank[order] = np.arange(len(cats))
    weeks = [cats[i] for i in order]
    return (rank[codes] if len(cats) else codes.astype(np.int64)), weeks


def _column(frame: pd.DataFrame, name: str, dtype: type, missing: object) -> np.ndarray:
    if name in frame:
        return frame[name].to_numpy(dtype=dtype)
    return np.full(len(frame), missing, dtype=dtype)


def arrays(table: CountTable) -> TableArrays:
    """The numpy views of ``table`` that the value rules read."""
    frame = table.frame
    week_codes, weeks = _week_codes(frame["week"])
    week_ord = np.array([(w.start - EPOCH).days // 7 for w in weeks], dtype=np.int64)
    ids = frame["district_id"].to_numpy(dtype=object)
    id_codes, id_uniques = pd.factorize(ids)
    return TableArrays(
        file=table.source.path.name,
        ids=ids,
        id_codes=id_codes,
        id_uniques=[str(u) for u in id_uniques],
        week_codes=week_codes,
        weeks=weeks,
        ordinal=week_ord[week_codes] if len(weeks) else np.zeros(0, np.int64),
        ili=frame["ili_visits"].to_numpy(dtype=np.float64),
        total=frame["total_visits"].to_numpy(dtype=np.float64),
        sites=_column(frame, "reporting_sites", np.float64, np.nan),
        lines=_column(frame, "line", np.int64, 0),
        names=_column(frame, "district_name", object, ""),
        rate=frame["rate_percent"].to_numpy(dtype=np.float64) if "rate_percent" in frame else None,
        columns=table.columns,
        system=table.system,
        numeric_id_lines=table.numeric_id_lines,
    )


@dataclasses.dataclass(frozen=True, eq=False)
class TableFacts:
    """One count table and what its rules need to know about the run.

    ``districts`` is ``None`` when the boundaries are not checked against;
    ``today`` is ``None`` when the future-week rule is skipped; ``prior`` is
    last week's table as received (the value-spike rule takes the weeks this
    table lacks from it). See :func:`sitrep.ingest.validate.validate_table`.
    """

    a: TableArrays
    districts: Districts | None
    settings: ValidationSettings
    weekly_file: bool = False
    weekly_inferred: bool = False
    today: dt.date | None = None
    season_start_week: int = 40
    latest_week_rules: bool = True
    prior: TableArrays | None = None

    @functools.cached_property
    def in_latest(self) -> np.ndarray:
        """Rows of the latest week."""
        return np.asarray(self.a.week_codes == len(self.a.weeks) - 1)

    @functools.cached_property
    def first_of_week(self) -> np.ndarray:
        """Per week code, the row with the smallest line."""
        return first_index(self.a.week_codes, len(self.a.weeks), self.a.lines)

    @functools.cached_property
    def boundary_ids(self) -> list[str]:
        return [] if self.districts is None else [str(x) for x in self.districts.ids]


@dataclasses.dataclass(frozen=True, eq=False)
class PairFacts:
    """This week's table and last week's table as it was received."""

    cur: TableArrays
    pri: TableArrays
    settings: ValidationSettings

    @property
    def step(self) -> int:
        """Weeks from last week's latest week to this week's latest week."""
        return self.cur.weeks[-1].weeks_since(self.pri.weeks[-1])

    @functools.cached_property
    def first_latest_line(self) -> int | None:
        """Line of the first row of this week's latest week."""
        first = first_index(self.cur.week_codes, len(self.cur.weeks), self.cur.lines)[-1]
        return self.cur.line(int(first))

    @functools.cached_property
    def row_keys(self) -> tuple[np.ndarray, np.ndarray]:
        """District-and-week keys of each row of this week's and last week's tables."""
        vocab: dict[str, int] = {}
        return keys(self.cur, vocab), keys(self.pri, vocab)


def fmt(x: float) -> str:
    """A count as written in messages: ``12`` for a whole number, else ``12.5``."""
    return str(int(x)) if np.isfinite(x) and float(x).is_integer() else f"{x:g}"


def pct(ili: float, total: float) -> float:
    """100 * ili / total, NaN when total is not positive."""
    return 100.0 * ili / total if total > 0 else float("nan")


def first_index(codes: np.ndarray, n: int, lines: np.ndarray) -> np.ndarray:
    """Row index of the smallest line per code."""
    order = np.lexsort((lines, codes))
    first = np.full(n, -1, dtype=np.int64)
    sorted_codes = codes[order]
    starts = np.flatnonzero(np.r_[True, sorted_codes[1:] != sorted_codes[:-1]])
    first[sorted_codes[starts]] = order[starts]
    return first


def keys(a: TableArrays, vocab: dict[str, int]) -> np.ndarray:
    """District-and-week key of each row; ``vocab`` numbers the ids across tables."""
    id_num = np.array([vocab.setdefault(u, len(vocab)) for u in a.id_uniques], dtype=np.int64)
    return np.asarray(id_num[a.id_codes] * 1_000_000 + a.ordinal)


def lookup(keys_from: np.ndarray, keys_to: np.ndarray) -> np.ndarray:
    """For each key in ``keys_to``, the first row of ``keys_from`` holding it, else -1."""
    rows = pd.Series(np.arange(len(keys_from)), index=keys_from)
    rows = rows[~rows.index.duplicated(keep="first")]
    pos = rows.index.get_indexer(keys_to)
    return np.asarray(np.where(pos >= 0, rows.to_numpy()[np.maximum(pos, 0)], -1))
