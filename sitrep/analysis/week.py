"""The analysis of one report week: every number the report shows (pure: no I/O).

:func:`analyse_week` composes the analysis modules in a fixed order:

1. counts of this week and of last week per boundary district (a district
   missing from the table has no data);
2. ILI% with its interval; which counts are withheld this week and last week
   (disclosure control, :mod:`sitrep.analysis.disclosure`);
3. week-over-week change against last week's *revised* counts;
4. terciles (this week, and the last few weeks on this week's cut points);
5. empirical Bayes rates; global and local Moran's I this week and last
   week, and how the clusters changed;
6. the jurisdiction-wide pooled figures.

The result, :class:`WeekAnalysis`, is what render receives.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Mapping
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from sitrep.analysis.change import ChangeTable, week_over_week
from sitrep.analysis.clusters import ClusterResult, GlobalMoranResult, global_moran, local_clusters
from sitrep.analysis.disclosure import (
    DisclosureDecision,
    DisclosureRules,
    Earlier,
    decide,
)
from sitrep.analysis.district_columns import (
    change_columns,
    cluster_columns,
    count_columns,
    prior_columns,
    protect,
)
from sitrep.analysis.jurisdiction import JurisdictionSummary, summarise, withhold_totals
from sitrep.analysis.parallel import side_by_side
from sitrep.analysis.proportions import (
    BoolArray,
    FloatArray,
    IntArray,
    ili_percent,
    proportion_interval,
)
from sitrep.analysis.ranks import TercileResult, tercile_ranks
from sitrep.analysis.recent import fixed_ranks, recent_terciles
from sitrep.analysis.smoothing import eb_rates
from sitrep.analysis.transitions import ClusterTransitions, compare_weeks
from sitrep.analysis.week_counts import Counts, aligned, combine, week_rows
from sitrep.analysis.weights import DistrictGraph
from sitrep.errors import AnalysisError
from sitrep.model import CountTable, Districts
from sitrep.weeks import EpiWeek

if TYPE_CHECKING:
    from sitrep.config import AnalysisSettings

__all__ = ["TABLE_COLUMNS", "JurisdictionSummary", "WeekAnalysis", "analyse_week", "fixed_ranks"]

TABLE_COLUMNS: tuple[str, ...] = (
    "district_id",
    "district_name",
    "week",
    "reporting_sites",
    "ili_visits",
    "total_visits",
    "ili_percent",
    "ci_low",
    "ci_high",
    "suppressed",
    "prior_suppressed",
    "prior_ili_percent",
    "prior_ili_percent_published",
    "prior_total_visits",
    "change_pp",
    "change_low_pp",
    "change_high_pp",
    "change_relative",
    "change_from_zero",
    "change_p",
    "change_class",
    "tercile",
    "eb_percent",
    "local_i",
    "p_value",
    "q_value",
    "cluster_label",
    "prior_cluster_label",
    "transition",
)
"""Columns of :attr:`WeekAnalysis.table`, in order."""


@dataclasses.dataclass(frozen=True, eq=False)
class WeekAnalysis:
    """Everything computed for one report week (analysis -> render).

    Attributes
    ----------
    week, prior_week : EpiWeek
        The report week and the week before it.
    table : pandas.DataFrame
        One row per boundary district in boundary order, columns
        :data:`TABLE_COLUMNS`. ``week`` is the label string, ``change_class``,
        ``cluster_label``, ``prior_cluster_label`` and ``transition`` are the
        enum values as strings (``prior_cluster_label`` is "" without a last
        week). ``suppressed`` / ``prior_suppressed`` say whether the district's
        counts are withheld this week / last week (``disclosure``); every value
        that would give a withheld count away is NaN (or "no data",
        "not assessable") in this table, which is the only one render
        publishes.
    unprotected_table : pandas.DataFrame
        The same table with the true values of withheld districts, for the
        internal file of ``output.keep_suppressed_values`` only.
    disclosure : DisclosureDecision
        Which cells are withheld, by which rule (this week and last week).
    jurisdiction : JurisdictionSummary
    change : ChangeTable
        The district change arrays behind the ``change_*`` columns.
    terciles : TercileResult
        This week's classes (suppressed and no-data districts excluded).
    recent_terciles : tuple of (EpiWeek, numpy.ndarray of int)
        The last ``recent_weeks`` weeks (oldest first, ending with this week)
        that have counts, each classed on **this week's** cut points so that
        one legend serves every panel; ranks 0 (no data/suppressed) to 3.
        Empty when this week's cut points do not exist.
    clusters : ClusterResult
        Local Moran's I of this week.
    prior_clusters : ClusterResult or None
        Last week's, computed the same way from its revised counts; None
        when last week has no counts.
    global_moran : GlobalMoranResult
    transitions : ClusterTransitions
    graph : DistrictGraph
    settings : AnalysisSettings
    notes : tuple of str
        Plain-language remarks for the methods and data-quality sections.
    """

    week: EpiWeek
    prior_week: EpiWeek
    table: pd.DataFrame
    jurisdiction: JurisdictionSummary
    change: ChangeTable
    terciles: TercileResult
    recent_terciles: tuple[tuple[EpiWeek, IntArray], ...]
    clusters: ClusterResult
    prior_clusters: ClusterResult | None
    global_moran: GlobalMoranResult
    transitions: ClusterTransitions
    graph: DistrictGraph
    settings: AnalysisSettings
    notes: tuple[str, ...]
    unprotected_table: pd.DataFrame
    disclosure: DisclosureDecision


PARALLEL_MIN_WORK = 1_000_000
"""Districts x permutations from which this week's and last week's local Moran's I run side by
side on two cores (:mod:`sitrep.analysis.parallel`); below it the fork costs more than it saves."""


def _no_step(done: int, total: int) -> None:
    """The default ``on_step`` of :func:`analyse_week`: nothing."""


def analyse_week(
    current: CountTable,
    prior: CountTable | None,
    districts: Districts,
    dg: DistrictGraph,
    settings: AnalysisSettings,
    *,
    week: EpiWeek | None = None,
    recent_weeks: int = 4,
    earlier: Mapping[str, Earlier] | None = None,
    on_step: Callable[[int, int], None] | None = None,
) -> WeekAnalysis:
    """Compute every district and jurisdiction figure of one report week.

    Parameters
    ----------
    current : CountTable
        This week's extract (one week or season to date).
    prior : CountTable or None
        Last week's extract as it was received (for "revised from x to y"
        and as a fallback when ``current`` lacks last week).
    districts : Districts
        Boundaries; every boundary district gets a row, in boundary order.
    dg : DistrictGraph
        Graph built on ``districts.frame`` (same ids, same order).
    settings : AnalysisSettings
        Interval, suppression, change test, permutation and correction
        settings.
    week : EpiWeek, optional
        The report week; default ``current.latest_week``.
    recent_weeks : int, default 4
        Number of weeks (ending with this one) in ``recent_terciles``.
    earlier : mapping of week label to Earlier, optional
        What earlier publications (earlier versions of this report, last
        week's report) showed and withheld of this week and last week; a
        district withheld there stays withheld (docs/methods.md §6.2).
    on_step : callable, optional
        Called as ``on_step(done, total)`` before the permutation runs and
        after each of them (this week's local statistic, last week's local
        one, this week's global one), for a progress display; it cannot
        change a result.

    Returns
    -------
    WeekAnalysis

    Raises
    ------
    AnalysisError
        If ``week`` has no rows in ``current``, the graph does not match the
        boundaries, ``recent_weeks`` is below 1, or a downstream function
        rejects the counts.

    Notes
    -----
    *Last week* is ``week - 1`` in the table's week system. For each district
    its counts are taken from ``current`` when ``current`` has a row for it
    in that week (the revised value), otherwise from ``prior``; the value in
    ``prior`` is also kept as "published". A district is *suppressed*
    (withheld) in a week by the rules of :mod:`sitrep.analysis.disclosure`
    (primary: fewer than ``settings.min_visits`` visits, an ILI count from 1
    to ``settings.min_count`` - 1, a zero with ``settings.suppress_zero``;
    then complementary cells and those withheld earlier). A withheld district
    takes no part in any statistic of that week: terciles, empirical Bayes
    rates and clusters are computed without it (label "no data"), and every
    value derived from its counts is blanked in ``table``. The cluster statistic
    uses ``settings.cluster_variable`` (ILI% or the empirical Bayes rate in
    percent). Deterministic: the only randomness is esda's, seeded with
    ``settings.seed``; with many districts this week's and last week's local
    statistics run at the same time in two processes, with the same results.
    """
    week, cur_rows = _checked_week(current, districts, dg, week, recent_weeks)
    ids = districts.ids
    prior_week = week - 1
    notes: list[str] = []
    cur, names = _this_week(cur_rows, districts, week, notes)
    before, published = _last_week(current, prior, ids, prior_week, notes)

    x1, n1 = cur.ili, cur.visits
    pct, low, high = _percent_and_interval(cur, settings)
    withheld = _withheld(cur, before, ids, settings, (week, prior_week), earlier or {}, notes)
    suppressed, suppressed0 = withheld.now, withheld.before
    usable = cur.has_data & ~suppressed & (n1 > 0)

    change = week_over_week(x1, n1, before.ili, before.visits, **_change_settings(settings))
    terciles = tercile_ranks(pct, valid=usable)
    if terciles.note:
        notes.append("terciles: " + terciles.note)
    eb_pct = _eb_percent(cur, usable)
    clusters, prior_clusters, gm = _clusters(
        _cluster_values(settings, pct, eb_pct, usable),
        _prior_values(before, suppressed0, settings),
        dg,
        settings,
        on_step if on_step is not None else _no_step,
    )
    transitions = compare_weeks(clusters, prior_clusters, dg)
    notes.extend(f"clusters: {n}" for n in clusters.notes)

    withheld_by_week = {week: suppressed, prior_week: suppressed0}
    recent = recent_terciles(
        current, prior, ids, week, recent_weeks, terciles, withheld.rules, withheld_by_week, notes
    )
    jurisdiction = withhold_totals(
        summarise(cur, before, published, settings),
        withheld.decision.this_week.total_withheld,
        withheld.decision.prior_week.total_withheld,
    )
    table = pd.DataFrame(
        {
            **count_columns(ids, names, week, cur, (pct, low, high)),
            **prior_columns(withheld.now, withheld.before, before, published),
            **change_columns(change),
            "tercile": terciles.ranks,
            "eb_percent": eb_pct,
            **cluster_columns(clusters, prior_clusters, transitions, len(ids)),
        },
        columns=list(TABLE_COLUMNS),
    )
    return WeekAnalysis(
        week=week,
        prior_week=prior_week,
        table=protect(table, suppressed, suppressed0),
        jurisdiction=jurisdiction,
        change=change,
        terciles=terciles,
        recent_terciles=recent,
        clusters=clusters,
        prior_clusters=prior_clusters,
        global_moran=gm,
        transitions=transitions,
        graph=dg,
        settings=settings,
        notes=tuple(notes),
        unprotected_table=table.copy(),
        disclosure=withheld.decision,
    )


@dataclasses.dataclass(frozen=True, eq=False)
class _Withheld:
    """Which districts are withheld this week and last week, and by which rules."""

    decision: DisclosureDecision
    rules: DisclosureRules
    now: BoolArray
    before: BoolArray


def _withheld(
    cur: Counts,
    before: Counts,
    ids: tuple[str, ...],
    settings: AnalysisSettings,
    weeks: tuple[EpiWeek, EpiWeek],
    earlier: Mapping[str, Earlier],
    notes: list[str],
) -> _Withheld:
    """Disclosure control of both weeks (docs/methods.md §6.2); notes name the districts."""
    week, prior_week = weeks
    rules = _rules(settings)
    decision = decide(
        cur.cells(ids),
        before.cells(ids),
        rules,
        labels=(week.label, prior_week.label),
        earlier_this=earlier.get(week.label),
        earlier_prior=earlier.get(prior_week.label),
    )
    notes.extend(_disclosure_notes(decision, rules))
    return _Withheld(
        decision,
        rules,
        np.array([i in decision.this_week.ids for i in ids], dtype=bool),
        np.array([i in decision.prior_week.ids for i in ids], dtype=bool),
    )


def _change_settings(settings: AnalysisSettings) -> dict[str, Any]:
    """The keyword arguments of :func:`week_over_week` taken from the settings."""
    return {
        "method": settings.change_test,
        "alpha": settings.change_alpha,
        "min_change_pp": settings.min_change_pp,
        "confidence": settings.confidence,
    }


def _checked_week(
    current: CountTable,
    districts: Districts,
    dg: DistrictGraph,
    week: EpiWeek | None,
    recent_weeks: int,
) -> tuple[EpiWeek, pd.DataFrame]:
    """The report week and its rows, after the checks that stop an analysis."""
    if recent_weeks < 1:
        raise AnalysisError(f"recent_weeks must be at least 1, got {recent_weeks}")
    if tuple(dg.ids) != tuple(districts.ids):
        raise AnalysisError(
            "the neighbour graph was built on other districts (or another order) than the "
            "boundaries; build it with build_graph(districts.frame)"
        )
    week = current.latest_week if week is None else week
    rows = week_rows(current.frame, week)
    if rows.empty:
        raise AnalysisError(
            f"week {week} has no rows in the current table (weeks present: "
            f"{', '.join(str(w) for w in current.weeks)}); set weeks.report_week to one of them"
        )
    return week, rows


def _this_week(
    rows: pd.DataFrame, districts: Districts, week: EpiWeek, notes: list[str]
) -> tuple[Counts, tuple[str, ...]]:
    """This week's counts and district names (the boundary's name first); notes on gaps."""
    ids = districts.ids
    unknown = sorted(set(rows["district_id"].astype(str)) - set(ids))
    if unknown:
        notes.append(
            f"{len(unknown)} district(s) in this week's table are not in the boundaries and "
            f"were ignored: {', '.join(unknown)}"
        )
    cur = aligned(rows, ids)
    boundary_names = districts.names
    names = tuple(boundary_names.get(i) or n for i, n in zip(ids, cur.names, strict=True))
    missing = [i for i, ok in zip(ids, cur.has_data, strict=True) if not ok]
    if missing:
        notes.append(f"{len(missing)} district(s) have no row for {week}: {', '.join(missing)}")
    return cur, names


def _last_week(
    current: CountTable,
    prior: CountTable | None,
    ids: tuple[str, ...],
    prior_week: EpiWeek,
    notes: list[str],
) -> tuple[Counts, Counts]:
    """Last week revised (this week's table) where available, else as published; and as published."""
    revised_here = aligned(week_rows(current.frame, prior_week), ids)
    if prior is not None:
        published = aligned(week_rows(prior.frame, prior_week), ids)
    else:
        published = aligned(current.frame.iloc[0:0], ids)
    before, fell_back = combine(revised_here, published)
    if fell_back and revised_here.has_data.any():
        notes.append(
            f"{fell_back} district(s) have no revised row for {prior_week} in this week's "
            "table; last week's published counts were used for them"
        )
    elif fell_back:
        notes.append(
            f"this week's table has no rows for {prior_week}; last week's published counts "
            "were used (no revisions are visible)"
        )
    if not before.has_data.any():
        notes.append(f"no counts for {prior_week}: changes and last week's clusters are not shown")
    return before, published


def _percent_and_interval(
    counts: Counts, settings: AnalysisSettings
) -> tuple[FloatArray, FloatArray, FloatArray]:
    """ILI% and its interval's bounds as proportions (``settings.interval``, ``.confidence``)."""
    low, high = proportion_interval(
        counts.ili, counts.visits, confidence=settings.confidence, method=settings.interval
    )
    return ili_percent(counts.ili, counts.visits), low, high


def _eb_percent(counts: Counts, usable: BoolArray) -> FloatArray:
    """Empirical Bayes rates in percent over the usable districts (NaN elsewhere)."""
    ili = np.where(usable, counts.ili, np.nan)
    visits = np.where(usable, counts.visits, np.nan)
    return np.asarray(100.0 * eb_rates(ili, visits), dtype=np.float64)


def _prior_values(
    before: Counts, suppressed0: BoolArray, settings: AnalysisSettings
) -> FloatArray | None:
    """Last week's cluster values, computed as this week's; None when last week has no counts."""
    if not before.has_data.any():
        return None
    usable0 = before.has_data & ~suppressed0 & (before.visits > 0)
    pct0 = ili_percent(before.ili, before.visits)
    return _cluster_values(settings, pct0, _eb_percent(before, usable0), usable0)


def _clusters(
    values: FloatArray,
    values0: FloatArray | None,
    dg: DistrictGraph,
    settings: AnalysisSettings,
    step: Callable[[int, int], None],
) -> tuple[ClusterResult, ClusterResult | None, GlobalMoranResult]:
    """Local Moran's I this week and last week (side by side when large), then global Moran's I."""
    runs = 3 if values0 is not None else 2
    step(0, runs)
    prior_clusters: ClusterResult | None = None
    if values0 is None:
        clusters = _local(values, dg, settings)
        step(1, runs)
    else:
        last = values0
        clusters, prior_clusters = side_by_side(
            lambda: _local(values, dg, settings),
            lambda: _local(last, dg, settings),
            fork=dg.n * settings.permutations >= PARALLEL_MIN_WORK,
        )
        step(1, runs)
        step(2, runs)
    gm = global_moran(values, dg, permutations=settings.permutations, seed=settings.seed)
    step(runs, runs)
    return clusters, prior_clusters, gm


def _rules(settings: AnalysisSettings) -> DisclosureRules:
    return DisclosureRules(
        min_visits=settings.min_visits,
        min_count=settings.min_count,
        suppress_zero=settings.suppress_zero,
    )


def _disclosure_notes(decision: DisclosureDecision, rules: DisclosureRules) -> list[str]:
    """Plain notes: which districts are withheld in each week (never by which rule)."""
    zero = ", a zero ILI count" if rules.suppress_zero else ""
    rule_text = (
        f"fewer than {rules.min_visits} visits, an ILI count from 1 to {rules.min_count - 1}"
        f"{zero}, or so that those cannot be worked out from the totals"
        if rules.min_count > 1
        else f"fewer than {rules.min_visits} visits{zero}, or so that those cannot be worked "
        "out from the totals"
    )
    out = []
    for when, group in (("this week", decision.this_week), ("last week", decision.prior_week)):
        if group.withheld:
            out.append(
                f"{len(group.withheld)} district(s) withheld {when} ({rule_text}); they are left "
                "out of terciles, smoothing and clusters: " + ", ".join(sorted(group.ids))
            )
        if group.total_withheld:
            out.append(f"the jurisdiction total of {when} is withheld as well: {group.reason}")
    return out


def _cluster_values(
    settings: AnalysisSettings, pct: FloatArray, eb_pct: FloatArray, usable: BoolArray
) -> FloatArray:
    chosen = eb_pct if settings.cluster_variable == "eb_rate" else pct
    return np.where(usable, chosen, np.nan)


def _local(values: FloatArray, dg: DistrictGraph, settings: AnalysisSettings) -> ClusterResult:
    return local_clusters(
        values,
        dg,
        permutations=settings.permutations,
        seed=settings.seed,
        alpha=settings.alpha,
        correction=settings.correction,
        q=settings.fdr_q,
    )
