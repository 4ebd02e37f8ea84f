"""Tests of the trend chart and the district bar chart.

The season curves are invented (a Gaussian bump on a 0.9 % floor). What is
checked is drawing behaviour stated in the docstrings of sitrep.render.charts:
labels present and not overlapping, everything inside the figure, text
colours readable (WCAG 2.1), input errors reported.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from matplotlib.colors import to_hex
from matplotlib.text import Text

from sitrep.errors import RenderError
from sitrep.render import charts, palette
from sitrep.render.figures import figure_style


def season(peak_week: float, peak: float, n: int = 52) -> np.ndarray:
    w = np.arange(1, n + 1)
    return 0.9 + peak * np.exp(-0.5 * ((w - peak_week) / 4.0) ** 2)


def drawn(fig):
    """Draw the figure at 150 dpi (as the report saves it) and return the renderer."""
    with figure_style():
        fig.set_dpi(150)
        fig.canvas.draw()
    return fig.canvas.get_renderer()


def visible_texts(fig) -> list[Text]:
    """Texts that are drawn (tick labels beyond the view limits are kept but not drawn)."""
    hidden = set()
    for ax in fig.axes:
        lo, hi = sorted(ax.get_ylim())
        hidden |= {id(t) for t in ax.get_yticklabels() if not lo <= t.get_position()[1] <= hi}
        lo, hi = sorted(ax.get_xlim())
        hidden |= {id(t) for t in ax.get_xticklabels() if not lo <= t.get_position()[0] <= hi}
    return [
        t
        for t in fig.findobj(Text)
        if t.get_visible() and t.get_text().strip() and id(t) not in hidden
    ]


def inside(box, outer, tol: float = 0.5) -> bool:
    return (
        box.x0 >= outer.x0 - tol
        and box.y0 >= outer.y0 - tol
        and box.x1 <= outer.x1 + tol
        and box.y1 <= outer.y1 + tol
    )


@pytest.fixture
def trend_fig():
    current = season(14, 3.5)[:20]
    past = [
        ("2023/24", season(18, 2.8)),
        ("2024/25", season(12, 5.1, n=53)),
        ("2025/26", season(16, 4.2)),
    ]
    return charts.trend_chart(
        list(range(1, 21)),
        current,
        past,
        baseline=1.3,
        thresholds={"Epidemic threshold": 1.4, "Medium intensity": 3.0, "High intensity": 4.6},
        season_start_week=40,
        current_label="2026/27 (this season)",
    )


# --------------------------------------------------------------------------- spread_labels


def test_spread_labels_docstring_example():
    assert charts.spread_labels([0.50, 0.51, 0.90], 0.05, 0.0, 1.0) == [0.5, 0.55, 0.9]


def test_spread_labels_pushes_down_from_the_top():
    assert charts.spread_labels([0.99, 1.0], 0.1, 0.0, 1.0) == pytest.approx([0.9, 1.0])


@settings(max_examples=200, deadline=None)
@given(
    st.lists(st.floats(0.0, 1.0, allow_nan=False), min_size=1, max_size=6),
    st.floats(0.01, 0.15),
)
def test_spread_labels_keeps_order_and_gap(positions, gap):
    placed = charts.spread_labels(positions, gap, 0.0, 1.0)
    order = sorted(range(len(positions)), key=lambda i: (positions[i], i))
    ys = [placed[i] for i in order]
    for a, b in itertools.pairwise(ys):
        assert b - a >= gap - 1e-9
    assert max(placed) <= 1.0 + 1e-9
    if (len(positions) - 1) * gap <= 1.0:  # when they fit, nothing leaves the band
        assert min(placed) >= -1e-9


# --------------------------------------------------------------------------- trend chart


def test_trend_chart_lines_and_labels(trend_fig):
    ax = trend_fig.axes[0]
    widths = {line.get_label(): line.get_linewidth() for line in ax.get_lines()}
    assert widths["2026/27 (this season)"] > 2 * max(
        widths["2023/24"], widths["2024/25"], widths["2025/26"]
    )
    texts = [t.get_text() for t in ax.texts]
    assert texts == [
        "Baseline 1.3%",
        "Epidemic threshold 1.4%",
        "Medium intensity 3.0%",
        "High intensity 4.6%",
    ]
    assert ax.get_xlabel() == "Week of season (week 1 = epi week 40)"
    assert ax.get_ylabel() == "ILI (% of outpatient visits)"
    # The 53-week past season sets the axis length.
    assert ax.get_xlim() == (0.5, 53.5)
    legend = trend_fig.legends[0]
    assert [t.get_text() for t in legend.get_texts()][0] == "2026/27 (this season)"


def test_trend_chart_labels_do_not_overlap_and_stay_inside(trend_fig):
    renderer = drawn(trend_fig)
    ax = trend_fig.axes[0]
    boxes = [t.get_window_extent(renderer) for t in ax.texts]
    for a, b in itertools.combinations(boxes, 2):
        assert not a.overlaps(b), (a, b)
    page = trend_fig.bbox
    for text in visible_texts(trend_fig):
        assert inside(text.get_window_extent(renderer), page), text.get_text()
    legend_box = trend_fig.legends[0].get_window_extent(renderer)
    assert inside(legend_box, page)
    assert not legend_box.overlaps(ax.get_window_extent(renderer))  # legend outside the plot


def test_trend_chart_text_colours_are_readable(trend_fig):
    drawn(trend_fig)
    for text in visible_texts(trend_fig):
        colour = to_hex(text.get_color()).upper()
        assert palette.contrast_ratio(colour, "#FFFFFF") >= 4.5, (text.get_text(), colour)


def test_trend_chart_week_labels_as_ticks():
    labels = [str((39 + k) % 52 + 1) for k in range(52)]  # 40, 41, ..., 52, 1, ..., 39
    fig = charts.trend_chart(
        [1, 2, 3],
        np.array([1.0, 1.2, 1.1]),
        [("2025/26", season(16, 4.2))],
        baseline=None,
        thresholds=None,
        week_labels=labels,
    )
    ax = fig.axes[0]
    ticks = [t.get_text() for t in ax.get_xticklabels()]
    # 52 season-weeks -> a tick every ceil(52 / 13) = 4 weeks, labelled with the epi week.
    assert ticks[:5] == ["40", "44", "48", "52", "4"]
    assert ax.get_xlabel() == "Epi week"
    assert len(ax.texts) == 0  # no baseline or thresholds: no right-edge labels


def test_trend_chart_rejects_bad_input():
    with pytest.raises(RenderError, match="expected 3 values"):
        charts.trend_chart([1, 2, 3], np.array([1.0, 2.0]), [], baseline=None, thresholds=None)
    with pytest.raises(RenderError, match="no reported week"):
        charts.trend_chart([1, 2], np.array([np.nan, np.nan]), [], baseline=None, thresholds=None)
    with pytest.raises(RenderError, match="at most 4 thresholds"):
        charts.trend_chart(
            [1], np.array([1.0]), [], baseline=None, thresholds={str(k): float(k) for k in range(5)}
        )
    with pytest.raises(RenderError, match="count from 1"):
        charts.trend_chart([0, 1], np.array([1.0, 1.0]), [], baseline=None, thresholds=None)
    with pytest.raises(RenderError, match="season-weeks 1-52"):
        charts.trend_chart(
            [1],
            np.array([1.0]),
            [("x", season(10, 1.0))],
            baseline=None,
            thresholds=None,
            week_labels=["40"],
        )
    with pytest.raises(RenderError, match=">= 0 and finite"):
        charts.trend_chart([1], np.array([-1.0]), [], baseline=None, thresholds=None)


# --------------------------------------------------------------------------- bar chart


@pytest.fixture
def bar_fig():
    names = ["Alder", "Birch", "Cedar", "Dogwood", "Elm vale and the long valley of the river Ash"]
    values = np.array([3.4, 7.1, 5.0, 5.0, 1.2])
    lows = values - np.array([1.3, 0.8, 1.0, 1.1, 0.4])
    highs = values + np.array([1.6, 0.9, 1.2, 1.0, 0.9])
    return charts.district_bar_chart(names, values, lows, highs)


def test_bar_chart_order_labels_and_whiskers(bar_fig):
    ax = bar_fig.axes[0]
    ticks = [t.get_text() for t in ax.get_yticklabels()]
    # Highest first from the top; 5.0 tie broken by name (Cedar before Dogwood).
    assert ticks[:4] == ["Birch", "Cedar", "Dogwood", "Alder"]
    long_name = ticks[-1]
    assert long_name.endswith("…") and len(long_name) == charts.MAX_NAME_CHARS
    texts = [t.get_text() for t in ax.texts]
    assert "7.1% (6.3–8.0)" in texts and "3.4% (2.1–5.0)" in texts
    assert len(ax.patches) == 5
    assert "95% CI" in ax.get_xlabel()


def test_bar_chart_fits_and_is_readable(bar_fig):
    renderer = drawn(bar_fig)
    for text in visible_texts(bar_fig):
        assert inside(text.get_window_extent(renderer), bar_fig.bbox), text.get_text()
        colour = to_hex(text.get_color()).upper()
        assert palette.contrast_ratio(colour, "#FFFFFF") >= 4.5, (text.get_text(), colour)


def test_bar_chart_rejects_bad_input():
    with pytest.raises(RenderError, match="at least one district"):
        charts.district_bar_chart([], np.array([]), np.array([]), np.array([]))
    with pytest.raises(RenderError, match="leave suppressed ones out"):
        charts.district_bar_chart(["A"], np.array([np.nan]), np.array([0.0]), np.array([1.0]))
    with pytest.raises(RenderError, match="outside its interval"):
        charts.district_bar_chart(["A"], np.array([2.0]), np.array([2.5]), np.array([3.0]))
    with pytest.raises(RenderError, match="expected 2 numbers"):
        charts.district_bar_chart(["A", "B"], np.array([1.0]), np.array([0.5]), np.array([2.0]))
