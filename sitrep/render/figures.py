"""Figure plumbing shared by the maps and charts: style, new figures, bytes out.

Every figure of the report is drawn on a :class:`matplotlib.figure.Figure`
attached to the Agg canvas (never pyplot, which keeps global state) inside
:func:`figure_style`, and turned into bytes by :func:`figure_to_svg` or
:func:`figure_to_png`. Both writers are deterministic: the same figure gives
the same bytes in every run, whatever ``PYTHONHASHSEED`` or the clock says.

Text in SVG output is drawn as glyph outlines (``svg.fonttype = 'path'``),
not as ``<text>`` elements. The SVG then looks the same in every browser and
in WeasyPrint whatever fonts the reader's machine has, at the cost of text
that cannot be selected or searched inside the figure; the report carries the
same information as alt text and in the district table.

Rasterized artists (those below an axes' rasterization z-order, such as
the district fills of maps with many districts, see :mod:`sitrep.render.maps`,
and those marked with ``Artist.set_rasterized(True)``, such as matplotlib's
own colour-bar gradients) are embedded in SVG output as PNG images at
:data:`RASTER_DPI`; everything else stays vector.
"""

from __future__ import annotations

import contextlib
import dataclasses
import io
from collections.abc import Iterator
from importlib import resources
from typing import Any, Literal

import matplotlib
from matplotlib import font_manager
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.layout_engine import ConstrainedLayoutEngine, PlaceHolderLayoutEngine
from matplotlib.typing import RcKeyType

__all__ = [
    "CM",
    "RASTER_DPI",
    "FIGURE_RC",
    "FONT_FAMILY",
    "figure_style",
    "figure_to_png",
    "figure_to_svg",
    "freeze_layout",
    "new_figure",
]

CM = 1 / 2.54
"""Inches per centimetre (matplotlib sizes figures in inches)."""

FONT_FAMILY = "sitrep DejaVu Sans"
"""Private family name under which the shipped DejaVu Sans files are registered.

matplotlib bundles its own (different) copy of DejaVu Sans under the family
name 'DejaVu Sans', and its font lookup prefers the copy it found first, so
registering the shipped files under their own name would silently draw with
matplotlib's copy. A private name makes the shipped files the ones used.
"""

RASTER_DPI = 300
"""Resolution of the rasterized parts of SVG output (print quality; 150 dpi PNGs are for screens)."""

_FONT_FILES = ("DejaVuSans.ttf", "DejaVuSans-Bold.ttf")

FIGURE_RC: dict[RcKeyType, Any] = {
    "font.family": [FONT_FAMILY],
    "font.size": 8.0,
    "axes.titlesize": 9.0,
    "axes.labelsize": 8.0,
    "xtick.labelsize": 7.5,
    "ytick.labelsize": 7.5,
    "legend.fontsize": 7.5,
    "legend.title_fontsize": 8.0,
    "text.color": "#222222",
    "axes.labelcolor": "#222222",
    "axes.edgecolor": "#555555",
    "xtick.color": "#555555",
    "ytick.color": "#555555",
    "xtick.labelcolor": "#222222",
    "ytick.labelcolor": "#222222",
    "hatch.linewidth": 0.6,
    "svg.fonttype": "path",
    "svg.hashsalt": "sitrep",
    "svg.image_inline": True,
    "path.simplify": True,
    "savefig.facecolor": "#FFFFFF",
    "savefig.edgecolor": "#FFFFFF",
    "figure.facecolor": "#FFFFFF",
    "axes.unicode_minus": True,
}
"""Settings every sitrep figure is drawn and saved under (colours: see palette)."""


def _register_fonts() -> None:
    """Add the shipped DejaVu Sans files to matplotlib under :data:`FONT_FAMILY` (once)."""
    manager = font_manager.fontManager
    if any(entry.name == FONT_FAMILY for entry in manager.ttflist):
        return
    assets = resources.files("sitrep.assets")
    for name in _FONT_FILES:
        with resources.as_file(assets / name) as path:
            entry = font_manager.ttfFontProperty(font_manager.get_font(str(path)))
            manager.ttflist.append(dataclasses.replace(entry, name=FONT_FAMILY))
    # No lookup of FONT_FAMILY can have been memoised before this point, so
    # matplotlib's font-lookup cache needs no clearing.


@contextlib.contextmanager
def figure_style() -> Iterator[None]:
    """Draw (or save) inside sitrep's figure settings.

    Registers the shipped font on first use and applies :data:`FIGURE_RC`
    with :func:`matplotlib.rc_context`, so the caller's own matplotlib
    settings are untouched afterwards.
    """
    _register_fonts()
    with matplotlib.rc_context(FIGURE_RC):
        yield


def new_figure(
    width_cm: float,
    height_cm: float,
    *,
    layout: Literal["constrained", "compressed", "none"] = "constrained",
) -> Figure:
    """A white figure of the given size attached to the Agg canvas.

    Parameters
    ----------
    width_cm, height_cm : float
        Size in centimetres (an A4 portrait page has about 17 cm usable width).
    layout : {'constrained', 'compressed', 'none'}
        matplotlib's layout engine: 'constrained' keeps legends and labels
        inside the figure; 'compressed' does the same for grids of
        fixed-aspect axes (maps), closing the gaps between them; 'none'
        leaves placement to the caller.

    Returns
    -------
    matplotlib.figure.Figure
        Call this inside :func:`figure_style` so the figure picks up its settings.
    """
    fig = Figure(
        figsize=(width_cm * CM, height_cm * CM),
        dpi=150,  # the report's PNG resolution: the layout is measured at the dpi it is saved at
        layout=None if layout == "none" else layout,
    )
    if layout != "none":
        engine = fig.get_layout_engine()
        if isinstance(engine, ConstrainedLayoutEngine):
            engine.set(w_pad=0.08, h_pad=0.08)
    FigureCanvasAgg(fig)
    return fig


def freeze_layout(fig: Figure) -> None:
    """Run the figure's layout engine once and fix the result.

    matplotlib re-runs constrained layout on every save, starting from the
    previous positions, so a second save of the same figure can differ in
    the last bits of a clip box and hence in an SVG id. Every sitrep figure
    function calls this last, so each save draws the same positions.

    The engine is then removed altogether (``set_layout_engine(None)``, not
    ``"none"``, which would leave a placeholder engine): with any engine set,
    ``savefig`` first draws the whole figure once more to let the engine
    measure it, and in vector output that extra draw really rasterizes the
    rasterized artists (the district fills of large maps), doubling the cost
    of every SVG.
    """
    engine = fig.get_layout_engine()
    if engine is not None and not isinstance(engine, PlaceHolderLayoutEngine):
        engine.execute(fig)
    with matplotlib.rc_context(
        {"figure.autolayout": False, "figure.constrained_layout.use": False}
    ):
        fig.set_layout_engine(None)  # with both settings off, None means no engine at all


def figure_to_svg(fig: Figure) -> bytes:
    """The figure as a self-contained, byte-reproducible SVG document.

    Parameters
    ----------
    fig : matplotlib.figure.Figure

    Returns
    -------
    bytes
        UTF-8 SVG. No date is written (``metadata={'Date': None}``) and the
        element ids come from a pinned ``svg.hashsalt``, so the same figure
        gives the same bytes in every run. Text is drawn as outlines (see
        the module notes). When the figure holds rasterized artists they are
        embedded as PNG at :data:`RASTER_DPI` (at the figure's own dpi if
        that is higher); a figure without any is written exactly as before.
    """
    buffer = io.BytesIO()
    options: dict[str, Any] = {}
    if _has_raster_parts(fig):
        options["dpi"] = max(RASTER_DPI, int(fig.dpi))
    with figure_style():
        fig.savefig(buffer, format="svg", metadata={"Date": None}, **options)
    return buffer.getvalue()


def _has_raster_parts(fig: Figure) -> bool:
    """Whether vector output of ``fig`` embeds any image (rasterized artists or z-order)."""
    if any(ax.get_rasterization_zorder() is not None for ax in fig.axes):
        return True
    return bool(fig.findobj(match=lambda artist: bool(artist.get_rasterized()), include_self=False))


def figure_to_png(fig: Figure, dpi: int = 150) -> bytes:
    """The figure as a byte-reproducible PNG image.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    dpi : int
        Pixels per inch (150 is sharp in print at the report's sizes).

    Returns
    -------
    bytes
        PNG without the 'Software' text chunk (``metadata={'Software': None}``),
        so the bytes do not change with the matplotlib version string.

    Raises
    ------
    ValueError
        If ``dpi`` is not a positive whole number.
    """
    if isinstance(dpi, bool) or not isinstance(dpi, int) or dpi <= 0:
        raise ValueError(f"dpi must be a positive whole number, got {dpi!r}")
    buffer = io.BytesIO()
    with figure_style():
        fig.savefig(buffer, format="png", dpi=dpi, metadata={"Software": None})
    return buffer.getvalue()
