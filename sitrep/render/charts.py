"""Charts of the weekly report (trend by season-week; top districts), as Figures.

Inputs are plain arrays; nothing here reads or writes files. Turn a figure
into bytes with :mod:`sitrep.render.figures`. Colours come from
:mod:`sitrep.render.palette`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import numpy.typing as npt
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import MaxNLocator

from sitrep.errors import RenderError
from sitrep.render.figures import figure_style, freeze_layout, new_figure
from sitrep.render.palette import COLOURS, LINE_COLOURS, TEXT_COLOURS
from sitrep.render.wording import labels as words

__all__ = [
    "MAX_NAME_CHARS",
    "district_bar_chart",
    "spread_labels",
    "trend_chart",
]

FloatArray = npt.NDArray[np.float64]

MAX_NAME_CHARS = 32
"""District names longer than this are shortened with an ellipsis in the bar chart."""

_PAST_STYLES: tuple[Any, ...] = (
    "-",
    (0, (5, 2)),
    (0, (1, 1.5)),
    (0, (6, 2, 1, 2)),
    (0, (8, 2, 1, 2, 1, 2)),
)
"""Dash patterns of past seasons in the order given (after five, repeated in the lighter grey)."""


def spread_labels(
    positions: Sequence[float], min_gap: float, low: float, high: float
) -> list[float]:
    """Move label positions apart so neighbours are at least ``min_gap`` apart.

    The positions are kept in their order; each is moved as little as a
    forward pass (push up) followed by a backward pass (push down from
    ``high``) allows. If the labels cannot all fit between ``low`` and
    ``high`` the lowest ones may end below ``low``.

    Parameters
    ----------
    positions : sequence of float
        Wanted positions, in any order.
    min_gap : float
        Smallest allowed distance between two neighbouring labels.
    low, high : float
        The band the labels should stay in.

    Returns
    -------
    list of float
        New positions, in the order of ``positions``.

    Examples
    --------
    >>> spread_labels([0.50, 0.51, 0.90], 0.05, 0.0, 1.0)
    [0.5, 0.55, 0.9]
    """
    order = sorted(range(len(positions)), key=lambda i: (positions[i], i))
    placed = [min(max(float(positions[i]), low), high) for i in order]
    for k in range(1, len(placed)):
        placed[k] = max(placed[k], placed[k - 1] + min_gap)
    if placed and placed[-1] > high:
        placed[-1] = high
        for k in range(len(placed) - 2, -1, -1):
            placed[k] = min(placed[k], placed[k + 1] - min_gap)
    out = [0.0] * len(positions)
    for k, i in enumerate(order):
        out[i] = round(placed[k], 12)
    return out


def _percent(value: float) -> str:
    return f"{value:.1f}%"


def trend_chart(
    season_weeks: Sequence[int],
    current: FloatArray,
    past: Sequence[tuple[str, FloatArray]],
    *,
    baseline: float | None,
    thresholds: Mapping[str, float] | None,
    week_labels: Sequence[str] | None = None,
    season_start_week: int | None = None,
    current_label: str = words.THIS_SEASON,
    y_label: str = words.TREND_Y_LABEL,
    x_label: str | None = None,
    value_digits: int = 1,
    max_ticks: int = 13,
    width_cm: float = 17.0,
    height_cm: float = 8.5,
) -> Figure:
    """This season's ILI% by season-week against past seasons, baseline and thresholds.

    The x axis is the week of the season (1 = the season's first week),
    running to the longest series. The current season is a bold plum line
    with a dot at its latest value; each past season is a thin grey line
    with its own dash pattern, in the order of ``past``. The baseline
    (dashed) and each threshold (dotted) are horizontal lines labelled at
    the right edge with their name and value ("Baseline 1.3%"); labels that
    would overlap are moved apart (:func:`spread_labels`) and joined to
    their line by a short leader. The y axis starts at 0 and reaches 10 %
    above the highest line or value. The legend sits below the plot. Line
    labels print their value with ``value_digits`` decimals
    (:func:`sitrep.render.wording.labels.line_label`), the precision the
    report's text gives thresholds.

    Parameters
    ----------
    season_weeks : sequence of int
        Season-week number (1, 2, ...) of each value of ``current``.
    current : numpy.ndarray of float, shape (len(season_weeks),)
        This season's ILI% per season-week; NaN for weeks not reported.
    past : sequence of (str, numpy.ndarray of float)
        Season label and its ILI% by season-week: element k is season-week
        k + 1 (seasons may differ in length, e.g. 52 or 53 weeks; NaN where
        a week has no value).
    baseline : float or None
        Baseline ILI% (not drawn when None).
    thresholds : mapping of str to float, or None
        Threshold name (e.g. "Epidemic threshold") to ILI%; up to 4.
    week_labels : sequence of str, optional
        Tick label of season-weeks 1, 2, ... (e.g. this season's week-ending
        dates, :func:`sitrep.render.wording.labels.week_ending_tick`); must
        cover every season-week on the axis. The axis is then titled "Epi
        week" unless ``x_label`` says otherwise.
    season_start_week : int, optional
        Without ``week_labels``: ticks show season-week numbers and the axis
        title says which epi week is season-week 1 ("Week of season (week 1
        = epi week 40)"). Epi week numbers are not derived from it because
        the year's length (52 or 53 weeks) is not known here.
    current_label, y_label, x_label : str
        Legend entry of this season and axis titles (``x_label`` overrides
        the default x-axis title).
    value_digits : int
        Decimals of the baseline and threshold values in their labels.
    max_ticks : int
        Most x-axis tick labels (fewer for long labels such as dates).
    width_cm, height_cm : float

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    RenderError
        If ``current`` is misaligned with ``season_weeks``, a season-week is
        below 1, a value is negative or infinite, there are more than 4
        thresholds, ``week_labels`` is too short, or this season has no
        reported week.
    """
    if len(season_weeks) == 0:
        raise RenderError("trend chart needs at least one season-week, got none")
    x_current = np.asarray(season_weeks, dtype=np.float64)
    if x_current.min() < 1:
        raise RenderError(
            f"season_weeks must count from 1 (the season's first week), got {x_current.min():g}"
        )
    series = [(current_label, x_current, np.asarray(current, dtype=np.float64))]
    for label, values in past:
        arr = np.asarray(values, dtype=np.float64)
        series.append((str(label), np.arange(1, arr.size + 1, dtype=np.float64), arr))
    for label, xs, values in series:
        if values.ndim != 1 or values.shape != xs.shape:
            raise RenderError(
                f"trend series {label!r}: expected {xs.size} values (one per season-week), "
                f"got shape {values.shape}"
            )
        shown = values[~np.isnan(values)]
        if shown.size and (not np.all(np.isfinite(shown)) or shown.min() < 0):
            raise RenderError(f"trend series {label!r}: ILI% must be >= 0 and finite or NaN")
    if np.all(np.isnan(series[0][2])):
        raise RenderError("trend chart: this season has no reported week to draw")
    n = int(max(xs.max() for _, xs, _ in series if xs.size))
    if week_labels is not None and len(week_labels) < n:
        raise RenderError(
            f"week_labels: expected a label for each of season-weeks 1-{n}, got {len(week_labels)}"
        )
    lines: list[tuple[str, float, str, str]] = []  # name, value, colour, line style
    text_keys: list[str] = []  # TEXT_COLOURS key of each line's label
    if baseline is not None:
        lines.append((words.BASELINE, float(baseline), LINE_COLOURS["baseline"], "--"))
        text_keys.append("baseline_label")
    items = list((thresholds or {}).items())
    if len(items) > 4:
        raise RenderError(f"trend chart shows at most 4 thresholds, got {len(items)}")
    for k, (name, value) in enumerate(sorted(items, key=lambda kv: (kv[1], kv[0])), start=1):
        lines.append((str(name), float(value), LINE_COLOURS[f"threshold_{k}"], ":"))
        text_keys.append(f"threshold_{k}")
    for name, value, _, _ in lines:
        if not (math.isfinite(value) and value >= 0):
            raise RenderError(f"{name}: expected a finite ILI% >= 0, got {value!r}")

    top = max(
        [float(np.nanmax(v)) for _, _, v in series if v.size and not np.all(np.isnan(v))]
        + [v for _, v, _, _ in lines]
    )
    y_max = max(top * 1.1, 0.5)

    with figure_style():
        fig = new_figure(width_cm, height_cm)
        ax = fig.add_subplot()
        for k, (label, xs, values) in enumerate(series[1:]):
            colour = LINE_COLOURS["past_season_1" if k < len(_PAST_STYLES) else "past_season_2"]
            ax.plot(
                xs,
                values,
                color=colour,
                linewidth=0.9,
                linestyle=_PAST_STYLES[k % len(_PAST_STYLES)],
                label=label,
                zorder=2,
            )
        label, xs, values = series[0]
        ax.plot(
            xs, values, color=LINE_COLOURS["current_season"], linewidth=2.4, label=label, zorder=4
        )
        last = int(np.flatnonzero(~np.isnan(values))[-1])
        ax.plot(
            [xs[last]],
            [values[last]],
            "o",
            color=LINE_COLOURS["current_season"],
            markersize=4.5,
            zorder=5,
        )
        for _name, value, colour, style in lines:
            ax.axhline(value, color=colour, linewidth=1.1, linestyle=style, zorder=3)

        ax.set_xlim(0.5, n + 0.5)
        ax.set_ylim(0, y_max)
        ax.yaxis.set_major_locator(MaxNLocator(nbins=6, steps=[1, 2, 2.5, 5, 10]))
        ax.yaxis.set_major_formatter(lambda v, _pos: f"{v:g}")
        step = max(1, math.ceil(n / max(1, max_ticks)))
        ticks = list(range(1, n + 1, step))
        ax.set_xticks(ticks)
        ax.set_xticklabels(
            [str(week_labels[t - 1]) if week_labels is not None else str(t) for t in ticks]
        )
        if x_label is None:
            x_label = (
                words.EPI_WEEK
                if week_labels is not None
                else words.trend_x_label(dates=False, season_start_week=season_start_week)
            )
        ax.set_xlabel(x_label)
        ax.set_ylabel(y_label)
        ax.grid(axis="y", color="#E6E6E6", linewidth=0.6, zorder=0)
        ax.set_axisbelow(True)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)

        handles, labels = ax.get_legend_handles_labels()
        order = [labels.index(current_label)] + [
            i for i, lab in enumerate(labels) if lab != current_label
        ]
        fig.legend(
            [handles[i] for i in order],
            [labels[i] for i in order],
            loc="outside lower center",
            ncols=min(len(order), 4),
            frameon=False,
            handlelength=2.8,
        )
        texts = [
            ax.text(
                1.015,
                value / y_max,
                words.line_label(name, value, value_digits),
                transform=ax.transAxes,
                ha="left",
                va="center",
                fontsize=7.5,
                color=TEXT_COLOURS[key],
            )
            for (name, value, _, _), key in zip(lines, text_keys, strict=True)
        ]
        # Fix the layout, then spread the right-edge labels with the final axes height.
        freeze_layout(fig)
        renderer = fig.canvas.get_renderer()  # type: ignore[attr-defined]
        if texts:
            right_px = max(t.get_window_extent(renderer).x1 for t in texts)
            # 4 % spare: text measured at screen dpi comes out a little wider at 150-300 dpi
            overflow = (right_px - 0.96 * fig.bbox.width) / fig.bbox.width
            if overflow > 0:  # narrow the axes until the labels fit inside the figure
                box = ax.get_position()
                ax.set_position((box.x0, box.y0, box.width - overflow / 1.015, box.height))
        axes_height_pt = ax.get_position().height * fig.get_size_inches()[1] * 72
        gap = 1.3 * 7.5 / axes_height_pt
        wanted = [value / y_max for _, value, _, _ in lines]
        placed = spread_labels(wanted, gap, 0.0, 1.0)
        for text, want, y, (_, _, colour, _) in zip(texts, wanted, placed, lines, strict=True):
            text.set_y(y)
            if abs(y - want) > 1e-9:
                ax.add_line(
                    Line2D(
                        [1.0, 1.012],
                        [want, y],
                        transform=ax.transAxes,
                        color=colour,
                        linewidth=0.6,
                        clip_on=False,
                    )
                )
    return fig


def district_bar_chart(
    names: Sequence[str],
    values: FloatArray,
    lows: FloatArray,
    highs: FloatArray,
    *,
    x_label: str = words.BAR_X_LABEL,
    interval_label: str = "95% CI",
    width_cm: float = 17.0,
) -> Figure:
    """Horizontal bars of the districts' ILI% with confidence-interval whiskers.

    Districts are drawn highest first from the top (ties in name order).
    Each bar ends in a whisker from ``lows`` to ``highs`` and is labelled at
    the right with "3.4% (2.1–5.0)". Names longer than
    :data:`MAX_NAME_CHARS` characters are shortened with "…". The height
    grows with the number of districts (0.55 cm each).

    Parameters
    ----------
    names : sequence of str
        District display names.
    values, lows, highs : numpy.ndarray of float, shape (n,)
        ILI% and its interval bounds per district, aligned with ``names``.
    x_label : str
        Axis title.
    interval_label : str
        What the whiskers are, shown under the axis (e.g. "95% CI").
    width_cm : float

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    RenderError
        If there are no districts, the arrays are misaligned, a value is not
        finite (suppressed districts must be left out), or a value lies
        outside its interval.
    """
    n = len(names)
    if n == 0:
        raise RenderError("bar chart needs at least one district, got none")
    arrays = []
    for label, arr in (("values", values), ("lows", lows), ("highs", highs)):
        a = np.asarray(arr, dtype=np.float64)
        if a.shape != (n,):
            raise RenderError(f"{label}: expected {n} numbers (one per name), got shape {a.shape}")
        if not np.all(np.isfinite(a)):
            raise RenderError(
                f"{label}: every district shown needs a finite ILI%; leave suppressed ones out"
            )
        arrays.append(a)
    v, lo, hi = arrays
    bad = np.flatnonzero((lo > v) | (v > hi))
    if bad.size:
        i = int(bad[0])
        raise RenderError(
            f"{names[i]!r}: ILI% {v[i]} is outside its interval {lo[i]}–{hi[i]}; "
            "expected low <= value <= high"
        )
    order = sorted(range(n), key=lambda i: (-v[i], str(names[i])))
    shown = [_short(str(names[i])) for i in order]
    y = np.arange(n)[::-1].astype(np.float64)
    x_max = float(hi.max()) if hi.max() > 0 else 1.0

    with figure_style():
        fig = new_figure(width_cm, 1.8 + 0.55 * n)
        ax = fig.add_subplot()
        ax.barh(
            y,
            v[order],
            height=0.62,
            color=COLOURS["bar"],
            edgecolor=LINE_COLOURS["bar_edge"],
            linewidth=0.6,
            zorder=2,
        )
        ax.errorbar(
            v[order],
            y,
            xerr=np.vstack([v[order] - lo[order], hi[order] - v[order]]),
            fmt="none",
            ecolor=LINE_COLOURS["whisker"],
            elinewidth=0.9,
            capsize=2.5,
            zorder=3,
        )
        for yi, i in zip(y, order, strict=True):
            ax.text(
                hi[i] + 0.015 * x_max,
                yi,
                f"{_percent(v[i])} ({lo[i]:.1f}–{hi[i]:.1f})",
                va="center",
                ha="left",
                fontsize=7,
                color=TEXT_COLOURS["body"],
            )
        ax.set_yticks(y)
        ax.set_yticklabels(shown)
        ax.set_ylim(-0.6, n - 0.4)
        ax.set_xlim(0, x_max * 1.28)
        ax.set_xlabel(f"{x_label}; whiskers: {interval_label}")
        ax.tick_params(axis="y", length=0)
        ax.grid(axis="x", color="#E6E6E6", linewidth=0.6, zorder=0)
        ax.set_axisbelow(True)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
        freeze_layout(fig)
    return fig


def _short(name: str) -> str:
    """The name, shortened to :data:`MAX_NAME_CHARS` characters with '…' if longer."""
    return name if len(name) <= MAX_NAME_CHARS else name[: MAX_NAME_CHARS - 1].rstrip() + "…"
