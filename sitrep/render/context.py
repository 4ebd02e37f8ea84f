"""Build the report's context: ready-made strings and numbers for the templates.

``ReportContext`` holds only str, int, float, bool and tuples of small frozen
dataclasses of those, so templates need no logic and golden files depend on
nothing else. Every number comes from the week's analysis, the seasonal
context or the validation report; none is typed here.

The steps have their own modules: :mod:`~sitrep.render.messages` (key
messages and their plain versions), :mod:`~sitrep.render.district_rows`,
:mod:`~sitrep.render.indicators` (indicator table and tiles) and
:mod:`~sitrep.render.report_notes` (data quality, methods, cautions).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence

from sitrep.analysis.seasonal_context import SeasonalContext
from sitrep.analysis.week import WeekAnalysis
from sitrep.config import Config
from sitrep.model import InputFile, ValidationReport
from sitrep.render import report_notes as notes
from sitrep.render.district_rows import DistrictRow, as_float, district_rows, pdf_rows
from sitrep.render.district_table import DistrictTable, district_table
from sitrep.render.indicators import IndicatorRow, Tile, indicators, tiles
from sitrep.render.messages import plain_sections, report_messages
from sitrep.render.report_figures import FigureItem, ReportFigures
from sitrep.render.report_notes import QualityItem
from sitrep.render.wording import formats as fm
from sitrep.render.wording import plain as pl
from sitrep.render.wording.mail import ATTACHED
from sitrep.render.wording.tables import pdf_table_note

__all__ = [
    "DistrictRow",
    "DistrictTable",
    "FigureItem",
    "IndicatorRow",
    "QualityItem",
    "ReportContext",
    "Tile",
    "build_context",
    "context_digits",
]


@dataclasses.dataclass(frozen=True)
class ReportContext:
    """Everything a template may show."""

    title: str
    jurisdiction: str
    week_number: int
    week_year: int
    week_label: str
    week_dates: str
    week_system: str
    season_label: str
    season_week: int
    data_as_of: str
    report_version: str
    page_size: str
    key_messages: tuple[str, ...]
    indicators: tuple[IndicatorRow, ...]
    figures: tuple[FigureItem, ...]
    districts: tuple[DistrictRow, ...]
    districts_pdf: tuple[DistrictRow, ...]
    districts_pdf_note: str
    quality_summary: str
    quality: tuple[QualityItem, ...]
    methods: tuple[tuple[str, str], ...]
    cautions: tuple[str, ...]
    contact: str
    versions: tuple[tuple[str, str], ...]
    inputs: tuple[tuple[str, str, str], ...]
    plain_sections: tuple[tuple[str, str], ...]
    """(heading, plain-language paragraph) for the communications draft."""
    quality_statement: str = ""
    """The PDF's plain statement of data quality (no rule ids, files or lines: those are in
    the HTML report, validation.json and the internal annex internal-data-quality.csv)."""
    quality_overall: tuple[str, ...] = ()
    """Warnings about the jurisdiction's table as a whole (no district), for the PDF, as found."""
    analysis_notes: tuple[str, ...] = ()
    """What the statistics left out or could not do this week (e.g. districts without data)."""
    reissue_note: str = ""
    """Set on a reissued report: which version this is, what it supersedes and why."""
    draft_key_messages: tuple[str, ...] = ()
    """The key messages in plain language, for the communications draft."""
    draft_intro: str = pl.DRAFT_INTRO
    ci_heading: str = "95% CI"
    """Heading of the district table's interval column (from analysis.confidence)."""
    attached_note: str = ATTACHED
    build_time: str = ""
    """ISO 8601 UTC time of the build (from SOURCE_DATE_EPOCH when set), for file properties."""
    tiles: tuple[Tile, ...] = ()
    """The headline boxes of page 1."""
    district_table: DistrictTable = DistrictTable((), (), ())
    """All districts, as the HTML report shows them (ids in natural order)."""
    district_table_pdf: DistrictTable = DistrictTable((), (), ())
    """The PDF's districts (highest ILI% first)."""
    disclosure_note: str = ""
    """How many districts are withheld to protect small counts (empty when none)."""
    named_district_ids: tuple[str, ...] = ()
    """Every district page 1 names (top third, high-value groups, groups gained or lost), by id:
    the districts whose data-quality warnings hold a bundle for review."""

    @property
    def trend_figures(self) -> tuple[FigureItem, ...]:
        """The trend chart (page 1)."""
        return tuple(f for f in self.figures if f.key == "trend")

    @property
    def map_figures(self) -> tuple[FigureItem, ...]:
        """Every figure but the trend chart, in display order (the maps)."""
        return tuple(f for f in self.figures if f.key != "trend")


def build_context(
    *,
    analysis: WeekAnalysis,
    seasonal: SeasonalContext,
    validation: ValidationReport,
    figures: ReportFigures,
    config: Config,
    versions: Mapping[str, str],
    inputs: Sequence[InputFile],
    reissue: tuple[int, str] | None = None,
    version: int | None = None,
    build_time: str = "",
    digits: int | None = None,
    projection: str = "",
) -> ReportContext:
    """Assemble the report context from the week's results (pure).

    ``version`` is the archive version of this report (None when it is not
    archived: ``report.version`` is shown then); ``digits`` prints district
    values and cut points (default: :func:`context_digits`). ``projection`` is
    the sentence saying in which CRS the maps are drawn and distances measured
    (``Districts.projection``); it becomes a methods entry.
    """
    week = analysis.week
    a = config.analysis
    names = dict(zip(analysis.table["district_id"], analysis.table["district_name"], strict=True))
    dates = fm.fmt_week_dates(week.start, week.end)
    if digits is None:
        digits = context_digits(analysis, seasonal)
    msgs = report_messages(analysis, seasonal, validation, config, names, dates, digits)
    rows = district_rows(analysis, seasonal, a.change_alpha, digits)
    top = pdf_rows(rows, config.report.top_districts_in_pdf, msgs.named_ids)
    disclosure_note = notes.disclosure_note(analysis.disclosure)
    conf_label = fm.confidence_label(a.confidence)
    return ReportContext(
        title=config.report.title,
        jurisdiction=config.report.jurisdiction,
        week_number=week.week,
        week_year=week.year,
        week_label=str(week),
        week_dates=dates,
        week_system=week.system.label,
        season_label=seasonal.season_label,
        season_week=seasonal.season_week,
        data_as_of=notes.data_as_of(analysis, inputs),
        report_version=str(version) if version is not None else config.report.version,
        page_size=config.report.page_size,
        key_messages=msgs.key,
        indicators=indicators(analysis, seasonal, config, msgs.verdict, digits),
        figures=figures.items,
        districts=rows,
        districts_pdf=tuple(top),
        districts_pdf_note=pdf_table_note(n_shown=len(top), n_all=len(rows)),
        quality_summary=msgs.quality_summary,
        quality=notes.quality_items(validation, names),
        methods=notes.methods(analysis, seasonal, config, names, projection),
        cautions=notes.cautions(analysis, seasonal, config),
        contact=config.report.contact,
        versions=tuple(sorted(versions.items())),
        inputs=tuple((f.role, f.path.name, f.sha256) for f in inputs),
        plain_sections=plain_sections(msgs.draft, disclosure_note),
        quality_overall=notes.quality_overall(validation),
        quality_statement=notes.quality_statement(validation, names, msgs.named_ids),
        analysis_notes=tuple(dict.fromkeys(analysis.notes)),
        reissue_note=notes.reissue_note(reissue, week.week),
        draft_key_messages=msgs.draft,
        ci_heading=f"{conf_label} CI",
        build_time=build_time,
        tiles=tiles(analysis, seasonal, rows, msgs, confidence=a.confidence, digits=digits),
        district_table=district_table(rows, confidence_label=conf_label, min_visits=a.min_visits),
        district_table_pdf=district_table(
            top, confidence_label=conf_label, order="given", min_visits=a.min_visits
        ),
        disclosure_note=disclosure_note,
        named_district_ids=tuple(sorted(msgs.named_ids)),
    )


def context_digits(analysis: WeekAnalysis, seasonal: SeasonalContext) -> int:
    """Decimals for district ILI% and cut points this week (see :func:`~sitrep.render.wording.formats.class_digits`)."""
    table = analysis.table
    values = [
        as_float(v)
        for v, sup in zip(table["ili_percent"], table["suppressed"], strict=True)
        if not bool(sup)
    ]
    cuts = tuple(analysis.terciles.cuts) if analysis.terciles.cuts else ()
    others = [x for x in (seasonal.epidemic_threshold, seasonal.baseline) if x is not None]
    return fm.class_digits(values, cuts, others=others)
