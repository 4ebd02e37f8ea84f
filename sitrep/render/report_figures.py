"""Draw the report's figures from the week's results, with captions and alt text from the numbers.

Adapts :class:`~sitrep.analysis.week.WeekAnalysis` and the seasonal context
to the plain-array drawing functions of :mod:`sitrep.render.maps` and
:mod:`sitrep.render.charts`, and keeps each figure's bytes (SVG for the
documents, PNG beside them) with the words that describe it.
"""

from __future__ import annotations

import base64
import dataclasses
import math
from collections.abc import Callable

import numpy as np

from sitrep.analysis.seasonal_context import SeasonalContext
from sitrep.analysis.week import WeekAnalysis
from sitrep.model import ClusterLabel, Districts
from sitrep.render import charts, maps
from sitrep.render.figures import figure_style, figure_to_png, figure_to_svg
from sitrep.render.shared_figures import framed_png, framed_svg
from sitrep.render.wording import captions as cap
from sitrep.render.wording import labels as words
from sitrep.render.wording.methods import variable_words

__all__ = ["FigureItem", "ReportFigures", "draw_report_figures"]


@dataclasses.dataclass(frozen=True)
class FigureItem:
    """One figure: inline image data and its words."""

    key: str
    title: str
    caption: str
    alt: str
    svg_data_uri: str
    png_data_uri: str
    svg: bytes = dataclasses.field(repr=False, default=b"")
    png: bytes = dataclasses.field(repr=False, default=b"")
    shared_svg: bytes = dataclasses.field(repr=False, default=b"")
    """The figure as shared on its own: title and week above, source and caution below."""
    shared_png: bytes = dataclasses.field(repr=False, default=b"")


@dataclasses.dataclass(frozen=True)
class ReportFigures:
    """All figures of one report, in display order."""

    items: tuple[FigureItem, ...]

    def files(self) -> dict[str, bytes]:
        """``{name: bytes}`` for the output folder's figures/ subfolder (the versions shared on their own)."""
        out: dict[str, bytes] = {}
        for item in self.items:
            out[f"{item.key}.svg"] = item.shared_svg or item.svg
            out[f"{item.key}.png"] = item.shared_png or item.png
        return out


def _item(key: str, title: str, caption: str, alt: str, fig: object) -> FigureItem:
    svg = figure_to_svg(fig)  # type: ignore[arg-type]
    png = figure_to_png(fig)  # type: ignore[arg-type]
    return FigureItem(
        key=key,
        title=title,
        caption=caption,
        alt=alt,
        svg_data_uri="data:image/svg+xml;base64," + base64.b64encode(svg).decode("ascii"),
        png_data_uri="data:image/png;base64," + base64.b64encode(png).decode("ascii"),
        svg=svg,
        png=png,
    )


def draw_report_figures(
    analysis: WeekAnalysis,
    seasonal: SeasonalContext,
    districts: Districts,
    *,
    digits: int = 1,
    jurisdiction: str = "",
    week_dates: str = "",
    on_step: Callable[[int, int], None] | None = None,
) -> ReportFigures:
    """Draw the trend chart and the four maps of the report.

    ``digits`` prints the tercile cut points and the trend chart's threshold
    values (see :func:`sitrep.render.wording.formats.class_digits`). With a
    ``jurisdiction``, each figure also gets a version to share on its own
    (title and week above it, source and caution below; see
    :mod:`sitrep.render.shared_figures`), written to ``figures/``.
    ``on_step(done, total)`` hears of each figure drawn, for a progress display.
    """
    table = analysis.table
    order = {d: i for i, d in enumerate(districts.frame["district_id"])}
    index = [order[d] for d in table["district_id"]]
    geoms = districts.map_frame.geometry.iloc[index].reset_index(drop=True)
    names = list(table["district_name"])
    week = analysis.week
    items: list[FigureItem] = []

    def drawn(item: FigureItem) -> None:
        items.append(item)
        if on_step is not None:
            on_step(len(items), _FIGURES)

    if on_step is not None:
        on_step(0, _FIGURES)
    with figure_style():
        drawn(_trend(analysis, seasonal, digits))

        cuts = analysis.terciles.cuts
        panels = [(f"Week {w.week}", np.asarray(ranks)) for w, ranks in analysis.recent_terciles]
        if not panels:  # no cut points this week (e.g. every district withheld): one empty panel
            panels = [(f"Week {week.week}", np.asarray(analysis.terciles.ranks))]
        fig = maps.tercile_small_multiples(
            geoms,
            panels,
            cuts,
            suppressed_label=words.LEGEND_LABELS["terciles"]["0"],
            decimals=digits,
        )
        ranks = np.asarray(analysis.terciles.ranks)
        counts = cap.legend_counts([str(int(r)) for r in ranks], words.LEGEND_LABELS["terciles"])
        first = analysis.recent_terciles[0][0].week if analysis.recent_terciles else week.week
        drawn(
            _item(
                "terciles",
                *cap.tercile_caption(
                    first_week=first, week=week.week, cuts=cuts, digits=digits, counts=counts
                ),
                fig,
            )
        )

        classes = [str(c) for c in table["change_class"]]
        fig = maps.change_map(geoms, classes, title=None, width_cm=8.4)
        counts = cap.legend_counts(classes, words.LEGEND_LABELS["change"])
        prior = analysis.prior_week.week if analysis.prior_week else week.week - 1
        drawn(_item("change", *cap.change_caption(prior_week=prior, counts=counts), fig))

        cluster_labels = [str(c) for c in table["cluster_label"]]
        fig = maps.cluster_map(geoms, cluster_labels, title=None, width_cm=8.4)
        groups = []
        for label in (
            ClusterLabel.HIGH_HIGH,
            ClusterLabel.LOW_LOW,
            ClusterLabel.HIGH_LOW,
            ClusterLabel.LOW_HIGH,
        ):
            members = [
                n for n, lab in zip(names, cluster_labels, strict=True) if lab == label.value
            ]
            if members:
                groups.append((label.value, members))
        others = cap.count_phrase(
            cluster_labels, ["not significant", "no neighbours", "no data", "not assessable"]
        )
        drawn(
            _item(
                "clusters",
                *cap.cluster_caption(
                    variable=variable_words(analysis.settings.cluster_variable),
                    groups=groups,
                    others=others,
                    counts=cap.legend_counts(cluster_labels, words.LEGEND_LABELS["cluster"]),
                ),
                fig,
            )
        )

        last = np.array(
            [
                _display(v, s)
                for v, s in zip(table["prior_ili_percent"], table["suppressed"], strict=True)
            ]
        )
        now = np.array(
            [_display(v, s) for v, s in zip(table["ili_percent"], table["suppressed"], strict=True)]
        )
        fig = maps.comparison_map(
            geoms,
            last,
            now,
            titles=(
                f"Week {analysis.prior_week.week if analysis.prior_week else ''} (revised)",
                f"Week {week.week}",
            ),
        )
        drawn(
            _item(
                "comparison",
                *cap.comparison_caption(
                    last_range=_range(last[np.isfinite(last)]),
                    now_range=_range(now[np.isfinite(now)]),
                ),
                fig,
            )
        )
    if jurisdiction:
        footer = cap.source_line(jurisdiction=jurisdiction)
        items = [
            dataclasses.replace(
                item,
                shared_svg=framed_svg(item.svg, title=heading, footer=footer),
                shared_png=framed_png(item.png, title=heading, footer=footer),
            )
            for item in items
            for heading in [
                cap.shared_title(
                    title=item.title, week_number=week.week, week_year=week.year, dates=week_dates
                )
            ]
        ]
    return ReportFigures(tuple(items))


_FIGURES = 5
"""Figures :func:`draw_report_figures` draws: the trend chart and four maps."""


def _display(value: object, suppressed: object) -> float:
    try:
        x = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return math.nan
    return math.nan if bool(suppressed) else x


def _range(values: np.ndarray) -> str:
    if values.size == 0:
        return cap.value_range(None, None)
    return cap.value_range(float(values.min()), float(values.max()))


def _trend(analysis: WeekAnalysis, seasonal: SeasonalContext, digits: int) -> FigureItem:
    weeks = [w for w, _ in seasonal.current_curve]
    current = np.array([v for _, v in seasonal.current_curve], dtype=float)
    past = [(label, np.array(values, dtype=float)) for label, values in seasonal.past_curves]
    thresholds = {}
    if seasonal.thresholds_available:
        for key, value in (
            ("epidemic", seasonal.epidemic_threshold),
            ("medium", seasonal.medium),
            ("high", seasonal.high),
            ("very_high", seasonal.very_high),
        ):
            if value is not None:
                thresholds[words.THRESHOLD_NAMES[key]] = float(value)
    # Tick labels: this season's week-ending dates (past seasons are aligned by week of the season).
    n = max([len(weeks) and max(weeks), *(len(v) for _, v in past)])
    start = analysis.week - (seasonal.season_week - 1)
    ends = [(start + k).end for k in range(n)]
    ticks = [words.week_ending_tick(day, with_year=False) for day in ends]
    fig = charts.trend_chart(
        weeks,
        current,
        past,
        baseline=seasonal.baseline,
        thresholds=thresholds or None,
        week_labels=ticks,
        x_label=words.trend_x_label(dates=True, season=seasonal.season_label),
        value_digits=digits,
        max_ticks=9,
        height_cm=6.0,
    )
    peaks = [float(np.nanmax(v)) for _, v in past if np.isfinite(v).any()]
    now = float(current[-1]) if current.size else math.nan
    return _item(
        "trend",
        *cap.trend_caption(
            season_label=seasonal.season_label,
            season_week=seasonal.season_week,
            now=now,
            past_peaks=peaks,
            threshold=seasonal.epidemic_threshold if seasonal.thresholds_available else None,
            baseline=seasonal.baseline,
            digits=digits,
        ),
        fig,
    )
