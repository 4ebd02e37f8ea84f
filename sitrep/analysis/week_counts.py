"""One week's counts per boundary district, as aligned arrays (pure: no I/O).

:func:`aligned` takes a week's rows of a count table and lines them up with
the boundary ids (a district without a row gets NaN); :func:`combine` takes
one week's counts from a first source where it has them and from a second
where not (this week's revised rows, then last week's table as published).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd

from sitrep.analysis.disclosure import Cell
from sitrep.analysis.proportions import BoolArray, FloatArray
from sitrep.errors import AnalysisError
from sitrep.weeks import EpiWeek

__all__ = ["Counts", "aligned", "combine", "nan_sum", "week_rows"]


@dataclasses.dataclass(frozen=True, eq=False)
class Counts:
    """One week's counts aligned with the boundary ids (NaN = no row)."""

    sites: FloatArray
    ili: FloatArray
    visits: FloatArray
    names: tuple[str, ...]

    @property
    def has_data(self) -> BoolArray:
        """True where the district has a row (visits present) that week."""
        return ~np.isnan(self.visits)

    def cells(self, ids: tuple[str, ...]) -> list[Cell]:
        """The districts with both counts, as disclosure cells."""
        ok = self.has_data & ~np.isnan(self.ili)
        return [
            Cell(i, int(x), int(n))
            for i, x, n, use in zip(ids, self.ili, self.visits, ok, strict=True)
            if use
        ]


def week_rows(frame: pd.DataFrame, week: EpiWeek) -> pd.DataFrame:
    """The rows of ``frame`` (a count table's frame) in ``week``."""
    mask = np.fromiter((w == week for w in frame["week"]), dtype=bool, count=len(frame))
    return frame.loc[mask]


def aligned(rows: pd.DataFrame, ids: tuple[str, ...]) -> Counts:
    """Counts of ``rows`` reindexed on ``ids`` (missing district -> NaN)."""
    by_id = rows.set_index(rows["district_id"].astype(str))
    if by_id.index.has_duplicates:
        dupes = sorted(set(by_id.index[by_id.index.duplicated()]))
        raise AnalysisError(
            f"district(s) {dupes} appear more than once in one week; validation should have "
            "blocked this table"
        )
    idx = pd.Index(ids)

    def col(name: str) -> FloatArray:
        if name not in by_id.columns:
            return np.full(len(ids), np.nan)
        return np.asarray(
            by_id[name].reindex(idx).to_numpy(dtype=np.float64, na_value=np.nan), dtype=np.float64
        )

    names = (
        by_id["district_name"].reindex(idx).fillna("").astype(str)
        if "district_name" in by_id.columns
        else pd.Series([""] * len(ids), index=idx)
    )
    return Counts(col("reporting_sites"), col("ili_visits"), col("total_visits"), tuple(names))


def combine(primary: Counts, fallback: Counts) -> tuple[Counts, int]:
    """Per district: ``primary`` where it has counts, else ``fallback``; and how many fell back."""
    use = ~primary.has_data & fallback.has_data

    def pick(a: FloatArray, b: FloatArray) -> FloatArray:
        return np.asarray(np.where(use, b, a), dtype=np.float64)

    names = tuple(b if u else a for a, b, u in zip(primary.names, fallback.names, use, strict=True))
    return Counts(
        pick(primary.sites, fallback.sites),
        pick(primary.ili, fallback.ili),
        pick(primary.visits, fallback.visits),
        names,
    ), int(use.sum())


def nan_sum(a: FloatArray) -> float:
    """Sum of the values present; NaN when none is."""
    present = ~np.isnan(a)
    return float(a[present].sum()) if present.any() else float("nan")
