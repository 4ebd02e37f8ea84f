"""Build the report's context: ready-made strings and numbers for the templates.

``ReportContext`` holds only str, int, float, bool and tuples of small frozen
dataclasses of those, so templates need no logic and golden files depend on
nothing else. Every number comes from the week's analysis, the seasonal
context or the validation report; none is typed here.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from typing import Any

from sitrep.analysis.seasonal_context import SeasonalContext
from sitrep.analysis.week import WeekAnalysis
from sitrep.config import Config
from sitrep.model import InputFile, ValidationReport
from sitrep.render.district_table import DistrictTable, district_table
from sitrep.render.report_figures import FigureItem, ReportFigures
from sitrep.render.wording import formats as fm
from sitrep.render.wording import methods as mt
from sitrep.render.wording import plain as pl
from sitrep.render.wording import sentences as nv
from sitrep.render.wording import tiles as tl
from sitrep.render.wording.mail import ATTACHED
from sitrep.render.wording.sentences import PRIOR_WITHHELD_NOTE, WITHHELD_NOTE, WITHHELD_TOTAL

__all__ = [
    "DistrictRow",
    "DistrictTable",
    "FigureItem",
    "IndicatorRow",
    "QualityItem",
    "ReportContext",
    "Tile",
    "build_context",
]


@dataclasses.dataclass(frozen=True)
class IndicatorRow:
    """One line of the indicator table."""

    label: str
    value: str
    note: str = ""


@dataclasses.dataclass(frozen=True)
class Tile:
    """One headline box of page 1."""

    label: str
    value: str
    note: str


@dataclasses.dataclass(frozen=True)
class DistrictRow:
    """One district in the district table (all display strings)."""

    district_id: str
    name: str
    sites: str
    ili_visits: str
    total_visits: str
    ili_pct: str
    ci: str
    change: str
    change_class: str
    tercile: str
    cluster: str
    transition: str
    flags: str
    notes: str
    sort_pct: float
    suppressed: bool


@dataclasses.dataclass(frozen=True)
class QualityItem:
    """One data-quality finding as shown in the report."""

    severity: str
    rule: str
    location: str
    district: str
    message: str


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


def _month_range(start: Any, end: Any) -> str:
    return fm.fmt_week_dates(start, end)


def _f(x: Any) -> float:
    try:
        value = float(x)
    except (TypeError, ValueError):
        return math.nan
    return value


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
    prior = analysis.prior_week
    j = analysis.jurisdiction
    a = config.analysis
    conf = a.confidence
    names = dict(zip(analysis.table["district_id"], analysis.table["district_name"], strict=True))
    dates = _month_range(week.start, week.end)
    completeness_drop = any("completeness" in f.rule for f in validation.warnings)
    if digits is None:
        digits = context_digits(analysis, seasonal)

    level = nv.level_sentence(
        week_number=week.week,
        dates=dates,
        jurisdiction=config.report.jurisdiction,
        pct=j.ili_percent,
        low=j.ci_low,
        high=j.ci_high,
        confidence=conf,
        n_reporting=j.n_districts_reporting,
        n_total=j.n_districts_total,
    )
    verdict = nv.change_verdict(
        change_class=j.change_class.value,
        p_value=j.change_p,
        alpha=a.change_alpha,
        diff_pp=j.change_pp,
        low_pp=j.change_low_pp,
        high_pp=j.change_high_pp,
    )
    rising_for = nv.rising_weeks([v for _, v in seasonal.current_curve])
    change = nv.change_sentence(
        verdict=verdict,
        pct_now=j.ili_percent,
        pct_before=j.prior_ili_percent,
        diff_pp=j.change_pp,
        low_pp=j.change_low_pp,
        high_pp=j.change_high_pp,
        confidence=conf,
        prior_week_number=prior.week if prior is not None else week.week - 1,
        min_change_pp=a.min_change_pp,
        revised_from=j.prior_ili_percent_published,
        completeness_drop=completeness_drop,
        rising_for=rising_for,
    )
    band_reason = (
        f" (season window to week {seasonal.window_end_week} or the whole season)"
        if seasonal.window_end_week
        else ""
    )
    thresholds = nv.threshold_sentence(
        pct=j.ili_percent,
        epidemic_threshold=seasonal.epidemic_threshold,
        intensity=seasonal.intensity if seasonal.thresholds_available else None,
        baseline=seasonal.baseline,
        digits=digits,
        band=seasonal.threshold_band,
        band_reason=band_reason,
        unavailable_reason=seasonal.thresholds_reason,
    )
    terc = analysis.terciles
    table = analysis.table
    pct_of = dict(zip(table["district_id"], (_f(x) for x in table["ili_percent"]), strict=True))
    high_ids = [i for i, r in zip(table["district_id"], terc.ranks, strict=True) if r == 3]
    n_classed = int(sum(1 for r in terc.ranks if r > 0))
    tercile = nv.tercile_sentence(
        n_classed=n_classed,
        upper_cut=terc.cuts[1] if terc.cuts else None,
        ranked=[(names[i], pct_of[i]) for i in high_ids],
        digits=digits,
    )
    clusters = analysis.clusters
    assessable = clusters.assessable
    transitions = analysis.transitions
    level_q = a.fdr_q if a.correction == "fdr_bh" else a.alpha
    adjusted = clusters.q_values if a.correction == "fdr_bh" else clusters.p_values
    q_of = dict(zip(clusters.ids, (_f(x) for x in adjusted), strict=True))
    q_before: dict[str, float] = {}
    if analysis.prior_clusters is not None:
        pc = analysis.prior_clusters
        prior_adjusted = pc.q_values if a.correction == "fdr_bh" else pc.p_values
        q_before = dict(zip(pc.ids, (_f(x) for x in prior_adjusted), strict=True))

    def borderline(ids_changed: Sequence[str]) -> bool:
        return bool(ids_changed) and all(
            nv.is_borderline(q_of.get(i), level_q) or nv.is_borderline(q_before.get(i), level_q)
            for i in ids_changed
        )

    groups = []
    named_ids: set[str] = set(high_ids)
    high_groups: list[list[str]] = []
    for group in transitions.groups_now:
        match = next(
            (
                c
                for c in transitions.changes
                if tuple(c.ids_now) == tuple(group.ids) and c.label is group.label
            ),
            None,
        )
        movement = ""
        if match is not None and transitions.compared:
            changed = (
                list(match.added) + list(match.removed)
                if match.kind != "appeared"
                else list(match.ids_now)
            )
            movement = nv.movement_phrase(
                kind=match.kind,
                n_before=len(match.ids_before),
                added=[names[i] for i in match.added],
                removed=[names[i] for i in match.removed],
                borderline=borderline(changed),
            )
        groups.append((group.label.value, [names[i] for i in group.ids], movement))
        named_ids.update(group.ids)
        if match is not None and transitions.compared:
            named_ids.update(match.removed)
        if group.label.value == "high-high":
            high_groups.append([names[i] for i in group.ids])
    correction = nv.correction_phrase(correction=a.correction, fdr_q=a.fdr_q, alpha=a.alpha)
    vanished = (
        [c for c in transitions.changes if c.kind == "vanished"] if transitions.compared else []
    )
    variable = mt.variable_words(a.cluster_variable)
    cluster = nv.cluster_sentence(
        assessable=assessable,
        reason=" ".join(clusters.notes) or "the values do not vary between districts.",
        groups=groups,
        correction=correction,
        variable=variable,
    )
    if vanished and assessable:
        cluster += " " + " ".join(
            nv.vanished_sentence(
                c.label.value,
                [names[i] for i in c.ids_before],
                borderline=borderline(list(c.ids_before)),
            )
            for c in vanished
        )
        for c in vanished:
            named_ids.update(c.ids_before)
    highlights = _quality_highlights(validation)
    dq = nv.data_quality_sentence(n_warnings=len(validation.warnings), highlights=highlights)
    dq_section = nv.data_quality_sentence(
        n_warnings=len(validation.warnings), highlights=highlights, in_section=True
    )
    key_messages = (level + " " + change, thresholds, tercile, cluster, dq)

    unsettled = bool(
        seasonal.threshold_band
        and seasonal.threshold_band[0] <= j.ili_percent <= seasonal.threshold_band[1]
    )
    draft_messages = (
        pl.plain_level(
            week_number=week.week,
            dates=dates,
            jurisdiction=config.report.jurisdiction,
            pct=j.ili_percent,
        )
        + " "
        + pl.plain_change(verdict=verdict, pct_before=j.prior_ili_percent, rising_for=rising_for),
        pl.plain_season(
            pct=j.ili_percent,
            threshold=seasonal.epidemic_threshold,
            digits=digits,
            unsettled=unsettled,
        ),
        pl.plain_highest(ranked=[(names[i], pct_of[i]) for i in high_ids], digits=digits),
        pl.plain_groups(high_groups=high_groups, name_groups=config.report.draft_names_groups),
        pl.plain_quality(
            revised=any(f.rule.startswith("revision") for f in validation.warnings),
            n_warnings=len(validation.warnings),
            completeness_drop=completeness_drop,
        ),
    )

    indicators = _indicators(analysis, seasonal, config, verdict, digits)
    district_rows = tuple(_district_rows(analysis, seasonal, a.change_alpha, digits))
    ranked_rows = sorted(
        (r for r in district_rows if not r.suppressed and not math.isnan(r.sort_pct)),
        key=lambda r: (-r.sort_pct, r.name.casefold()),
    )
    top_ids = {r.district_id for r in ranked_rows[: config.report.top_districts_in_pdf]}
    top = [r for r in ranked_rows if r.district_id in top_ids or r.district_id in named_ids]
    top += [r for r in district_rows if r.district_id in named_ids and r not in top]
    quality = tuple(
        QualityItem(
            severity=g.severity.value,
            rule=g.rule,
            location=g.location(),
            district=_group_districts(g.districts(), names),
            message=g.message(span=False, full_list="validation.json").replace(" -> ", " → "),
        )
        for g in ValidationReport(validation.warnings).grouped()
    )
    table_file = next((f for f in inputs if f.role == "table"), None)
    data_as_of = nv.data_as_of(
        latest_day=f"{week.end.day} {week.end:%B %Y}",
        file_name=table_file.path.name if table_file else "",
    )
    g = analysis.global_moran
    mem = seasonal.mem
    settings = mt.MethodSettings(
        jurisdiction=config.report.jurisdiction,
        confidence=conf,
        interval=a.interval,
        min_visits=a.min_visits,
        min_count=a.min_count,
        suppress_zero=a.suppress_zero,
        change_test=a.change_test,
        change_alpha=a.change_alpha,
        min_change_pp=a.min_change_pp,
        weights=a.weights,
        knn_k=a.knn_k,
        link_islands_k=a.link_islands_k,
        n_links=analysis.graph.n_links,
        islands=[names.get(i, i) for i in analysis.graph.islands],
        cluster_variable=a.cluster_variable,
        permutations=clusters.permutations,
        seed=clusters.seed,
        correction=a.correction,
        fdr_q=a.fdr_q,
        alpha=a.alpha,
        global_text=nv.global_moran_text(
            available=bool(getattr(g, "available", True)),
            i=_f(g.i),
            expectation=_f(g.expectation),
            p_sim=_f(g.p_sim),
            n=int(g.n),
            notes=tuple(g.notes),
        ),
        seasonal_text=mt.seasonal_method_text(
            max_seasons=config.seasonal.mem_max_seasons,
            delta=config.seasonal.mem_delta,
            form=config.seasonal.mem_form,
            onset_weeks=config.seasonal.onset_weeks,
            season_start_week=config.weeks.season_start_week,
            window_end_week=seasonal.window_end_week,
            baseline_sd=config.seasonal.baseline_sd,
            baseline_seasons_used=seasonal.baseline_seasons_used,
            baseline_weeks=seasonal.baseline_weeks,
            baseline_reason=seasonal.baseline_note,
            sd_floor_pp=config.seasonal.aberration_sd_floor_pp,
            seasons_used=tuple(mem.seasons_used) if mem is not None and mem.available else (),
        ),
        week_system=week.system.label,
        season_label=seasonal.season_label,
        season_start_week=config.weeks.season_start_week,
    )
    methods = mt.methods_sections(settings) + (
        (("Maps and distances", projection),) if projection else ()
    )
    previous = [v for v in seasonal.previous_visits if v > 0]
    usual = float(sorted(previous)[len(previous) // 2]) if len(previous) >= 3 else None
    cautions = mt.cautions(
        confidence=conf,
        case_definition=mt.case_definition_sentence(config.report.case_definition),
        coverage=mt.coverage_sentence(
            n_sites=j.reporting_sites if math.isfinite(_f(j.reporting_sites)) else None,
            n_reporting=j.n_districts_reporting,
            n_total=j.n_districts_total,
        ),
        completeness=mt.completeness_sentence(
            visits_now=None if j.withheld else int(j.total_visits),
            visits_usual=usual,
            weeks=len(previous),
        ),
    )
    decision = analysis.disclosure
    disclosure_note = nv.withheld_sentence(
        n_now=len(decision.this_week.withheld),
        n_before=len(decision.prior_week.withheld),
        total_now_reason=decision.this_week.reason if decision.this_week.total_withheld else "",
        total_before_reason=decision.prior_week.reason
        if decision.prior_week.total_withheld
        else "",
    )
    plain = (
        ("This week", draft_messages[0]),
        ("Compared with the season", draft_messages[1]),
        ("Where levels are highest", draft_messages[2] + " " + draft_messages[3]),
        (
            "About the figures",
            draft_messages[4] + (" " + disclosure_note if disclosure_note else ""),
        ),
    )
    report_version = str(version) if version is not None else config.report.version
    n_high = sum(1 for lab in table["cluster_label"] if lab == "high-high")
    n_low = sum(1 for lab in table["cluster_label"] if lab == "low-low")
    tiles = [
        tl.level_tile(
            pct=j.ili_percent, low=j.ci_low, high=j.ci_high, confidence=conf, digits=digits
        ),
        tl.change_tile(
            prior_week=prior.week if prior is not None else week.week - 1,
            diff_pp=j.change_pp,
            verdict=verdict,
            rising_for=rising_for,
        ),
        tl.season_tile(
            intensity=seasonal.intensity,
            threshold=seasonal.epidemic_threshold if seasonal.thresholds_available else None,
            digits=digits,
            unsettled=unsettled,
        ),
    ]
    shown_pct = [
        r.sort_pct for r in district_rows if not r.suppressed and not math.isnan(r.sort_pct)
    ]
    if seasonal.thresholds_available and seasonal.epidemic_threshold is not None:
        tiles.append(
            tl.over_threshold_tile(
                n_over=sum(1 for v in shown_pct if v >= seasonal.epidemic_threshold),
                n_with_data=len(shown_pct),
                threshold=seasonal.epidemic_threshold,
                digits=digits,
            )
        )
    tiles.append(
        tl.reporting_tile(
            n_reporting=j.n_districts_reporting,
            n_total=j.n_districts_total,
            sites=j.reporting_sites if math.isfinite(_f(j.reporting_sites)) else None,
        )
    )
    tiles.append(tl.cluster_tile(assessable=assessable, n_high=n_high, n_low=n_low))
    conf_label = fm.confidence_label(conf)
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
        data_as_of=data_as_of,
        report_version=report_version,
        page_size=config.report.page_size,
        key_messages=key_messages,
        indicators=indicators,
        figures=figures.items,
        districts=district_rows,
        districts_pdf=tuple(top),
        districts_pdf_note=(
            f"The {len(top)} districts with the highest ILI% this week or named above, highest first; the "
            f"full table of {len(district_rows)} districts is in the HTML report and results.csv."
        ),
        quality_summary=dq_section,
        quality=quality,
        methods=methods,
        cautions=cautions,
        contact=config.report.contact,
        versions=tuple(sorted(versions.items())),
        inputs=tuple((f.role, f.path.name, f.sha256) for f in inputs),
        plain_sections=plain,
        quality_overall=tuple(
            dict.fromkeys(
                f.message.replace(" -> ", " → ").rstrip(".") + "."
                for f in validation.warnings
                if not f.district_id
            )
        ),
        quality_statement=nv.partner_quality_statement(
            n_warnings=len(validation.warnings),
            named_affected=sorted(
                {names[f.district_id] for f in validation.warnings if f.district_id in named_ids},
                key=str.casefold,
            ),
        ),
        analysis_notes=tuple(dict.fromkeys(analysis.notes)),
        reissue_note=(
            nv.reissue_note(version=reissue[0], week_number=week.week, reason=reissue[1])
            if reissue
            else ""
        ),
        draft_key_messages=draft_messages,
        ci_heading=f"{fm.confidence_label(conf)} CI",
        build_time=build_time,
        tiles=tuple(Tile(*t) for t in tiles),
        district_table=district_table(
            district_rows, confidence_label=conf_label, min_visits=a.min_visits
        ),
        district_table_pdf=district_table(
            top, confidence_label=conf_label, order="given", min_visits=a.min_visits
        ),
        disclosure_note=disclosure_note,
        named_district_ids=tuple(sorted(named_ids)),
    )


def context_digits(analysis: WeekAnalysis, seasonal: SeasonalContext) -> int:
    """Decimals for district ILI% and cut points this week (see :func:`~sitrep.render.wording.formats.class_digits`)."""
    table = analysis.table
    values = [
        _f(v)
        for v, sup in zip(table["ili_percent"], table["suppressed"], strict=True)
        if not bool(sup)
    ]
    cuts = tuple(analysis.terciles.cuts) if analysis.terciles.cuts else ()
    others = [x for x in (seasonal.epidemic_threshold, seasonal.baseline) if x is not None]
    return fm.class_digits(values, cuts, others=others)


def _group_districts(ids: tuple[str, ...], names: dict[str, str]) -> str:
    """District column of a grouped finding: the name, or how many districts."""
    if len(ids) == 1:
        return names.get(ids[0], ids[0])
    return f"{len(ids)} districts" if ids else ""


def _quality_highlights(validation: ValidationReport) -> list[str]:
    counts: dict[str, int] = {}
    for f in validation.warnings:
        counts[f.rule] = counts.get(f.rule, 0) + 1
    order = sorted(counts.items(), key=lambda item: (-item[1], item[0]))
    return [nv.quality_highlight(rule, n) for rule, n in order][:4]


def _indicators(
    analysis: WeekAnalysis, seasonal: SeasonalContext, config: Config, verdict: str, digits: int
) -> tuple[IndicatorRow, ...]:
    j = analysis.jurisdiction
    conf = fm.confidence_label(config.analysis.confidence)
    prior_label = f"week {analysis.prior_week.week}" if analysis.prior_week else "last week"
    revised_note = nv.revision_note(
        published=j.prior_ili_percent_published, revised=j.prior_ili_percent
    )
    rows = [
        IndicatorRow(
            "ILI% this week",
            fm.fmt_pct(j.ili_percent),
            WITHHELD_TOTAL
            if j.withheld
            else f"{conf} CI {fm.fmt_interval(j.ci_low, j.ci_high)}; {fm.fmt_count(j.ili_visits)} of {fm.fmt_count(j.total_visits)} visits",
        ),
        IndicatorRow(
            f"ILI% {prior_label} (revised)", fm.fmt_pct(j.prior_ili_percent), revised_note
        ),
        IndicatorRow(
            "Change",
            fm.fmt_pp(j.change_pp),
            f"{conf} CI {fm.fmt_interval(j.change_low_pp, j.change_high_pp, ' pp')}; {verdict}",
        ),
        IndicatorRow(
            "Districts reporting",
            f"{j.n_districts_reporting} of {j.n_districts_total}",
            nv.reporting_note(j.reporting_sites if math.isfinite(_f(j.reporting_sites)) else None),
        ),
    ]
    if seasonal.same_week_past:
        label, value = seasonal.same_week_past[-1]
        rows.append(
            IndicatorRow(
                f"Same week, season {label}",
                fm.fmt_pct(value),
                f"season week {seasonal.season_week}",
            )
        )
    baseline_note = (
        f"mean + {config.seasonal.baseline_sd:g} SD of ILI% outside the epidemic periods of the last "
        f"{seasonal.baseline_seasons_used} seasons ({seasonal.baseline_weeks} weeks)"
        if seasonal.baseline_seasons_used
        else seasonal.baseline_note
    )
    rows.append(
        IndicatorRow("Seasonal baseline", fm.fmt_pct(seasonal.baseline, digits), baseline_note)
    )
    if seasonal.thresholds_available:
        window = (
            f"; season window weeks {config.weeks.season_start_week} to {seasonal.window_end_week}"
            if seasonal.window_end_week
            else ""
        )
        band = (
            f"; {fm.fmt_pct(seasonal.threshold_band[0], digits)} to {fm.fmt_pct(seasonal.threshold_band[1], digits)} by season window"
            if seasonal.threshold_band
            else ""
        )
        rows.append(
            IndicatorRow(
                "Epidemic threshold",
                fm.fmt_pct(seasonal.epidemic_threshold, digits),
                f"intensity this week: {seasonal.intensity}{window}{band}",
            )
        )
        rows.append(
            IndicatorRow(
                "Intensity thresholds",
                f"{fm.fmt_pct(seasonal.medium)} / {fm.fmt_pct(seasonal.high)} / {fm.fmt_pct(seasonal.very_high)}",
                "medium / high / very high",
            )
        )
    else:
        rows.append(
            IndicatorRow("Epidemic threshold", fm.NOT_AVAILABLE, seasonal.thresholds_reason)
        )
    if seasonal.season_peak is not None:
        peak_week, peak_pct = seasonal.season_peak
        rows.append(
            IndicatorRow("Season peak so far", fm.fmt_pct(peak_pct), f"week {peak_week.week}")
        )
    if seasonal.onset_week is not None:
        rows.append(
            IndicatorRow(
                "Season onset",
                f"week {seasonal.onset_week.week}",
                f"first of {config.seasonal.onset_weeks} consecutive weeks at or above the epidemic threshold",
            )
        )
    return tuple(rows)


_TERCILE = {0: "no data", 1: "low", 2: "middle", 3: "high"}


def _district_rows(
    analysis: WeekAnalysis, seasonal: SeasonalContext, change_alpha: float, digits: int
) -> list[DistrictRow]:
    rows = []
    for rec in analysis.table.to_dict("records"):
        suppressed = bool(rec["suppressed"])
        total = _f(rec["total_visits"])
        notes = []
        if suppressed:
            notes.append(WITHHELD_NOTE)
        elif not math.isfinite(total):
            notes = ["not reported this week"]
        elif bool(rec.get("prior_suppressed")):
            notes.append(PRIOR_WITHHELD_NOTE)
        pct = _f(rec["ili_percent"])
        show = not suppressed and math.isfinite(pct)
        change_pp = _f(rec["change_pp"])
        if rec.get("change_from_zero") and show:
            change_text = f"from 0 to {fm.fmt_pct(pct, digits)}"
        elif show and math.isfinite(change_pp):
            change_text = fm.fmt_pp(change_pp).replace(" percentage points", " pp")
        else:
            change_text = "—"
        verdict = nv.change_verdict(
            change_class=str(rec["change_class"]),
            p_value=_f(rec["change_p"]),
            alpha=change_alpha,
            diff_pp=change_pp,
            low_pp=_f(rec["change_low_pp"]),
            high_pp=_f(rec["change_high_pp"]),
        )
        flags = seasonal.district_flags.get(rec["district_id"], "")
        rows.append(
            DistrictRow(
                district_id=str(rec["district_id"]),
                name=str(rec["district_name"]),
                sites=fm.fmt_count(rec["reporting_sites"])
                if math.isfinite(_f(rec["reporting_sites"]))
                else "—",
                ili_visits=fm.fmt_count(rec["ili_visits"])
                if show
                else ("withheld" if suppressed else "—"),
                total_visits="withheld"
                if suppressed
                else (fm.fmt_count(total) if math.isfinite(total) else "—"),
                ili_pct=fm.fmt_pct(pct, digits)
                if show
                else ("withheld" if suppressed else "no data"),
                ci=fm.fmt_interval(_f(rec["ci_low"]), _f(rec["ci_high"])) if show else "—",
                change=change_text,
                change_class=verdict if show and math.isfinite(change_pp) else "not assessable",
                tercile=_TERCILE[int(rec["tercile"])],
                cluster=str(rec["cluster_label"]),
                transition=str(rec["transition"] or ""),
                flags="" if suppressed else flags,
                notes="; ".join(notes),
                sort_pct=pct if show else math.nan,
                suppressed=suppressed or not math.isfinite(pct),
            )
        )
    return rows
