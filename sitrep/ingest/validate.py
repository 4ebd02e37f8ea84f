"""Value rules on one count table and cross-table rules against last week's table.

Pure functions (no I/O): they take the typed tables made by
:mod:`sitrep.ingest.read` and return a :class:`~sitrep.model.ValidationReport`.
Error-level findings block the run; warnings go into the report's data-quality
section. Methods follow docs/methods.md section 9.4 (common practice).
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import difflib
import re
import unicodedata
import warnings
from collections.abc import Sequence

import numpy as np
import pandas as pd

from sitrep.config import ValidationSettings
from sitrep.ingest.geometry import NUMERIC_IDS_ATTR
from sitrep.ingest.read import NUMERIC_ID_LINES_ATTR, SOURCE_COLUMNS_ATTR, FindingCollector
from sitrep.ingest.read import line_list as _line_list
from sitrep.model import CountTable, Districts, Finding, Severity, ValidationReport
from sitrep.weeks import EpiWeek, season_of

__all__ = ["RULES", "validate_against_prior", "validate_table"]

RULES: tuple[tuple[str, str], ...] = (
    ("row-duplicate", "two rows share the same district and week (error)"),
    ("count-negative", "a count is below zero (error)"),
    ("count-not-integer", "a count is fractional (error)"),
    ("count-ili-exceeds-total", "ILI visits exceed total visits (error)"),
    ("count-zero-total", "total visits are 0 while ILI visits are not (error)"),
    ("id-not-in-boundaries", "a table district id is not in the boundary file (error, one per id)"),
    (
        "id-leading-zeros",
        "a table id matches a boundary id only with leading zeros (error; see input.id_zero_pad)",
    ),
    ("id-numeric-as-text", "ids stored as whole numbers were read as text (info, one per file)"),
    ("week-mixed", "a file declared as one week holds several weeks (error)"),
    ("week-future", "a week starts after today's date (error)"),
    ("week-gap", "weeks are missing inside a season of a season-to-date extract (warning)"),
    (
        "rate-mismatch",
        "the supplied rate differs from 100 * ILI / total beyond tolerance (warning)",
    ),
    ("district-missing-latest", "a boundary district has no row in the latest week (warning)"),
    ("district-name-differs", "the table's district name differs from the boundary name (info)"),
    (
        "value-spike",
        "the latest ILI% is far from the district's previous weeks after the jurisdiction's "
        "movement, and unlike the other districts' changes (warning)",
    ),
    (
        "district-no-visits",
        "a district has 0 visits in the latest week, e.g. a closed site (warning)",
    ),
    (
        "week-system-differs",
        "this week's and last week's tables use different week systems (error)",
    ),
    ("week-backwards", "this week's table does not end after last week's (error)"),
    ("week-skipped", "this week's table ends more than one week after last week's (warning)"),
    ("district-new", "a district reports in the latest week but was absent last week (warning)"),
    ("district-dropped", "a district reported last week but not in the latest week (warning)"),
    ("revision-summary", "past weeks' counts differ from last week's table (warning, one)"),
    ("revision-large", "one past week's value was revised by more than the set size (warning)"),
    ("revision-row-removed", "a past district-week row present last week is gone (warning)"),
    (
        "completeness-drop",
        "total visits or reporting sites fell by more than the set share (warning)",
    ),
    ("stale-resend", "a district's latest row is identical to its previous week's row (warning)"),
)
"""Rule ids of this module with one-line descriptions (for the documentation)."""

_EPOCH = dt.date(1970, 1, 4)  # a Sunday; week ordinals are only compared within one system


@dataclasses.dataclass(frozen=True, eq=False)
class _Arrays:
    """Numpy views of a CountTable, with integer week codes (fast grouping)."""

    file: str
    ids: np.ndarray  # object str
    id_codes: np.ndarray
    id_uniques: list[str]
    week_codes: np.ndarray  # index into weeks (sorted)
    weeks: list[EpiWeek]
    ordinal: np.ndarray  # per row: week start in weeks since _EPOCH
    ili: np.ndarray  # float64 (NaN never: counts are required)
    total: np.ndarray
    sites: np.ndarray
    lines: np.ndarray  # int64; 0 when unknown
    names: np.ndarray
    rate: np.ndarray | None
    columns: dict[str, str]

    def col(self, internal: str) -> str:
        return self.columns.get(internal, internal)

    def line(self, i: int | np.integer) -> int | None:
        value = int(self.lines[i])
        return value if value > 0 else None


def _arrays(table: CountTable) -> _Arrays:
    frame = table.frame
    week = frame["week"]
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
    week_codes = rank[codes] if len(cats) else codes.astype(np.int64)
    week_ord = np.array([(w.start - _EPOCH).days // 7 for w in weeks], dtype=np.int64)
    ids = frame["district_id"].to_numpy(dtype=object)
    id_codes, id_uniques = pd.factorize(ids)
    columns = dict(frame.attrs.get(SOURCE_COLUMNS_ATTR, {}))
    lines = (
        frame["line"].to_numpy(dtype=np.int64)
        if "line" in frame
        else np.zeros(len(frame), np.int64)
    )
    names = (
        frame["district_name"].to_numpy(dtype=object)
        if "district_name" in frame
        else np.array([""] * len(frame), dtype=object)
    )
    sites = (
        frame["reporting_sites"].to_numpy(dtype=np.float64)
        if "reporting_sites" in frame
        else np.full(len(frame), np.nan)
    )
    return _Arrays(
        file=table.source.path.name,
        ids=ids,
        id_codes=id_codes,
        id_uniques=[str(u) for u in id_uniques],
        week_codes=week_codes,
        weeks=weeks,
        ordinal=week_ord[week_codes] if len(weeks) else np.zeros(0, np.int64),
        ili=frame["ili_visits"].to_numpy(dtype=np.float64),
        total=frame["total_visits"].to_numpy(dtype=np.float64),
        sites=sites,
        lines=lines,
        names=names,
        rate=frame["rate_percent"].to_numpy(dtype=np.float64) if "rate_percent" in frame else None,
        columns=columns,
    )


def _fmt(x: float) -> str:
    return str(int(x)) if np.isfinite(x) and float(x).is_integer() else f"{x:g}"


def _pct(ili: float, total: float) -> float:
    return 100.0 * ili / total if total > 0 else float("nan")


# --------------------------------------------------------------------------- one table


def validate_table(
    table: CountTable,
    districts: Districts | None,
    settings: ValidationSettings,
    *,
    weekly_file: bool = False,
    today: dt.date | None = None,
    season_start_week: int = 40,
    latest_week_rules: bool = True,
    prior: CountTable | None = None,
    weekly_inferred: bool = False,
) -> ValidationReport:
    """Check the values of one count table (validation stage 2).

    Rules (rule id, severity):

    * ``row-duplicate`` (error): more than one row for a district and week;
      one finding per extra row, listing every line of that key.
    * ``count-negative``, ``count-not-integer`` (error): per cell of
      ``ili_visits``, ``total_visits``, ``reporting_sites``.
    * ``count-ili-exceeds-total`` (error): ``ili_visits > total_visits``.
    * ``count-zero-total`` (error): ``total_visits == 0`` and ``ili_visits > 0``.
    * ``id-not-in-boundaries`` (error, only when ``districts`` is given): one
      finding per unknown id, at its first line, listing all its lines and
      near matches in the boundaries (same id after adding or removing leading
      zeros, ignoring case and whitespace, or by string similarity).
    * ``week-mixed`` (error, only when ``weekly_file``): one finding per week
      other than the latest, at its first line.
    * ``week-future`` (error, only when ``today`` is given): a week whose
      first day is after ``today``.
    * ``week-gap`` (warning): inside one season (``season_start_week`` to the
      week before it next year, :func:`sitrep.weeks.season_of`), weeks missing
      between the first and last week present. Gaps between seasons are normal.
    * ``rate-mismatch`` (warning): ``|rate - 100 * ili / total| >
      settings.rate_tolerance_pp`` where a rate column was supplied and
      ``total > 0`` (the rate is in percent, converted by the reader).
    * ``district-missing-latest`` (warning): a boundary district with no row
      in the latest week.
    * ``district-name-differs`` (info): the table's name for a district, after
      NFC normalisation, case folding and collapsing whitespace, differs from
      the boundary name.
    * ``id-leading-zeros`` (error, with ``districts``): an all-digit id not in
      the boundaries that matches a boundary id once leading zeros are added
      (or, when the boundary file stores its ids as numbers, removed); the
      message names ``input.id_zero_pad`` with the width that would match.
    * ``id-numeric-as-text`` (info, with ``districts``): one note per file
      whose id cells were stored as whole numbers (XLSX, Parquet, a
      Shapefile's numeric field), saying how many of them matched.
    * ``district-no-visits`` (warning): a district with 0 total and 0 ILI
      visits in the latest week; the message says whether its reporting
      sites were 0 (a closed site), above 0, or not supplied.
    * ``value-spike`` (warning): for each district in the latest week with
      ``x`` its ILI% (100 * ili / total): its reference ``ref`` is the median
      of its ILI% over the previous 8 weeks when at least ``spike_min_weeks``
      of them have data (``MAD`` their unscaled median absolute deviation),
      else its latest previous week (``MAD`` = 0), taken from this table or,
      for weeks it does not hold, from ``prior``. The jurisdiction's movement
      ``g`` is, without the district itself and among districts with data in
      both weeks, the pooled ILI% now over the pooled ILI% in each previous
      week (the median over the district's weeks, or the one week). The
      value is flagged when both hold: ``|x - g*ref| / max(g*MAD,
      spike_mad_floor_pp, SE) > spike_robust_z`` (SE the binomial standard
      error at ``g*ref`` and this week's visits, so that small districts'
      one-visit jumps are not flagged), and, when at least 5 districts are
      assessed, the robust z of its log deviation ``log((x+f)/(g*ref+f))``
      (``f`` the floor) among all assessed districts, ``|d - median| /
      max(1.4826*MAD, 0.1)``, also exceeds ``spike_robust_z``. A week in which
      every district rises is the jurisdiction's movement, not many faults;
      a ten-fold jump in one district stands out on both counts.

    Parameters
    ----------
    table : CountTable
        The typed table from :func:`sitrep.ingest.read.read_count_table`.
    districts : Districts or None
        The checked boundaries; ``None`` skips the boundary rules.
    settings : ValidationSettings
        Thresholds. Read with defaults when absent: ``spike_min_weeks`` (5)
        and ``spike_mad_floor_pp`` (0.1 percentage points).
    weekly_file : bool, optional
        The file is declared to hold one week only.
    today : datetime.date or None, optional
        Today's date for the future-week rule (passed in, never read from the
        clock here); ``None`` skips the rule.
    season_start_week : int, optional
        First week of the season (``weeks.season_start_week``).
    latest_week_rules : bool, optional
        Run the rules about the latest week (``district-missing-latest``,
        ``district-no-visits``, ``value-spike``). Pass False for the history
        file, whose last week is not the report week.
    prior : CountTable or None, optional
        Last week's table as received: the value-spike rule takes the weeks
        this table lacks from it (a one-week extract has no past weeks).
    weekly_inferred : bool, optional
        ``weekly_file`` was inferred from a one-week prior file rather than
        declared (the week-mixed message says which).

    Returns
    -------
    ValidationReport
        Findings sorted by file, line, column and rule.

    Notes
    -----
    The MAD floor keeps a district whose previous weeks were all equal
    (often all zero) from being flagged for any change at all. The floor,
    the minimum of 5 weeks, the minimum of 5 districts and the 0.1 floor of
    the log spread are common practice, not published values; 1.4826 makes
    the MAD a consistent estimate of a normal standard deviation.
    """
    a = _arrays(table)
    out = FindingCollector(a.file)
    n = len(a.ids)
    if n == 0:
        return out.report()
    c_id, c_week = a.col("district_id"), a.col("week")
    c_ili, c_total, c_sites = a.col("ili_visits"), a.col("total_visits"), a.col("reporting_sites")

    # duplicates of (district, week)
    key = a.id_codes.astype(np.int64) * max(len(a.weeks), 1) + a.week_codes
    dup = pd.Series(key).duplicated(keep=False).to_numpy()
    if dup.any():
        rows = np.flatnonzero(dup)
        groups: dict[int, list[int]] = {}
        for i in rows[np.lexsort((a.lines[rows], key[rows]))]:
            groups.setdefault(int(key[i]), []).append(int(i))
        for members in groups.values():
            all_lines = ", ".join(str(a.lines[i]) for i in members)
            first = members[0]
            for i in members[1:]:
                out.add(
                    Severity.ERROR,
                    "row-duplicate",
                    f"expected one row for district {a.ids[i]} in {a.weeks[a.week_codes[i]]}, "
                    f"got rows on lines {all_lines}; keep one row (counts would be doubled)",
                    line=a.line(i),
                    column=c_id,
                    district_id=str(a.ids[i]),
                    value=f"first on line {a.lines[first]}",
                )

    # impossible counts
    for values, column in ((a.ili, c_ili), (a.total, c_total), (a.sites, c_sites)):
        finite = np.isfinite(values)
        for i in np.flatnonzero(finite & (values < 0)):
            out.add(
                Severity.ERROR,
                "count-negative",
                f"expected a count of 0 or more, got {_fmt(values[i])}; correct the count",
                line=a.line(i),
                column=column,
                district_id=str(a.ids[i]),
                value=_fmt(values[i]),
            )
        for i in np.flatnonzero(finite & (values != np.round(values))):
            out.add(
                Severity.ERROR,
                "count-not-integer",
                f"expected a whole number, got {_fmt(values[i])}; counts cannot be fractional",
                line=a.line(i),
                column=column,
                district_id=str(a.ids[i]),
                value=_fmt(values[i]),
            )
    for i in np.flatnonzero(a.ili > a.total):
        out.add(
            Severity.ERROR,
            "count-ili-exceeds-total",
            f"expected ILI visits ({_fmt(a.ili[i])}) to be at most total visits "
            f"({_fmt(a.total[i])}); ILI visits are part of all visits. Check whether the two "
            "columns were swapped or a count mistyped",
            line=a.line(i),
            column=c_ili,
            district_id=str(a.ids[i]),
            value=f"{_fmt(a.ili[i])} > {_fmt(a.total[i])}",
        )
    for i in np.flatnonzero((a.total == 0) & (a.ili > 0)):
        out.add(
            Severity.ERROR,
            "count-zero-total",
            f"expected total visits above 0 when ILI visits are {_fmt(a.ili[i])}, got 0; "
            "enter the total visits (the ILI% would be undefined)",
            line=a.line(i),
            column=c_total,
            district_id=str(a.ids[i]),
            value="0",
        )

    latest_code = len(a.weeks) - 1
    latest = a.weeks[latest_code]
    in_latest = a.week_codes == latest_code

    # boundaries
    if districts is not None:
        boundary_ids = [str(x) for x in districts.ids]
        known = set(boundary_ids)
        first_line = _first_index(a.id_codes, len(a.id_uniques), a.lines)
        numeric_lines = set(table.frame.attrs.get(NUMERIC_ID_LINES_ATTR, ()))
        b_info = districts.frame.attrs.get(NUMERIC_IDS_ATTR) or {}
        b_numeric = bool(b_info.get("numeric"))
        by_digits: dict[str, str] = {}
        for b in boundary_ids:
            if b.isascii() and b.isdigit() and b.lstrip("0"):
                by_digits.setdefault(b.lstrip("0"), b)
        for code, ident in enumerate(a.id_uniques):
            if ident in known:
                continue
            rows = np.flatnonzero(a.id_codes == code)
            line_list = ", ".join(str(x) for x in sorted(a.lines[rows])[:10])
            more = f" and {len(rows) - 10} more" if len(rows) > 10 else ""
            line = int(a.lines[first_line[code]]) or None
            padded = (
                by_digits.get(ident.lstrip("0"))
                if ident.isascii() and ident.isdigit() and ident.lstrip("0")
                else None
            )
            if padded is not None and (
                len(padded) > len(ident) or (b_numeric and len(ident) > len(padded))
            ):
                width = max(len(padded), len(ident))
                if len(ident) > len(padded):
                    stored = "the boundary file stores its ids as numbers"
                elif numeric_lines.intersection(a.lines[rows].tolist()):
                    stored = "the table stored it as a number"
                else:
                    stored = "a spreadsheet probably stored it as a number"
                out.add(
                    Severity.ERROR,
                    "id-leading-zeros",
                    f"district id {ident!r} (lines {line_list}{more}) matches the boundary id "
                    f"{padded!r} only with leading zeros ({stored} and the zeros were lost). "
                    f"Set input.id_zero_pad = {width} to pad all-digit ids to {width} digits in "
                    "the table and the boundaries, or store the ids as text with their zeros",
                    line=line,
                    column=c_id,
                    district_id=ident,
                    value=ident,
                )
                continue
            near = _near_matches(ident, boundary_ids)
            hint = (
                f"; near matches in the boundaries: {', '.join(repr(m) for m in near)}"
                if near
                else "; no similar id in the boundaries"
            )
            out.add(
                Severity.ERROR,
                "id-not-in-boundaries",
                f"expected every district id to be in the boundary file, got {ident!r} "
                f"(lines {line_list}{more}){hint}. Correct the id in the table (keep ids as text "
                "with their leading zeros) or add the district to the boundaries",
                line=line,
                column=c_id,
                district_id=ident,
                value=ident,
            )
        if numeric_lines:
            rows = np.flatnonzero(np.isin(a.lines, list(numeric_lines)))
            numeric_ids = sorted({str(a.ids[i]) for i in rows})
            matched = sum(1 for i in numeric_ids if i in known)
            outcome = (
                f"all {matched} matched the boundaries"
                if matched == len(numeric_ids)
                else f"{matched} of {len(numeric_ids)} matched the boundaries (the others are "
                "listed as errors)"
            )
            out.add(
                Severity.INFO,
                "id-numeric-as-text",
                f"district ids in column {c_id!r} were stored as numbers on {len(rows)} "
                f"line{'s' if len(rows) != 1 else ''}; read as text (e.g. {numeric_ids[0]}), "
                f"{outcome}",
                line=int(a.lines[rows].min()),
                column=c_id,
                value=str(len(numeric_ids)),
            )
        if b_numeric and latest_week_rules:
            in_table = set(a.id_uniques)
            matched = sum(1 for i in boundary_ids if i in in_table)
            outcome = (
                f"all {matched} match the table"
                if matched == len(boundary_ids)
                else f"{matched} of {len(boundary_ids)} have rows in the table"
            )
            out.items.append(
                Finding(
                    Severity.INFO,
                    "id-numeric-as-text",
                    f"district ids in the boundary field {b_info.get('column')!r} are stored as "
                    f"numbers; read as text (e.g. {boundary_ids[0]}), {outcome}",
                    file=districts.source.path.name,
                    column=str(b_info.get("column")),
                    value=str(len(boundary_ids)),
                )
            )
        present = set(np.asarray(a.ids[in_latest], dtype=object).tolist())
        for ident in boundary_ids if latest_week_rules else ():
            if ident not in present:
                out.add(
                    Severity.WARNING,
                    "district-missing-latest",
                    f"district {ident} ({districts.names.get(ident, '')}) is in the boundaries "
                    f"but has no row for {latest}; it is shown as not reported. Ask whether its "
                    "data are late",
                    column=c_id,
                    district_id=ident,
                    value=str(latest),
                )
        _names_differ(a, dict(districts.names), out)

    # weeks
    first_of_week = _first_index(a.week_codes, len(a.weeks), a.lines)
    if weekly_file and len(a.weeks) > 1:
        counts = np.bincount(a.week_codes, minlength=len(a.weeks))
        listing = ", ".join(f"{w} ({counts[k]} rows)" for k, w in enumerate(a.weeks))
        declared = (
            "because last week's file (input.prior_table) held one week, this file is taken as "
            "one week too; set input.weekly_file = false if it is a season-to-date extract"
            if weekly_inferred
            else "input.weekly_file = true declares one week; send one file per week or set "
            "input.weekly_file = false for a season-to-date extract"
        )
        for k, w in enumerate(a.weeks[:-1]):
            i = first_of_week[k]
            week_lines = sorted(int(x) for x in a.lines[a.week_codes == k])
            out.add(
                Severity.ERROR,
                "week-mixed",
                f"expected one week in this file, got {listing}; the rows of {w} are on "
                f"line{'s' if len(week_lines) != 1 else ''} {_line_list(week_lines)} ({declared})",
                line=a.line(i),
                column=c_week,
                district_id=str(a.ids[i]),
                value=str(w),
            )
    if today is not None:
        for k, w in enumerate(a.weeks):
            if w.start > today:
                i = first_of_week[k]
                out.add(
                    Severity.ERROR,
                    "week-future",
                    f"expected weeks that have started by today ({today.isoformat()}), got {w} "
                    f"which starts on {w.start.isoformat()}; check the week column and "
                    "weeks.system",
                    line=a.line(i),
                    column=c_week,
                    district_id=str(a.ids[i]),
                    value=str(w),
                )
    if not weekly_file:
        by_season: dict[str, list[int]] = {}
        for k, w in enumerate(a.weeks):
            by_season.setdefault(season_of(w, season_start_week)[0], []).append(k)
        for season, ks in by_season.items():
            for prev, nxt in zip(ks, ks[1:], strict=False):
                missing = a.weeks[nxt].weeks_since(a.weeks[prev]) - 1
                if missing > 0:
                    i = first_of_week[nxt]
                    gap = (
                        str(a.weeks[prev] + 1)
                        if missing == 1
                        else f"{a.weeks[prev] + 1} to {a.weeks[nxt] - 1}"
                    )
                    out.add(
                        Severity.WARNING,
                        "week-gap",
                        f"expected consecutive weeks within season {season}, got no rows for "
                        f"{gap} ({missing} week{'s' if missing > 1 else ''}) between "
                        f"{a.weeks[prev]} and {a.weeks[nxt]}; check that the extract is complete",
                        line=a.line(i),
                        column=c_week,
                        value=str(a.weeks[nxt]),
                    )

    # supplied rate
    if a.rate is not None:
        with np.errstate(divide="ignore", invalid="ignore"):
            computed = np.where(
                a.total > 0, 100.0 * a.ili / np.where(a.total > 0, a.total, 1), np.nan
            )
        diff = np.abs(a.rate - computed)
        c_rate = a.col("rate_percent")
        for i in np.flatnonzero(np.isfinite(diff) & (diff > settings.rate_tolerance_pp + 1e-9)):
            out.add(
                Severity.WARNING,
                "rate-mismatch",
                f"expected the supplied rate to match 100 * ILI / total = {computed[i]:.2f}% "
                f"within {settings.rate_tolerance_pp:g} pp, got {a.rate[i]:.4g}% (read in "
                "percent); sitrep uses the counts. Check the rate column and its declared scale "
                "(columns.rate_scale)",
                line=a.line(i),
                column=c_rate,
                district_id=str(a.ids[i]),
                value=f"{a.rate[i]:g}",
            )

    if latest_week_rules:
        _closed(a, out)
        _spikes(a, settings, out, _arrays(prior) if prior is not None else None)
    return out.report()


def _closed(a: _Arrays, out: FindingCollector) -> None:
    """Warn for each district with no visits at all in the latest week (a closed site?)."""
    last = len(a.weeks) - 1
    for i in np.flatnonzero((a.week_codes == last) & (a.total == 0) & (a.ili == 0)).tolist():
        sites = a.sites[i]
        if np.isfinite(sites) and sites == 0:
            why = "and 0 reporting sites: its sites were probably closed or did not report"
        elif np.isfinite(sites):
            why = f"although {_fmt(sites)} site{'s' if sites != 1 else ''} reported"
        else:
            why = "(no reporting-sites column to tell a closed site from a quiet week)"
        out.add(
            Severity.WARNING,
            "district-no-visits",
            f"district {a.ids[i]} has 0 visits in {a.weeks[last]} {why}; it is left out of the "
            "statistics (no ILI% can be computed), not shown as 0% ILI. Ask the district whether "
            "data are missing",
            line=a.line(i),
            column=a.col("total_visits"),
            district_id=str(a.ids[i]),
            value="0",
        )


def _first_index(codes: np.ndarray, n: int, lines: np.ndarray) -> np.ndarray:
    """Row index of the smallest line per code."""
    order = np.lexsort((lines, codes))
    first = np.full(n, -1, dtype=np.int64)
    sorted_codes = codes[order]
    starts = np.flatnonzero(np.r_[True, sorted_codes[1:] != sorted_codes[:-1]])
    first[sorted_codes[starts]] = order[starts]
    return first


def _squash(text: str) -> str:
    return re.sub(r"\s+", "", unicodedata.normalize("NFC", text)).casefold()


def _near_matches(ident: str, candidates: Sequence[str]) -> list[str]:
    """Boundary ids that ``ident`` probably meant, most likely first."""
    found: list[str] = []
    squashed = _squash(ident)
    for c in candidates:
        sc = _squash(c)
        if sc == squashed or (
            squashed.lstrip("0") == sc.lstrip("0") and squashed.lstrip("0") != ""
        ):
            found.append(c)
    for c in difflib.get_close_matches(ident, list(candidates), n=3, cutoff=0.75):
        if c not in found:
            found.append(c)
    return found[:3]


def _names_differ(a: _Arrays, boundary_names: dict[str, str], out: FindingCollector) -> None:
    """One info finding per district whose table name differs from the boundary name."""
    name_codes, name_uniques = pd.factorize(a.names)
    pair = a.id_codes.astype(np.int64) * (len(name_uniques) + 1) + name_codes
    pair_codes, _ = pd.factorize(pair)
    first = _first_index(pair_codes, int(pair_codes.max()) + 1, a.lines)
    seen: set[str] = set()
    for i in sorted(first.tolist(), key=lambda r: a.lines[r]):
        ident, name = str(a.ids[i]), str(a.names[i])
        want = boundary_names.get(ident) or ""
        if ident in seen or not name or not want:
            continue
        if _squash_keep(name) != _squash_keep(want):
            seen.add(ident)
            out.add(
                Severity.INFO,
                "district-name-differs",
                f"the table names district {ident} {name!r} but the boundaries call it "
                f"{want!r}; the report uses the boundary name",
                line=a.line(int(i)),
                column=a.col("district_name"),
                district_id=ident,
                value=name,
            )


def _squash_keep(text: str) -> list[str]:
    return unicodedata.normalize("NFC", text).casefold().split()


_SPIKE_LOG_SPREAD_FLOOR = 0.1
"""Smallest spread of the districts' log deviations in the value-spike rule (common practice)."""
_SPIKE_MIN_DISTRICTS = 5
"""Fewest districts for comparing one district's deviation with the others' (common practice)."""


def _grid(a: _Arrays, last: int, ids: dict[str, int]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """ILI visits, total visits and row index per district x week ``last - 8 .. last``."""
    ili = np.full((len(ids), 9), np.nan)
    tot = np.full((len(ids), 9), np.nan)
    row = np.full((len(ids), 9), -1, dtype=np.int64)
    keep = np.flatnonzero((a.ordinal >= last - 8) & (a.ordinal <= last))
    keep = keep[[str(a.ids[i]) in ids for i in keep]] if len(keep) else keep
    d = np.array([ids[str(a.ids[i])] for i in keep], dtype=np.int64)
    w = a.ordinal[keep] - (last - 8)
    ili[d, w], tot[d, w], row[d, w] = a.ili[keep], a.total[keep], keep
    return ili, tot, row


def _spikes(
    a: _Arrays, settings: ValidationSettings, out: FindingCollector, prior: _Arrays | None = None
) -> None:
    z_limit = settings.spike_robust_z
    min_weeks = int(settings.spike_min_weeks)
    floor = float(settings.spike_mad_floor_pp)
    last = int(a.ordinal.max())
    ids = {ident: k for k, ident in enumerate(a.id_uniques)}
    ili, tot, row = _grid(a, last, ids)
    if prior is not None and len(prior.ids):
        # weeks this table does not hold come from last week's table as received
        p_ili, p_tot, _ = _grid(prior, last, ids)
        gap = np.isnan(tot)
        gap[:, 8] = False
        ili[gap], tot[gap] = p_ili[gap], p_tot[gap]
    with np.errstate(divide="ignore", invalid="ignore"):
        valid = (tot > 0) & (ili >= 0) & (ili <= tot)  # other rows are errors of other rules
        pct = np.where(valid, 100.0 * ili / tot, np.nan)
    now_ok = np.isfinite(pct[:, 8])
    past = pct[:, :8]
    n_past = np.isfinite(past).sum(axis=1)
    long = n_past >= min_weeks
    # reference: the median of the previous 8 weeks, or (too few of them) the latest previous week
    last_seen = np.where(np.isfinite(past), np.arange(8), -1).max(axis=1)
    usable = now_ok & (long | (last_seen >= 0))
    if not usable.any():
        return
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN rows stay NaN on purpose
        med = np.where(long, np.nanmedian(past, axis=1), np.nan)
        mad = np.where(long, np.nanmedian(np.abs(past - med[:, None]), axis=1), 0.0)
    one_week = np.take_along_axis(past, np.maximum(last_seen, 0)[:, None], axis=1)[:, 0]
    ref = np.where(long, med, one_week)

    # The jurisdiction's own movement, without the district itself: for each past week, the
    # pooled ILI% now over the pooled ILI% then, among districts reporting in both weeks.
    both = np.isfinite(pct) & np.isfinite(pct[:, [8]])
    ili0, tot0 = np.where(both, ili, 0.0), np.where(both, tot, 0.0)
    now_ili, now_tot = np.where(both, ili[:, [8]], 0.0), np.where(both, tot[:, [8]], 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        p_now = (now_ili.sum(axis=0) - now_ili) / (now_tot.sum(axis=0) - now_tot)
        p_then = (ili0.sum(axis=0) - ili0) / (tot0.sum(axis=0) - tot0)
        ratio = np.where(both & (p_then > 0), p_now / p_then, np.nan)[:, :8]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN rows stay NaN on purpose
        g_long = np.nanmedian(np.where(np.isfinite(past), ratio, np.nan), axis=1)
    g_one = np.take_along_axis(ratio, np.maximum(last_seen, 0)[:, None], axis=1)[:, 0]
    g = np.where(long, g_long, g_one)
    g = np.where(np.isfinite(g) & (g > 0), g, 1.0)

    x = pct[:, 8]
    expected = ref * g
    n_now = np.maximum(np.nan_to_num(tot[:, 8], nan=1.0), 1.0)
    p_exp = np.clip(expected / 100.0, 0.005, 0.995)
    # Binomial noise at this week's visits: a small district's ILI% jumps by whole points
    # from one visit, which is not a data fault.
    binomial_se = 100.0 * np.sqrt(p_exp * (1.0 - p_exp) / n_now)
    spread = np.maximum(np.maximum(mad * g, floor), binomial_se)
    with np.errstate(invalid="ignore"):
        own_z = np.abs(x - expected) / spread
    # ... and against the other districts: robust z of the log deviation from the movement
    with np.errstate(divide="ignore", invalid="ignore"):
        dev = np.log((x + floor) / (expected + floor))
    cross_z = np.full(len(x), np.inf)
    if usable.sum() >= _SPIKE_MIN_DISTRICTS:
        centre = float(np.median(dev[usable]))
        scale = max(
            1.4826 * float(np.median(np.abs(dev[usable] - centre))), _SPIKE_LOG_SPREAD_FLOOR
        )
        cross_z = np.abs(dev - centre) / scale
    flagged = usable & (own_z > z_limit) & (cross_z > z_limit)
    for d in np.flatnonzero(flagged).tolist():
        i = int(row[d, 8])
        if long[d]:
            basis = f"its previous 8 weeks (median {med[d]:.2f}%, MAD {mad[d]:.2f} pp)"
        else:
            basis = (
                f"its previous week ({one_week[d]:.2f}% in {a.weeks[-1] - (8 - int(last_seen[d]))})"
            )
        others = (
            f"; {cross_z[d]:.1f} against the other districts' changes"
            if np.isfinite(cross_z[d])
            else ""
        )
        out.add(
            Severity.WARNING,
            "value-spike",
            f"district {a.ids[i]} has ILI {x[d]:.2f}% in {a.weeks[a.week_codes[i]]}, far from "
            f"{basis} even after the other districts' movement this week (x{g[d]:.2f}, "
            f"expected {expected[d]:.2f}%): robust z {own_z[d]:.1f} > {z_limit:g}{others}; "
            "check the counts with the district before publishing",
            line=a.line(i),
            column=a.col("ili_visits"),
            district_id=str(a.ids[i]),
            value=f"{x[d]:.2f}",
        )


# --------------------------------------------------------------------------- two tables


def validate_against_prior(
    current: CountTable, prior: CountTable, settings: ValidationSettings
) -> ValidationReport:
    """Compare this week's table with last week's table as it was received.

    Rules (rule id, severity):

    * ``week-system-differs`` (error): the tables use different week systems.
    * ``week-backwards`` (error): the current latest week is not after the
      prior latest week.
    * ``week-skipped`` (warning): the current latest week is more than one
      week after the prior latest week (week arithmetic of
      :class:`~sitrep.weeks.EpiWeek`, so a week 53 is counted). The message
      says which value the change uses: the week before the latest as given in
      this week's table, or none (the change is then not assessed) when the
      table has no rows for that week either.
    * ``district-new`` / ``district-dropped`` (warning): a district in the
      current latest week but in no row of the prior latest week, and the
      reverse.
    * ``revision-summary`` (warning, at most one): rows of the same district
      and week in both tables whose ILI visits, total visits or reporting sites
      differ; gives the number of changed cells and rows and the largest
      change of ILI% (100 * ili / total) in percentage points.
    * ``revision-large`` (warning): one per revised row whose ILI% changed by
      more than ``settings.revision_report_pp`` or whose total visits changed
      by more than ``settings.revision_report_share`` of the old total.
    * ``revision-row-removed`` (warning): a row of a week present in both
      tables that is missing from the current one.
    * ``completeness-drop`` (warning): the sum of total visits, or of
      reporting sites, over all districts in the current latest week is lower
      than the same sum for the prior latest week (as revised in the current
      table where it holds that week) by more than
      ``settings.completeness_drop_share``.
    * ``stale-resend`` (warning): a district's latest row has the same ILI
      visits, total visits and reporting sites as its row of the week before
      (from the current table, else the prior one), with total visits > 0.

    Parameters
    ----------
    current : CountTable
        This week's table.
    prior : CountTable
        Last week's table as received then.
    settings : ValidationSettings
        Thresholds of the revision and completeness rules.

    Returns
    -------
    ValidationReport
        Findings (on the current table's file) sorted by file, line, column, rule.
    """
    cur, pri = _arrays(current), _arrays(prior)
    out = FindingCollector(cur.file)
    if not cur.weeks or not pri.weeks:
        return out.report()
    c_week, c_id = cur.col("week"), cur.col("district_id")
    if current.system is not prior.system:
        out.add(
            Severity.ERROR,
            "week-system-differs",
            f"expected both tables in the same week system, got {current.system.label} this week "
            f"and {prior.system.label} last week; set weeks.system to the convention of the data",
        )
        return out.report()
    latest, prior_latest = cur.weeks[-1], pri.weeks[-1]
    step = latest.weeks_since(prior_latest)
    first_latest = _first_index(cur.week_codes, len(cur.weeks), cur.lines)[-1]
    if step <= 0:
        out.add(
            Severity.ERROR,
            "week-backwards",
            f"this week's table ends at {latest} but last week's already reached "
            f"{prior_latest}; expected {prior_latest + 1}. Check that this is the new extract "
            "and not last week's file sent again",
            line=cur.line(int(first_latest)),
            column=c_week,
            value=str(latest),
        )
    elif step > 1:
        week_before = latest - 1
        skipped = step - 1
        if any(w == week_before for w in cur.weeks):
            basis = (
                f"the change is computed against {week_before} as given in this week's table "
                "(no figure for it was published)"
            )
        else:
            basis = (
                f"this week's table has no rows for {week_before} either, so the week-over-week "
                "change is not assessed"
            )
        out.add(
            Severity.WARNING,
            "week-skipped",
            f"this week's table ends at {latest} but last week's ended at {prior_latest}; "
            f"{skipped} week{'s' if skipped > 1 else ''} ({prior_latest + 1}"
            + (f" to {latest - 1}" if skipped > 1 else "")
            + f") had no extract: this table comes over {step} weeks after last week's, not "
            f"one, and {basis}. Check for a missed delivery",
            line=cur.line(int(first_latest)),
            column=c_week,
            value=str(latest),
        )

    # district set of the latest weeks
    cur_latest_rows = np.flatnonzero(cur.week_codes == len(cur.weeks) - 1)
    pri_latest_rows = np.flatnonzero(pri.week_codes == len(pri.weeks) - 1)
    cur_ids = {str(cur.ids[i]): int(i) for i in cur_latest_rows[::-1]}
    pri_ids = {str(pri.ids[i]) for i in pri_latest_rows}
    if step > 0:
        for ident in sorted(set(cur_ids) - pri_ids):
            i = cur_ids[ident]
            out.add(
                Severity.WARNING,
                "district-new",
                f"district {ident} reports in {latest} but had no row in last week's table for "
                f"{prior_latest}; check that it is a new reporting district, not a changed id",
                line=cur.line(i),
                column=c_id,
                district_id=ident,
                value=ident,
            )
        for ident in sorted(pri_ids - set(cur_ids)):
            out.add(
                Severity.WARNING,
                "district-dropped",
                f"district {ident} reported in {prior_latest} last week but has no row for "
                f"{latest}; it is shown as not reported. Ask whether its data are late",
                column=c_id,
                district_id=ident,
                value=ident,
            )

    _revisions(cur, pri, settings, out)
    _completeness(cur, pri, settings, out)
    _stale(cur, pri, out)
    return out.report()


def _keys(a: _Arrays, vocab: dict[str, int]) -> np.ndarray:
    id_num = np.array([vocab.setdefault(u, len(vocab)) for u in a.id_uniques], dtype=np.int64)
    return np.asarray(id_num[a.id_codes] * 1_000_000 + a.ordinal)


def _lookup(keys_from: np.ndarray, keys_to: np.ndarray) -> np.ndarray:
    """For each key in ``keys_to``, the first row of ``keys_from`` holding it, else -1."""
    rows = pd.Series(np.arange(len(keys_from)), index=keys_from)
    rows = rows[~rows.index.duplicated(keep="first")]
    pos = rows.index.get_indexer(keys_to)
    return np.asarray(np.where(pos >= 0, rows.to_numpy()[np.maximum(pos, 0)], -1))


def _revisions(
    cur: _Arrays, pri: _Arrays, settings: ValidationSettings, out: FindingCollector
) -> None:
    vocab: dict[str, int] = {}
    kc, kp = _keys(cur, vocab), _keys(pri, vocab)
    cur_latest_ord = int(cur.ordinal.max())
    # past weeks = weeks present in both tables, other than the current latest
    shared_ord = np.intersect1d(np.unique(cur.ordinal), np.unique(pri.ordinal))
    shared_ord = shared_ord[shared_ord != cur_latest_ord]
    if len(shared_ord) == 0:
        return
    p_rows = np.flatnonzero(np.isin(pri.ordinal, shared_ord))
    match = _lookup(kc, kp[p_rows])
    found = match >= 0
    pr, cr = p_rows[found], match[found]

    def differs(x: np.ndarray, y: np.ndarray) -> np.ndarray:
        return ~((x == y) | (np.isnan(x) & np.isnan(y)))

    d_ili = differs(pri.ili[pr], cur.ili[cr])
    d_tot = differs(pri.total[pr], cur.total[cr])
    d_sites = differs(pri.sites[pr], cur.sites[cr])
    changed_cells = int(d_ili.sum() + d_tot.sum() + d_sites.sum())
    changed_rows = d_ili | d_tot | d_sites
    week_of = {int((w.start - _EPOCH).days // 7): w for w in cur.weeks}
    if changed_cells:
        with np.errstate(divide="ignore", invalid="ignore"):
            old_pct = np.where(pri.total[pr] > 0, 100 * pri.ili[pr] / pri.total[pr], np.nan)
            new_pct = np.where(cur.total[cr] > 0, 100 * cur.ili[cr] / cur.total[cr], np.nan)
            d_pct = np.abs(new_pct - old_pct)
            share = np.where(
                pri.total[pr] > 0,
                np.abs(cur.total[cr] - pri.total[pr]) / pri.total[pr],
                np.where(cur.total[cr] != pri.total[pr], np.inf, 0.0),
            )
        rows_idx = np.flatnonzero(changed_rows)
        finite = rows_idx[np.isfinite(d_pct[rows_idx])]
        if len(finite):
            j = finite[np.argmax(d_pct[finite])]
            largest = (
                f"; the largest change of ILI% is {d_pct[j]:.2f} pp (district {cur.ids[cr[j]]}, "
                f"{week_of[int(cur.ordinal[cr[j]])]}: {old_pct[j]:.2f}% -> {new_pct[j]:.2f}%)"
            )
        else:
            largest = ""
        n_weeks = len(np.unique(cur.ordinal[cr[rows_idx]]))
        out.add(
            Severity.WARNING,
            "revision-summary",
            f"{changed_cells} cell{'s' if changed_cells != 1 else ''} in {len(rows_idx)} "
            f"row{'s' if len(rows_idx) != 1 else ''} of {n_weeks} past "
            f"week{'s' if n_weeks != 1 else ''} differ from last week's table{largest}. "
            "Past weeks are provisional; the report uses this week's values",
            value=str(changed_cells),
        )
        big = rows_idx[
            (np.nan_to_num(d_pct[rows_idx], nan=0.0) > settings.revision_report_pp)
            | (share[rows_idx] > settings.revision_report_share)
        ]
        for j in big:
            i = int(cr[j])
            by_pct = np.isfinite(d_pct[j]) and d_pct[j] > settings.revision_report_pp
            out.add(
                Severity.WARNING,
                "revision-large",
                f"district {cur.ids[i]}, {week_of[int(cur.ordinal[i])]} was revised: ILI visits "
                f"{_fmt(pri.ili[pr[j]])} -> {_fmt(cur.ili[i])}, total visits "
                f"{_fmt(pri.total[pr[j]])} -> {_fmt(cur.total[i])}, ILI% "
                f"{_pct(pri.ili[pr[j]], pri.total[pr[j]]):.2f} -> "
                f"{_pct(cur.ili[i], cur.total[i]):.2f} (limits "
                f"{settings.revision_report_pp:g} pp, {settings.revision_report_share:.0%} of "
                "visits); check the revision with the data provider",
                line=cur.line(i),
                column=cur.col("ili_visits") if by_pct else cur.col("total_visits"),
                district_id=str(cur.ids[i]),
                value=f"{_fmt(pri.ili[pr[j]])}/{_fmt(pri.total[pr[j]])} -> "
                f"{_fmt(cur.ili[i])}/{_fmt(cur.total[i])}",
            )
    for j in np.flatnonzero(~found):
        p = int(p_rows[j])
        out.add(
            Severity.WARNING,
            "revision-row-removed",
            f"district {pri.ids[p]}, {week_of.get(int(pri.ordinal[p]), pri.weeks[pri.week_codes[p]])} "
            "was in last week's table but is missing from this week's; check whether the row "
            "was withdrawn on purpose",
            column=cur.col("district_id"),
            district_id=str(pri.ids[p]),
            value=str(pri.weeks[pri.week_codes[p]]),
        )


def _completeness(
    cur: _Arrays, pri: _Arrays, settings: ValidationSettings, out: FindingCollector
) -> None:
    last = int(cur.ordinal.max())
    ref = int(pri.ordinal.max())
    if ref >= last:
        return
    source = cur if (cur.ordinal == ref).any() else pri
    now_rows = cur.ordinal == last
    ref_rows = source.ordinal == ref
    latest = cur.weeks[-1]
    ref_week = source.weeks[source.week_codes[np.flatnonzero(ref_rows)[0]]]
    for label, internal, now_v, ref_v in (
        ("total visits", "total_visits", cur.total[now_rows], source.total[ref_rows]),
        ("reporting sites", "reporting_sites", cur.sites[now_rows], source.sites[ref_rows]),
    ):
        if not np.isfinite(now_v).any() or not np.isfinite(ref_v).any():
            continue
        now_sum, ref_sum = float(np.nansum(now_v)), float(np.nansum(ref_v))
        if ref_sum <= 0:
            continue
        fall = 1.0 - now_sum / ref_sum
        if fall > settings.completeness_drop_share:
            out.add(
                Severity.WARNING,
                "completeness-drop",
                f"{label} fell from {_fmt(ref_sum)} in {ref_week} to {_fmt(now_sum)} in {latest} "
                f"({fall:.0%}, above the {settings.completeness_drop_share:.0%} limit); the fall "
                "may reflect reporting, not activity. Describe it as incomplete reporting, "
                "not as a fall in illness",
                column=cur.col(internal),
                value=f"{_fmt(ref_sum)} -> {_fmt(now_sum)}",
            )


def _stale(cur: _Arrays, pri: _Arrays, out: FindingCollector) -> None:
    last = int(cur.ordinal.max())
    vocab: dict[str, int] = {}
    kc, kp = _keys(cur, vocab), _keys(pri, vocab)
    now = np.flatnonzero(cur.ordinal == last)
    want = kc[now] - 1  # same district, previous week
    in_cur = _lookup(kc, want)
    in_pri = _lookup(kp, want)
    for j, i in enumerate(now):
        if in_cur[j] >= 0:
            src, r = cur, int(in_cur[j])
        elif in_pri[j] >= 0:
            src, r = pri, int(in_pri[j])
        else:
            continue
        same = (
            cur.ili[i] == src.ili[r]
            and cur.total[i] == src.total[r]
            and (
                cur.sites[i] == src.sites[r] or (np.isnan(cur.sites[i]) and np.isnan(src.sites[r]))
            )
        )
        if same and cur.total[i] > 0:
            prev = src.weeks[src.week_codes[r]]
            out.add(
                Severity.WARNING,
                "stale-resend",
                f"district {cur.ids[i]} has exactly the same counts in {cur.weeks[-1]} as in "
                f"{prev} ({_fmt(cur.ili[i])} ILI of {_fmt(cur.total[i])} visits); check that "
                "last week's data were not sent again",
                line=cur.line(int(i)),
                column=cur.col("ili_visits"),
                district_id=str(cur.ids[i]),
                value=f"{_fmt(cur.ili[i])}/{_fmt(cur.total[i])}",
            )
