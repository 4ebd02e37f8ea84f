"""Cross-table rules: this week's table against last week's table as it was received.

Each rule is a pure function of :class:`~sitrep.ingest.facts.PairFacts`
yielding :class:`~sitrep.ingest.findings.Hit` records on this week's file.
Rule ids and severities are in :data:`sitrep.ingest.rules.REGISTRY`.
"""

from __future__ import annotations

import dataclasses
import functools
from collections.abc import Iterator

import numpy as np

from sitrep.ingest.facts import EPOCH, PairFacts, TableArrays, fmt, lookup, pct
from sitrep.ingest.findings import Hit

__all__ = [
    "completeness_drop",
    "district_dropped",
    "district_new",
    "revision_large",
    "revision_row_removed",
    "revision_summary",
    "stale_resend",
    "week_backwards",
    "week_skipped",
    "week_system_differs",
]


def week_system_differs(p: PairFacts) -> Iterator[Hit]:
    """The two tables use different week systems (the later rules are then not run)."""
    if p.cur.system is not p.pri.system:
        yield Hit(
            f"expected both tables in the same week system, got {p.cur.system.label} this week "
            f"and {p.pri.system.label} last week; set weeks.system to the convention of the data"
        )


def week_backwards(p: PairFacts) -> Iterator[Hit]:
    """This week's latest week is not after last week's latest week."""
    latest, prior_latest = p.cur.weeks[-1], p.pri.weeks[-1]
    if p.step <= 0:
        yield Hit(
            f"this week's table ends at {latest} but last week's already reached "
            f"{prior_latest}; expected {prior_latest + 1}. Check that this is the new extract "
            "and not last week's file sent again",
            line=p.first_latest_line,
            column=p.cur.columns.week,
            value=str(latest),
        )


def week_skipped(p: PairFacts) -> Iterator[Hit]:
    """This week's latest week is more than one week after last week's (week arithmetic of
    :class:`~sitrep.weeks.EpiWeek`, so a week 53 is counted). The message says which value
    the change uses: the week before the latest as given in this week's table, or none (the
    change is then not assessed) when the table has no rows for that week either."""
    latest, prior_latest, step = p.cur.weeks[-1], p.pri.weeks[-1], p.step
    if step <= 1:
        return
    week_before = latest - 1
    skipped = step - 1
    if any(w == week_before for w in p.cur.weeks):
        basis = (
            f"the change is computed against {week_before} as given in this week's table "
            "(no figure for it was published)"
        )
    else:
        basis = (
            f"this week's table has no rows for {week_before} either, so the week-over-week "
            "change is not assessed"
        )
    yield Hit(
        f"this week's table ends at {latest} but last week's ended at {prior_latest}; "
        f"{skipped} week{'s' if skipped > 1 else ''} ({prior_latest + 1}"
        + (f" to {latest - 1}" if skipped > 1 else "")
        + f") had no extract: this table comes over {step} weeks after last week's, not "
        f"one, and {basis}. Check for a missed delivery",
        line=p.first_latest_line,
        column=p.cur.columns.week,
        value=str(latest),
    )


def _latest_ids(p: PairFacts) -> tuple[dict[str, int], set[str]]:
    """Ids of this week's latest week (with their first row) and of last week's latest week."""
    cur, pri = p.cur, p.pri
    cur_rows = np.flatnonzero(cur.week_codes == len(cur.weeks) - 1)
    pri_rows = np.flatnonzero(pri.week_codes == len(pri.weeks) - 1)
    return {str(cur.ids[i]): int(i) for i in cur_rows[::-1]}, {str(pri.ids[i]) for i in pri_rows}


def district_new(p: PairFacts) -> Iterator[Hit]:
    """A district in this week's latest week but in no row of last week's latest week (only
    when the tables move forward)."""
    if p.step <= 0:
        return
    cur_ids, pri_ids = _latest_ids(p)
    for ident in sorted(set(cur_ids) - pri_ids):
        yield Hit(
            f"district {ident} reports in {p.cur.weeks[-1]} but had no row in last week's "
            f"table for {p.pri.weeks[-1]}; check that it is a new reporting district, not a "
            "changed id",
            line=p.cur.line(cur_ids[ident]),
            column=p.cur.columns.district_id,
            district_id=ident,
            value=ident,
        )


def district_dropped(p: PairFacts) -> Iterator[Hit]:
    """A district in last week's latest week but in no row of this week's latest week (only
    when the tables move forward)."""
    if p.step <= 0:
        return
    cur_ids, pri_ids = _latest_ids(p)
    for ident in sorted(pri_ids - set(cur_ids)):
        yield Hit(
            f"district {ident} reported in {p.pri.weeks[-1]} last week but has no row for "
            f"{p.cur.weeks[-1]}; it is shown as not reported. Ask whether its data are late",
            column=p.cur.columns.district_id,
            district_id=ident,
            value=ident,
        )


@dataclasses.dataclass(frozen=True, eq=False)
class _Revisions:
    """Rows of the past weeks held by both tables, matched by district and week."""

    p_rows: np.ndarray  # rows of last week's table in a shared past week
    found: np.ndarray  # per p_rows: has a row in this week's table
    pr: np.ndarray  # matched rows, last week's table
    cr: np.ndarray  # matched rows, this week's table
    changed: np.ndarray  # per matched pair: any count differs
    changed_cells: int
    week_of: dict[int, object]


def _differs(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    return np.asarray(~((x == y) | (np.isnan(x) & np.isnan(y))))


@functools.lru_cache(maxsize=1)  # the three revision rules share one matching
def _revisions(p: PairFacts) -> _Revisions | None:
    """The matched past rows, or None when the tables share no past week."""
    cur, pri = p.cur, p.pri
    kc, kp = p.row_keys
    shared = np.intersect1d(np.unique(cur.ordinal), np.unique(pri.ordinal))
    shared = shared[shared != int(cur.ordinal.max())]  # past weeks: not the current latest
    if len(shared) == 0:
        return None
    p_rows = np.flatnonzero(np.isin(pri.ordinal, shared))
    match = lookup(kc, kp[p_rows])
    found = match >= 0
    pr, cr = p_rows[found], match[found]
    d_ili = _differs(pri.ili[pr], cur.ili[cr])
    d_tot = _differs(pri.total[pr], cur.total[cr])
    d_sites = _differs(pri.sites[pr], cur.sites[cr])
    week_of: dict[int, object] = {int((w.start - EPOCH).days // 7): w for w in cur.weeks}
    return _Revisions(
        p_rows=p_rows,
        found=found,
        pr=pr,
        cr=cr,
        changed=d_ili | d_tot | d_sites,
        changed_cells=int(d_ili.sum() + d_tot.sum() + d_sites.sum()),
        week_of=week_of,
    )


def _changes(cur: TableArrays, pri: TableArrays, r: _Revisions) -> tuple[np.ndarray, ...]:
    """Per matched pair: old ILI%, new ILI%, their absolute difference, total-visits share."""
    pr, cr = r.pr, r.cr
    with np.errstate(divide="ignore", invalid="ignore"):
        old_pct = np.where(pri.total[pr] > 0, 100 * pri.ili[pr] / pri.total[pr], np.nan)
        new_pct = np.where(cur.total[cr] > 0, 100 * cur.ili[cr] / cur.total[cr], np.nan)
        share = np.where(
            pri.total[pr] > 0,
            np.abs(cur.total[cr] - pri.total[pr]) / pri.total[pr],
            np.where(cur.total[cr] != pri.total[pr], np.inf, 0.0),
        )
    return old_pct, new_pct, np.abs(new_pct - old_pct), share


def revision_summary(p: PairFacts) -> Iterator[Hit]:
    """At most one: rows of the same district and week in both tables whose ILI visits, total
    visits or reporting sites differ; gives the number of changed cells and rows and the
    largest change of ILI% (100 * ili / total) in percentage points."""
    r = _revisions(p)
    if r is None or not r.changed_cells:
        return
    cur, cr, n = p.cur, r.cr, r.changed_cells
    old_pct, new_pct, d_pct, _ = _changes(cur, p.pri, r)
    rows_idx = np.flatnonzero(r.changed)
    finite = rows_idx[np.isfinite(d_pct[rows_idx])]
    largest = ""
    if len(finite):
        j = finite[np.argmax(d_pct[finite])]
        largest = (
            f"; the largest change of ILI% is {d_pct[j]:.2f} pp (district {cur.ids[cr[j]]}, "
            f"{r.week_of[int(cur.ordinal[cr[j]])]}: {old_pct[j]:.2f}% -> {new_pct[j]:.2f}%)"
        )
    n_weeks = len(np.unique(cur.ordinal[cr[rows_idx]]))
    yield Hit(
        f"{n} cell{'s' if n != 1 else ''} in {len(rows_idx)} "
        f"row{'s' if len(rows_idx) != 1 else ''} of {n_weeks} past "
        f"week{'s' if n_weeks != 1 else ''} differ from last week's table{largest}. "
        "Past weeks are provisional; the report uses this week's values",
        value=str(n),
    )


def revision_large(p: PairFacts) -> Iterator[Hit]:
    """One per revised row whose ILI% changed by more than ``validation.revision_report_pp`` or whose
    total visits changed by more than ``validation.revision_report_share`` of the old total."""
    r = _revisions(p)
    if r is None or not r.changed_cells:
        return
    cur, pri, s = p.cur, p.pri, p.settings
    _, _, d_pct, share = _changes(cur, pri, r)
    rows_idx = np.flatnonzero(r.changed)
    big = rows_idx[
        (np.nan_to_num(d_pct[rows_idx], nan=0.0) > s.revision_report_pp)
        | (share[rows_idx] > s.revision_report_share)
    ]
    for j in big:
        i, k = int(r.cr[j]), r.pr[j]
        by_pct = np.isfinite(d_pct[j]) and d_pct[j] > s.revision_report_pp
        yield Hit(
            f"district {cur.ids[i]}, {r.week_of[int(cur.ordinal[i])]} was revised: ILI visits "
            f"{fmt(pri.ili[k])} -> {fmt(cur.ili[i])}, total visits "
            f"{fmt(pri.total[k])} -> {fmt(cur.total[i])}, ILI% "
            f"{pct(pri.ili[k], pri.total[k]):.2f} -> "
            f"{pct(cur.ili[i], cur.total[i]):.2f} (limits "
            f"{s.revision_report_pp:g} pp, {s.revision_report_share:.0%} of "
            "visits); check the revision with the data provider",
            line=cur.line(i),
            column=cur.columns.ili_visits if by_pct else cur.columns.total_visits,
            district_id=str(cur.ids[i]),
            value=f"{fmt(pri.ili[k])}/{fmt(pri.total[k])} -> {fmt(cur.ili[i])}/{fmt(cur.total[i])}",
        )


def revision_row_removed(p: PairFacts) -> Iterator[Hit]:
    """A row of a week present in both tables that is missing from this week's."""
    r = _revisions(p)
    if r is None:
        return
    pri = p.pri
    for j in np.flatnonzero(~r.found):
        k = int(r.p_rows[j])
        week = r.week_of.get(int(pri.ordinal[k]), pri.weeks[pri.week_codes[k]])
        yield Hit(
            f"district {pri.ids[k]}, {week} was in last week's table but is missing from this "
            "week's; check whether the row was withdrawn on purpose",
            column=p.cur.columns.district_id,
            district_id=str(pri.ids[k]),
            value=str(pri.weeks[pri.week_codes[k]]),
        )


def completeness_drop(p: PairFacts) -> Iterator[Hit]:
    """The sum of total visits, or of reporting sites, over all districts in this week's
    latest week is lower than the same sum for last week's latest week (as revised in this
    week's table where it holds that week) by more than ``validation.completeness_drop_share``."""
    cur, pri, limit = p.cur, p.pri, p.settings.completeness_drop_share
    last, ref = int(cur.ordinal.max()), int(pri.ordinal.max())
    if ref >= last:
        return
    source = cur if (cur.ordinal == ref).any() else pri
    now_rows, ref_rows = cur.ordinal == last, source.ordinal == ref
    ref_week = source.weeks[source.week_codes[np.flatnonzero(ref_rows)[0]]]
    for label, column, now_v, ref_v in (
        ("total visits", cur.columns.total_visits, cur.total[now_rows], source.total[ref_rows]),
        (
            "reporting sites",
            cur.columns.reporting_sites,
            cur.sites[now_rows],
            source.sites[ref_rows],
        ),
    ):
        if not np.isfinite(now_v).any() or not np.isfinite(ref_v).any():
            continue
        now_sum, ref_sum = float(np.nansum(now_v)), float(np.nansum(ref_v))
        if ref_sum <= 0:
            continue
        fall = 1.0 - now_sum / ref_sum
        if fall > limit:
            yield Hit(
                f"{label} fell from {fmt(ref_sum)} in {ref_week} to {fmt(now_sum)} in "
                f"{cur.weeks[-1]} ({fall:.0%}, above the {limit:.0%} limit); the fall "
                "may reflect reporting, not activity. Describe it as incomplete reporting, "
                "not as a fall in illness",
                column=column,
                value=f"{fmt(ref_sum)} -> {fmt(now_sum)}",
            )


def stale_resend(p: PairFacts) -> Iterator[Hit]:
    """A district's latest row has the same ILI visits, total visits and reporting sites as
    its row of the week before (from this week's table, else last week's), with total
    visits > 0."""
    cur, pri = p.cur, p.pri
    kc, kp = p.row_keys
    now = np.flatnonzero(cur.ordinal == int(cur.ordinal.max()))
    want = kc[now] - 1  # same district, previous week
    in_cur, in_pri = lookup(kc, want), lookup(kp, want)
    for j, i in enumerate(now):
        if in_cur[j] >= 0:
            src, k = cur, int(in_cur[j])
        elif in_pri[j] >= 0:
            src, k = pri, int(in_pri[j])
        else:
            continue
        same_sites = cur.sites[i] == src.sites[k] or (
            np.isnan(cur.sites[i]) and np.isnan(src.sites[k])
        )
        same = cur.ili[i] == src.ili[k] and cur.total[i] == src.total[k] and same_sites
        if same and cur.total[i] > 0:
            yield Hit(
                f"district {cur.ids[i]} has exactly the same counts in {cur.weeks[-1]} as in "
                f"{src.weeks[src.week_codes[k]]} ({fmt(cur.ili[i])} ILI of "
                f"{fmt(cur.total[i])} visits); check that last week's data were not sent again",
                line=cur.line(int(i)),
                column=cur.columns.ili_visits,
                district_id=str(cur.ids[i]),
                value=f"{fmt(cur.ili[i])}/{fmt(cur.total[i])}",
            )
