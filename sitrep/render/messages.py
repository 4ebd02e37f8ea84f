"""The key messages of page 1 and their plain-language versions for the communications draft.

Five messages: the level and its change, the season's thresholds, the top
third of districts, the clusters (with how they moved since last week) and
data quality. Besides the sentences, :func:`report_messages` returns what
other parts of the report reuse: the change verdict, how many weeks the level
has risen, whether the level sits in the threshold band, and every district
the messages name (their data-quality warnings hold a bundle for review).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Mapping, Sequence

from sitrep.analysis.seasonal_context import SeasonalContext
from sitrep.analysis.week import WeekAnalysis
from sitrep.config import Config
from sitrep.model import ValidationReport
from sitrep.render.district_rows import as_float
from sitrep.render.wording import methods as mt
from sitrep.render.wording import plain as pl
from sitrep.render.wording import sentences as nv

__all__ = ["Messages", "plain_sections", "report_messages"]


@dataclasses.dataclass(frozen=True)
class Messages:
    """The key messages, their plain versions and what the rest of the report reuses of them."""

    key: tuple[str, ...]
    """Level and change, thresholds, top third, clusters, data quality."""
    draft: tuple[str, ...]
    """The same in plain language: level and change, season, highest, groups, quality."""
    quality_summary: str
    """The data-quality sentence of the data-quality section."""
    verdict: str
    """The jurisdiction's change verdict (clear / small / no clear change)."""
    rising_for: int
    """Weeks in a row the season's curve has risen up to this week."""
    unsettled: bool
    """Whether this week's ILI% lies within the band of the epidemic threshold."""
    named_ids: frozenset[str]
    """Every district the messages name (top third, groups, groups gained or lost)."""


@dataclasses.dataclass(frozen=True)
class _Clusters:
    sentence: str
    named_ids: frozenset[str]
    high_groups: tuple[tuple[str, ...], ...]


def report_messages(
    analysis: WeekAnalysis,
    seasonal: SeasonalContext,
    validation: ValidationReport,
    config: Config,
    names: Mapping[str, str],
    dates: str,
    digits: int,
) -> Messages:
    """The week's key messages and their plain-language versions (pure)."""
    j = analysis.jurisdiction
    completeness_drop = any("completeness" in f.rule for f in validation.warnings)
    verdict = nv.change_verdict(
        change_class=j.change_class.value,
        p_value=j.change_p,
        alpha=config.analysis.change_alpha,
        diff_pp=j.change_pp,
        low_pp=j.change_low_pp,
        high_pp=j.change_high_pp,
    )
    rising_for = nv.rising_weeks([v for _, v in seasonal.current_curve])
    level_change = _level_and_change(
        analysis, seasonal, config, dates, verdict, rising_for, completeness_drop
    )
    ranked = _top_third(analysis, names)
    tercile = nv.tercile_sentence(
        n_classed=int(sum(1 for r in analysis.terciles.ranks if r > 0)),
        upper_cut=analysis.terciles.cuts[1] if analysis.terciles.cuts else None,
        ranked=[(names[i], pct) for i, pct in ranked],
        digits=digits,
    )
    clusters = _cluster_message(analysis, config, names)
    highlights = _quality_highlights(validation)
    n_warnings = len(validation.warnings)
    dq = nv.data_quality_sentence(n_warnings=n_warnings, highlights=highlights)
    unsettled = bool(
        seasonal.threshold_band
        and seasonal.threshold_band[0] <= j.ili_percent <= seasonal.threshold_band[1]
    )
    draft = _draft_messages(
        analysis=analysis,
        seasonal=seasonal,
        validation=validation,
        config=config,
        dates=dates,
        verdict=verdict,
        rising_for=rising_for,
        unsettled=unsettled,
        ranked=[(names[i], pct) for i, pct in ranked],
        high_groups=clusters.high_groups,
        completeness_drop=completeness_drop,
        digits=digits,
    )
    return Messages(
        key=(level_change, _threshold_sentence(seasonal, j.ili_percent, digits), tercile)
        + (clusters.sentence, dq),
        draft=draft,
        quality_summary=nv.data_quality_sentence(
            n_warnings=n_warnings, highlights=highlights, in_section=True
        ),
        verdict=verdict,
        rising_for=rising_for,
        unsettled=unsettled,
        named_ids=frozenset(i for i, _ in ranked) | clusters.named_ids,
    )


def _level_and_change(
    analysis: WeekAnalysis,
    seasonal: SeasonalContext,
    config: Config,
    dates: str,
    verdict: str,
    rising_for: int,
    completeness_drop: bool,
) -> str:
    """The first key message: this week's level, then its change since last week."""
    week, prior, j, a = analysis.week, analysis.prior_week, analysis.jurisdiction, config.analysis
    level = nv.level_sentence(
        week_number=week.week,
        dates=dates,
        jurisdiction=config.report.jurisdiction,
        pct=j.ili_percent,
        low=j.ci_low,
        high=j.ci_high,
        confidence=a.confidence,
        n_reporting=j.n_districts_reporting,
        n_total=j.n_districts_total,
    )
    change = nv.change_sentence(
        verdict=verdict,
        pct_now=j.ili_percent,
        pct_before=j.prior_ili_percent,
        diff_pp=j.change_pp,
        low_pp=j.change_low_pp,
        high_pp=j.change_high_pp,
        confidence=a.confidence,
        prior_week_number=prior.week if prior is not None else week.week - 1,
        min_change_pp=a.min_change_pp,
        revised_from=j.prior_ili_percent_published,
        completeness_drop=completeness_drop,
        rising_for=rising_for,
    )
    return level + " " + change


def _threshold_sentence(seasonal: SeasonalContext, pct: float, digits: int) -> str:
    """The second key message: this week against the season's baseline and thresholds."""
    band_reason = (
        f" (season window to week {seasonal.window_end_week} or the whole season)"
        if seasonal.window_end_week
        else ""
    )
    return nv.threshold_sentence(
        pct=pct,
        epidemic_threshold=seasonal.epidemic_threshold,
        intensity=seasonal.intensity if seasonal.thresholds_available else None,
        baseline=seasonal.baseline,
        digits=digits,
        band=seasonal.threshold_band,
        band_reason=band_reason,
        unavailable_reason=seasonal.thresholds_reason,
    )


def _top_third(analysis: WeekAnalysis, names: Mapping[str, str]) -> list[tuple[str, float]]:
    """(district id, ILI%) of the districts in the upper tercile, in table order."""
    table = analysis.table
    pct_of = dict(
        zip(table["district_id"], (as_float(x) for x in table["ili_percent"]), strict=True)
    )
    return [
        (i, pct_of[i])
        for i, r in zip(table["district_id"], analysis.terciles.ranks, strict=True)
        if r == 3
    ]


def _borderline_test(analysis: WeekAnalysis, config: Config) -> Callable[[Sequence[str]], bool]:
    """Whether every changed district's adjusted p (this week or last) is near the level."""
    a = config.analysis
    fdr = a.correction == "fdr_bh"
    level_q = a.fdr_q if fdr else a.alpha
    clusters = analysis.clusters
    adjusted = clusters.q_values if fdr else clusters.p_values
    q_of = dict(zip(clusters.ids, (as_float(x) for x in adjusted), strict=True))
    q_before: dict[str, float] = {}
    if analysis.prior_clusters is not None:
        pc = analysis.prior_clusters
        prior_adjusted = pc.q_values if fdr else pc.p_values
        q_before = dict(zip(pc.ids, (as_float(x) for x in prior_adjusted), strict=True))

    def borderline(ids_changed: Sequence[str]) -> bool:
        return bool(ids_changed) and all(
            nv.is_borderline(q_of.get(i), level_q) or nv.is_borderline(q_before.get(i), level_q)
            for i in ids_changed
        )

    return borderline


def _cluster_message(analysis: WeekAnalysis, config: Config, names: Mapping[str, str]) -> _Clusters:
    """The fourth key message: this week's groups, how they moved, and the groups that ended."""
    a = config.analysis
    clusters = analysis.clusters
    transitions = analysis.transitions
    borderline = _borderline_test(analysis, config)
    groups = []
    named_ids: set[str] = set()
    high_groups: list[tuple[str, ...]] = []
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
            named_ids.update(match.removed)
        groups.append((group.label.value, [names[i] for i in group.ids], movement))
        named_ids.update(group.ids)
        if group.label.value == "high-high":
            high_groups.append(tuple(names[i] for i in group.ids))
    sentence = nv.cluster_sentence(
        assessable=clusters.assessable,
        reason=" ".join(clusters.notes) or "the values do not vary between districts.",
        groups=groups,
        correction=nv.correction_phrase(correction=a.correction, fdr_q=a.fdr_q, alpha=a.alpha),
        variable=mt.variable_words(a.cluster_variable),
    )
    vanished = (
        [c for c in transitions.changes if c.kind == "vanished"] if transitions.compared else []
    )
    if vanished and clusters.assessable:
        sentence += " " + " ".join(
            nv.vanished_sentence(
                c.label.value,
                [names[i] for i in c.ids_before],
                borderline=borderline(list(c.ids_before)),
            )
            for c in vanished
        )
        for c in vanished:
            named_ids.update(c.ids_before)
    return _Clusters(sentence, frozenset(named_ids), tuple(high_groups))


def _quality_highlights(validation: ValidationReport) -> list[str]:
    """The four most frequent warnings, most frequent first (ties by rule id)."""
    counts: dict[str, int] = {}
    for f in validation.warnings:
        counts[f.rule] = counts.get(f.rule, 0) + 1
    order = sorted(counts.items(), key=lambda item: (-item[1], item[0]))
    return [nv.quality_highlight(rule, n) for rule, n in order][:4]


def _draft_messages(
    *,
    analysis: WeekAnalysis,
    seasonal: SeasonalContext,
    validation: ValidationReport,
    config: Config,
    dates: str,
    verdict: str,
    rising_for: int,
    unsettled: bool,
    ranked: Sequence[tuple[str, float]],
    high_groups: Sequence[Sequence[str]],
    completeness_drop: bool,
    digits: int,
) -> tuple[str, ...]:
    """The key messages in plain language, for the communications draft."""
    j = analysis.jurisdiction
    return (
        pl.plain_level(
            week_number=analysis.week.week,
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
        pl.plain_highest(ranked=ranked, digits=digits),
        pl.plain_groups(high_groups=high_groups, name_groups=config.report.draft_names_groups),
        pl.plain_quality(
            revised=any(f.rule.startswith("revision") for f in validation.warnings),
            n_warnings=len(validation.warnings),
            completeness_drop=completeness_drop,
        ),
    )


def plain_sections(draft: Sequence[str], disclosure_note: str) -> tuple[tuple[str, str], ...]:
    """(heading, paragraph) of the communications draft from the plain messages."""
    return (
        ("This week", draft[0]),
        ("Compared with the season", draft[1]),
        ("Where levels are highest", draft[2] + " " + draft[3]),
        (
            "About the figures",
            draft[4] + (" " + disclosure_note if disclosure_note else ""),
        ),
    )
