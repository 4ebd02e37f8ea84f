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
from sitrep.render import narrative as nv
from sitrep.render.report_figures import FigureItem, ReportFigures

__all__ = [
    "DistrictRow",
    "FigureItem",
    "IndicatorRow",
    "QualityItem",
    "ReportContext",
    "build_context",
]


@dataclasses.dataclass(frozen=True)
class IndicatorRow:
    """One line of the indicator table."""

    label: str
    value: str
    note: str = ""


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
    quality_pdf: tuple[QualityItem, ...] = ()
    """The first findings, for the PDF (the HTML and validation.json list all)."""
    quality_pdf_note: str = ""
    analysis_notes: tuple[str, ...] = ()
    """What the statistics left out or could not do this week (e.g. districts without data)."""
    reissue_note: str = ""
    """Set on a reissued report: which version this is, what it supersedes and why."""


PDF_FINDINGS = 25
"""Most data-quality findings listed in the PDF."""

CAUTIONS = (
    "Figures are provisional: recent weeks usually rise as late reports arrive, and past weeks"
    " may be revised.",
    "Influenza-like illness is a syndrome defined by symptoms; it includes illnesses other than"
    " influenza and is not laboratory-confirmed influenza.",
    "Percentages for districts with few visits are unstable; districts below the minimum number"
    " of visits are not shown.",
    "Clusters are statistical: they mark districts whose values resemble their neighbours' more"
    " than chance would suggest, not a common source of infection. With many districts, some"
    " flags occur by chance.",
    "This report describes population-level surveillance and is not for individual clinical"
    " decisions.",
    "Defer to the local health authority for public-health action and follow its rules on"
    " small-number suppression before sharing district figures.",
)


def _month_range(start: Any, end: Any) -> str:
    if start.year != end.year:
        return f"{start.day} {start:%B %Y} to {end.day} {end:%B %Y}"
    if start.month != end.month:
        return f"{start.day} {start:%B} to {end.day} {end:%B %Y}"
    return f"{start.day}–{end.day} {end:%B %Y}"


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
    projection: str = "",
) -> ReportContext:
    """Assemble the report context from the week's results (pure).

    ``projection`` is the sentence saying in which CRS the maps are drawn and
    distances measured (``Districts.projection``); it becomes a methods entry.
    """
    week = analysis.week
    prior = analysis.prior_week
    j = analysis.jurisdiction
    names = dict(zip(analysis.table["district_id"], analysis.table["district_name"], strict=True))
    dates = _month_range(week.start, week.end)
    completeness_drop = any("completeness" in f.rule for f in validation.warnings)

    level = nv.level_sentence(
        week_number=week.week,
        dates=dates,
        jurisdiction=config.report.jurisdiction,
        pct=j.ili_percent,
        low=j.ci_low,
        high=j.ci_high,
        n_reporting=j.n_districts_reporting,
        n_total=j.n_districts_total,
    )
    change = nv.change_sentence(
        change_class=j.change_class.value,
        pct_now=j.ili_percent,
        pct_before=j.prior_ili_percent,
        diff_pp=j.change_pp,
        low_pp=j.change_low_pp,
        high_pp=j.change_high_pp,
        prior_week_number=prior.week if prior is not None else week.week - 1,
        revised_from=j.prior_ili_percent_published,
        completeness_drop=completeness_drop,
        p_value=j.change_p,
        alpha=config.analysis.change_alpha,
        min_change_pp=config.analysis.min_change_pp,
    )
    thresholds = nv.threshold_sentence(
        pct=j.ili_percent,
        epidemic_threshold=seasonal.epidemic_threshold,
        intensity=seasonal.intensity if seasonal.thresholds_available else None,
        baseline=seasonal.baseline,
        unavailable_reason=seasonal.thresholds_reason,
    )
    terc = analysis.terciles
    table = analysis.table
    high_names = [names[i] for i, r in zip(table["district_id"], terc.ranks, strict=True) if r == 3]
    n_classed = int(sum(1 for r in terc.ranks if r > 0))
    tercile = nv.tercile_sentence(
        n_high=len(high_names),
        n_classed=n_classed,
        upper_cut=terc.cuts[1] if terc.cuts else None,
        names=high_names,
    )
    clusters = analysis.clusters
    assessable = clusters.assessable
    transitions = analysis.transitions
    groups = []
    for group in transitions.groups_now:
        match = next((c for c in transitions.changes if tuple(c.ids_now) == tuple(group.ids) and c.label is group.label), None)
        movement = _movement(match, names) if (match is not None and transitions.compared) else ""
        groups.append((group.label.value, [names[i] for i in group.ids], movement))
    correction = (
        f"Benjamini–Hochberg false discovery rate q = {config.analysis.fdr_q:g}"
        if config.analysis.correction == "fdr_bh"
        else f"unadjusted p ≤ {config.analysis.alpha:g}"
    )
    vanished = [c for c in transitions.changes if c.kind == "vanished"] if transitions.compared else []
    cluster = nv.cluster_sentence(
        assessable=assessable,
        reason=" ".join(clusters.notes) or "the values do not vary between districts.",
        groups=groups,
        correction=correction,
    )
    if vanished and assessable:
        cluster += " " + "; ".join(
            f"The {c.label.value} cluster of last week ({nv.join_names([names[i] for i in c.ids_before])})"
            " is no longer significant."
            for c in vanished
        )
    dq = nv.data_quality_sentence(
        n_warnings=len(validation.warnings), highlights=_quality_highlights(validation)
    )
    key_messages = (level + " " + change, thresholds, tercile, cluster, dq)

    indicators = _indicators(analysis, seasonal, config)
    district_rows = tuple(_district_rows(analysis, seasonal))
    top = sorted(
        (r for r in district_rows if not r.suppressed and not math.isnan(r.sort_pct)),
        key=lambda r: (-r.sort_pct, r.name.casefold()),
    )[: config.report.top_districts_in_pdf]
    quality = tuple(
        QualityItem(
            severity=g.severity.value,
            rule=g.rule,
            location=g.location(),
            district=_group_districts(g.districts(), names),
            message=g.message(span=False, full_list="validation.json"),
        )
        for g in ValidationReport(validation.warnings).grouped()
    )
    table_file = next((f for f in inputs if f.role == "table"), None)
    data_as_of = (
        f"extract {table_file.path.name} (SHA-256 {table_file.sha256[:12]})" if table_file else ""
    )
    a = config.analysis
    methods = (
        ("ILI percentage", f"ILI visits divided by all outpatient visits, per district and pooled over districts for {config.report.jurisdiction} (pooled ratio, not a population-weighted mean). {a.interval.title()} {a.confidence:.0%} intervals from unrounded counts. Districts with fewer than {a.min_visits} visits are suppressed in displays."),
        ("Week-over-week change", f"This week against last week's revised value, in percentage points, with a Newcombe hybrid score interval. Test: {a.change_test}; a change is called an increase or decrease only when p < {a.change_alpha:g} and the change is at least {a.min_change_pp:g} percentage points."),
        ("Terciles", "Cut points are the 1/3 and 2/3 quantiles (linear interpolation) of this week's non-suppressed district values; classes are closed on the right and tied values share a class. The same cut points class the earlier weeks in the small multiples."),
        ("Spatial weights", f"{a.weights.title()} contiguity, row-standardised" + (f", islands linked to their {a.link_islands_k} nearest districts" if a.link_islands_k else "") + f"; {analysis.graph.n_links} links; districts with no neighbour: {nv.join_names([names.get(i, i) for i in analysis.graph.islands], limit=20)} (never tested)."),
        ("Local Moran's I", f"esda {clusters.esda_version} Moran_Local on ILI%, {clusters.permutations:,} conditional permutations, seed {clusters.seed}; pseudo p-value {clusters.alternative}. Multiple testing: {correction}; a district is flagged when its adjusted p-value is at most the threshold. Local values use esda's scaling (n−1)·z_i·(Wz)_i/Σz², which changes neither p-values nor quadrants. Districts without data or with too few visits are left out of the statistic; districts with no neighbour are never tested (a permutation test cannot be run for them)."),
        ("Global Moran's I", _global_text(analysis)),
        ("Seasonal thresholds", seasonal.method_note),
        ("Week numbering", f"{week.system.label}; season {seasonal.season_label} starts in week {config.weeks.season_start_week}. Some years have a week 53."),
    ) + ((("Maps and distances", projection),) if projection else ())
    plain = (
        ("This week", level + " " + change),
        ("Compared with the season", thresholds),
        ("Where activity is highest", tercile),
        ("Clusters", cluster),
        ("Data quality", dq),
    )
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
        report_version=config.report.version,
        page_size=config.report.page_size,
        key_messages=key_messages,
        indicators=indicators,
        figures=figures.items,
        districts=district_rows,
        districts_pdf=tuple(top),
        districts_pdf_note=(
            f"The {len(top)} districts with the highest ILI% this week; the full table of "
            f"{len(district_rows)} districts is in the HTML report and results.csv."
        ),
        quality_summary=dq,
        quality=quality,
        methods=methods,
        cautions=CAUTIONS,
        contact=config.report.contact,
        versions=tuple(sorted(versions.items())),
        inputs=tuple((f.role, f.path.name, f.sha256) for f in inputs),
        plain_sections=plain,
        quality_pdf=quality[:PDF_FINDINGS],
        quality_pdf_note=(
            f"The first {PDF_FINDINGS} of {len(quality)} findings; the HTML report and "
            "validation.json list them all."
            if len(quality) > PDF_FINDINGS
            else ""
        ),
        analysis_notes=tuple(dict.fromkeys(analysis.notes)),
        reissue_note=(
            f"This is version {reissue[0]} of the week {week.week} report; it supersedes version "
            f"{reissue[0] - 1}. Reason: {reissue[1]}"
            if reissue
            else ""
        ),
    )


def _movement(change: Any, names: Mapping[str, str]) -> str:
    kind = change.kind
    before = len(change.ids_before)
    if kind == "appeared":
        return "new this week"
    if kind == "grew":
        return f"grown from {nv.plural(before, 'district')} last week"
    if kind == "shrank":
        return f"down from {nv.plural(before, 'district')} last week"
    if kind == "moved":
        parts = []
        if change.added:
            parts.append(f"gained {nv.join_names([names[i] for i in change.added], limit=4)}")
        if change.removed:
            parts.append(f"lost {nv.join_names([names[i] for i in change.removed], limit=4)}")
        return "which since last week has " + " and ".join(parts) if parts else "shifted since last week"
    if kind == "persisted":
        return "unchanged from last week"
    return ""


def _global_text(analysis: WeekAnalysis) -> str:
    g = analysis.global_moran
    if not getattr(g, "available", True) or not math.isfinite(_f(g.i)):
        return "Not computed this week: " + " ".join(g.notes)
    return (
        f"I = {g.i:.3f} (expected {g.expectation:.3f} under no spatial autocorrelation), "
        f"permutation p = {g.p_sim:.3f}, over {g.n} districts with data."
    )


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


def _indicators(analysis: WeekAnalysis, seasonal: SeasonalContext, config: Config) -> tuple[IndicatorRow, ...]:
    j = analysis.jurisdiction
    prior_label = f"week {analysis.prior_week.week}" if analysis.prior_week else "last week"
    revised_note = ""
    if math.isfinite(_f(j.prior_ili_percent_published)) and math.isfinite(_f(j.prior_ili_percent)):
        revised_note = (
            f"revised from {nv.fmt_pct(j.prior_ili_percent_published)} as published last week"
            if round(j.prior_ili_percent_published, 1) != round(j.prior_ili_percent, 1)
            else "unchanged by revisions"
        )
    rows = [
        IndicatorRow("ILI% this week", nv.fmt_pct(j.ili_percent), f"95% CI {nv.fmt_interval(j.ci_low, j.ci_high)}; {nv.fmt_count(j.ili_visits)} of {nv.fmt_count(j.total_visits)} visits"),
        IndicatorRow(f"ILI% {prior_label} (revised)", nv.fmt_pct(j.prior_ili_percent), revised_note),
        IndicatorRow("Change", nv.fmt_pp(j.change_pp), f"95% CI {nv.fmt_num(j.change_low_pp)} to {nv.fmt_num(j.change_high_pp)}; {j.change_class.value}"),
        IndicatorRow("Districts reporting", f"{j.n_districts_reporting} of {j.n_districts_total}", f"{nv.fmt_count(j.reporting_sites)} reporting sites" if math.isfinite(_f(j.reporting_sites)) else ""),
    ]
    if seasonal.same_week_past:
        label, value = seasonal.same_week_past[-1]
        rows.append(IndicatorRow(f"Same week, season {label}", nv.fmt_pct(value), f"season week {seasonal.season_week}"))
    rows.append(IndicatorRow("Seasonal baseline", nv.fmt_pct(seasonal.baseline), seasonal.baseline_note))
    if seasonal.thresholds_available:
        rows.append(IndicatorRow("Epidemic threshold", nv.fmt_pct(seasonal.epidemic_threshold), f"intensity this week: {seasonal.intensity}"))
        rows.append(IndicatorRow("Intensity thresholds", f"{nv.fmt_pct(seasonal.medium)} / {nv.fmt_pct(seasonal.high)} / {nv.fmt_pct(seasonal.very_high)}", "medium / high / very high"))
    else:
        rows.append(IndicatorRow("Epidemic threshold", nv.NOT_AVAILABLE, seasonal.thresholds_reason))
    if seasonal.season_peak is not None:
        peak_week, peak_pct = seasonal.season_peak
        rows.append(IndicatorRow("Season peak so far", nv.fmt_pct(peak_pct), f"week {peak_week.week}"))
    if seasonal.onset_week is not None:
        rows.append(IndicatorRow("Season onset", f"week {seasonal.onset_week.week}", f"first of {config.seasonal.onset_weeks} consecutive weeks at or above the epidemic threshold"))
    return tuple(rows)


_TERCILE = {0: "no data", 1: "low", 2: "middle", 3: "high"}


def _district_rows(analysis: WeekAnalysis, seasonal: SeasonalContext) -> list[DistrictRow]:
    rows = []
    for rec in analysis.table.to_dict("records"):
        suppressed = bool(rec["suppressed"])
        total = _f(rec["total_visits"])
        notes = []
        if suppressed:
            notes.append("fewer visits than the display minimum" if math.isfinite(total) else "not reported")
        if not math.isfinite(total):
            notes = ["not reported this week"]
        pct = _f(rec["ili_percent"])
        show = not suppressed and math.isfinite(pct)
        change_pp = _f(rec["change_pp"])
        if rec.get("change_from_zero") and show:
            change_text = f"from 0 to {nv.fmt_pct(pct)}"
        else:
            change_text = nv.fmt_pp(change_pp).replace(" percentage points", " pp") if show else "—"
        flags = seasonal.district_flags.get(rec["district_id"], "")
        rows.append(
            DistrictRow(
                district_id=str(rec["district_id"]),
                name=str(rec["district_name"]),
                sites=nv.fmt_count(rec["reporting_sites"]) if math.isfinite(_f(rec["reporting_sites"])) else "—",
                ili_visits=nv.fmt_count(rec["ili_visits"]) if show else ("suppressed" if suppressed and math.isfinite(total) else "—"),
                total_visits=nv.fmt_count(rec["total_visits"]) if math.isfinite(total) else "—",
                ili_pct=nv.fmt_pct(pct) if show else ("suppressed" if suppressed and math.isfinite(total) else "no data"),
                ci=nv.fmt_interval(_f(rec["ci_low"]), _f(rec["ci_high"])) if show else "—",
                change=change_text,
                change_class=str(rec["change_class"]) if show else "not assessable",
                tercile=_TERCILE[int(rec["tercile"])],
                cluster=str(rec["cluster_label"]),
                transition=str(rec["transition"] or ""),
                flags=flags,
                notes="; ".join(notes),
                sort_pct=pct if show else math.nan,
                suppressed=suppressed or not math.isfinite(pct),
            )
        )
    return rows
