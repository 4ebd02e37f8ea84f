"""District maps of the weekly report, each returned as a matplotlib Figure.

The inputs are plain values: the district geometries (a projected
:class:`geopandas.GeoSeries` in district order) and arrays or sequences
aligned with them. Nothing here reads or writes files; turn a figure into
bytes with :mod:`sitrep.render.figures`.

Drawing method, shared by every map: each district's polygon parts are
simplified for drawing only (``shapely.simplify(preserve_topology=True)`` at
:data:`SIMPLIFY_SHARE` of the larger side of the extent; a part the
simplifier would lose is drawn unsimplified), exterior rings are turned
anticlockwise and holes clockwise, and every part becomes one
:class:`matplotlib.path.Path` (holes included through ``MOVETO``/``CLOSEPOLY``
codes). Parts of one class share one :class:`~matplotlib.collections.PathCollection`
(one fill, hatch and outline per class; see :mod:`sitrep.render.palette`),
which stays fast at thousands of districts. Above :data:`RASTER_MIN_PARTS`
parts the district collections of a map panel are drawn below the panel's
rasterization z-order (``Axes.set_rasterization_zorder``): PNG output is
unchanged, and vector (SVG) output embeds all the panel's district fills and
outlines as one image at :data:`sitrep.render.figures.RASTER_DPI` while
text, legend, scale bar and north arrow stay vector. (Tens of thousands of vector
paths make an SVG of tens of megabytes that browsers and the PDF engine draw
one element at a time; at that density no single outline can be told apart
on paper anyway.) The drawing paths of one set of geometries are built once
and reused by every map of the report (:func:`_prepare` keeps the last few,
keyed by the geometries' WKB checksum and CRS). The map extent covers every
part, offshore islands included. Maps are north-up (the projected grid's y
axis points up the page), have no axes frame, and carry a scale bar in km
and a north arrow in a strip below the districts.
"""

from __future__ import annotations

import collections
import dataclasses
import enum
import hashlib
import math
import threading
from collections.abc import Sequence
from typing import Any

import geopandas as gpd
import numpy as np
import numpy.typing as npt
import shapely
from matplotlib.axes import Axes
from matplotlib.cm import ScalarMappable
from matplotlib.collections import PathCollection
from matplotlib.colors import LinearSegmentedColormap, Normalize
from matplotlib.figure import Figure
from matplotlib.legend import Legend
from matplotlib.patches import Patch
from matplotlib.path import Path

from sitrep.errors import RenderError
from sitrep.render.figures import CM, figure_style, freeze_layout, new_figure
from sitrep.render.palette import (
    CHANGE_STYLES,
    CLUSTER_STYLES,
    COLOURS,
    NO_DATA_STYLE,
    RAMP,
    TERCILE_STYLES,
    FillStyle,
)
from sitrep.render.wording.labels import LEGEND_LABELS

__all__ = [
    "LEGEND_LABELS",
    "RASTER_MIN_PARTS",
    "SIMPLIFY_SHARE",
    "change_map",
    "cluster_map",
    "comparison_map",
    "format_cut",
    "tercile_labels",
    "tercile_small_multiples",
]

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]

SIMPLIFY_SHARE = 0.0005
"""Drawing tolerance as a share of the larger side of the map extent (0.05 %).

On a 17 cm wide map that is about 0.09 mm of paper, one pixel at 300 dpi, so
the simplified outline cannot be told from the original at print size."""

RASTER_MIN_PARTS = 1000
"""Above this many polygon parts, the district collections are rasterized in vector output.

Measured on the 2-core reference machine with ``benchmarks/bench_full.py``:
WeasyPrint needs about 1 ms per SVG path element, so the report's eight map
panels at 3,000 districts (24,000 paths) took about 25 s of PDF time and
matplotlib's SVG writer another 3 s; as images they take well under a second.
County- and state-sized reports (up to 1,000 parts) stay fully vector."""

_RASTER_ZORDER = 0.5
"""Artists below this z-order are rasterized together in vector output (see :func:`_zorder`)."""

_CACHE_SIZE = 4
_CACHE: collections.OrderedDict[tuple[str, str], _MapGeometry] = collections.OrderedDict()
_CACHE_LOCK = threading.Lock()

_MAX_PANELS = 8
_MARGIN = 0.02  # share of the extent's larger side added on each side
_STRIP_CM = 1.0  # paper height of the strip below the districts (scale bar, north arrow)
_TITLE_CM = 0.55  # paper height of a panel title
_MAX_MAP_HEIGHT_CM = 12.0


# --------------------------------------------------------------------------- geometry


@dataclasses.dataclass(frozen=True, eq=False)
class _MapGeometry:
    """Drawing paths of the districts: one path per polygon part."""

    paths: tuple[Path, ...]
    owner: IntArray
    """District position (row in ``geoms``) of each path."""
    bounds: tuple[float, float, float, float]
    metres_per_unit: float
    n_districts: int

    @property
    def rasterize(self) -> bool:
        """Whether the district collections are rasterized in vector output."""
        return len(self.paths) > RASTER_MIN_PARTS


def _part_paths(parts: npt.NDArray[np.object_]) -> tuple[Path, ...]:
    """Each polygon (with its holes) as one Path: exterior anticlockwise, holes clockwise.

    Vectorised over all parts: the rings' signed areas (shoelace formula,
    ``0.5 * sum(x_i y_(i+1) - x_(i+1) y_i)``) decide which rings are reversed
    (an exterior with area <= 0, a hole with area > 0); every ring starts with
    ``MOVETO`` and ends with ``CLOSEPOLY`` (its repeated first point).
    """
    rings, ring_part = shapely.get_rings(parts, return_index=True)
    xy, ring_of = shapely.get_coordinates(rings, return_index=True)
    n_rings = len(rings)
    counts = np.bincount(ring_of, minlength=n_rings)
    ends = np.cumsum(counts)
    starts = ends - counts
    x, y = xy[:, 0], xy[:, 1]
    cross = x[:-1] * y[1:] - x[1:] * y[:-1]
    same_ring = ring_of[:-1] == ring_of[1:]
    area = 0.5 * np.bincount(ring_of[:-1][same_ring], weights=cross[same_ring], minlength=n_rings)
    exterior = np.ones(n_rings, dtype=bool)
    exterior[1:] = ring_part[1:] != ring_part[:-1]  # get_rings lists each exterior first
    flip = (area > 0) != exterior
    i = np.arange(len(xy))
    order = np.where(flip[ring_of], starts[ring_of] + ends[ring_of] - 1 - i, i)
    vertices = xy[order]
    codes = np.full(len(xy), Path.LINETO, dtype=Path.code_type)
    codes[starts] = Path.MOVETO
    codes[ends - 1] = Path.CLOSEPOLY
    part_ends = ends[np.flatnonzero(np.append(ring_part[1:] != ring_part[:-1], True))]
    part_starts = np.concatenate([[0], part_ends[:-1]])
    return tuple(
        Path(vertices[a:b], codes[a:b]) for a, b in zip(part_starts, part_ends, strict=True)
    )


def _prepare(geoms: gpd.GeoSeries) -> _MapGeometry:
    """Check the geometries and build their drawing paths (see the module notes).

    The result for the same geometries (same WKB bytes in the same order and
    the same CRS) is reused: the last :data:`_CACHE_SIZE` are kept.
    """
    if not isinstance(geoms, gpd.GeoSeries):
        raise RenderError(
            f"map geometries must be a geopandas GeoSeries, got {type(geoms).__name__}; "
            "pass districts.frame.geometry"
        )
    crs = geoms.crs
    if crs is None or not crs.is_projected:
        got = "no CRS" if crs is None else f"geographic CRS {crs.to_string()}"
        raise RenderError(
            f"maps need boundaries in a projected CRS (units of length), got {got}; "
            "project them first, e.g. to the local UTM zone"
        )
    metres_per_unit = float(crs.axis_info[0].unit_conversion_factor)
    values = np.asarray(geoms.array, dtype=object)
    if len(values) == 0:
        raise RenderError("no district geometries to draw, got an empty GeoSeries")
    digest = hashlib.sha256()
    for wkb in shapely.to_wkb(values):
        digest.update(b"\x00" if wkb is None else len(wkb).to_bytes(8, "little") + wkb)
    key = (digest.hexdigest(), crs.to_wkt())
    with _CACHE_LOCK:
        cached = _CACHE.get(key)
        if cached is not None:
            _CACHE.move_to_end(key)
            return cached
    geometry = _build_geometry(values, metres_per_unit)
    with _CACHE_LOCK:
        _CACHE[key] = geometry
        while len(_CACHE) > _CACHE_SIZE:
            _CACHE.popitem(last=False)
    return geometry


def _build_geometry(values: npt.NDArray[np.object_], metres_per_unit: float) -> _MapGeometry:
    """Check polygon types, simplify for drawing and build one Path per part."""
    type_ids = shapely.get_type_id(values)
    bad = np.flatnonzero(~np.isin(type_ids, (3, 6)) | shapely.is_empty(values))
    if bad.size:
        shown = ", ".join(str(i) for i in bad[:5]) + (" ..." if bad.size > 5 else "")
        raise RenderError(
            f"every district needs a non-empty polygon or multipolygon; {bad.size} do not "
            f"(rows {shown}); fix or remove them in the boundary file"
        )
    xmin, ymin, xmax, ymax = (float(v) for v in shapely.total_bounds(values))
    tolerance = SIMPLIFY_SHARE * max(xmax - xmin, ymax - ymin)
    simple = shapely.simplify(values, tolerance, preserve_topology=True)
    lost = (shapely.get_num_geometries(simple) != shapely.get_num_geometries(values)) | (
        shapely.is_empty(simple) | ~np.isin(shapely.get_type_id(simple), (3, 6))
    )
    simple = np.where(lost, values, simple)
    parts, owner = shapely.get_parts(simple, return_index=True)
    paths = _part_paths(parts)
    return _MapGeometry(
        paths=paths,
        owner=np.asarray(owner, dtype=np.int64),
        bounds=(xmin, ymin, xmax, ymax),
        metres_per_unit=metres_per_unit,
        n_districts=len(values),
    )


# --------------------------------------------------------------------------- drawing helpers


def _border_width(geometry: _MapGeometry) -> float:
    """District outline width in points: thinner when there are many parts."""
    n = len(geometry.paths)
    return 0.35 if n <= 300 else 0.2 if n <= 1500 else 0.1


def _draw_classes(
    ax: Axes,
    geometry: _MapGeometry,
    classes: Sequence[Any],
    styles: dict[Any, FillStyle],
) -> None:
    """Fill each district with its class's style: one PathCollection per class."""
    base_width = _border_width(geometry)
    per_district = np.empty(len(classes), dtype=object)
    per_district[:] = list(classes)
    per_part = per_district[geometry.owner]
    for key, style in styles.items():
        idx = np.flatnonzero(per_part == key)
        if not idx.size:
            continue
        width = base_width if style.edge_width is None else style.edge_width * base_width / 0.35
        collection = PathCollection(
            [geometry.paths[i] for i in idx],
            facecolors=style.face,
            edgecolors=style.edge,
            linewidths=width,
            linestyles=style.edge_style,
            hatch=style.hatch or None,
            hatchcolor=style.hatch_colour,
            zorder=_zorder(geometry, outlined=style.edge_width is not None),
            gid=f"class-{key}",
        )
        ax.add_collection(collection, autolim=False)
    _rasterize_districts(ax, geometry)


def _zorder(geometry: _MapGeometry, *, outlined: bool) -> float:
    """Drawing order of a district collection: outlined classes above plain fills.

    When the districts are rasterized they sit below :data:`_RASTER_ZORDER`
    (and every other artist of the map above it), so that all district
    collections of one map panel become one image.
    """
    if geometry.rasterize:
        return 0.2 if outlined else 0.1
    return 2 if outlined else 1


def _rasterize_districts(ax: Axes, geometry: _MapGeometry) -> None:
    """Rasterize, in vector output, every artist below :data:`_RASTER_ZORDER` (the districts)."""
    if geometry.rasterize:
        ax.set_rasterization_zorder(_RASTER_ZORDER)


@dataclasses.dataclass(frozen=True)
class _Panel:
    """Size of one map panel: data limits and the data units per centimetre on paper."""

    xlim: tuple[float, float]
    ylim: tuple[float, float]
    per_cm: float
    """Data units (CRS units) per centimetre of paper."""
    width_cm: float
    height_cm: float


def _panel(geometry: _MapGeometry, ncols: int, width_cm: float, max_height_cm: float) -> _Panel:
    """Panel limits and paper size: the extent plus a margin, and a strip below it.

    Each of ``ncols`` panels gets an equal share of ``width_cm`` (less 0.4 cm
    gaps). The strip (:data:`_STRIP_CM` of paper) holds the scale bar and
    north arrow. When the panel would be taller than ``max_height_cm`` it is
    narrowed instead, keeping the aspect ratio.
    """
    xmin, ymin, xmax, ymax = geometry.bounds
    side = max(xmax - xmin, ymax - ymin, 1e-9)
    margin = _MARGIN * side
    data_w = (xmax - xmin) + 2 * margin
    data_h = (ymax - ymin) + 2 * margin
    panel_w_cm = max((width_cm - 0.4 * (ncols - 1) - 0.3) / ncols, 2.0)
    per_cm = data_w / panel_w_cm
    if data_h / per_cm + _STRIP_CM > max_height_cm:
        per_cm = data_h / (max_height_cm - _STRIP_CM)
        panel_w_cm = data_w / per_cm
    strip = _STRIP_CM * per_cm
    return _Panel(
        xlim=(xmin - margin, xmax + margin),
        ylim=(ymin - margin - strip, ymax + margin),
        per_cm=per_cm,
        width_cm=panel_w_cm,
        height_cm=data_h / per_cm + _STRIP_CM,
    )


def _frame(ax: Axes, geometry: _MapGeometry, panel: _Panel, *, furniture: bool) -> None:
    """Extent, equal aspect, no frame; scale bar and north arrow when asked."""
    ax.set_xlim(*panel.xlim)
    ax.set_ylim(*panel.ylim)
    ax.set_aspect("equal", adjustable="box")
    ax.set_axis_off()
    if furniture:
        _scale_bar(ax, geometry, panel)
        _north_arrow(ax, geometry, panel)


def _nice_length(target_m: float) -> float:
    """Largest of 1, 2 or 5 times a power of ten that is not above ``target_m``."""
    exponent = math.floor(math.log10(max(target_m, 1e-9)))
    for mantissa in (5, 2, 1):
        if mantissa * 10**exponent <= target_m:
            return float(mantissa * 10**exponent)
    return float(10**exponent)  # pragma: no cover - the loop always returns


def _scale_bar(ax: Axes, geometry: _MapGeometry, panel: _Panel) -> None:
    """A scale bar of a round length (at most a quarter of the extent's width), in km."""
    xmin, _, xmax, _ = geometry.bounds
    unit = geometry.metres_per_unit
    length_m = _nice_length(0.25 * (xmax - xmin) * unit)
    length = length_m / unit
    bottom, cm = panel.ylim[0], panel.per_cm
    y = bottom + 0.62 * cm
    tick = 0.07 * cm
    ink = COLOURS["ink"]
    ax.plot([xmin, xmin + length], [y, y], color=ink, linewidth=1.2, solid_capstyle="butt")
    for x in (xmin, xmin + length):
        ax.plot([x, x], [y - tick, y + tick], color=ink, linewidth=0.8)
    label = f"{length_m / 1000:g} km" if length_m >= 1000 else f"{length_m:g} m"
    ax.text(xmin + length / 2, y - 0.14 * cm, label, ha="center", va="top", fontsize=6.5)


def _north_arrow(ax: Axes, geometry: _MapGeometry, panel: _Panel) -> None:
    """An upward arrow with 'N' at the right of the strip (grid north is up)."""
    x = geometry.bounds[2]
    bottom, cm = panel.ylim[0], panel.per_cm
    ax.annotate(
        "",
        xy=(x, bottom + 0.62 * cm),
        xytext=(x, bottom + 0.12 * cm),
        arrowprops={
            "arrowstyle": "-|>,head_length=0.5,head_width=0.25",
            "color": COLOURS["ink"],
            "linewidth": 0.9,
            "shrinkA": 0,
            "shrinkB": 0,
        },
    )
    ax.text(x, bottom + 0.66 * cm, "N", ha="center", va="bottom", fontsize=7, fontweight="bold")


def _handle(style: FillStyle, label: str) -> Patch:
    return Patch(
        facecolor=style.face,
        edgecolor=style.edge,
        hatch=style.hatch or None,
        hatchcolor=style.hatch_colour,
        linestyle=style.edge_style,
        linewidth=0.9 if style.edge_width is not None else 0.5,
        label=label,
    )


def _figure_legend(fig: Figure, handles: list[Patch], *, max_cols: int) -> Legend:
    """Legend below the maps, in the most columns that fit the figure's width.

    Only balanced column counts are tried (every column but the last full),
    so four entries go in one row or two rows of two, never 3 + 1.
    """
    renderer = fig.canvas.get_renderer()  # type: ignore[attr-defined]
    n = len(handles)
    for ncol in range(min(max_cols, n), 0, -1):
        if ncol > 1 and math.ceil(n / math.ceil(n / ncol)) != ncol:
            continue
        legend = fig.legend(
            handles=handles,
            loc="outside lower center",
            ncols=ncol,
            frameon=False,
            handlelength=1.8,
            handleheight=1.3,
            columnspacing=1.6,
        )
        if ncol == 1 or legend.get_window_extent(renderer).width <= 0.97 * fig.bbox.width:
            return legend
        legend.remove()
    raise AssertionError("unreachable")  # pragma: no cover


def _fit_height(fig: Figure, maps_cm: float, legend: Legend | None) -> None:
    """Set the figure's height to the maps' height plus the legend's, so no space is wasted."""
    legend_cm = 0.0
    if legend is not None:
        renderer = fig.canvas.get_renderer()  # type: ignore[attr-defined]
        legend_cm = legend.get_window_extent(renderer).height / fig.dpi / CM
    width_in = fig.get_size_inches()[0]
    fig.set_size_inches(width_in, (maps_cm + legend_cm + 0.5) * CM)


def _values(items: Sequence[Any], n: int, what: str, allowed: Sequence[str]) -> list[str]:
    """Class strings (enum members accepted) aligned with the districts, checked."""
    if len(items) != n:
        raise RenderError(
            f"{what} must have one value per district ({n}), got {len(items)}; "
            "align them with the geometries"
        )
    out = [item.value if isinstance(item, enum.Enum) else item for item in items]
    unknown = sorted({str(v) for v in out} - set(allowed))
    if unknown:
        raise RenderError(
            f"unknown {what} {', '.join(map(repr, unknown))}; expected one of "
            f"{', '.join(map(repr, allowed))}"
        )
    return out


# --------------------------------------------------------------------------- public maps


def format_cut(value: float, decimals: int = 1) -> str:
    """A cut point as printed in legends: fixed decimals, no sign for zero ('0.0')."""
    text = f"{value:.{decimals}f}"
    return text[1:] if text.startswith("-") and float(text) == 0 else text


def tercile_labels(
    cuts: tuple[float, float] | None, suppressed_label: str, decimals: int | None = None
) -> dict[int, str]:
    """The printed legend label of each tercile rank.

    Ranks follow the analysis' (a, b] classes: rank 1 is ILI% <= the first
    cut, rank 2 above it up to the second cut, rank 3 above the second cut.
    Cuts are printed with ``decimals`` decimals (the caller chooses enough to
    keep the printed values on the right side of them); by default 1, or 2
    when both round to the same text, so that the labels stay distinct.

    Parameters
    ----------
    cuts : (float, float) or None
        The 1/3 and 2/3 cut points in percent; None when terciles could not
        be formed (the labels then carry no numbers).
    suppressed_label : str
        Text for rank 0 (no data or suppressed), e.g. "No data / suppressed (< 30 visits)".

    Returns
    -------
    dict of int to str
        Keys 1, 2, 3, 0 in that (legend) order.

    Raises
    ------
    RenderError
        If a cut is not finite or the first is above the second.

    Examples
    --------
    >>> tercile_labels((1.2, 2.5), "No data")[2]
    'Middle third (1.2–2.5%)'
    """
    words = LEGEND_LABELS["terciles"]
    if cuts is None:
        return {1: words["1"], 2: words["2"], 3: words["3"], 0: suppressed_label}
    low, high = (float(c) for c in cuts)
    if not (math.isfinite(low) and math.isfinite(high)) or low > high:
        raise RenderError(
            f"tercile cuts must be two finite numbers in increasing order, got {cuts!r}"
        )
    if decimals is None:
        decimals = 1 if format_cut(low) != format_cut(high) else 2
    a, b = format_cut(low, decimals), format_cut(high, decimals)
    return {
        1: f"{words['1']} (≤ {a}%)",
        2: f"{words['2']} ({a}–{b}%)",
        3: f"{words['3']} (> {b}%)",
        0: suppressed_label,
    }


def tercile_small_multiples(
    geoms: gpd.GeoSeries,
    panels: Sequence[tuple[str, IntArray]],
    cuts: tuple[float, float] | None,
    *,
    suppressed_label: str,
    width_cm: float = 17.0,
    decimals: int | None = None,
) -> Figure:
    """ILI% tercile maps of the last weeks side by side, on one fixed legend.

    Each panel fills a district by its tercile rank for that week (0 no data
    or suppressed, hatched; 1..3 lowest to highest third) with the sand ->
    amber -> plum ramp. All panels use the same rank colours and one legend
    whose labels print ``cuts`` (see :func:`tercile_labels`), so the caller
    must rank every week against the same cut points; a rank that no panel
    has is left out of the legend. Panels run left to
    right in the order given; up to 4 panels go in one row when the region
    is at least about as wide as tall, otherwise in rows of 2. The first
    panel carries the scale bar and north arrow.

    Parameters
    ----------
    geoms : geopandas.GeoSeries
        District geometries in a projected CRS, in district order.
    panels : sequence of (str, numpy.ndarray of int)
        Panel title (e.g. the week label) and the rank per district, aligned
        with ``geoms``; 1 to 8 panels.
    cuts : (float, float) or None
        Cut points in percent printed in the legend.
    suppressed_label : str
        Legend text of the hatched no-data class.
    width_cm : float
        Figure width (A4 portrait: about 17 cm usable).

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    RenderError
        If the geometries are unusable (not projected, empty, not polygons),
        there are no or too many panels, a rank array is misaligned or holds
        a value other than 0-3, or the cuts are malformed.
    """
    if not 1 <= len(panels) <= _MAX_PANELS:
        raise RenderError(f"small multiples need 1 to {_MAX_PANELS} panels, got {len(panels)}")
    geometry = _prepare(geoms)
    labels = tercile_labels(cuts, suppressed_label, decimals)
    ranks_per_panel: list[list[int]] = []
    for title, ranks in panels:
        arr = np.asarray(ranks)
        if arr.shape != (geometry.n_districts,) or not np.issubdtype(arr.dtype, np.integer):
            raise RenderError(
                f"panel {title!r}: expected {geometry.n_districts} integer ranks, got "
                f"shape {arr.shape} of {arr.dtype}"
            )
        bad = sorted({int(v) for v in arr} - set(TERCILE_STYLES))
        if bad:
            raise RenderError(
                f"panel {title!r}: tercile ranks must be 0 (no data) or 1-3, got {bad}"
            )
        ranks_per_panel.append([int(v) for v in arr])

    xmin, ymin, xmax, ymax = geometry.bounds
    wide = (xmax - xmin) >= 0.9 * (ymax - ymin)
    n = len(panels)
    ncols = min(n, 4) if wide else min(n, 2)
    nrows = math.ceil(n / ncols)
    panel = _panel(geometry, ncols, width_cm, _MAX_MAP_HEIGHT_CM / nrows)
    with figure_style():
        fig = new_figure(width_cm, nrows * (panel.height_cm + _TITLE_CM), layout="compressed")
        axes = fig.subplots(nrows, ncols, squeeze=False)
        for k, ax in enumerate(axes.flat):
            if k >= n:
                ax.set_axis_off()
                continue
            _draw_classes(ax, geometry, ranks_per_panel[k], TERCILE_STYLES)
            _frame(ax, geometry, panel, furniture=(k == 0))
            ax.set_title(panels[k][0], fontsize=8.5)
        present = {r for ranks in ranks_per_panel for r in ranks}
        handles = [_handle(TERCILE_STYLES[r], labels[r]) for r in (1, 2, 3, 0) if r in present]
        legend = _figure_legend(fig, handles, max_cols=4)
        _fit_height(fig, nrows * (panel.height_cm + _TITLE_CM), legend)
        freeze_layout(fig)
    return fig


def _single_class_map(
    geoms: gpd.GeoSeries,
    values: Sequence[Any],
    *,
    what: str,
    styles: dict[str, FillStyle],
    words: dict[str, str],
    title: str | None,
    width_cm: float,
) -> Figure:
    geometry = _prepare(geoms)
    classes = _values(values, geometry.n_districts, what, tuple(styles))
    panel = _panel(geometry, 1, width_cm, _MAX_MAP_HEIGHT_CM)
    maps_cm = panel.height_cm + (_TITLE_CM if title else 0.0)
    with figure_style():
        fig = new_figure(width_cm, maps_cm, layout="compressed")
        ax = fig.add_subplot()
        _draw_classes(ax, geometry, classes, styles)
        _frame(ax, geometry, panel, furniture=True)
        if title:
            ax.set_title(title, fontsize=9)
        handles = [_handle(styles[key], words[key]) for key in words if key in classes]
        legend = _figure_legend(fig, handles, max_cols=4)
        _fit_height(fig, maps_cm, legend)
        freeze_layout(fig)
    return fig


def change_map(
    geoms: gpd.GeoSeries,
    classes: Sequence[str],
    *,
    title: str | None = None,
    width_cm: float = 12.0,
) -> Figure:
    """Map of each district's week-over-week change class.

    Fills: increase rust, similar linen, decrease sea-green with horizontal
    stripes, not assessable white with diagonal hatching. The legend names
    in words each class that has districts (the caption gives the counts).

    Parameters
    ----------
    geoms : geopandas.GeoSeries
        District geometries in a projected CRS, in district order.
    classes : sequence of str or ChangeClass
        'increase', 'decrease', 'similar' or 'not assessable' per district.
    title : str, optional
    width_cm : float

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    RenderError
        If the geometries are unusable or ``classes`` is misaligned or holds
        an unknown class.
    """
    return _single_class_map(
        geoms,
        classes,
        what="change classes",
        styles=CHANGE_STYLES,
        words=LEGEND_LABELS["change"],
        title=title,
        width_cm=width_cm,
    )


def cluster_map(
    geoms: gpd.GeoSeries,
    labels: Sequence[str],
    *,
    title: str | None = None,
    width_cm: float = 12.0,
) -> Figure:
    """Map of each district's Local Moran's I label.

    Fills (see :mod:`sitrep.render.palette`): high-high plum, low-low pine,
    high-low apricot with rust hatching and outline, low-high mist with
    dots, not significant fog grey, no neighbours white with a dotted
    outline, no data white with diagonal hatching, not assessable white with
    cross-hatching. The legend names in words each label that has districts
    this week (the caption gives the counts).

    Parameters
    ----------
    geoms : geopandas.GeoSeries
        District geometries in a projected CRS, in district order.
    labels : sequence of str or ClusterLabel
        A :class:`~sitrep.model.ClusterLabel` value per district.
    title : str, optional
    width_cm : float

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    RenderError
        If the geometries are unusable or ``labels`` is misaligned or holds
        an unknown label.
    """
    return _single_class_map(
        geoms,
        labels,
        what="cluster labels",
        styles=CLUSTER_STYLES,
        words=LEGEND_LABELS["cluster"],
        title=title,
        width_cm=width_cm,
    )


_SCALE_STEPS = (1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 8.0, 10.0)


def _nice_ceiling(value: float) -> float:
    """Smallest of 1, 1.5, 2, 2.5, 3, 4, 5, 6, 8 or 10 times a power of ten that is >= ``value``."""
    if value <= 0:
        return 1.0
    exponent = math.floor(math.log10(value))
    for mantissa in _SCALE_STEPS:
        candidate = mantissa * 10.0**exponent
        if candidate >= value * (1 - 1e-12):
            return float(candidate)
    return float(10.0 ** (exponent + 1))  # pragma: no cover


def comparison_map(
    geoms: gpd.GeoSeries,
    last_week_pct: FloatArray,
    this_week_pct: FloatArray,
    *,
    titles: tuple[str, str] = ("Last week", "This week"),
    suppressed_label: str = LEGEND_LABELS["comparison"]["no data"],
    vmax: float | None = None,
    width_cm: float = 17.0,
) -> Figure:
    """Last week's and this week's ILI% side by side on one continuous scale.

    Both panels colour a district by its ILI% on the same scale from 0 to
    ``vmax`` (the sand -> amber -> plum ramp, interpolated linearly in sRGB;
    values above ``vmax`` take the darkest colour), so a district that
    darkens from left to right rose. NaN (no data or suppressed) is white
    with diagonal hatching. One colour bar and the no-data key sit below both
    panels; the left panel carries the scale bar and north arrow.

    Parameters
    ----------
    geoms : geopandas.GeoSeries
        District geometries in a projected CRS, in district order.
    last_week_pct, this_week_pct : numpy.ndarray of float, shape (n,)
        ILI% per district (0-100), NaN where not shown.
    titles : (str, str)
        Panel titles, e.g. the two week labels.
    suppressed_label : str
        Text of the hatched no-data key.
    vmax : float, optional
        Top of the scale; default the smallest of 1, 1.5, 2, 2.5, 3, 4, 5,
        6, 8 or 10 times a power of ten at or above the larger week's maximum.
    width_cm : float

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    RenderError
        If the geometries are unusable, an array is misaligned, a value is
        outside 0-100 or infinite, or ``vmax`` is not positive.
    """
    geometry = _prepare(geoms)
    weeks = []
    for name, values in (("last_week_pct", last_week_pct), ("this_week_pct", this_week_pct)):
        arr = np.asarray(values, dtype=np.float64)
        if arr.shape != (geometry.n_districts,):
            raise RenderError(
                f"{name}: expected {geometry.n_districts} values (one per district), "
                f"got shape {arr.shape}"
            )
        present = arr[~np.isnan(arr)]
        if present.size and (
            not np.all(np.isfinite(present)) or present.min() < 0 or present.max() > 100
        ):
            raise RenderError(
                f"{name}: ILI% must lie in 0-100 or be NaN (not shown), got values from "
                f"{present.min()} to {present.max()}"
            )
        weeks.append(arr)
    finite = np.concatenate([w[~np.isnan(w)] for w in weeks])
    top = _nice_ceiling(float(finite.max())) if vmax is None and finite.size else (vmax or 1.0)
    if not (math.isfinite(top) and top > 0):
        raise RenderError(f"vmax must be a positive number, got {vmax!r}")
    norm = Normalize(vmin=0.0, vmax=top, clip=True)
    cmap = LinearSegmentedColormap.from_list("sitrep_ramp", list(RAMP))
    base_width = _border_width(geometry)

    panel = _panel(geometry, 2, width_cm, _MAX_MAP_HEIGHT_CM)
    maps_cm = panel.height_cm + _TITLE_CM
    key_cm = 1.6  # colour bar with its ticks and label
    with figure_style():
        fig = new_figure(width_cm, maps_cm + key_cm + 0.3, layout="compressed")
        grid = fig.add_gridspec(2, 2, height_ratios=[maps_cm, key_cm * 0.3])
        for k, values in enumerate(weeks):
            ax = fig.add_subplot(grid[0, k])
            missing = np.isnan(values)
            per_part_missing = missing[geometry.owner]
            shown_idx = np.flatnonzero(~per_part_missing)
            if shown_idx.size:
                colours = cmap(norm(values[geometry.owner[shown_idx]]))
                shown = PathCollection(
                    [geometry.paths[i] for i in shown_idx],
                    facecolors=colours,
                    edgecolors=COLOURS["border"],
                    linewidths=base_width,
                )
                if geometry.rasterize:
                    shown.set_zorder(_zorder(geometry, outlined=False))
                ax.add_collection(shown, autolim=False)
            classes = ["no data" if m else "shown" for m in missing]
            _draw_classes(ax, geometry, classes, {"no data": NO_DATA_STYLE})
            _frame(ax, geometry, panel, furniture=(k == 0))
            ax.set_title(titles[k], fontsize=8.5)
        bar_ax = fig.add_subplot(grid[1, 0])
        colourbar = fig.colorbar(
            ScalarMappable(norm=norm, cmap=cmap), cax=bar_ax, orientation="horizontal"
        )
        colourbar.set_label(LEGEND_LABELS["comparison"]["scale"], fontsize=7.5)
        colourbar.outline.set_edgecolor(COLOURS["slate"])
        key_ax = fig.add_subplot(grid[1, 1])
        key_ax.set_axis_off()
        if any(np.isnan(w).any() for w in weeks):  # the no-data key only when a district has none
            key_ax.legend(
                handles=[_handle(NO_DATA_STYLE, suppressed_label)],
                loc="center left",
                frameon=False,
                handlelength=1.6,
                handleheight=1.2,
            )
        freeze_layout(fig)
    return fig
