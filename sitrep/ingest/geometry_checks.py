"""Checks of the read districts: the declared extent, sliver gaps and glyphs of the names."""

from __future__ import annotations

import functools
import importlib.resources
import math
import unicodedata
from typing import Any

import numpy as np

from sitrep.config import InputSettings
from sitrep.ingest.findings import FindingCollector
from sitrep.model import Severity

__all__ = [
    "GAP_SHARE",
    "REPORT_FONTS",
    "check_extent",
    "check_gaps",
    "check_glyphs",
    "missing_glyphs",
]

GAP_SHARE = 0.01
"""A gap narrower than this share of sqrt(area) is a sliver, not sea (see :func:`sitrep.ingest.geometry.read_districts`)."""

REPORT_FONTS = ("DejaVuSans.ttf", "DejaVuSans-Bold.ttf")
"""The fonts shipped in ``sitrep/assets`` that the PDF is set in (regular and bold)."""


def check_extent(frame: Any, settings: InputSettings, out: FindingCollector) -> bool:
    """False (with an error) when the layer is not inside ``settings.boundaries_extent``."""
    extent = settings.boundaries_extent
    if extent is None:
        return True
    west, south, east, north = extent
    try:
        lon_lat = frame.to_crs("EPSG:4326")
    except Exception as exc:  # pyproj raises several types for impossible transforms
        out.error(
            "boundaries-outside-extent",
            f"the boundaries cannot be transformed to WGS 84 to compare with "
            f"input.boundaries_extent ({type(exc).__name__}: {exc}); check the CRS",
        )
        return False
    minx, miny, maxx, maxy = (float(v) for v in lon_lat.total_bounds)
    if minx >= west and maxx <= east and miny >= south and maxy <= north:
        return True
    out.error(
        "boundaries-outside-extent",
        f"expected the districts inside input.boundaries_extent (longitude {west:g}..{east:g}, "
        f"latitude {south:g}..{north:g}), got longitude {minx:.4f}..{maxx:.4f}, latitude "
        f"{miny:.4f}..{maxy:.4f}; longitude and latitude may be swapped or the CRS wrong. "
        "Fix the file or its CRS (input.boundaries_crs)",
        value=f"{minx:.4f},{miny:.4f},{maxx:.4f},{maxy:.4f}",
    )
    return False


def check_gaps(frame: Any, out: FindingCollector) -> None:
    """Warn about districts that touch none but lie within a sliver of another."""
    import shapely

    geoms = np.asarray(frame.geometry.to_numpy(), dtype=object)
    if len(geoms) < 2:
        return
    tree = shapely.STRtree(geoms)
    ids = list(frame["district_id"])
    for k, g in enumerate(geoms):
        touching = [j for j in tree.query(g, predicate="intersects") if j != k]
        if touching:
            continue
        tolerance = GAP_SHARE * math.sqrt(max(g.area, 0.0))
        if tolerance <= 0:
            continue
        near = [j for j in tree.query(g, predicate="dwithin", distance=tolerance) if j != k]
        if not near:
            continue
        j = min(near, key=lambda m: (g.distance(geoms[m]), ids[m]))
        gap = g.distance(geoms[j])
        out.add(
            Severity.WARNING,
            "geometry-gap",
            f"district {ids[k]} touches no other district, but {ids[j]} is only {gap:.3g} map "
            f"units away (under {GAP_SHARE:.0%} of the district's width); the boundaries "
            "probably have sliver gaps (simplified or shrunk polygons), so contiguity "
            "neighbours are missing and cluster results are not trustworthy. Use boundaries "
            "that share their edges",
            district_id=ids[k],
            value=f"{gap:.6g}",
        )


@functools.lru_cache(maxsize=1)
def _font_codepoints() -> frozenset[int]:
    """Code points that every font in ``REPORT_FONTS`` has a glyph for (empty: no check)."""
    try:
        from fontTools.ttLib import TTFont
    except ImportError:  # pragma: no cover - fontTools comes with WeasyPrint
        return frozenset()
    folder = importlib.resources.files("sitrep.assets")
    common: set[int] | None = None
    for name in REPORT_FONTS:
        with importlib.resources.as_file(folder / name) as font_path:
            font = TTFont(str(font_path), lazy=True)
            try:
                cmap = set(font.getBestCmap() or {})
            finally:
                font.close()
        common = cmap if common is None else common & cmap
    return frozenset(common or ())


def missing_glyphs(text: str) -> tuple[str, ...]:
    """Characters of ``text`` (in order, once each) the report fonts cannot draw.

    Whitespace and other characters that are never drawn (Unicode categories
    Zs, Cc, Cf) are not checked. An empty tuple also results when the font
    files cannot be read (the check is then skipped).

    >>> missing_glyphs("Ελληνικό Северный Thévrisande")
    ()
    >>> missing_glyphs("北区 東京")
    ('北', '区', '東', '京')
    """
    covered = _font_codepoints()
    if not covered:
        return ()
    seen: dict[str, None] = {}
    for ch in text:
        if unicodedata.category(ch) in ("Zs", "Cc", "Cf") or ord(ch) in covered:
            continue
        seen.setdefault(ch, None)
    return tuple(seen)


def check_glyphs(frame: Any, settings: InputSettings, out: FindingCollector) -> None:
    for ident, name in zip(frame["district_id"], frame["district_name"], strict=True):
        missing = missing_glyphs(str(name))
        if not missing:
            continue
        listing = ", ".join(f"{ch!r} (U+{ord(ch):04X})" for ch in missing[:12])
        more = f" and {len(missing) - 12} more" if len(missing) > 12 else ""
        out.add(
            Severity.WARNING,
            "name-glyphs-missing",
            f"the name of district {ident} ({name!r}) has characters that the report font "
            f"(DejaVu Sans, shipped with sitrep) cannot draw: {listing}{more}. In the PDF they "
            "are drawn only if an installed system font covers them (for Chinese, Japanese and "
            "Korean e.g. Debian's fonts-noto-cjk), otherwise as blank boxes; the HTML depends "
            "on the reader's fonts. Check the PDF, or give the name in Latin, Greek or "
            "Cyrillic script",
            column=settings.boundaries_name_column,
            district_id=str(ident),
            value=str(name),
        )
