"""Words drawn inside the figures: map legends, axis titles, line labels, tick labels.

The drawing code (:mod:`sitrep.render.maps`, :mod:`sitrep.render.charts`)
takes these as defaults or arguments, so a maintainer who must change a
legend word changes it here.
"""

from __future__ import annotations

import datetime as dt

from sitrep.model import ChangeClass, ClusterLabel
from sitrep.render.wording.formats import fmt_pct

__all__ = [
    "BAR_X_LABEL",
    "BASELINE",
    "EPI_WEEK",
    "LEGEND_LABELS",
    "THIS_SEASON",
    "THRESHOLD_NAMES",
    "TREND_Y_LABEL",
    "line_label",
    "trend_x_label",
    "week_ending_tick",
]

LEGEND_LABELS: dict[str, dict[str, str]] = {
    "terciles": {
        "1": "Lowest third",
        "2": "Middle third",
        "3": "Highest third",
        "0": "No data / suppressed",
    },
    "change": {
        ChangeClass.INCREASE.value: "Clear increase",
        ChangeClass.SIMILAR.value: "No clear or only a small change",
        ChangeClass.DECREASE.value: "Clear decrease",
        ChangeClass.NOT_ASSESSABLE.value: "Not assessable",
    },
    "cluster": {
        ClusterLabel.HIGH_HIGH.value: "High cluster (high-high)",
        ClusterLabel.LOW_LOW.value: "Low cluster (low-low)",
        ClusterLabel.HIGH_LOW.value: "High among low (high-low)",
        ClusterLabel.LOW_HIGH.value: "Low among high (low-high)",
        ClusterLabel.NOT_SIGNIFICANT.value: "Not significant",
        ClusterLabel.NO_NEIGHBOURS.value: "No neighbours (not tested)",
        ClusterLabel.NO_DATA.value: "No data / suppressed",
        ClusterLabel.NOT_ASSESSABLE.value: "Not assessable",
    },
    "comparison": {
        "scale": "ILI (% of outpatient visits)",
        "no data": "No data / suppressed",
    },
}
"""Legend words per map and class, in legend order.

``terciles`` holds the word stems; the printed tercile labels (with cut
points) come from :func:`sitrep.render.maps.tercile_labels`. Keys of
``change`` and ``cluster`` are the :class:`~sitrep.model.ChangeClass` and
:class:`~sitrep.model.ClusterLabel` values. A legend lists only the classes
that have districts this week; the caption gives the counts.
"""

TREND_Y_LABEL = "ILI (% of outpatient visits)"
THIS_SEASON = "This season"
BASELINE = "Baseline"
EPI_WEEK = "Epi week"
THRESHOLD_NAMES: dict[str, str] = {
    "epidemic": "Epidemic threshold",
    "medium": "Medium",
    "high": "High",
    "very_high": "Very high",
}
"""Names of the trend chart's threshold lines (MEM epidemic and intensity thresholds)."""

BAR_X_LABEL = "ILI (% of outpatient visits)"


def line_label(name: str, value: float, digits: int = 1) -> str:
    """The label at the right end of a horizontal line: ``'Epidemic threshold 2.18%'``.

    ``digits`` is the precision the report prints cut points and thresholds
    with (:func:`~sitrep.render.wording.formats.class_digits`), so the chart
    shows the same number as the text.

    >>> line_label("Baseline", 2.334, 2)
    'Baseline 2.33%'
    """
    return f"{name} {fmt_pct(value, digits)}"


def trend_x_label(*, dates: bool, season_start_week: int | None = None, season: str = "") -> str:
    """Title of the trend chart's x axis.

    >>> trend_x_label(dates=True, season="2026-27")
    'Week ending, season 2026-27 (past seasons by week of the season)'
    >>> trend_x_label(dates=False, season_start_week=40)
    'Week of season (week 1 = epi week 40)'
    """
    if dates:
        return f"Week ending{', season ' + season if season else ''} (past seasons by week of the season)"
    if season_start_week is not None:
        return f"Week of season (week 1 = epi week {season_start_week})"
    return "Week of season"


def week_ending_tick(day: dt.date, *, with_year: bool) -> str:
    """A tick label of the trend chart's date axis: ``'4 Oct'``, or ``'3 Jan 2027'`` with the year.

    >>> week_ending_tick(dt.date(2026, 10, 3), with_year=False)
    '3 Oct'
    """
    return f"{day.day} {day:%b}" + (f" {day.year}" if with_year else "")
