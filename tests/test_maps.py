"""Tests of the palettes, the district maps and the figure writers.

Check values and their sources are named beside each check. The synthetic
districts are invented for these tests: a 4 x 3 grid of 10 km squares in
UTM zone 33N, where district 0 also owns a detached piece to the west
(multipart), district 5 has a hole filled by an enclave (district 12), and
district 13 is an island offshore to the east.
"""

from __future__ import annotations

import itertools
import math
import os
import subprocess
import sys
import textwrap
import time

import geopandas as gpd
import numpy as np
import pytest
import shapely
from matplotlib.collections import PathCollection
from matplotlib.path import Path
from shapely.geometry import MultiPolygon, Polygon, box

from sitrep.errors import RenderError
from sitrep.model import ChangeClass, ClusterLabel
from sitrep.render import maps, palette
from sitrep.render.figures import figure_style, figure_to_png, figure_to_svg

# --------------------------------------------------------------------------- fixtures


def synthetic_districts() -> gpd.GeoSeries:
    """Invented districts: grid + multipart (0) + hole (5) with enclave (12) + island (13)."""
    g: list[Polygon | MultiPolygon] = [
        box(i * 1e4, j * 1e4, (i + 1) * 1e4, (j + 1) * 1e4) for j in range(3) for i in range(4)
    ]
    hole = [(13e3, 13e3), (17e3, 13e3), (17e3, 17e3), (13e3, 17e3)]
    g[5] = Polygon(g[5].exterior.coords, [hole])
    g.append(box(13e3, 13e3, 17e3, 17e3))
    g[0] = MultiPolygon([g[0], box(-8e3, 2e3, -4e3, 6e3)])
    g.append(Polygon([(52e3, 5e3), (56e3, 4e3), (57e3, 9e3), (53e3, 10e3)]))
    return gpd.GeoSeries(g, crs="EPSG:32633")


@pytest.fixture(scope="module")
def geoms() -> gpd.GeoSeries:
    return synthetic_districts()


def n_parts(geoms: gpd.GeoSeries) -> int:
    return int(shapely.get_num_geometries(np.asarray(geoms.array)).sum())


def district_collections(fig) -> list[list[PathCollection]]:
    """Per map axes, the PathCollections that draw districts."""
    out = []
    for ax in fig.axes:
        colls = [c for c in ax.collections if isinstance(c, PathCollection)]
        if colls:
            out.append(colls)
    return out


def legend_texts(fig) -> list[str]:
    texts = []
    for legend in fig.legends:
        texts += [t.get_text() for t in legend.get_texts()]
    for ax in fig.axes:
        if ax.get_legend() is not None:
            texts += [t.get_text() for t in ax.get_legend().get_texts()]
    return texts


def signed_area(vertices: np.ndarray) -> float:
    x, y = vertices[:, 0], vertices[:, 1]
    return 0.5 * float(np.dot(x[:-1], y[1:]) - np.dot(x[1:], y[:-1]))


# --------------------------------------------------------------------------- colour maths


def test_contrast_ratio_extremes_and_symmetry():
    # WCAG 2.1, definition of "contrast ratio": black on white is 21:1, a colour on itself 1:1.
    assert palette.contrast_ratio("#000000", "#FFFFFF") == pytest.approx(21.0)
    assert palette.contrast_ratio("#FFFFFF", "#000000") == pytest.approx(21.0)
    assert palette.contrast_ratio("#5B2558", "#5B2558") == pytest.approx(1.0)


def test_contrast_ratio_known_greys():
    # Common practice (WebAIM contrast checker): #767676 on white is 4.54:1, the lightest
    # grey passing AA for body text; #777777 is 4.48:1 and fails.
    assert palette.contrast_ratio("#767676", "#FFFFFF") == pytest.approx(4.54, abs=0.005)
    assert palette.contrast_ratio("#777777", "#FFFFFF") == pytest.approx(4.48, abs=0.005)


def test_contrast_ratio_rejects_malformed_colour():
    with pytest.raises(ValueError, match="expected a colour like"):
        palette.contrast_ratio("red", "#FFFFFF")
    with pytest.raises(ValueError, match="expected a colour like"):
        palette.contrast_ratio("#GG0000", "#FFFFFF")


def test_cielab_reference_values():
    # sRGB red (255, 0, 0) -> L*a*b* (53.24, 80.09, 67.20), D65; commonly quoted reference
    # values (e.g. Bruce Lindbloom's colour calculator). White -> (100, 0, 0).
    assert palette.cielab("#FF0000") == pytest.approx((53.24, 80.09, 67.20), abs=0.02)
    assert palette.cielab("#FFFFFF") == pytest.approx((100.0, 0.0, 0.0), abs=0.01)
    assert palette.cielab("#000000") == pytest.approx((0.0, 0.0, 0.0), abs=0.01)


@pytest.mark.parametrize(
    ("lab1", "lab2", "expected"),
    [
        # Sharma, Wu & Dalal (2005), Table 1, pairs 1, 7, 17, 25 and 34.
        ((50.0, 2.6772, -79.7751), (50.0, 0.0, -82.7485), 2.0425),
        ((50.0, 0.0, 0.0), (50.0, -1.0, 2.0), 2.3669),
        ((50.0, 2.5, 0.0), (73.0, 25.0, -18.0), 27.1492),
        ((60.2574, -34.0099, 36.2677), (60.4626, -34.1751, 39.4387), 1.2644),
        ((2.0776, 0.0795, -1.1350), (0.9033, -0.0636, -0.5514), 0.9082),
    ],
)
def test_delta_e_2000_matches_published_pairs(lab1, lab2, expected):
    assert palette.delta_e_2000(lab1, lab2) == pytest.approx(expected, abs=1e-4)
    assert palette.delta_e_2000(lab2, lab1) == pytest.approx(expected, abs=1e-4)


@pytest.mark.parametrize("kind", palette.CVD_KINDS)
def test_cvd_simulation_keeps_greys_and_merges_red_green(kind):
    # Machado et al. (2009): each severity-1.0 matrix row sums to 1, so greys are fixed points.
    for grey in ("#000000", "#808080", "#FFFFFF"):
        assert palette.simulate_cvd(grey, kind) == grey
    if kind in ("protanopia", "deuteranopia"):
        # Red-green dichromats: pure red and pure green move much closer (the defining confusion).
        before = palette.delta_e_2000(palette.cielab("#FF0000"), palette.cielab("#00FF00"))
        after = palette.delta_e_2000(
            palette.cielab(palette.simulate_cvd("#FF0000", kind)),
            palette.cielab(palette.simulate_cvd("#00FF00", kind)),
        )
        assert after < 0.5 * before


def test_cvd_simulation_rejects_unknown_kind():
    with pytest.raises(ValueError, match="kind must be one of"):
        palette.simulate_cvd("#FFFFFF", "monochrome")


# --------------------------------------------------------------------------- palettes


def test_all_text_colours_reach_wcag_aa():
    # WCAG 2.1 SC 1.4.3: text contrast >= 4.5:1.
    for name, colour in palette.TEXT_COLOURS.items():
        assert palette.contrast_ratio(colour, "#FFFFFF") >= 4.5, name


def test_all_line_colours_reach_non_text_contrast():
    # WCAG 2.1 SC 1.4.11: graphical objects >= 3:1 against the background.
    for name, colour in palette.LINE_COLOURS.items():
        assert palette.contrast_ratio(colour, "#FFFFFF") >= 3.0, name


SCHEMES = {
    "terciles": palette.TERCILE_STYLES,
    "change": palette.CHANGE_STYLES,
    "cluster": palette.CLUSTER_STYLES,
}


@pytest.mark.parametrize("scheme", sorted(SCHEMES))
def test_same_pattern_fills_stay_distinct_in_every_vision_type(scheme):
    # Project rule (palette module docs): fills that share a pattern differ by
    # CIEDE2000 >= MIN_DELTA_E in normal vision and under each Machado (2009)
    # dichromacy, and by >= MIN_LIGHTNESS_STEP in L* (greyscale print).
    styles = SCHEMES[scheme]
    checked = 0
    for (k1, s1), (k2, s2) in itertools.combinations(styles.items(), 2):
        if s1.pattern != s2.pattern:
            continue
        checked += 1
        views = [(s1.face, s2.face)] + [
            (palette.simulate_cvd(s1.face, k), palette.simulate_cvd(s2.face, k))
            for k in palette.CVD_KINDS
        ]
        worst = min(palette.delta_e_2000(palette.cielab(a), palette.cielab(b)) for a, b in views)
        assert worst >= palette.MIN_DELTA_E, (scheme, k1, k2, worst)
        lightness = abs(palette.cielab(s1.face)[0] - palette.cielab(s2.face)[0])
        assert lightness >= palette.MIN_LIGHTNESS_STEP, (scheme, k1, k2, lightness)
    assert checked >= 1  # each scheme has solid fills that rely on lightness


@pytest.mark.parametrize("kind", ("normal", *palette.CVD_KINDS))
def test_tercile_ramp_gets_darker_in_every_vision_type(kind):
    # A sequential ramp must keep its order: L* strictly falls from low to high tercile.
    faces = [palette.TERCILE_STYLES[r].face for r in (1, 2, 3)]
    if kind != "normal":
        faces = [palette.simulate_cvd(f, kind) for f in faces]
    lightness = [palette.cielab(f)[0] for f in faces]
    assert lightness[0] - lightness[1] >= palette.MIN_LIGHTNESS_STEP
    assert lightness[1] - lightness[2] >= palette.MIN_LIGHTNESS_STEP


def test_every_label_has_a_style_and_words():
    assert set(palette.CLUSTER_STYLES) == {c.value for c in ClusterLabel}
    assert set(maps.LEGEND_LABELS["cluster"]) == {c.value for c in ClusterLabel}
    assert set(palette.CHANGE_STYLES) == {c.value for c in ChangeClass}
    assert set(maps.LEGEND_LABELS["change"]) == {c.value for c in ChangeClass}
    assert set(palette.TERCILE_STYLES) == {0, 1, 2, 3}


def test_missing_classes_are_hatched_and_no_neighbours_outlined():
    # WCAG 2.1 SC 1.4.1: no data must not be told apart by colour alone.
    for style in (
        palette.TERCILE_STYLES[0],
        palette.CHANGE_STYLES["not assessable"],
        palette.CLUSTER_STYLES["no data"],
        palette.CLUSTER_STYLES["not assessable"],
    ):
        assert style.hatch
    assert palette.CLUSTER_STYLES["no neighbours"].edge_style == "dotted"
    assert (
        palette.CLUSTER_STYLES["no data"].pattern != palette.CLUSTER_STYLES["no neighbours"].pattern
    )


def test_cluster_scheme_avoids_strong_red_and_strong_blue():
    # Project rule ("original look"): no strong red or strong blue cluster fills.
    for label, style in palette.CLUSTER_STYLES.items():
        _, a, b = palette.cielab(style.face)
        hue = math.degrees(math.atan2(b, a)) % 360
        chroma = math.hypot(a, b)
        strong_red = chroma > 40 and (hue < 45 or hue > 345)
        strong_blue = chroma > 40 and 250 <= hue <= 310
        assert not strong_red and not strong_blue, label


# --------------------------------------------------------------------------- geometry and maps


def test_tercile_labels_print_cuts_to_one_decimal():
    labels = maps.tercile_labels((1.234, 2.5), "No data / suppressed")
    assert labels == {
        1: "Lowest third (≤ 1.2%)",
        2: "Middle third (1.2–2.5%)",
        3: "Highest third (> 2.5%)",
        0: "No data / suppressed",
    }


def test_tercile_labels_use_two_decimals_when_cuts_round_together():
    labels = maps.tercile_labels((1.23, 1.24), "No data")
    assert labels[2] == "Middle third (1.23–1.24%)"
    assert maps.tercile_labels(None, "No data")[1] == "Lowest third"


def test_tercile_labels_reject_bad_cuts():
    with pytest.raises(RenderError, match="increasing order"):
        maps.tercile_labels((2.5, 1.2), "No data")
    with pytest.raises(RenderError, match="finite"):
        maps.tercile_labels((float("nan"), 1.2), "No data")


def test_small_multiples_draw_every_part_with_one_fixed_legend(geoms):
    n = len(geoms)
    rng = np.random.default_rng(20260101)
    panels = [(f"Week {w}", rng.integers(0, 4, n).astype(np.int64)) for w in (44, 45, 46, 47)]
    panels[0][1][:] = 0  # a panel entirely without data still draws every district
    fig = maps.tercile_small_multiples(
        geoms, panels, (1.234, 2.5), suppressed_label="No data / suppressed"
    )
    per_axes = district_collections(fig)
    assert len(per_axes) == 4
    for colls in per_axes:
        assert sum(len(c.get_paths()) for c in colls) == n_parts(geoms) == 15
    texts = legend_texts(fig)
    assert len(fig.legends) == 1 and len(texts) == 4
    assert any("1.2" in t and "2.5" in t for t in texts)
    assert "Lowest third (≤ 1.2%)" in texts and "Highest third (> 2.5%)" in texts
    nodata = [c for c in per_axes[0] if c.get_gid() == "class-0"]
    assert nodata and nodata[0].get_hatch() == "////"
    handle = fig.legends[0].legend_handles[3]
    assert handle.get_hatch() == "////"
    assert [ax.get_title() for ax in fig.axes if ax.get_title()] == [p[0] for p in panels]


def test_small_multiples_layout_rows(geoms):
    n = len(geoms)
    panels = [(f"W{k}", np.ones(n, dtype=np.int64)) for k in range(4)]
    wide = maps.tercile_small_multiples(geoms, panels, (1.0, 2.0), suppressed_label="No data")
    positions = [ax.get_position() for ax in wide.axes if ax.get_title()]
    assert len({round(p.y0, 6) for p in positions}) == 1  # a wide region: one row of 4
    tall = gpd.GeoSeries(geoms.scale(1.0, 4.0, origin=(0, 0)), crs=geoms.crs)
    fig = maps.tercile_small_multiples(tall, panels, (1.0, 2.0), suppressed_label="No data")
    with figure_style():
        fig.canvas.draw()
    rows = {round(ax.get_position().y0, 3) for ax in fig.axes if ax.get_title()}
    assert len(rows) == 2  # a tall region: 2 x 2


def test_holes_multiparts_and_islands_are_drawn(geoms):
    fig = maps.cluster_map(geoms, ["not significant"] * len(geoms))
    (colls,) = district_collections(fig)
    paths: list[Path] = [p for c in colls for p in c.get_paths()]
    assert len(paths) == n_parts(geoms)
    # District 5 keeps its hole: two rings, exterior anticlockwise, hole clockwise.
    with_hole = [p for p in paths if int((p.codes == Path.MOVETO).sum()) == 2]
    assert len(with_hole) == 1
    starts = np.flatnonzero(with_hole[0].codes == Path.MOVETO)
    ext, hole = np.split(with_hole[0].vertices, starts[1:])
    assert signed_area(ext) > 0 > signed_area(hole)
    # The extent covers the detached western piece and the eastern island.
    ax = fig.axes[0]
    xmin, ymin, xmax, ymax = geoms.total_bounds
    assert ax.get_xlim()[0] < xmin and ax.get_xlim()[1] > xmax
    assert ax.get_ylim()[0] < ymin and ax.get_ylim()[1] > ymax
    assert xmin == -8e3 and xmax == 57e3


def test_outer_ring_orientation_is_fixed_for_clockwise_input():
    cw = Polygon([(0, 0), (0, 1e4), (1e4, 1e4), (1e4, 0)])  # clockwise exterior
    assert not shapely.is_ccw(cw.exterior)
    g = gpd.GeoSeries([cw, box(1e4, 0, 2e4, 1e4)], crs="EPSG:32633")
    fig = maps.change_map(g, ["increase", "decrease"])
    for colls in district_collections(fig):
        for c in colls:
            for p in c.get_paths():
                assert signed_area(p.vertices) > 0


def test_change_map_legend_lists_only_classes_with_districts(geoms):
    classes = ["increase"] * 4 + ["similar"] * 7 + ["not assessable"] * 3
    assert len(classes) == len(geoms)
    fig = maps.change_map(geoms, classes)
    texts = legend_texts(fig)
    assert texts == [  # no 'Clear decrease': no district has it (the caption gives the counts)
        "Clear increase",
        "No clear or only a small change",
        "Not assessable",
    ]
    (colls,) = district_collections(fig)
    assert sum(len(c.get_paths()) for c in colls) == n_parts(geoms)
    hatched = {c.get_gid(): c.get_hatch() for c in colls}
    assert hatched["class-not assessable"] == "////"


def test_cluster_map_accepts_enum_members_and_lists_the_labels_present(geoms):
    labels = [list(ClusterLabel)[i % len(ClusterLabel)] for i in range(len(geoms))]
    fig = maps.cluster_map(geoms, labels)
    texts = legend_texts(fig)
    assert len(texts) == len(ClusterLabel)
    assert "No neighbours (not tested)" in texts  # rows 5 and 13
    fewer = maps.cluster_map(
        geoms, ["not significant"] * (len(geoms) - 1) + [ClusterLabel.HIGH_HIGH]
    )
    assert legend_texts(fewer) == ["High cluster (high-high)", "Not significant"]
    (colls,) = district_collections(fig)
    by_gid = {c.get_gid(): c for c in colls}
    assert by_gid["class-no data"].get_hatch() == "////"
    assert by_gid["class-no neighbours"].get_linestyle()[0][1] is not None  # dotted dashes
    assert sum(len(c.get_paths()) for c in colls) == n_parts(geoms)


def test_comparison_map_two_panels_share_one_scale(geoms):
    n = len(geoms)
    last = np.linspace(0.5, 6.0, n)
    this = last + 0.4
    last[3] = np.nan
    this[7] = np.nan
    fig = maps.comparison_map(geoms, last, this, titles=("Week 46", "Week 47"))
    per_axes = district_collections(fig)
    assert len(per_axes) == 2
    for colls in per_axes:
        assert sum(len(c.get_paths()) for c in colls) == n_parts(geoms)
        assert any(c.get_hatch() == "////" for c in colls)
    assert "No data / suppressed" in legend_texts(fig)
    # Max 6.4 -> scale top 8 (1, 1.5, 2, 2.5, 3, 4, 5, 6, 8, 10 x 10^k rule, see docstring).
    colourbar_axes = [ax for ax in fig.axes if ax.get_xlim() == (0.0, 8.0)]
    assert len(colourbar_axes) == 1


def test_scale_bar_is_round_and_in_km(geoms):
    # Extent 65 km wide: a quarter is 16.25 km, the largest 1/2/5 x 10^k below is 10 km.
    fig = maps.change_map(geoms, ["similar"] * len(geoms))
    texts = [t.get_text() for t in fig.axes[0].texts]
    assert "10 km" in texts and "N" in texts


def test_maps_reject_bad_input(geoms):
    n = len(geoms)
    with pytest.raises(RenderError, match="projected CRS"):
        maps.change_map(geoms.to_crs("EPSG:4326"), ["similar"] * n)
    with pytest.raises(RenderError, match="projected CRS"):
        maps.change_map(gpd.GeoSeries(list(geoms)), ["similar"] * n)
    with pytest.raises(RenderError, match=f"one value per district \\({n}\\), got 3"):
        maps.change_map(geoms, ["similar"] * 3)
    with pytest.raises(RenderError, match="unknown change classes 'up'"):
        maps.change_map(geoms, ["up"] + ["similar"] * (n - 1))
    with pytest.raises(RenderError, match="must be 0 \\(no data\\) or 1-3"):
        maps.tercile_small_multiples(
            geoms, [("W1", np.full(n, 5, dtype=np.int64))], None, suppressed_label="x"
        )
    with pytest.raises(RenderError, match="1 to 8 panels"):
        maps.tercile_small_multiples(geoms, [], None, suppressed_label="x")
    with pytest.raises(RenderError, match="0-100"):
        maps.comparison_map(geoms, np.full(n, 120.0), np.full(n, 1.0))
    empty = gpd.GeoSeries([*list(geoms)[:-1], Polygon()], crs=geoms.crs)
    with pytest.raises(RenderError, match=f"rows {n - 1}"):
        maps.change_map(empty, ["similar"] * n)


def test_drawing_simplifies_detail_but_keeps_tiny_parts():
    detailed = shapely.Point(0, 0).buffer(2e4, quad_segs=2000)  # ~8,000 vertices
    tiny = box(3e4, 0, 3e4 + 1.0, 1.0)  # 1 m square, far below the drawing tolerance
    g = gpd.GeoSeries([detailed, MultiPolygon([box(-3e4, 0, -2.9e4, 1e3), tiny])], crs="EPSG:32633")
    fig = maps.change_map(g, ["increase", "decrease"])
    (colls,) = district_collections(fig)
    paths = [p for c in colls for p in c.get_paths()]
    assert len(paths) == 3
    assert max(len(p.vertices) for p in paths) < len(detailed.exterior.coords) / 4


def test_three_thousand_districts_draw_quickly():
    rng = np.random.default_rng(7)
    cells = [
        box(i * 1e3, j * 1e3, (i + 1) * 1e3, (j + 1) * 1e3).buffer(
            rng.uniform(-200, 0), quad_segs=3
        )
        for j in range(50)
        for i in range(60)
    ]
    g = gpd.GeoSeries(cells, crs="EPSG:32633")
    labels = [list(ClusterLabel)[k] for k in rng.integers(0, len(ClusterLabel), len(cells))]
    start = time.perf_counter()
    fig = maps.cluster_map(g, labels)
    png = figure_to_png(fig)
    elapsed = time.perf_counter() - start
    print(f"3,000-district cluster map: built and written as PNG in {elapsed:.2f} s")
    (colls,) = district_collections(fig)
    assert sum(len(c.get_paths()) for c in colls) == 3000
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    assert elapsed < 30  # loose: a guard against pathological slowness, not a benchmark


# --------------------------------------------------------------------------- figure bytes

_REPRO_SCRIPT = textwrap.dedent(
    """
    import hashlib, sys
    import numpy as np
    sys.path.insert(0, {tests_dir!r})
    from test_maps import synthetic_districts
    from sitrep.render import charts, maps
    from sitrep.render.figures import figure_to_png, figure_to_svg
    g = synthetic_districts()
    labels = ["high-high", "low-low", "high-low", "low-high", "not significant",
              "no neighbours", "no data", "not assessable"] * 2
    figs = [
        maps.cluster_map(g, labels[: len(g)]),
        maps.comparison_map(g, np.linspace(0, 5, len(g)), np.linspace(1, 6, len(g))),
        charts.trend_chart([1, 2, 3, 4], np.array([1.0, 2.0, np.nan, np.nan]),
                           [("2024/25", np.array([1.0, 1.5, 2.5, 2.0]))],
                           baseline=1.1, thresholds={{"Epidemic threshold": 1.2}}),
    ]
    for fig in figs:
        print(hashlib.sha256(figure_to_png(fig)).hexdigest(),
              hashlib.sha256(figure_to_svg(fig)).hexdigest())
    """
)


def test_png_and_svg_are_byte_identical_across_processes():
    tests_dir = os.path.dirname(os.path.abspath(__file__))
    script = _REPRO_SCRIPT.format(tests_dir=tests_dir)
    digests = []
    for seed in ("1", "4242"):
        env = {**os.environ, "PYTHONHASHSEED": seed}
        done = subprocess.run(
            [sys.executable, "-c", script], env=env, capture_output=True, text=True, timeout=120
        )
        assert done.returncode == 0, done.stderr
        digests.append(done.stdout.split())
    assert len(digests[0]) == 6
    assert digests[0] == digests[1]


def test_svg_has_no_date_and_text_as_paths(geoms):
    fig = maps.change_map(geoms, ["similar"] * len(geoms))
    svg = figure_to_svg(fig)
    assert b"<dc:date>" not in svg
    assert b"<text" not in svg  # svg.fonttype = 'path' (see figures module notes)
    assert svg == figure_to_svg(fig)
    png = figure_to_png(fig, dpi=100)
    assert b"Software" not in png
    with pytest.raises(ValueError, match="positive whole number"):
        figure_to_png(fig, dpi=0)
