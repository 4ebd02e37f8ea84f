"""The one registry of validation rules: id, severity, stage, description and check.

:data:`REGISTRY` is the only list of the rules. The readers raise the rules
of the file stages while they parse; :mod:`sitrep.ingest.validate` runs the
``check`` function of every rule of the value stages in registry order; the
documentation page ``docs/rules.md`` (``tools/make_rules_doc.py``) and the
``RULES`` listings of the ingest modules are derived from it. To add a rule,
write its check (a pure function of the facts, yielding
:class:`~sitrep.ingest.findings.Hit` records) and add one :class:`Rule` here.
"""

from __future__ import annotations

import dataclasses
import enum
import inspect
import re
from collections.abc import Callable, Iterable
from typing import Any

from sitrep.ingest import boundary_rules as b
from sitrep.ingest import prior_rules as p
from sitrep.ingest import spike_rule as s
from sitrep.ingest import table_rules as t
from sitrep.ingest.findings import Hit
from sitrep.model import Severity

__all__ = ["REGISTRY", "Rule", "Stage", "by_code", "descriptions", "rules_markdown", "rules_of"]


class Stage(enum.Enum):
    """Where a rule is applied."""

    TABLE_FILE = "reading a count table"
    """:func:`sitrep.ingest.read.read_count_table`: every cell parsed and typed."""
    BOUNDARY_FILE = "reading the boundaries"
    """:func:`sitrep.ingest.geometry.read_districts`: layer, CRS, ids and shapes."""
    TABLE = "values of one table"
    """:func:`sitrep.ingest.validate.validate_table` (this week's table and the history)."""
    PRIOR = "this week's table against last week's"
    """:func:`sitrep.ingest.validate.validate_against_prior`."""


ERR, WARN, NOTE = Severity.ERROR, Severity.WARNING, Severity.INFO
_FILE, _GEO = Stage.TABLE_FILE, Stage.BOUNDARY_FILE
_BOTH = (Stage.TABLE_FILE, Stage.BOUNDARY_FILE)


@dataclasses.dataclass(frozen=True)
class Rule:
    """One validation rule.

    ``check`` is the pure function of a value stage (``None`` for a rule the
    readers raise while parsing). ``latest_week``: run only on the table of
    the report week, not on the history file. ``stops``: when it fires, the
    later rules of its stage are not run (their comparison would mean nothing).
    """

    code: str
    severity: Severity
    description: str
    stages: tuple[Stage, ...]
    check: Callable[[Any], Iterable[Hit]] | None = None
    latest_week: bool = False
    stops: bool = False


def _r(
    code: str, severity: Severity, stages: Stage | tuple[Stage, ...], description: str, **kw: Any
) -> Rule:
    return Rule(
        code, severity, description, stages if isinstance(stages, tuple) else (stages,), **kw
    )


REGISTRY: tuple[Rule, ...] = (
    # reading a count table
    _r(
        "file-too-large",
        ERR,
        _FILE,
        "the file is larger than input.max_input_mb (checked before parsing)",
    ),
    _r(
        "file-format-unknown",
        ERR,
        _FILE,
        "the file extension is not .csv/.txt, .xlsx or .parquet/.pq",
    ),
    _r("file-empty", ERR, _FILE, "the file holds no bytes or only blank lines"),
    _r("file-header-only", ERR, _FILE, "the file has a header but no data rows"),
    _r("file-encoding", ERR, _FILE, "the bytes are not valid in the declared input.encoding"),
    _r("file-unparseable", ERR, _FILE, "the file cannot be parsed as the declared format"),
    _r("sheet-missing", ERR, _FILE, "the XLSX workbook has no worksheet named input.sheet"),
    _r(
        "sheet-elsewhere",
        ERR,
        _FILE,
        "the first worksheet lacks the columns another worksheet has (input.sheet)",
    ),
    _r("row-field-count", ERR, _FILE, "a CSV row has a different number of fields from the header"),
    _r("row-blank", NOTE, _FILE, "a blank row inside the table was skipped"),
    _r("column-duplicated", ERR, _FILE, "two header cells carry the same column name"),
    _r(
        "column-missing",
        ERR,
        _BOTH,
        "a required mapped column (table) or the id column (boundaries) is absent",
    ),
    _r(
        "column-optional-missing",
        WARN,
        _BOTH,
        "an optional mapped column (table: name, sites) or the name column (boundaries) is absent",
    ),
    _r(
        "week-columns-ambiguous",
        ERR,
        _FILE,
        "the column map names no usable week column, or several",
    ),
    _r(
        "id-missing",
        ERR,
        _BOTH,
        "a district id cell (table) or a feature's id (boundaries) is empty",
    ),
    _r("id-numeric", ERR, _BOTH, "a district id stored as a number is not a whole number"),
    _r(
        "id-whitespace-stripped",
        NOTE,
        _BOTH,
        "ids had surrounding spaces, removed (one note per file)",
    ),
    _r("id-zero-padded", NOTE, _BOTH, "ids were padded with zeros to input.id_zero_pad digits"),
    _r("cell-missing", ERR, _FILE, "a required count cell is empty"),
    _r(
        "cell-not-number",
        ERR,
        _FILE,
        "a count or rate cell is not a plain number in the declared format",
    ),
    _r(
        "count-not-integer",
        ERR,
        (_FILE, Stage.TABLE),
        "a count is fractional",
        check=t.count_not_integer,
    ),
    _r("week-invalid", ERR, _FILE, "a week cell is not a valid epi week in the declared system"),
    _r(
        "week-date-weekday",
        ERR,
        _FILE,
        "a week start/end date is not on the system's first/last weekday",
    ),
    _r("reader-warning", NOTE, _BOTH, "the underlying file reader emitted a warning"),
    # reading the boundaries
    _r("boundaries-too-large", ERR, _GEO, "the boundary file is larger than input.max_input_mb"),
    _r(
        "boundaries-format-unknown", ERR, _GEO, "the extension is not .geojson/.json, .gpkg or .shp"
    ),
    _r("boundaries-unreadable", ERR, _GEO, "the file cannot be read as the declared format"),
    _r("boundaries-empty", ERR, _GEO, "the layer holds no features"),
    _r(
        "layer-missing",
        ERR,
        _GEO,
        "the GeoPackage has no layer input.boundaries_layer (or several, none named)",
    ),
    _r(
        "crs-missing",
        ERR,
        _GEO,
        "no CRS in the file (e.g. a shapefile without .prj) and none declared",
    ),
    _r("crs-invalid", ERR, _GEO, "input.boundaries_crs is not a CRS pyproj understands"),
    _r("crs-conflict", ERR, _GEO, "the file's CRS differs from input.boundaries_crs"),
    _r(
        "crs-coordinates-out-of-range",
        ERR,
        _GEO,
        "coordinates outside lon/lat bounds in a geographic CRS",
    ),
    _r("map-crs-invalid", ERR, _GEO, "input.map_crs is not a projected CRS pyproj understands"),
    _r(
        "map-projection-failed",
        ERR,
        _GEO,
        "the boundaries cannot be projected to the CRS of the maps and distances",
    ),
    _r("id-duplicated", ERR, _GEO, "two features carry the same district id"),
    _r("geometry-missing", ERR, _GEO, "a district's geometry is null or empty"),
    _r("geometry-not-polygon", ERR, _GEO, "a district's geometry is not a Polygon or MultiPolygon"),
    _r(
        "geometry-invalid",
        ERR,
        _GEO,
        "a district's geometry is invalid and cannot be repaired safely",
    ),
    _r(
        "geometry-repaired",
        WARN,
        _GEO,
        "a district's invalid geometry was repaired with make_valid",
    ),
    _r(
        "boundaries-outside-extent",
        ERR,
        _GEO,
        "the layer lies outside input.boundaries_extent (swapped axes or a wrong CRS)",
    ),
    _r(
        "geometry-gap",
        WARN,
        _GEO,
        "a district touches no other district but lies within a sliver of one",
    ),
    _r(
        "name-glyphs-missing",
        WARN,
        _GEO,
        "a district name has characters the report font cannot draw",
    ),
    # values of one table
    _r(
        "row-duplicate",
        ERR,
        Stage.TABLE,
        "two rows share the same district and week",
        check=t.row_duplicate,
    ),
    _r("count-negative", ERR, Stage.TABLE, "a count is below zero", check=t.count_negative),
    _r(
        "count-ili-exceeds-total",
        ERR,
        Stage.TABLE,
        "ILI visits exceed total visits",
        check=t.count_ili_exceeds_total,
    ),
    _r(
        "count-zero-total",
        ERR,
        Stage.TABLE,
        "total visits are 0 while ILI visits are not",
        check=t.count_zero_total,
    ),
    _r(
        "id-not-in-boundaries",
        ERR,
        Stage.TABLE,
        "a table district id is not in the boundary file (one per id)",
        check=b.id_not_in_boundaries,
    ),
    _r(
        "id-leading-zeros",
        ERR,
        Stage.TABLE,
        "a table id matches a boundary id only with leading zeros (see input.id_zero_pad)",
        check=b.id_leading_zeros,
    ),
    _r(
        "id-numeric-as-text",
        NOTE,
        Stage.TABLE,
        "ids stored as whole numbers were read as text (one per file)",
        check=b.id_numeric_as_text,
    ),
    _r(
        "week-mixed",
        ERR,
        Stage.TABLE,
        "a file declared as one week holds several weeks",
        check=t.week_mixed,
    ),
    _r("week-future", ERR, Stage.TABLE, "a week starts after today's date", check=t.week_future),
    _r(
        "week-gap",
        WARN,
        Stage.TABLE,
        "weeks are missing inside a season of a season-to-date extract",
        check=t.week_gap,
    ),
    _r(
        "rate-mismatch",
        WARN,
        Stage.TABLE,
        "the supplied rate differs from 100 * ILI / total beyond tolerance",
        check=t.rate_mismatch,
    ),
    _r(
        "district-missing-latest",
        WARN,
        Stage.TABLE,
        "a boundary district has no row in the latest week",
        check=b.district_missing_latest,
        latest_week=True,
    ),
    _r(
        "district-name-differs",
        NOTE,
        Stage.TABLE,
        "the table's district name differs from the boundary name",
        check=b.district_name_differs,
    ),
    _r(
        "value-spike",
        WARN,
        Stage.TABLE,
        "the latest ILI% is far from the district's previous weeks after the jurisdiction's movement, and unlike the other districts' changes",
        check=s.value_spike,
        latest_week=True,
    ),
    _r(
        "district-no-visits",
        WARN,
        Stage.TABLE,
        "a district has 0 visits in the latest week, e.g. a closed site",
        check=t.district_no_visits,
        latest_week=True,
    ),
    # this week's table against last week's
    _r(
        "week-system-differs",
        ERR,
        Stage.PRIOR,
        "this week's and last week's tables use different week systems",
        check=p.week_system_differs,
        stops=True,
    ),
    _r(
        "week-backwards",
        ERR,
        Stage.PRIOR,
        "this week's table does not end after last week's",
        check=p.week_backwards,
    ),
    _r(
        "week-skipped",
        WARN,
        Stage.PRIOR,
        "this week's table ends more than one week after last week's",
        check=p.week_skipped,
    ),
    _r(
        "district-new",
        WARN,
        Stage.PRIOR,
        "a district reports in the latest week but was absent last week",
        check=p.district_new,
    ),
    _r(
        "district-dropped",
        WARN,
        Stage.PRIOR,
        "a district reported last week but not in the latest week",
        check=p.district_dropped,
    ),
    _r(
        "revision-summary",
        WARN,
        Stage.PRIOR,
        "past weeks' counts differ from last week's table (one finding)",
        check=p.revision_summary,
    ),
    _r(
        "revision-large",
        WARN,
        Stage.PRIOR,
        "one past week's value was revised by more than the set size",
        check=p.revision_large,
    ),
    _r(
        "revision-row-removed",
        WARN,
        Stage.PRIOR,
        "a past district-week row present last week is gone",
        check=p.revision_row_removed,
    ),
    _r(
        "completeness-drop",
        WARN,
        Stage.PRIOR,
        "total visits or reporting sites fell by more than the set share",
        check=p.completeness_drop,
    ),
    _r(
        "stale-resend",
        WARN,
        Stage.PRIOR,
        "a district's latest row is identical to its previous week's row",
        check=p.stale_resend,
    ),
)
"""Every validation rule of the ingest stage, once; value rules run in this order."""


def rules_of(stage: Stage) -> tuple[Rule, ...]:
    """The rules applied at ``stage``, in registry order."""
    return tuple(r for r in REGISTRY if stage in r.stages)


def descriptions(*stages: Stage) -> tuple[tuple[str, str], ...]:
    """``(code, description)`` of the rules of any of ``stages`` (the modules' ``RULES``)."""
    return tuple((r.code, r.description) for r in REGISTRY if set(stages) & set(r.stages))


def by_code(code: str) -> Rule:
    """The rule with id ``code`` (KeyError when there is none)."""
    for r in REGISTRY:
        if r.code == code:
            return r
    raise KeyError(code)


def _detail(rule: Rule) -> str:
    """The check's docstring in Markdown, one line per paragraph."""
    doc = inspect.getdoc(rule.check) if rule.check is not None else None
    if not doc:
        return ""
    doc = re.sub(r":[a-z]+:`~?([^`]+)`", r"`\1`", doc).replace("``", "`")
    return "\n\n".join(" ".join(block.split()) for block in doc.split("\n\n"))


def rules_markdown() -> str:
    """Markdown sections: one table of rules per stage, then each value rule's detail."""
    parts: list[str] = []
    for stage in Stage:
        parts.append(f"## {stage.value[0].upper()}{stage.value[1:]}\n")
        parts.append("| rule | severity | what it means |\n| --- | --- | --- |")
        for r in rules_of(stage):
            notes = [
                n
                for n, on in (("latest week only", r.latest_week), ("stops the stage", r.stops))
                if on
            ]
            extra = f" ({'; '.join(notes)})" if notes else ""
            parts.append(f"| `{r.code}` | {r.severity.value} | {r.description}{extra} |")
        parts.append("")
    parts.append("## How the value rules decide\n")
    for r in REGISTRY:
        if r.check is not None:
            parts.append(f"### `{r.code}` ({r.severity.value})\n\n{_detail(r)}\n")
    return "\n".join(parts)
