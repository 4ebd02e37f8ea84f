"""The jurisdiction-wide figures of a report week, pooled over its districts (pure: no I/O)."""

from __future__ import annotations

import dataclasses
from typing import TYPE_CHECKING

import numpy as np

from sitrep.analysis.change import week_over_week
from sitrep.analysis.proportions import ili_percent, proportion_interval
from sitrep.analysis.week_counts import Counts, nan_sum
from sitrep.model import ChangeClass

if TYPE_CHECKING:
    from sitrep.config import AnalysisSettings

__all__ = ["JurisdictionSummary", "summarise", "withhold_totals"]


@dataclasses.dataclass(frozen=True)
class JurisdictionSummary:
    """Jurisdiction-wide figures pooled over all districts with data.

    Percentages are ``100 * sum(ILI visits) / sum(all visits)`` (each visit
    counts once; not a mean of district percentages), with the interval of
    ``settings.interval`` at ``settings.confidence`` on the pooled counts.
    Suppressed districts count here: suppression hides unstable district
    percentages, not visits. NaN where a week has no visits at all.
    """

    ili_percent: float
    ci_low: float
    ci_high: float
    ili_visits: int
    total_visits: int
    reporting_sites: float
    """Sum of the supplied reporting-site counts; NaN if no district supplied one."""
    n_districts_reporting: int
    """Districts with at least one visit this week."""
    n_districts_total: int
    """Districts in the boundary file."""
    prior_ili_percent: float
    """Last week, revised (counts as known this week)."""
    prior_ci_low: float
    prior_ci_high: float
    prior_ili_percent_published: float
    """Last week as published in last week's table (NaN without it)."""
    prior_ili_visits: int
    prior_total_visits: int
    change_pp: float
    change_low_pp: float
    change_high_pp: float
    change_relative: float
    change_from_zero: bool
    change_p: float
    change_class: ChangeClass
    withheld: bool = False
    """This week's total is withheld (no choice of districts protected the small counts);
    its percentages and the change are NaN then and its counts must not be shown."""
    prior_withheld: bool = False
    """Last week's total is withheld likewise (last week's percentages and the change are NaN)."""


def withhold_totals(j: JurisdictionSummary, now: bool, before: bool) -> JurisdictionSummary:
    """Blank the jurisdiction figures of a week whose total is withheld (docs/methods.md §6.2)."""
    nan = float("nan")
    changes: dict[str, object] = {}
    if now:
        changes.update(ili_percent=nan, ci_low=nan, ci_high=nan, withheld=True)
    if before:
        changes.update(
            prior_ili_percent=nan,
            prior_ci_low=nan,
            prior_ci_high=nan,
            prior_ili_percent_published=nan,
            prior_withheld=True,
        )
    if now or before:
        changes.update(
            change_pp=nan,
            change_low_pp=nan,
            change_high_pp=nan,
            change_relative=nan,
            change_p=nan,
            change_from_zero=False,
            change_class=ChangeClass.NOT_ASSESSABLE,
        )
    return dataclasses.replace(j, **changes) if changes else j  # type: ignore[arg-type]


def summarise(
    cur: Counts, before: Counts, published: Counts, settings: AnalysisSettings
) -> JurisdictionSummary:
    """This week's and last week's pooled figures and the change between them."""

    def totals(c: Counts) -> tuple[int, int]:
        ok = c.has_data & ~np.isnan(c.ili)
        return int(c.ili[ok].sum()), int(c.visits[ok].sum())

    x1, n1 = totals(cur)
    x0, n0 = totals(before)
    xp, np_ = totals(published)

    def pct_ci(x: int, n: int) -> tuple[float, float, float]:
        p = ili_percent(np.array([x]), np.array([n]))[0]
        lo, hi = proportion_interval(
            np.array([x]), np.array([n]), confidence=settings.confidence, method=settings.interval
        )
        return float(p), float(100.0 * lo[0]), float(100.0 * hi[0])

    p1, l1, h1 = pct_ci(x1, n1)
    p0, l0, h0 = pct_ci(x0, n0)
    pp = float(ili_percent(np.array([xp]), np.array([np_]))[0])
    ch = week_over_week(
        np.array([x1]),
        np.array([n1]),
        np.array([x0]),
        np.array([n0]),
        method=settings.change_test,
        alpha=settings.change_alpha,
        min_change_pp=settings.min_change_pp,
        confidence=settings.confidence,
    )
    return JurisdictionSummary(
        ili_percent=p1,
        ci_low=l1,
        ci_high=h1,
        ili_visits=x1,
        total_visits=n1,
        reporting_sites=nan_sum(np.where(cur.has_data, cur.sites, np.nan)),
        n_districts_reporting=int((cur.has_data & (cur.visits > 0)).sum()),
        n_districts_total=len(cur.visits),
        prior_ili_percent=p0,
        prior_ci_low=l0,
        prior_ci_high=h0,
        prior_ili_percent_published=pp,
        prior_ili_visits=x0,
        prior_total_visits=n0,
        change_pp=float(ch.diff_pp[0]),
        change_low_pp=float(ch.low_pp[0]),
        change_high_pp=float(ch.high_pp[0]),
        change_relative=float(ch.relative[0]),
        change_from_zero=bool(ch.from_zero[0]),
        change_p=float(ch.p_value[0]),
        change_class=ch.classes[0],
    )
