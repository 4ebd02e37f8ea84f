"""A figure as shared on its own: its title and week above it, the source and a caution below.

The report shows each figure under its caption, which names it; a figure
copied out of ``figures/`` into a slide or an e-mail has lost that caption.
:func:`framed_png` and :func:`framed_svg` add a band above the figure (the
title, e.g. "Change since week 46 — week 47, 2026") and a band below it (the
source line, e.g. "Source: Province of Quillmarsh, ILI sentinel surveillance
… Provisional data …") without redrawing the figure:

- PNG: the figure's pixels are placed 1:1 (``Figure.figimage``) on a taller
  white canvas with the two text bands, drawn with the shipped font;
- SVG: the figure's SVG document is nested unchanged inside an outer SVG
  that adds the two bands as ``<text>`` elements (so the title can be
  searched and read aloud).

Both are byte-reproducible (no dates, no random ids). The words come from
:mod:`sitrep.render.wording.captions`.
"""

from __future__ import annotations

import io
import re
import textwrap
from xml.sax.saxutils import escape

import numpy as np
from matplotlib.figure import Figure
from matplotlib.image import imread

from sitrep.errors import RenderError
from sitrep.render.figures import figure_style
from sitrep.render.palette import COLOURS

__all__ = ["framed_png", "framed_svg"]

TITLE_PT = 9.5
FOOTER_PT = 7.0
PAD_PT = 5.0
_CHAR_WIDTH = 0.56
"""Average advance of a DejaVu Sans character as a share of the font size (for line breaking)."""


def _lines(text: str, width_pt: float, size_pt: float) -> list[str]:
    per_line = max(20, int(width_pt / (_CHAR_WIDTH * size_pt)))
    return textwrap.wrap(text, per_line) or [""]


def _bands(width_pt: float, title: str, footer: str) -> tuple[list[str], list[str], float, float]:
    """Title and footer lines, and the heights (pt) of the top and bottom bands."""
    title_lines = _lines(title, width_pt - 2 * PAD_PT, TITLE_PT)
    footer_lines = _lines(footer, width_pt - 2 * PAD_PT, FOOTER_PT)
    top = PAD_PT + 1.3 * TITLE_PT * len(title_lines) + PAD_PT / 2
    bottom = PAD_PT / 2 + 1.3 * FOOTER_PT * len(footer_lines) + PAD_PT
    return title_lines, footer_lines, top, bottom


def framed_png(png: bytes, *, title: str, footer: str, dpi: int = 150) -> bytes:
    """The PNG figure with a title band above and a source band below (same pixel scale).

    Raises
    ------
    RenderError
        If ``png`` is not a PNG image.
    """
    if not png.startswith(b"\x89PNG"):
        raise RenderError("framed_png needs PNG bytes")
    pixels = imread(io.BytesIO(png), format="png")
    height_px, width_px = pixels.shape[:2]
    width_pt = width_px / dpi * 72
    title_lines, footer_lines, top_pt, bottom_pt = _bands(width_pt, title, footer)
    top_px, bottom_px = round(top_pt / 72 * dpi), round(bottom_pt / 72 * dpi)
    total_px = height_px + top_px + bottom_px
    with figure_style():
        fig = Figure(figsize=(width_px / dpi, total_px / dpi), dpi=dpi)
        fig.figimage(np.asarray(pixels), xo=0, yo=bottom_px, origin="upper", resize=False)
        pad = PAD_PT / 72 * dpi
        fig.text(
            pad / width_px,
            1 - pad / total_px,
            "\n".join(title_lines),
            ha="left",
            va="top",
            fontsize=TITLE_PT,
            fontweight="bold",
            color=COLOURS["ink"],
            linespacing=1.15,
        )
        fig.text(
            pad / width_px,
            pad / total_px,
            "\n".join(footer_lines),
            ha="left",
            va="bottom",
            fontsize=FOOTER_PT,
            color=COLOURS["ink"],
            linespacing=1.15,
        )
        buffer = io.BytesIO()
        fig.savefig(buffer, format="png", dpi=dpi, metadata={"Software": None})
    return buffer.getvalue()


_ROOT = re.compile(rb"<svg\b[^>]*>")
_SIZE = re.compile(rb'\b(width|height)="([0-9.]+)pt"')


def framed_svg(svg: bytes, *, title: str, footer: str) -> bytes:
    """The SVG figure nested in an outer SVG with a title band above and a source band below.

    Raises
    ------
    RenderError
        If ``svg`` has no root element with a size in points (as matplotlib writes it).
    """
    root = _ROOT.search(svg)
    if root is None:
        raise RenderError("framed_svg needs an SVG document")
    size = dict(_SIZE.findall(root.group(0)))
    if b"width" not in size or b"height" not in size:
        raise RenderError("framed_svg needs an SVG whose width and height are given in pt")
    width, height = float(size[b"width"]), float(size[b"height"])
    title_lines, footer_lines, top, bottom = _bands(width, title, footer)
    total = top + height + bottom
    # The nested root is sized in the outer document's user units (points here), not in "pt",
    # which inside an SVG would be read as 4/3 of a user unit.
    tag = _SIZE.sub(lambda m: m.group(1) + b'="' + m.group(2) + b'"', root.group(0))
    tag = tag.replace(b"<svg ", f'<svg x="0" y="{top:.2f}" '.encode(), 1)
    inner = tag + svg[root.end() :]
    ink = COLOURS["ink"]
    font = 'font-family="DejaVu Sans, Verdana, Arial, sans-serif"'
    parts = [
        '<?xml version="1.0" encoding="utf-8" standalone="no"?>',
        f'<svg xmlns="http://www.w3.org/2000/svg" xmlns:xlink="http://www.w3.org/1999/xlink" '
        f'version="1.1" width="{width:.2f}pt" height="{total:.2f}pt" viewBox="0 0 {width:.2f} {total:.2f}">',
        f"<title>{escape(title)}</title>",
        f'<rect x="0" y="0" width="{width:.2f}" height="{total:.2f}" fill="#ffffff"/>',
    ]
    for k, line in enumerate(title_lines):
        y = PAD_PT + TITLE_PT + k * 1.3 * TITLE_PT
        parts.append(
            f'<text x="{PAD_PT:.2f}" y="{y:.2f}" {font} font-size="{TITLE_PT}" font-weight="bold" '
            f'fill="{ink}">{escape(line)}</text>'
        )
    head = "\n".join(parts).encode()
    tail = []
    for k, line in enumerate(footer_lines):
        y = top + height + PAD_PT / 2 + FOOTER_PT + k * 1.3 * FOOTER_PT
        tail.append(
            f'<text x="{PAD_PT:.2f}" y="{y:.2f}" {font} font-size="{FOOTER_PT}" fill="{ink}">{escape(line)}</text>'
        )
    return head + b"\n" + inner.rstrip() + b"\n" + "\n".join(tail).encode() + b"\n</svg>\n"
