"""The report's notes around the numbers: data quality, methods, cautions, withheld counts.

Each function turns the week's results, the validation report and the
configuration into the display strings of one section; the words are in
:mod:`sitrep.render.wording.sentences` and :mod:`sitrep.render.wording.methods`.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Collection, Mapping, Sequence

from sitrep.analysis.disclosure import DisclosureDecision
from sitrep.analysis.seasonal_context import SeasonalContext
from sitrep.analysis.week import WeekAnalysis
from sitrep.config import Config
from sitrep.model import InputFile, ValidationReport
from sitrep.render.district_rows import as_float
from sitrep.render.wording import methods as mt
from sitrep.render.wording import sentences as nv

__all__ = [
    "QualityItem",
    "cautions",
    "data_as_of",
    "disclosure_note",
    "methods",
    "quality_items",
    "quality_overall",
    "quality_statement",
    "reissue_note",
]


@dataclasses.dataclass(frozen=True)
class QualityItem:
    """One data-quality finding as shown in the report."""

    severity: str
    rule: str
    location: str
    district: str
    message: str


def _group_districts(ids: tuple[str, ...], names: Mapping[str, str]) -> str:
    """District column of a grouped finding: the name, or how many districts."""
    if len(ids) == 1:
        return names.get(ids[0], ids[0])
    return f"{len(ids)} districts" if ids else ""


def quality_items(
    validation: ValidationReport, names: Mapping[str, str]
) -> tuple[QualityItem, ...]:
    """The warnings of the data-quality section, alike findings grouped."""
    return tuple(
        QualityItem(
            severity=g.severity.value,
            rule=g.rule,
            location=g.location(),
            district=_group_districts(g.districts(), names),
            message=g.message(span=False, full_list="validation.json").replace(" -> ", " → "),
        )
        for g in ValidationReport(validation.warnings).grouped()
    )


def quality_overall(validation: ValidationReport) -> tuple[str, ...]:
    """Warnings about the table as a whole (no district), each once, as found."""
    return tuple(
        dict.fromkeys(
            f.message.replace(" -> ", " → ").rstrip(".") + "."
            for f in validation.warnings
            if not f.district_id
        )
    )


def quality_statement(
    validation: ValidationReport, names: Mapping[str, str], named_ids: Collection[str]
) -> str:
    """The PDF's plain statement of data quality, naming the named districts with warnings."""
    return nv.partner_quality_statement(
        n_warnings=len(validation.warnings),
        named_affected=sorted(
            {
                names[f.district_id]
                for f in validation.warnings
                if f.district_id is not None and f.district_id in named_ids
            },
            key=str.casefold,
        ),
    )


def data_as_of(analysis: WeekAnalysis, inputs: Sequence[InputFile]) -> str:
    """The last day the data cover and the table's file name."""
    end = analysis.week.end
    table_file = next((f for f in inputs if f.role == "table"), None)
    return nv.data_as_of(
        latest_day=f"{end.day} {end:%B %Y}",
        file_name=table_file.path.name if table_file else "",
    )


def reissue_note(reissue: tuple[int, str] | None, week_number: int) -> str:
    """On a reissued report (version, reason): which version this is and why; else empty."""
    if not reissue:
        return ""
    return nv.reissue_note(version=reissue[0], week_number=week_number, reason=reissue[1])


def disclosure_note(decision: DisclosureDecision) -> str:
    """How many districts are withheld this week and last week (empty when none)."""
    return nv.withheld_sentence(
        n_now=len(decision.this_week.withheld),
        n_before=len(decision.prior_week.withheld),
        total_now_reason=decision.this_week.reason if decision.this_week.total_withheld else "",
        total_before_reason=decision.prior_week.reason
        if decision.prior_week.total_withheld
        else "",
    )


def methods(
    analysis: WeekAnalysis,
    seasonal: SeasonalContext,
    config: Config,
    names: Mapping[str, str],
    projection: str,
) -> tuple[tuple[str, str], ...]:
    """The methods sections, with the maps' projection last when it is known."""
    return mt.methods_sections(_method_settings(analysis, seasonal, config, names)) + (
        (("Maps and distances", projection),) if projection else ()
    )


def _global_text(analysis: WeekAnalysis) -> str:
    """The global Moran's I of the week, in words."""
    g = analysis.global_moran
    return nv.global_moran_text(
        available=bool(getattr(g, "available", True)),
        i=as_float(g.i),
        expectation=as_float(g.expectation),
        p_sim=as_float(g.p_sim),
        n=int(g.n),
        notes=tuple(g.notes),
    )


def _seasonal_text(seasonal: SeasonalContext, config: Config) -> str:
    """How the baseline and the epidemic thresholds were set, in words."""
    s = config.seasonal
    mem = seasonal.mem
    return mt.seasonal_method_text(
        max_seasons=s.mem_max_seasons,
        delta=s.mem_delta,
        form=s.mem_form,
        onset_weeks=s.onset_weeks,
        season_start_week=config.weeks.season_start_week,
        window_end_week=seasonal.window_end_week,
        baseline_sd=s.baseline_sd,
        baseline_seasons_used=seasonal.baseline_seasons_used,
        baseline_weeks=seasonal.baseline_weeks,
        baseline_reason=seasonal.baseline_note,
        sd_floor_pp=s.aberration_sd_floor_pp,
        seasons_used=tuple(mem.seasons_used) if mem is not None and mem.available else (),
    )


def _method_settings(
    analysis: WeekAnalysis, seasonal: SeasonalContext, config: Config, names: Mapping[str, str]
) -> mt.MethodSettings:
    """Every value the methods sections print, from the configuration and the week's results."""
    a = config.analysis
    clusters = analysis.clusters
    return mt.MethodSettings(
        jurisdiction=config.report.jurisdiction,
        confidence=a.confidence,
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
        global_text=_global_text(analysis),
        seasonal_text=_seasonal_text(seasonal, config),
        week_system=analysis.week.system.label,
        season_label=seasonal.season_label,
        season_start_week=config.weeks.season_start_week,
    )


def cautions(analysis: WeekAnalysis, seasonal: SeasonalContext, config: Config) -> tuple[str, ...]:
    """The cautions section: case definition, coverage and this week's completeness."""
    j = analysis.jurisdiction
    previous = [v for v in seasonal.previous_visits if v > 0]
    usual = float(sorted(previous)[len(previous) // 2]) if len(previous) >= 3 else None
    return mt.cautions(
        confidence=config.analysis.confidence,
        case_definition=mt.case_definition_sentence(config.report.case_definition),
        coverage=mt.coverage_sentence(
            n_sites=j.reporting_sites if math.isfinite(as_float(j.reporting_sites)) else None,
            n_reporting=j.n_districts_reporting,
            n_total=j.n_districts_total,
        ),
        completeness=mt.completeness_sentence(
            visits_now=None if j.withheld else int(j.total_visits),
            visits_usual=usual,
            weeks=len(previous),
        ),
    )
