"""The indicator table and the headline tiles of page 1.

Both show the jurisdiction's week (level, change, districts reporting) and the
season (baseline, epidemic and intensity thresholds, peak, onset) as display
strings; the wording is in :mod:`sitrep.render.wording.tiles` and
:mod:`sitrep.render.wording.formats`.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence

from sitrep.analysis.seasonal_context import SeasonalContext
from sitrep.analysis.week import WeekAnalysis
from sitrep.config import Config
from sitrep.render.district_rows import DistrictRow, as_float
from sitrep.render.messages import Messages
from sitrep.render.wording import formats as fm
from sitrep.render.wording import sentences as nv
from sitrep.render.wording import tiles as tl
from sitrep.render.wording.sentences import WITHHELD_TOTAL

__all__ = ["IndicatorRow", "Tile", "indicators", "tiles"]


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


def _sites(analysis: WeekAnalysis) -> float | None:
    """The jurisdiction's reporting sites, or None when the table has no site counts."""
    sites = analysis.jurisdiction.reporting_sites
    return sites if math.isfinite(as_float(sites)) else None


def indicators(
    analysis: WeekAnalysis, seasonal: SeasonalContext, config: Config, verdict: str, digits: int
) -> tuple[IndicatorRow, ...]:
    """The indicator table: this week's rows, then the season's."""
    return _week_rows(analysis, config, verdict) + _season_rows(seasonal, config, digits)


def _week_rows(analysis: WeekAnalysis, config: Config, verdict: str) -> tuple[IndicatorRow, ...]:
    """ILI% this week and last week, the change and the districts reporting."""
    j = analysis.jurisdiction
    conf = fm.confidence_label(config.analysis.confidence)
    prior_label = f"week {analysis.prior_week.week}" if analysis.prior_week else "last week"
    revised_note = nv.revision_note(
        published=j.prior_ili_percent_published, revised=j.prior_ili_percent
    )
    return (
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
            nv.reporting_note(_sites(analysis)),
        ),
    )


def _season_rows(
    seasonal: SeasonalContext, config: Config, digits: int
) -> tuple[IndicatorRow, ...]:
    """Same week of the last season, baseline, thresholds, season peak and onset."""
    rows = []
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
    rows += _threshold_rows(seasonal, config, digits)
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


def _threshold_rows(seasonal: SeasonalContext, config: Config, digits: int) -> list[IndicatorRow]:
    """The epidemic threshold (with this week's intensity) and the intensity thresholds."""
    if not seasonal.thresholds_available:
        return [IndicatorRow("Epidemic threshold", fm.NOT_AVAILABLE, seasonal.thresholds_reason)]
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
    return [
        IndicatorRow(
            "Epidemic threshold",
            fm.fmt_pct(seasonal.epidemic_threshold, digits),
            f"intensity this week: {seasonal.intensity}{window}{band}",
        ),
        IndicatorRow(
            "Intensity thresholds",
            f"{fm.fmt_pct(seasonal.medium)} / {fm.fmt_pct(seasonal.high)} / {fm.fmt_pct(seasonal.very_high)}",
            "medium / high / very high",
        ),
    ]


def tiles(
    analysis: WeekAnalysis,
    seasonal: SeasonalContext,
    rows: Sequence[DistrictRow],
    messages: Messages,
    *,
    confidence: float,
    digits: int,
) -> tuple[Tile, ...]:
    """The headline boxes: level, change, season, over the threshold (when known), reporting, clusters."""
    week, prior, j = analysis.week, analysis.prior_week, analysis.jurisdiction
    verdict, rising_for, unsettled = messages.verdict, messages.rising_for, messages.unsettled
    out = [
        tl.level_tile(
            pct=j.ili_percent, low=j.ci_low, high=j.ci_high, confidence=confidence, digits=digits
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
    shown_pct = [r.sort_pct for r in rows if not r.suppressed and not math.isnan(r.sort_pct)]
    if seasonal.thresholds_available and seasonal.epidemic_threshold is not None:
        out.append(
            tl.over_threshold_tile(
                n_over=sum(1 for v in shown_pct if v >= seasonal.epidemic_threshold),
                n_with_data=len(shown_pct),
                threshold=seasonal.epidemic_threshold,
                digits=digits,
            )
        )
    out.append(
        tl.reporting_tile(
            n_reporting=j.n_districts_reporting, n_total=j.n_districts_total, sites=_sites(analysis)
        )
    )
    labels = analysis.table["cluster_label"]
    out.append(
        tl.cluster_tile(
            assessable=analysis.clusters.assessable,
            n_high=sum(1 for lab in labels if lab == "high-high"),
            n_low=sum(1 for lab in labels if lab == "low-low"),
        )
    )
    return tuple(Tile(*t) for t in out)
