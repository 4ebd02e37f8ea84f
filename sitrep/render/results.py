"""Machine-readable results: results.csv, results.json and validation.json.

results.csv is UTF-8 with a byte order mark (a spreadsheet opened by
double-click then shows accented names correctly); results.json and
validation.json are plain UTF-8. Counts are whole numbers (``12``, not
``12.0``) and a missing value is an empty field (``null`` in JSON). Every
column and key is described in :mod:`sitrep.render.dictionary`. Text cells that a spreadsheet would evaluate as a formula (starting with
``=``, ``+``, ``-``, ``@``, TAB, CR or LF) are prefixed with an apostrophe
(OWASP ASVS 1.2.10 guidance on CSV injection); numbers are written as numbers.
Suppressed districts' values are blanked unless the configuration keeps them.
"""

from __future__ import annotations

import io
import json
import math
from typing import Any

import pandas as pd

from sitrep.analysis.week import WeekAnalysis
from sitrep.config import AnalysisSettings
from sitrep.model import ValidationReport
from sitrep.render.dictionary import BOM

__all__ = [
    "COUNT_COLUMNS",
    "RESULT_COLUMNS",
    "csv_field",
    "neutralise_formula",
    "results_csv",
    "results_json",
    "validation_json",
]

RESULT_COLUMNS = (
    "jurisdiction", "week", "week_start", "week_end",
    "district_id", "district_name", "reporting_sites", "ili_visits", "total_visits",
    "ili_percent", "ci_low", "ci_high", "suppressed", "prior_ili_percent",
    "prior_ili_percent_published", "change_pp", "change_low_pp", "change_high_pp",
    "change_relative", "change_from_zero", "change_p", "change_class", "tercile", "eb_percent",
    "local_i", "p_value", "q_value", "cluster_label", "prior_cluster_label", "transition",
)
COUNT_COLUMNS = ("reporting_sites", "ili_visits", "total_visits")
"""Columns holding counts: written as whole numbers."""
_SUPPRESSIBLE = ("ili_visits", "ili_percent", "ci_low", "ci_high", "change_pp", "change_low_pp",
                 "change_high_pp", "change_relative", "change_p", "eb_percent")
_TRIGGERS = ("=", "+", "-", "@", "\t", "\r", "\n")


def neutralise_formula(text: str) -> str:
    """Prefix ``'`` to text a spreadsheet would run as a formula.

    >>> neutralise_formula("=HYPERLINK(1)"), neutralise_formula("Ostrelle")
    ("'=HYPERLINK(1)", 'Ostrelle')
    """
    return "'" + text if text.startswith(_TRIGGERS) else text


def _records(
    analysis: WeekAnalysis, settings: AnalysisSettings, jurisdiction: str
) -> list[dict[str, Any]]:
    out = []
    fixed = {
        "jurisdiction": jurisdiction,
        "week_start": analysis.week.start.isoformat(),
        "week_end": analysis.week.end.isoformat(),
    }
    for rec in analysis.table.to_dict("records"):
        row = {}
        for col in RESULT_COLUMNS:
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
        if row["suppressed"] and not settings.keep_suppressed_values:
            for col in _SUPPRESSIBLE:
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
    """
    buffer = io.StringIO()
    buffer.write(",".join(csv_field(c) for c in RESULT_COLUMNS) + "\n")
    for row in _records(analysis, settings, jurisdiction):
        cells = []
        for col in RESULT_COLUMNS:
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
        "ili_percent": clean(j.ili_percent), "ci_low": clean(j.ci_low), "ci_high": clean(j.ci_high),
        "prior_ili_percent": clean(j.prior_ili_percent),
        "prior_ili_percent_published": clean(j.prior_ili_percent_published),
        "change_pp": clean(j.change_pp), "change_class": clean(j.change_class),
        "ili_visits": clean(j.ili_visits), "total_visits": clean(j.total_visits),
        "districts_reporting": clean(j.n_districts_reporting), "districts": clean(j.n_districts_total),
    }
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
