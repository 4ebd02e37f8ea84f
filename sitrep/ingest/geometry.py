"""Read district boundaries (GeoJSON, GeoPackage, Shapefile) into checked :class:`Districts`.

The coordinate reference system is never guessed: it comes from the file or
from ``input.boundaries_crs``. Ids are text, NFC-normalised. Bad content is
returned as findings; only a file that cannot be opened raises.
"""

from __future__ import annotations

import hashlib
import warnings
from pathlib import Path
from typing import Any

from sitrep.config import InputSettings
from sitrep.errors import InputError
from sitrep.ingest.findings import FindingCollector
from sitrep.ingest.geometry_checks import (
    GAP_SHARE,
    REPORT_FONTS,
    check_extent,
    check_gaps,
    check_glyphs,
    missing_glyphs,
)
from sitrep.ingest.geometry_features import REPAIR_AREA_TOLERANCE, check_features
from sitrep.ingest.geometry_layer import GEOJSON, GPKG, SHP, check_crs, read_layer
from sitrep.ingest.geometry_projection import UTM_MAX_SPAN_DEGREES, local_crs, project_districts
from sitrep.ingest.rules import Stage, descriptions
from sitrep.model import Districts, InputFile, Severity, ValidationReport

__all__ = [
    "GAP_SHARE",
    "REPAIR_AREA_TOLERANCE",
    "REPORT_FONTS",
    "RULES",
    "UTM_MAX_SPAN_DEGREES",
    "local_crs",
    "missing_glyphs",
    "read_districts",
]

RULES: tuple[tuple[str, str], ...] = descriptions(Stage.BOUNDARY_FILE)
"""Rule ids of the boundary reader with one-line descriptions (from the registry)."""


def read_districts(
    path: Path, settings: InputSettings
) -> tuple[Districts | None, ValidationReport]:
    """Read and check district boundaries.

    Formats by extension: GeoJSON (``.geojson``/``.json``; RFC 7946 says
    WGS 84 longitude/latitude, which is assumed unless
    ``settings.boundaries_crs`` declares another CRS), GeoPackage (``.gpkg``;
    layer ``settings.boundaries_layer``, or the only layer) and Shapefile
    (``.shp``; the CRS comes from the ``.prj`` file). Files are read with the
    pyogrio engine. For any other format a file without a CRS needs
    ``settings.boundaries_crs``; a file whose CRS differs from a declared one
    is an error (nothing is reprojected silently).

    Checks, per district id (column ``settings.boundaries_id_column``, text,
    NFC-normalised, whitespace-stripped when
    ``settings.strip_id_whitespace``): missing id, numeric id column,
    duplicate ids, null or empty geometry, non-polygonal geometry. In a
    geographic CRS, coordinates must lie within longitude -180..180 and
    latitude -90..90 (metre coordinates labelled WGS 84 fail this).

    Invalid geometry (OGC validity, :func:`shapely.is_valid`) is repaired
    with :func:`shapely.make_valid` and kept with a ``geometry-repaired``
    warning only when the repair is *safe*: the result (after dropping
    zero-area parts such as stray lines) is a Polygon or MultiPolygon whose
    area differs from the original's planar (shoelace) area by at most
    ``REPAIR_AREA_TOLERANCE`` (1 %) of the larger of the two. Otherwise the
    repair would change the district's shape materially (a bow-tie, whose
    loops' signed areas cancel, is the typical case) and it is an error.

    When ``settings.boundaries_extent`` declares the expected extent
    ``[west, south, east, north]`` in WGS 84 degrees (the bounding-box order
    of RFC 7946 §5), the layer's bounds, transformed to WGS 84, must lie
    inside it; otherwise it is an error. This catches swapped longitude and
    latitude and a wrongly declared CRS, which the range check cannot when
    the swapped numbers are still valid degrees.

    Maps and distances (k nearest neighbours, island links) need a projected
    CRS. It is ``settings.map_crs`` when set (it must be projected), else the
    file's own CRS when that is projected, else one estimated from the layer
    by :func:`local_crs` (a layer in degrees, such as any RFC 7946 GeoJSON).
    ``Districts.projected`` holds the projected frame and
    ``Districts.projection`` the sentence saying which CRS and why (for the
    methods note and the manifest). Contiguity is found on the boundaries as
    read, so projecting never changes the neighbours.

    Two warnings need no setting. ``geometry-gap``: a district that touches
    no other district although another lies closer than ``GAP_SHARE`` (1 %)
    of the square root of its area (a sliver gap left by simplifying or
    shrinking polygons, which silently removes contiguity neighbours; an
    offshore island is much farther away). ``name-glyphs-missing``: a name
    holds characters for which the fonts the PDF is set in
    (``REPORT_FONTS``, DejaVu Sans regular and bold) have no glyph, e.g. CJK;
    the message names each character and its code point.

    Parameters
    ----------
    path : pathlib.Path
        The boundary file (for a shapefile, the ``.shp``).
    settings : InputSettings
        Layer, id/name columns, declared CRS and extent, id whitespace rule,
        size cap.

    Returns
    -------
    tuple of (Districts or None, ValidationReport)
        The districts (columns ``district_id``, ``district_name``,
        ``geometry``, sorted by id; ``None`` when any error was found) and the
        findings. Multipart districts, holes and enclaves are kept as they are.

    Raises
    ------
    InputError
        Only when the file cannot be opened (missing, a folder, no
        permission); the message names the path.
    """
    path = Path(path)
    out = FindingCollector(path.name)
    ext = _check_file(path, settings, out)
    if ext is None:
        return None, out.report()
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read the boundary file {path}: {exc.strerror or exc}") from exc
    source = InputFile("boundaries", path, hashlib.sha256(data).hexdigest(), len(data))
    checked = _read_checked(path, ext, settings, out)
    if checked is None:
        return None, out.report()
    result, numeric_ids = checked
    if not check_extent(result, settings, out):
        return None, out.report()
    projection = project_districts(result, settings, out)
    if projection is None:
        return None, out.report()
    projected, note = projection
    check_gaps(result, out)
    check_glyphs(result, settings, out)
    return (
        Districts(
            frame=result,
            source=source,
            projected=projected,
            projection=note,
            id_column=settings.boundaries_id_column,
            numeric_ids=numeric_ids,
        ),
        out.report(),
    )


def _check_file(path: Path, settings: InputSettings, out: FindingCollector) -> str | None:
    """The file's lower-case extension, or None (with an error) when it is too large or of an
    unknown format; raises InputError when it cannot be opened."""
    try:
        size = path.stat().st_size
    except OSError as exc:
        raise InputError(f"cannot open the boundary file {path}: {exc.strerror or exc}") from exc
    if path.is_dir():
        raise InputError(f"the boundary file {path} is a folder; give the path of a file")
    if size > settings.max_input_mb * 1_000_000:
        out.error(
            "boundaries-too-large",
            f"the file is {size / 1e6:,.1f} MB, above the cap of {settings.max_input_mb:g} MB "
            "(input.max_input_mb); check the file or raise the cap",
            value=str(size),
        )
        return None
    ext = path.suffix.lower()
    if ext not in GEOJSON | GPKG | SHP:
        out.error(
            "boundaries-format-unknown",
            f"expected a .geojson, .json, .gpkg or .shp file, got '{path.suffix or '(none)'}'; "
            "convert the boundaries to one of these formats",
            value=path.suffix,
        )
        return None
    return ext


def _read_checked(
    path: Path, ext: str, settings: InputSettings, out: FindingCollector
) -> tuple[Any, bool] | None:
    """The layer with its CRS and features checked, sorted by id, and whether the id column was
    numeric (None: an error was found); the reader's own warnings become notes."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        frame = read_layer(path, ext, settings, out)
    for w in caught:
        out.add(Severity.INFO, "reader-warning", f"the file reader warned: {w.message}")
    if frame is None:
        return None
    frame = check_crs(frame, ext, settings, out)
    if frame is None:
        return None
    checked = check_features(frame, settings, out)
    if checked is None or out.has_errors:
        return None
    return checked
