"""The columns of the week's district table, and the blanking of withheld values (pure: no I/O).

The table (:data:`sitrep.analysis.week.TABLE_COLUMNS`) is put together from
the column groups here; :func:`protect` then blanks every value that would
give a withheld count away (docs/methods.md §6.2).
"""

from __future__ import annotations

import pandas as pd

from sitrep.analysis.change import ChangeTable
from sitrep.analysis.clusters import ClusterResult
from sitrep.analysis.proportions import BoolArray, FloatArray, ili_percent
from sitrep.analysis.ranks import NO_DATA
from sitrep.analysis.transitions import ClusterTransitions
from sitrep.analysis.week_counts import Counts
from sitrep.model import ChangeClass
from sitrep.weeks import EpiWeek

__all__ = ["change_columns", "cluster_columns", "count_columns", "prior_columns", "protect"]


_WITHHELD_NOW = (
    "ili_visits",
    "total_visits",
    "ili_percent",
    "ci_low",
    "ci_high",
    "eb_percent",
    "local_i",
    "p_value",
    "q_value",
)
"""Columns blanked for a district withheld this week."""
_WITHHELD_BEFORE = ("prior_ili_percent", "prior_ili_percent_published", "prior_total_visits")
"""Columns blanked for a district withheld last week."""
_WITHHELD_EITHER = (
    "change_pp",
    "change_low_pp",
    "change_high_pp",
    "change_relative",
    "change_p",
)
"""Columns blanked when either week is withheld (a change gives one week from the other)."""


def count_columns(
    ids: tuple[str, ...],
    names: tuple[str, ...],
    week: EpiWeek,
    cur: Counts,
    interval: tuple[FloatArray, FloatArray, FloatArray],
) -> dict[str, object]:
    """This week's columns of the district table: ids, counts, ILI% and its interval."""
    pct, low, high = interval
    return {
        "district_id": list(ids),
        "district_name": list(names),
        "week": [week.label] * len(ids),
        "reporting_sites": cur.sites,
        "ili_visits": pd.array(cur.ili, dtype="Int64"),
        "total_visits": pd.array(cur.visits, dtype="Int64"),
        "ili_percent": pct,
        "ci_low": 100.0 * low,
        "ci_high": 100.0 * high,
    }


def prior_columns(
    now: BoolArray, before_withheld: BoolArray, before: Counts, published: Counts
) -> dict[str, object]:
    """The withheld flags and last week's columns of the district table."""
    return {
        "suppressed": now,
        "prior_suppressed": before_withheld,
        "prior_ili_percent": ili_percent(before.ili, before.visits),
        "prior_ili_percent_published": ili_percent(published.ili, published.visits),
        "prior_total_visits": pd.array(before.visits, dtype="Int64"),
    }


def change_columns(change: ChangeTable) -> dict[str, object]:
    """The ``change_*`` columns of the district table (the class as its string value)."""
    return {
        "change_pp": change.diff_pp,
        "change_low_pp": change.low_pp,
        "change_high_pp": change.high_pp,
        "change_relative": change.relative,
        "change_from_zero": change.from_zero,
        "change_p": change.p_value,
        "change_class": [c.value for c in change.classes],
    }


def cluster_columns(
    clusters: ClusterResult,
    prior_clusters: ClusterResult | None,
    transitions: ClusterTransitions,
    n: int,
) -> dict[str, object]:
    """The local Moran's I columns of the district table (labels as their string values)."""
    return {
        "local_i": clusters.local_i,
        "p_value": clusters.p_values,
        "q_value": clusters.q_values,
        "cluster_label": [lab.value for lab in clusters.labels],
        "prior_cluster_label": (
            [lab.value for lab in prior_clusters.labels] if prior_clusters is not None else [""] * n
        ),
        "transition": [t.value for t in transitions.districts],
    }


def protect(table: pd.DataFrame, now: BoolArray, before: BoolArray) -> pd.DataFrame:
    """Blank every value that would give a withheld count away (docs/methods.md §6.2)."""
    out = table.copy()
    either = now | before
    if now.any():
        for column in _WITHHELD_NOW:
            out[column] = out[column].mask(now)
        out.loc[now, "tercile"] = NO_DATA
    if before.any():
        for column in _WITHHELD_BEFORE:
            out[column] = out[column].mask(before)
    if either.any():
        for column in _WITHHELD_EITHER:
            out[column] = out[column].mask(either)
        out.loc[either, "change_from_zero"] = False
        out.loc[either, "change_class"] = ChangeClass.NOT_ASSESSABLE.value
    return out
