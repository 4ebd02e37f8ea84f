"""The data dictionary of results.csv and results.json: one list, three outputs.

:data:`FIELDS` is the only place where a results column or key is described.
From it come ``results-dictionary.csv`` (written into every output folder and
bundle), the Markdown table of ``docs/results-dictionary.md``
(``python tools/make_results_dictionary.py`` rewrites it) and nothing else;
``tests/test_results.py`` fails when a column of the results has no entry
here, or an entry names no column.
"""

from __future__ import annotations

import dataclasses

__all__ = [
    "DISTRICTS",
    "FIELDS",
    "SUMMARY",
    "TOP",
    "Field",
    "dictionary_csv",
    "dictionary_markdown",
    "names_in",
]

DISTRICTS = "results.csv; results.json districts[]"
"""Where the per-district columns appear: every row of results.csv, every record of results.json."""
SUMMARY = "results.json jurisdiction"
"""The jurisdiction-wide figures of results.json."""
TOP = "results.json"
"""The top-level keys of results.json."""

BOM = b"\xef\xbb\xbf"
"""The UTF-8 byte order mark: a spreadsheet opened by double-click then reads the file as UTF-8."""


@dataclasses.dataclass(frozen=True)
class Field:
    """One column (or key) of the results.

    Attributes
    ----------
    name : str
        The column name in results.csv, or the key in results.json.
    where : str
        :data:`DISTRICTS`, :data:`SUMMARY` or :data:`TOP`.
    meaning : str
        What the value is, in a sentence.
    unit : str
        Its unit or type: ``count``, ``percent``, ``percentage points``,
        ``ratio``, ``probability``, ``true/false``, ``date``, ``text`` or
        ``category`` (with the values it takes).
    method : str
        How it is computed, with the section of docs/methods.md, or where it
        comes from.
    """

    name: str
    where: str
    meaning: str
    unit: str
    method: str


_BLANK_SUPPRESSED = " Blank for a district withheld this week (suppressed), docs/methods.md §6.2."
_BLANK_PRIOR = " Blank for a district withheld last week (prior_suppressed), docs/methods.md §6.2."
_BLANK_EITHER = " Blank for a district withheld this week or last week, docs/methods.md §6.2."

FIELDS: tuple[Field, ...] = (
    # ---- one row per district (results.csv, results.json "districts")
    Field(
        "jurisdiction",
        DISTRICTS,
        "The jurisdiction the report is for.",
        "text",
        "report.jurisdiction in the configuration; the same in every row, so weekly files stack.",
    ),
    Field(
        "week",
        DISTRICTS,
        "The report week, e.g. 2026-W47.",
        "text (year-W week)",
        "Epidemiological week in the system of weeks.system (MMWR or ISO 8601), docs/methods.md §1.1.",
    ),
    Field(
        "week_start",
        DISTRICTS,
        "First day of the report week.",
        "date (YYYY-MM-DD)",
        "From the week and its system (Sunday for MMWR, Monday for ISO 8601), docs/methods.md §1.1.",
    ),
    Field(
        "week_end",
        DISTRICTS,
        "Last day of the report week.",
        "date (YYYY-MM-DD)",
        "week_start plus six days, docs/methods.md §1.1.",
    ),
    Field(
        "district_id",
        DISTRICTS,
        "The district's code, as in the boundary file.",
        "text",
        "input.columns.district_id in the table, matched to input.boundaries_id_column; kept as text "
        "(leading zeros stay).",
    ),
    Field(
        "district_name",
        DISTRICTS,
        "The district's name.",
        "text",
        "From the boundary file, else from the table's name column.",
    ),
    Field(
        "reporting_sites",
        DISTRICTS,
        "Sentinel sites that reported for the district this week.",
        "count",
        "From the table's reporting-sites column; blank when the table has none.",
    ),
    Field(
        "ili_visits",
        DISTRICTS,
        "Visits meeting the influenza-like-illness case definition this week.",
        "count",
        "From the table (revised counts as in this week's file)." + _BLANK_SUPPRESSED,
    ),
    Field(
        "total_visits",
        DISTRICTS,
        "All visits at the reporting sites this week.",
        "count",
        "From the table; the denominator of ili_percent." + _BLANK_SUPPRESSED,
    ),
    Field(
        "ili_percent",
        DISTRICTS,
        "Share of visits that were for influenza-like illness.",
        "percent",
        "100 × ili_visits / total_visits, docs/methods.md §2." + _BLANK_SUPPRESSED,
    ),
    Field(
        "ci_low",
        DISTRICTS,
        "Lower end of the confidence interval of ili_percent.",
        "percent",
        "Wilson score (default) or Clopper-Pearson interval at analysis.confidence, "
        "docs/methods.md §2." + _BLANK_SUPPRESSED,
    ),
    Field(
        "ci_high",
        DISTRICTS,
        "Upper end of the confidence interval of ili_percent.",
        "percent",
        "As ci_low, docs/methods.md §2." + _BLANK_SUPPRESSED,
    ),
    Field(
        "suppressed",
        DISTRICTS,
        "Whether the district's counts are withheld this week to protect small counts.",
        "true/false",
        "Primary suppression (fewer than analysis.min_visits visits, "
        "an ILI count from 1 to analysis.min_count - 1, a zero with analysis.suppress_zero) or "
        "complementary suppression, or withheld by an earlier publication, docs/methods.md §6.2.",
    ),
    Field(
        "prior_suppressed",
        DISTRICTS,
        "Whether the district's counts are withheld for last week.",
        "true/false",
        "The same rules on last week's revised counts, docs/methods.md §6.2.",
    ),
    Field(
        "prior_ili_percent",
        DISTRICTS,
        "Last week's ILI percentage, as revised in this week's table.",
        "percent",
        "From this week's table where it has last week's row, else from last week's "
        "table, docs/methods.md §3." + _BLANK_PRIOR,
    ),
    Field(
        "prior_ili_percent_published",
        DISTRICTS,
        "Last week's ILI percentage as published in last week's table.",
        "percent",
        "From input.prior_table; blank without it. Differs from prior_ili_percent when counts "
        "were revised, docs/methods.md §9.4." + _BLANK_PRIOR,
    ),
    Field(
        "change_pp",
        DISTRICTS,
        "Change of ili_percent since last week.",
        "percentage points",
        "ili_percent minus prior_ili_percent, docs/methods.md §3." + _BLANK_EITHER,
    ),
    Field(
        "change_low_pp",
        DISTRICTS,
        "Lower end of the confidence interval of change_pp.",
        "percentage points",
        "Newcombe hybrid score interval, docs/methods.md §3." + _BLANK_EITHER,
    ),
    Field(
        "change_high_pp",
        DISTRICTS,
        "Upper end of the confidence interval of change_pp.",
        "percentage points",
        "Newcombe hybrid score interval, docs/methods.md §3." + _BLANK_EITHER,
    ),
    Field(
        "change_relative",
        DISTRICTS,
        "Relative change since last week (0.5 means 50% higher).",
        "ratio",
        "ili_percent / prior_ili_percent − 1; blank when last week was 0%, "
        "docs/methods.md §3." + _BLANK_EITHER,
    ),
    Field(
        "change_from_zero",
        DISTRICTS,
        "Whether last week was 0% and this week is above it.",
        "true/false",
        "When true the relative change is undefined and the report says "
        '"from 0 to X%", docs/methods.md §3.',
    ),
    Field(
        "change_p",
        DISTRICTS,
        "Two-sided p-value of the week-over-week change.",
        "probability",
        "Pooled two-proportion z test (default) or Poisson score test, analysis.change_test, "
        "docs/methods.md §3." + _BLANK_EITHER,
    ),
    Field(
        "change_class",
        DISTRICTS,
        "The change in words used by the map.",
        "category: increase, decrease, similar, not assessable",
        "increase or decrease when the change is detectable and at least analysis.min_change_pp, "
        "docs/methods.md §3.",
    ),
    Field(
        "tercile",
        DISTRICTS,
        "The district's third of this week's ILI percentages.",
        "category: 1 low, 2 middle, 3 high, 0 no data",
        "Type 7 quantiles of the values not withheld, docs/methods.md §4; 0 for a withheld district.",
    ),
    Field(
        "eb_percent",
        DISTRICTS,
        "ILI percentage smoothed towards the jurisdiction's rate.",
        "percent",
        "Global empirical Bayes (Marshall 1991), docs/methods.md §6.1." + _BLANK_SUPPRESSED,
    ),
    Field(
        "local_i",
        DISTRICTS,
        "Local Moran's I of the district.",
        "statistic (no unit)",
        "esda Moran_Local on analysis.cluster_variable with row-standardised weights, "
        "docs/methods.md §5.3; blank when not tested.",
    ),
    Field(
        "p_value",
        DISTRICTS,
        "Pseudo p-value of local_i.",
        "probability",
        "(M + 1) / (R + 1) from analysis.permutations conditional permutations, "
        "docs/methods.md §5.3; blank when not tested.",
    ),
    Field(
        "q_value",
        DISTRICTS,
        "p_value adjusted for testing every district.",
        "probability",
        "Benjamini-Hochberg false discovery rate (analysis.correction), docs/methods.md §5.6.",
    ),
    Field(
        "cluster_label",
        DISTRICTS,
        "The district's cluster this week.",
        "category: high-high, low-low, high-low, low-high, not significant, no neighbours, "
        "no data, not assessable",
        "Quadrant of a significant local_i, docs/methods.md §5.3 and §5.5.",
    ),
    Field(
        "prior_cluster_label",
        DISTRICTS,
        "The district's cluster last week, on the same settings.",
        "category: as cluster_label",
        "As cluster_label on last week's revised counts; blank without last week.",
    ),
    Field(
        "transition",
        DISTRICTS,
        "How the district's cluster changed since last week.",
        "category: new, persisting, ended, changed type, not comparable, or blank",
        "Compares cluster_label with prior_cluster_label, docs/methods.md §5.6; blank when "
        "neither week is significant.",
    ),
    # ---- results.json, top level
    Field("week", TOP, "The report week.", "text (year-W week)", "As the district column week."),
    Field(
        "week_start",
        TOP,
        "First day of the report week.",
        "date (YYYY-MM-DD)",
        "As the district column week_start.",
    ),
    Field(
        "week_end",
        TOP,
        "Last day of the report week.",
        "date (YYYY-MM-DD)",
        "As the district column week_end.",
    ),
    Field(
        "prior_week",
        TOP,
        "The week before the report week.",
        "text (year-W week)",
        "The report week minus one in the same system; null when unknown.",
    ),
    Field(
        "jurisdiction_name",
        TOP,
        "The jurisdiction the report is for.",
        "text",
        "report.jurisdiction in the configuration.",
    ),
    Field(
        "jurisdiction",
        TOP,
        "The jurisdiction-wide figures (the keys below).",
        "object",
        "Pooled over every district with data, docs/methods.md §2.",
    ),
    Field(
        "tercile_cuts",
        TOP,
        "The two cut points between the low, middle and high thirds.",
        "percent (two numbers)",
        "docs/methods.md §4; null with too few districts.",
    ),
    Field(
        "districts",
        TOP,
        "One record per district, with the columns of results.csv.",
        "list",
        "In the order of the boundary file.",
    ),
    # ---- results.json "jurisdiction"
    Field(
        "ili_percent",
        SUMMARY,
        "The jurisdiction's ILI percentage.",
        "percent",
        "Pooled ratio 100 × Σ ILI visits / Σ visits over the districts that reported, "
        "docs/methods.md §2 (not a mean of district percentages).",
    ),
    Field(
        "ci_low",
        SUMMARY,
        "Lower end of the interval of the jurisdiction's ILI percentage.",
        "percent",
        "As the district column, on the pooled counts, docs/methods.md §2.",
    ),
    Field(
        "ci_high",
        SUMMARY,
        "Upper end of the interval of the jurisdiction's ILI percentage.",
        "percent",
        "As the district column, on the pooled counts, docs/methods.md §2.",
    ),
    Field(
        "prior_ili_percent",
        SUMMARY,
        "Last week's pooled ILI percentage, as revised.",
        "percent",
        "docs/methods.md §3.",
    ),
    Field(
        "prior_ili_percent_published",
        SUMMARY,
        "Last week's pooled ILI percentage as published.",
        "percent",
        "From input.prior_table; null without it.",
    ),
    Field(
        "change_pp",
        SUMMARY,
        "Change of the pooled ILI percentage since last week.",
        "percentage points",
        "docs/methods.md §3.",
    ),
    Field(
        "change_class",
        SUMMARY,
        "The jurisdiction's change in words.",
        "category: as the district column",
        "docs/methods.md §3.",
    ),
    Field(
        "ili_visits",
        SUMMARY,
        "ILI visits in every district this week.",
        "count",
        "Sum of the district counts (withheld districts included); null when the total itself "
        "is withheld.",
    ),
    Field(
        "total_visits",
        SUMMARY,
        "All visits in every district this week.",
        "count",
        "Sum of the district counts (withheld districts included); null when the total itself "
        "is withheld.",
    ),
    Field(
        "districts_reporting",
        SUMMARY,
        "Districts with at least one visit this week.",
        "count",
        "From the table.",
    ),
    Field("districts", SUMMARY, "Districts in the boundary file.", "count", "From the boundaries."),
    Field(
        "withheld",
        SUMMARY,
        "Whether this week's jurisdiction total is withheld.",
        "true/false",
        "true only when no choice of districts protects the small counts; the counts, "
        "percentages and change are then null, docs/methods.md §6.2.",
    ),
    Field(
        "prior_withheld",
        SUMMARY,
        "Whether last week's jurisdiction total is withheld.",
        "true/false",
        "As withheld, for last week, docs/methods.md §6.2.",
    ),
)
"""Every column of results.csv and key of results.json, in file order within each part."""

_HEADER = ("name", "appears_in", "meaning", "unit", "method")


def names_in(where: str) -> tuple[str, ...]:
    """The names documented for one part of the results (:data:`DISTRICTS`, :data:`SUMMARY`, :data:`TOP`)."""
    return tuple(f.name for f in FIELDS if f.where == where)


def _csv_field(text: str) -> str:
    if any(c in text for c in (",", '"', "\r", "\n")):
        return '"' + text.replace('"', '""') + '"'
    return text


def dictionary_csv() -> bytes:
    """``results-dictionary.csv``: one row per field, UTF-8 with a byte order mark, LF line ends."""
    rows = [_HEADER, *((f.name, f.where, f.meaning, f.unit, f.method) for f in FIELDS)]
    text = "".join(",".join(_csv_field(cell) for cell in row) + "\n" for row in rows)
    return BOM + text.encode("utf-8")


def dictionary_markdown() -> str:
    """The Markdown body of docs/results-dictionary.md: one table per part of the results."""
    parts = [
        ("results.csv and the records of results.json `districts`", DISTRICTS),
        ("results.json, top level", TOP),
        ("results.json `jurisdiction`", SUMMARY),
    ]
    out: list[str] = []
    for title, where in parts:
        out += [
            f"## {title}",
            "",
            "| name | meaning | unit | method |",
            "| --- | --- | --- | --- |",
        ]
        for f in FIELDS:
            if f.where == where:
                cells = (f"`{f.name}`", f.meaning, f.unit, f.method)
                out.append("| " + " | ".join(c.replace("|", "\\|") for c in cells) + " |")
        out.append("")
    return "\n".join(out)
