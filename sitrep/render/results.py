"""Machine-readable results: results.csv, results.json, validation.json and the internal
data-quality annex (``internal-data-quality.csv``).

results.csv is UTF-8 with a byte order mark (a spreadsheet opened by
double-click then shows accented names correctly); results.json and
validation.json are plain UTF-8. Counts are whole numbers (``12``, not
``12.0``) and a missing value is an empty field (``null`` in JSON). Every
column and key is described in :mod:`sitrep.render.dictionary`. Text cells that a spreadsheet would evaluate as a formula (starting with
``=``, ``+``, ``-``, ``@``, TAB, CR or LF) are prefixed with an apostrophe
(OWASP ASVS 1.2.10 guidance on CSV injection); numbers are written as numbers.
Withheld districts' values are blanked (docs/methods.md §6.2); with
``output.keep_suppressed_values`` their true values go only to
:data:`INTERNAL_RESULTS` (:func:`internal_results_csv`), which is never attached
or e-mailed.
"""

from __future__ import annotations

import dataclasses
import io
import json
import math
import re
from collections.abc import Collection, Iterable, Mapping
from typing import Any

import pandas as pd

from sitrep.analysis.disclosure import Earlier
from sitrep.analysis.week import WeekAnalysis
from sitrep.config import AnalysisSettings
from sitrep.model import Finding, ValidationReport
from sitrep.render.dictionary import BOM
from sitrep.render.wording.sentences import redacted_finding

__all__ = [
    "COUNT_COLUMNS",
    "INTERNAL_QUALITY_COLUMNS",
    "INTERNAL_QUALITY_CSV",
    "INTERNAL_RESULTS",
    "RESULT_COLUMNS",
    "csv_field",
    "earlier_publication",
    "internal_quality_csv",
    "internal_results_csv",
    "neutralise_formula",
    "redact_findings",
    "results_csv",
    "results_json",
    "validation_json",
]

RESULT_COLUMNS = (
    "jurisdiction",
    "week",
    "week_start",
    "week_end",
    "district_id",
    "district_name",
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
COUNT_COLUMNS = ("reporting_sites", "ili_visits", "total_visits")
"""Columns holding counts: written as whole numbers."""
_SUPPRESSIBLE = (
    "ili_visits",
    "total_visits",
    "ili_percent",
    "ci_low",
    "ci_high",
    "change_pp",
    "change_low_pp",
    "change_high_pp",
    "change_relative",
    "change_p",
    "eb_percent",
    "local_i",
    "p_value",
    "q_value",
)
_PRIOR_SUPPRESSIBLE = (
    "prior_ili_percent",
    "prior_ili_percent_published",
    "change_pp",
    "change_low_pp",
    "change_high_pp",
    "change_relative",
    "change_p",
)
INTERNAL_RESULTS = "internal-results-UNSUPPRESSED.csv"
"""Bundle file with the true values of withheld districts (``output.keep_suppressed_values``)."""
INTERNAL_COLUMNS = (*RESULT_COLUMNS, "withheld_rule", "prior_withheld_rule")
"""Columns of :data:`INTERNAL_RESULTS`: those of results.csv and the rule that withheld each week."""
_TRIGGERS = ("=", "+", "-", "@", "\t", "\r", "\n")


def neutralise_formula(text: str) -> str:
    """Prefix ``'`` to text a spreadsheet would run as a formula.

    >>> neutralise_formula("=HYPERLINK(1)"), neutralise_formula("Ostrelle")
    ("'=HYPERLINK(1)", 'Ostrelle')
    """
    return "'" + text if text.startswith(_TRIGGERS) else text


def _records(
    analysis: WeekAnalysis, settings: AnalysisSettings, jurisdiction: str, *, internal: bool = False
) -> list[dict[str, Any]]:
    """Rows of the published table (withheld values blank), or with ``internal`` the true ones."""
    out = []
    fixed = {
        "jurisdiction": jurisdiction,
        "week_start": analysis.week.start.isoformat(),
        "week_end": analysis.week.end.isoformat(),
    }
    table = analysis.unprotected_table if internal else analysis.table
    columns = INTERNAL_COLUMNS if internal else RESULT_COLUMNS
    now, before = analysis.disclosure.this_week, analysis.disclosure.prior_week
    for rec in table.to_dict("records"):
        if internal:
            r_now, r_before = now.rule_of(rec["district_id"]), before.rule_of(rec["district_id"])
            rec["withheld_rule"] = r_now.value if r_now is not None else ""
            rec["prior_withheld_rule"] = r_before.value if r_before is not None else ""
        row = {}
        for col in columns:
            value = fixed[col] if col in fixed else rec.get(col)
            if hasattr(value, "item"):
                value = value.item()
            if value is not None and not isinstance(value, (str, bool)) and pd.isna(value):
                value = None  # NaN and pandas' NA
            if isinstance(value, float) and not math.isfinite(value):
                value = None
            if col in COUNT_COLUMNS and isinstance(value, float) and value.is_integer():
                value = int(value)
            row[col] = value
        if not internal:
            if row["suppressed"]:
                for col in _SUPPRESSIBLE:
                    row[col] = None
            if row["prior_suppressed"]:
                for col in _PRIOR_SUPPRESSIBLE:
                    row[col] = None
        out.append(row)
    return out


def csv_field(text: str) -> str:
    r"""One CSV field quoted as RFC 4180 §2 requires.

    A field holding a comma, a double quote, CR or LF is enclosed in double
    quotes with each ``"`` doubled; any other field is written as it is.
    (Python's ``csv.writer`` with an LF line terminator does not quote a lone
    CR, which spreadsheet programs then read as a line break.)

    >>> csv_field('North "East", part'), csv_field("a\rb"), csv_field("Ostrelle")
    ('"North ""East"", part"', '"a\rb"', 'Ostrelle')
    """
    if any(c in text for c in (",", '"', "\r", "\n")):
        return '"' + text.replace('"', '""') + '"'
    return text


def results_csv(analysis: WeekAnalysis, settings: AnalysisSettings, *, jurisdiction: str) -> bytes:
    """The per-district table as CSV: UTF-8 with a byte order mark, RFC 4180 quoting by
    :func:`csv_field`, LF line ends.

    ``jurisdiction`` (``report.jurisdiction``) fills the first column, so that
    weekly files of several jurisdictions stack. Text cells pass through
    :func:`neutralise_formula` first; counts (:data:`COUNT_COLUMNS`) are whole
    numbers, other numbers are written with ``repr`` after rounding to 10
    decimals, booleans as ``true``/``false``, missing values as empty fields.
    Withheld values are empty.
    """
    return _csv(analysis, settings, jurisdiction, internal=False)


def internal_results_csv(
    analysis: WeekAnalysis, settings: AnalysisSettings, *, jurisdiction: str
) -> bytes:
    """:func:`results_csv` with the true values of withheld districts and the rule that withheld
    each (for :data:`INTERNAL_RESULTS`; internal use only)."""
    return _csv(analysis, settings, jurisdiction, internal=True)


def _csv(
    analysis: WeekAnalysis, settings: AnalysisSettings, jurisdiction: str, *, internal: bool
) -> bytes:
    columns = INTERNAL_COLUMNS if internal else RESULT_COLUMNS
    buffer = io.StringIO()
    buffer.write(",".join(csv_field(c) for c in columns) + "\n")
    for row in _records(analysis, settings, jurisdiction, internal=internal):
        cells = []
        for col in columns:
            value = row[col]
            if value is None:
                cells.append("")
            elif isinstance(value, bool):
                cells.append("true" if value else "false")
            elif isinstance(value, float):
                cells.append(repr(round(value, 10)))
            elif isinstance(value, int):
                cells.append(str(value))
            else:
                cells.append(neutralise_formula(str(value)))
        buffer.write(",".join(csv_field(c) for c in cells) + "\n")
    return BOM + buffer.getvalue().encode("utf-8")


def results_json(analysis: WeekAnalysis, settings: AnalysisSettings, *, jurisdiction: str) -> bytes:
    """The per-district table (the rows of results.csv) and the jurisdiction summary as JSON."""
    j = analysis.jurisdiction

    def clean(x: Any) -> Any:
        if hasattr(x, "item"):
            x = x.item()
        if isinstance(x, float) and not math.isfinite(x):
            return None
        if hasattr(x, "value") and not isinstance(x, (int, float, str)):
            return x.value
        return x

    summary = {
        "ili_percent": clean(j.ili_percent),
        "ci_low": clean(j.ci_low),
        "ci_high": clean(j.ci_high),
        "prior_ili_percent": clean(j.prior_ili_percent),
        "prior_ili_percent_published": clean(j.prior_ili_percent_published),
        "change_pp": clean(j.change_pp),
        "change_class": clean(j.change_class),
        "ili_visits": clean(j.ili_visits),
        "total_visits": clean(j.total_visits),
        "districts_reporting": clean(j.n_districts_reporting),
        "districts": clean(j.n_districts_total),
    }
    summary.update(withheld=j.withheld, prior_withheld=j.prior_withheld)
    if j.withheld:
        summary.update(ili_visits=None, total_visits=None)
    doc = {
        "week": str(analysis.week),
        "week_start": analysis.week.start.isoformat(),
        "week_end": analysis.week.end.isoformat(),
        "prior_week": str(analysis.prior_week) if analysis.prior_week else None,
        "jurisdiction_name": jurisdiction,
        "jurisdiction": summary,
        "tercile_cuts": list(analysis.terciles.cuts) if analysis.terciles.cuts else None,
        "districts": _records(analysis, settings, jurisdiction),
    }
    return (json.dumps(doc, indent=2, sort_keys=True, ensure_ascii=False) + "\n").encode("utf-8")


def validation_json(report: ValidationReport) -> bytes:
    """Every finding, machine-readable."""
    doc = {
        "blocked": report.blocked,
        "errors": len(report.errors),
        "warnings": len(report.warnings),
        "findings": [f.as_dict() for f in report.findings],
    }
    return (json.dumps(doc, indent=2, sort_keys=True, ensure_ascii=False) + "\n").encode("utf-8")


def earlier_publication(doc: Any, week_label: str) -> Earlier:
    """What one archived ``results.json`` published of week ``week_label``.

    The districts it withheld that week (as its report week, ``suppressed``,
    or as its last week, ``prior_suppressed``) and the counts it showed for
    the report week. Raises ValueError when ``doc`` is not a results document.
    """
    if not isinstance(doc, dict) or not isinstance(doc.get("districts"), list):
        raise ValueError("not a results.json document (no 'districts' list)")
    withheld: set[str] = set()
    shown: list[tuple[str, int, int]] = []
    as_report_week = str(doc.get("week")) == week_label
    as_prior_week = str(doc.get("prior_week")) == week_label
    for row in doc["districts"]:
        if not isinstance(row, dict):
            raise ValueError("a 'districts' entry is not an object")
        ident = str(row.get("district_id"))
        if as_report_week:
            if row.get("suppressed"):
                withheld.add(ident)
            else:
                x, n = row.get("ili_visits"), row.get("total_visits")
                if isinstance(x, (int, float)) and isinstance(n, (int, float)):
                    shown.append((ident, int(x), int(n)))
        if as_prior_week and row.get("prior_suppressed"):
            withheld.add(ident)
    return Earlier(frozenset(withheld), tuple(sorted(shown)))


def redact_findings(report: ValidationReport, withheld: Iterable[str]) -> ValidationReport:
    """The findings with the message and value of every finding about a withheld district replaced.

    A finding is about a district when its ``district_id`` is one of ``withheld``
    or its message names it ("district 042"); the replacement keeps the rule,
    file, line and column and says that the values are withheld. Used for every
    published copy of the findings (report, validation.json); the run's own
    check output is unchanged.
    """
    ids = sorted(set(withheld))
    if not ids:
        return report
    named = re.compile(r"\bdistrict (?:" + "|".join(re.escape(i) for i in ids) + r")\b")

    def redact(f: Finding) -> Finding:
        if f.district_id in ids or named.search(f.message):
            return dataclasses.replace(f, message=redacted_finding(f.rule), value=None)
        return f

    return ValidationReport(tuple(redact(f) for f in report.findings))


INTERNAL_QUALITY_CSV = "internal-data-quality.csv"
"""The internal annex: for the surveillance team, never attached to the partner e-mail."""
INTERNAL_QUALITY_COLUMNS = (
    "severity",
    "rule",
    "file",
    "line",
    "column",
    "district_id",
    "district_name",
    "named_on_page_one",
    "value",
    "message",
)


def internal_quality_csv(
    report: ValidationReport, names: Mapping[str, str], named_on_page_one: Collection[str]
) -> bytes:
    """Every finding with its rule id, file, line and column, for the reviewer (UTF-8 CSV with a BOM).

    One row per finding, errors first, then warnings, then notes, each in the
    order validation found them; ``named_on_page_one`` says whether the
    finding's district is one page 1 names (those hold a bundle for review).
    Quoting and formula neutralising as in :func:`results_csv`.
    """
    order = {"error": 0, "warning": 1, "info": 2}
    findings = sorted(report.findings, key=lambda f: order.get(f.severity.value, 3))
    buffer = io.StringIO()
    buffer.write(",".join(INTERNAL_QUALITY_COLUMNS) + "\n")
    for f in findings:
        district = f.district_id or ""
        cells = [
            f.severity.value,
            f.rule,
            f.file,
            "" if f.line is None else str(f.line),
            f.column or "",
            district,
            names.get(district, "") if district else "",
            ("true" if district in named_on_page_one else "false") if district else "",
            "" if f.value is None else str(f.value),
            f.message,
        ]
        buffer.write(",".join(csv_field(neutralise_formula(c)) for c in cells) + "\n")
    return BOM + buffer.getvalue().encode("utf-8")
