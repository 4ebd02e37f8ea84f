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
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from sitrep.analysis.change import ChangeTable, week_over_week
from sitrep.analysis.clusters import ClusterResult, GlobalMoranResult, global_moran, local_clusters
from sitrep.analysis.disclosure import (
    Cell,
    DisclosureDecision,
    DisclosureRules,
    Earlier,
    decide,
    primary_rule,
)
from sitrep.analysis.proportions import (
    BoolArray,
    FloatArray,
    IntArray,
    ili_percent,
    proportion_interval,
)
from sitrep.analysis.ranks import NO_DATA, TercileResult, tercile_ranks
from sitrep.analysis.smoothing import eb_rates
from sitrep.analysis.transitions import ClusterTransitions, compare_weeks
from sitrep.analysis.weights import DistrictGraph
from sitrep.errors import AnalysisError
from sitrep.model import ChangeClass, CountTable, Districts
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


def _withhold_totals(j: JurisdictionSummary, now: bool, before: bool) -> JurisdictionSummary:
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


@dataclasses.dataclass(frozen=True, eq=False)
class _Counts:
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


def _week_rows(frame: pd.DataFrame, week: EpiWeek) -> pd.DataFrame:
    mask = np.fromiter((w == week for w in frame["week"]), dtype=bool, count=len(frame))
    return frame.loc[mask]


def _aligned(rows: pd.DataFrame, ids: tuple[str, ...]) -> _Counts:
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
    return _Counts(col("reporting_sites"), col("ili_visits"), col("total_visits"), tuple(names))


def _combine(primary: _Counts, fallback: _Counts) -> tuple[_Counts, int]:
    """Per district: ``primary`` where it has counts, else ``fallback``; and how many fell back."""
    use = ~primary.has_data & fallback.has_data

    def pick(a: FloatArray, b: FloatArray) -> FloatArray:
        return np.asarray(np.where(use, b, a), dtype=np.float64)

    names = tuple(b if u else a for a, b, u in zip(primary.names, fallback.names, use, strict=True))
    return _Counts(
        pick(primary.sites, fallback.sites),
        pick(primary.ili, fallback.ili),
        pick(primary.visits, fallback.visits),
        names,
    ), int(use.sum())


def fixed_ranks(values: FloatArray, cuts: tuple[float, float], valid: BoolArray) -> IntArray:
    """Class ``values`` on given tercile cut points, as :func:`tercile_ranks` does.

    Right-closed classes: 1 if ``v <= q1``, 2 if ``q1 < v <= q2``, 3 if
    ``v > q2``; ``NO_DATA`` (0) where the value is not finite or ``valid``
    is False.
    """
    out = np.full(values.shape, NO_DATA, dtype=np.int64)
    ok = np.isfinite(values) & valid
    out[ok] = np.searchsorted(np.asarray(cuts), values[ok], side="left") + 1
    return out


def _nan_sum(a: FloatArray) -> float:
    present = ~np.isnan(a)
    return float(a[present].sum()) if present.any() else float("nan")


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
        Called as ``on_step(done, total)`` before and after each of the
        permutation runs (this week's local and global statistics, last
        week's local one), for a progress display; it cannot change a result.

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
    ``settings.seed``.
    """
    if recent_weeks < 1:
        raise AnalysisError(f"recent_weeks must be at least 1, got {recent_weeks}")
    ids = districts.ids
    if tuple(dg.ids) != tuple(ids):
        raise AnalysisError(
            "the neighbour graph was built on other districts (or another order) than the "
            "boundaries; build it with build_graph(districts.frame)"
        )
    week = current.latest_week if week is None else week
    frame = current.frame
    cur_rows = _week_rows(frame, week)
    if cur_rows.empty:
        raise AnalysisError(
            f"week {week} has no rows in the current table (weeks present: "
            f"{', '.join(str(w) for w in current.weeks)}); set weeks.report_week to one of them"
        )
    prior_week = week - 1
    notes: list[str] = []
    known = set(ids)
    unknown = sorted(set(cur_rows["district_id"].astype(str)) - known)
    if unknown:
        notes.append(
            f"{len(unknown)} district(s) in this week's table are not in the boundaries and "
            f"were ignored: {', '.join(unknown)}"
        )

    cur = _aligned(cur_rows, ids)
    boundary_names = districts.names
    names = tuple(boundary_names.get(i) or n for i, n in zip(ids, cur.names, strict=True))
    missing_now = [i for i, ok in zip(ids, cur.has_data, strict=True) if not ok]
    if missing_now:
        notes.append(
            f"{len(missing_now)} district(s) have no row for {week}: {', '.join(missing_now)}"
        )

    # Last week: revised (from this week's table) where available, else as published.
    revised_here = _aligned(_week_rows(frame, prior_week), ids)
    if prior is not None:
        published = _aligned(_week_rows(prior.frame, prior_week), ids)
    else:
        published = _aligned(frame.iloc[0:0], ids)
    before, fell_back = _combine(revised_here, published)
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

    # This week: ILI%, interval; disclosure control of both weeks.
    x1, n1 = cur.ili, cur.visits
    pct = ili_percent(x1, n1)
    low, high = proportion_interval(
        x1, n1, confidence=settings.confidence, method=settings.interval
    )
    earlier = earlier or {}
    rules = _rules(settings)
    disclosure = decide(
        cur.cells(ids),
        before.cells(ids),
        rules,
        labels=(week.label, prior_week.label),
        earlier_this=earlier.get(week.label),
        earlier_prior=earlier.get(prior_week.label),
    )
    suppressed = np.array([i in disclosure.this_week.ids for i in ids], dtype=bool)
    suppressed0 = np.array([i in disclosure.prior_week.ids for i in ids], dtype=bool)
    notes.extend(_disclosure_notes(disclosure, rules))
    usable = cur.has_data & ~suppressed & (n1 > 0)

    change = week_over_week(
        x1,
        n1,
        before.ili,
        before.visits,
        method=settings.change_test,
        alpha=settings.change_alpha,
        min_change_pp=settings.min_change_pp,
        confidence=settings.confidence,
    )
    terciles = tercile_ranks(pct, valid=usable)
    if terciles.note:
        notes.append("terciles: " + terciles.note)
    eb_pct = 100.0 * eb_rates(np.where(usable, x1, np.nan), np.where(usable, n1, np.nan))

    # Clusters this week and last week, on the same graph and settings.
    runs = 3 if before.has_data.any() else 2
    step = on_step if on_step is not None else _no_step
    step(0, runs)
    values = _cluster_values(settings, pct, eb_pct, usable)
    clusters = _local(values, dg, settings)
    step(1, runs)
    gm = global_moran(values, dg, permutations=settings.permutations, seed=settings.seed)
    step(2, runs)
    prior_clusters: ClusterResult | None = None
    if before.has_data.any():
        x0, n0 = before.ili, before.visits
        usable0 = before.has_data & ~suppressed0 & (n0 > 0)
        eb0 = 100.0 * eb_rates(np.where(usable0, x0, np.nan), np.where(usable0, n0, np.nan))
        values0 = _cluster_values(settings, ili_percent(x0, n0), eb0, usable0)
        prior_clusters = _local(values0, dg, settings)
        step(3, runs)
    transitions = compare_weeks(clusters, prior_clusters, dg)
    notes.extend(f"clusters: {n}" for n in clusters.notes)

    withheld_by_week = {week: suppressed, prior_week: suppressed0}
    recent = _recent_terciles(
        current, prior, ids, week, recent_weeks, terciles, rules, withheld_by_week, notes
    )
    jurisdiction = _withhold_totals(
        _jurisdiction(cur, before, published, settings),
        disclosure.this_week.total_withheld,
        disclosure.prior_week.total_withheld,
    )

    prior_pct = ili_percent(before.ili, before.visits)
    published_pct = ili_percent(published.ili, published.visits)
    table = pd.DataFrame(
        {
            "district_id": list(ids),
            "district_name": list(names),
            "week": [week.label] * len(ids),
            "reporting_sites": cur.sites,
            "ili_visits": pd.array(x1, dtype="Int64"),
            "total_visits": pd.array(n1, dtype="Int64"),
            "ili_percent": pct,
            "ci_low": 100.0 * low,
            "ci_high": 100.0 * high,
            "suppressed": suppressed,
            "prior_suppressed": suppressed0,
            "prior_ili_percent": prior_pct,
            "prior_ili_percent_published": published_pct,
            "prior_total_visits": pd.array(before.visits, dtype="Int64"),
            "change_pp": change.diff_pp,
            "change_low_pp": change.low_pp,
            "change_high_pp": change.high_pp,
            "change_relative": change.relative,
            "change_from_zero": change.from_zero,
            "change_p": change.p_value,
            "change_class": [c.value for c in change.classes],
            "tercile": terciles.ranks,
            "eb_percent": eb_pct,
            "local_i": clusters.local_i,
            "p_value": clusters.p_values,
            "q_value": clusters.q_values,
            "cluster_label": [lab.value for lab in clusters.labels],
            "prior_cluster_label": (
                [lab.value for lab in prior_clusters.labels]
                if prior_clusters is not None
                else [""] * len(ids)
            ),
            "transition": [t.value for t in transitions.districts],
        },
        columns=list(TABLE_COLUMNS),
    )
    unprotected = table.copy()
    table = _protect(table, suppressed, suppressed0)

    return WeekAnalysis(
        week=week,
        prior_week=prior_week,
        table=table,
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
        unprotected_table=unprotected,
        disclosure=disclosure,
    )


def _rules(settings: AnalysisSettings) -> DisclosureRules:
    return DisclosureRules(
        min_visits=settings.min_visits,
        min_count=settings.min_count,
        suppress_zero=settings.suppress_zero,
    )


def _protect(table: pd.DataFrame, now: BoolArray, before: BoolArray) -> pd.DataFrame:
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


def _recent_terciles(
    current: CountTable,
    prior: CountTable | None,
    ids: tuple[str, ...],
    week: EpiWeek,
    recent_weeks: int,
    terciles: TercileResult,
    rules: DisclosureRules,
    withheld: Mapping[EpiWeek, BoolArray],
    notes: list[str],
) -> tuple[tuple[EpiWeek, IntArray], ...]:
    """Last weeks classed on this week's cut points (current table first, then prior).

    This week and last week leave out their withheld districts; earlier weeks
    leave out the districts the primary rule would withhold.
    """
    if terciles.cuts is None:
        notes.append("recent weeks are not classed: this week has no tercile cut points")
        return ()
    out: list[tuple[EpiWeek, IntArray]] = []
    skipped: list[str] = []
    for back in range(recent_weeks - 1, -1, -1):
        w = week - back
        counts = _aligned(_week_rows(current.frame, w), ids)
        if prior is not None:
            counts, _ = _combine(counts, _aligned(_week_rows(prior.frame, w), ids))
        if not counts.has_data.any():
            skipped.append(str(w))
            continue
        if w in withheld:
            hidden = withheld[w]
        else:
            hidden = np.array(
                [
                    not (np.isnan(x) or np.isnan(n))
                    and primary_rule(int(x), int(n), rules) is not None
                    for x, n in zip(counts.ili, counts.visits, strict=True)
                ],
                dtype=bool,
            )
        valid = counts.has_data & ~hidden & (counts.visits > 0)
        ranks = fixed_ranks(ili_percent(counts.ili, counts.visits), terciles.cuts, valid)
        ranks.setflags(write=False)
        out.append((w, ranks))
    if skipped:
        notes.append(f"no counts for {', '.join(skipped)}: those map panels are left out")
    return tuple(out)


def _jurisdiction(
    cur: _Counts, before: _Counts, published: _Counts, settings: AnalysisSettings
) -> JurisdictionSummary:
    def totals(c: _Counts) -> tuple[int, int]:
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
        reporting_sites=_nan_sum(np.where(cur.has_data, cur.sites, np.nan)),
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
