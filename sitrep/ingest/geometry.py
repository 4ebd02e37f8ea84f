"""Read district boundaries (GeoJSON, GeoPackage, Shapefile) into checked :class:`Districts`.

The coordinate reference system is never guessed: it comes from the file or
from ``input.boundaries_crs``. Ids are text, NFC-normalised. Bad content is
returned as findings; only a file that cannot be opened raises.
"""

from __future__ import annotations

import functools
import hashlib
import importlib.resources
import math
import unicodedata
import warnings
from pathlib import Path
from typing import Any

import numpy as np

from sitrep.config import InputSettings
from sitrep.errors import InputError
from sitrep.ingest.findings import FindingCollector, line_list
from sitrep.ingest.id_cells import pad_id
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

REPAIR_AREA_TOLERANCE = 0.01
"""A repair is safe when the area changes by at most this share (see :func:`read_districts`)."""

UTM_MAX_SPAN_DEGREES = 6.0
"""A layer in degrees spanning at most this much longitude is mapped in a UTM zone (see :func:`local_crs`)."""

GAP_SHARE = 0.01
"""A gap narrower than this share of sqrt(area) is a sliver, not sea (see :func:`read_districts`)."""

REPORT_FONTS = ("DejaVuSans.ttf", "DejaVuSans-Bold.ttf")
"""The fonts shipped in ``sitrep/assets`` that the PDF is set in (regular and bold)."""

_GEOJSON = {".geojson", ".json"}
_GPKG = {".gpkg"}
_SHP = {".shp"}


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
        return None, out.report()
    ext = path.suffix.lower()
    if ext not in _GEOJSON | _GPKG | _SHP:
        out.error(
            "boundaries-format-unknown",
            f"expected a .geojson, .json, .gpkg or .shp file, got '{path.suffix or '(none)'}'; "
            "convert the boundaries to one of these formats",
            value=path.suffix,
        )
        return None, out.report()
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read the boundary file {path}: {exc.strerror or exc}") from exc
    source = InputFile("boundaries", path, hashlib.sha256(data).hexdigest(), len(data))

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        frame = _read_layer(path, ext, settings, out)
    for w in caught:
        out.add(Severity.INFO, "reader-warning", f"the file reader warned: {w.message}")
    if frame is None:
        return None, out.report()
    frame = _check_crs(frame, ext, settings, out)
    if frame is None:
        return None, out.report()
    checked = _check_features(frame, settings, out)
    if checked is None or out.has_errors:
        return None, out.report()
    result, numeric_ids = checked
    if not _check_extent(result, settings, out):
        return None, out.report()
    projection = _project(result, settings, out)
    if projection is None:
        return None, out.report()
    projected, note = projection
    _check_gaps(result, out)
    _check_glyphs(result, settings, out)
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


def local_crs(frame: Any) -> tuple[Any, str]:
    """A projected CRS suited to a layer in longitude/latitude, and why it was chosen.

    The layer's longitude range is the shortest arc of the circle holding
    every vertex, so a layer on both sides of the antimeridian (longitudes
    near +180 and -180, as RFC 7946 §3.1.9 requires such files to be split)
    gets a centre near 180° and not near 0°. Its centre is the middle of that
    arc and of the latitude range.

    - When the arc spans at most :data:`UTM_MAX_SPAN_DEGREES` (6°) and the
      centre's latitude is within the UTM band (80° S to 84° N): the WGS 84
      UTM zone holding the centre (EPSG:326zz north, 327zz south; zone =
      floor((longitude + 180) / 6) + 1). Every vertex is then at most 6° from
      the zone's central meridian, where the transverse Mercator scale error
      stays below about 0.6 % (1 + (Δλ·cos φ)² / 2, common practice).
    - Otherwise: a Lambert azimuthal equal-area projection centred on the
      centre (WGS 84 ellipsoid, metres), which keeps areas and has no zone
      edge for a large or polar layer.

    Parameters
    ----------
    frame : geopandas.GeoDataFrame or GeoSeries
        The layer, in a geographic CRS (x = longitude, y = latitude).

    Returns
    -------
    tuple of (pyproj.CRS, str)
        The CRS and a phrase describing it, e.g. ``"WGS 84 / UTM zone 32N
        (EPSG:32632), the UTM zone of the layer's centre (6.00° E, 45.50° N)"``.
    """
    import shapely
    from pyproj import CRS

    geoms = np.asarray(
        frame.geometry.to_numpy() if hasattr(frame, "geometry") else frame, dtype=object
    )
    xy = shapely.get_coordinates(geoms)
    lons = np.unique(((xy[:, 0] + 180.0) % 360.0) - 180.0)
    if lons.size == 0:
        raise ValueError("the layer has no coordinates")
    if lons.size == 1:
        west, span = float(lons[0]), 0.0
    else:
        gaps = np.diff(np.concatenate([lons, [lons[0] + 360.0]]))
        k = int(np.argmax(gaps))
        west = float(lons[(k + 1) % lons.size])
        span = 360.0 - float(gaps[k])
    lon = ((west + span / 2.0 + 180.0) % 360.0) - 180.0
    lat = (float(xy[:, 1].min()) + float(xy[:, 1].max())) / 2.0
    where = (
        f"{abs(lon):.2f}° {'E' if lon >= 0 else 'W'}, {abs(lat):.2f}° {'N' if lat >= 0 else 'S'}"
    )
    if span <= UTM_MAX_SPAN_DEGREES and -80.0 <= lat <= 84.0:
        zone = int((lon + 180.0) // 6.0) % 60 + 1
        code = (32600 if lat >= 0 else 32700) + zone
        crs = CRS.from_epsg(code)
        return crs, f"{crs.name} (EPSG:{code}), the UTM zone of the layer's centre ({where})"
    from pyproj.crs import GeographicCRS, ProjectedCRS
    from pyproj.crs.coordinate_operation import LambertAzimuthalEqualAreaConversion

    crs = ProjectedCRS(
        LambertAzimuthalEqualAreaConversion(round(lat, 4), round(lon, 4)),
        name=f"WGS 84 / Lambert azimuthal equal-area centred on {where}",
        geodetic_crs=GeographicCRS(datum="WGS84"),
    )
    return crs, (
        f"a Lambert azimuthal equal-area projection centred on the layer ({where}; "
        f"the layer spans {span:.1f}° of longitude, too wide for one UTM zone)"
    )


def _project(frame: Any, settings: InputSettings, out: FindingCollector) -> tuple[Any, str] | None:
    """The districts in the CRS of maps and distances and the sentence saying which (None: error)."""
    from pyproj import CRS
    from pyproj.exceptions import CRSError

    own = CRS(frame.crs)
    target = None
    if settings.map_crs:
        try:
            target = CRS.from_user_input(settings.map_crs)
        except CRSError as exc:
            out.error(
                "map-crs-invalid",
                f"input.map_crs = {settings.map_crs!r} is not a CRS pyproj understands ({exc}); "
                "give a projected CRS such as 'EPSG:3035', or remove the setting",
                value=settings.map_crs,
            )
            return None
        if not target.is_projected:
            out.error(
                "map-crs-invalid",
                f"input.map_crs = {settings.map_crs!r} is {target.name}, not a projected CRS; "
                "maps and distances need units of length. Give a projected CRS such as "
                "'EPSG:3035', or remove the setting to have one chosen from the layer",
                value=settings.map_crs,
            )
            return None
        how = f"{target.name}, as set by input.map_crs"
    elif own.is_projected:
        return None, (
            f"Maps are drawn and distances measured in the boundaries' own CRS, {own.name}; "
            "contiguity is found on the boundaries as read."
        )
    else:
        try:
            target, how = local_crs(frame)
        except (ValueError, CRSError) as exc:
            out.error(
                "map-projection-failed",
                f"no projected CRS could be chosen for the boundaries ({exc}); set input.map_crs",
            )
            return None
    try:
        projected = frame.to_crs(target)
        ok = bool(np.all(np.isfinite(_bounds(projected))))
    except Exception as exc:  # pyproj raises several types for impossible transforms
        ok, projected = False, None
        detail = f" ({type(exc).__name__}: {exc})"
    else:
        detail = ""
    if not ok:
        out.error(
            "map-projection-failed",
            f"the boundaries ({own.name}) cannot be projected to {target.name} for the maps "
            f"and distances{detail}: some coordinates have no finite value there. Set "
            "input.map_crs to a projected CRS that covers the whole layer",
            value=settings.map_crs,
        )
        return None
    kind = "longitude/latitude" if own.is_geographic else "another CRS"
    return projected, (
        f"The boundaries are in {own.name} ({kind}); maps are drawn and distances measured in "
        f"{how}. Contiguity is found on the boundaries as read, so projecting does not change "
        "the neighbours."
    )


def _bounds(frame: Any) -> Any:
    """Bounds of every geometry of ``frame`` (n x 4 array)."""
    import shapely

    return shapely.bounds(np.asarray(frame.geometry.to_numpy(), dtype=object))


def _read_layer(path: Path, ext: str, settings: InputSettings, out: FindingCollector) -> Any:
    import geopandas as gpd
    import pyogrio

    layer = None
    if ext in _GPKG:
        try:
            layers = [str(x[0]) for x in pyogrio.list_layers(path)]
        except Exception as exc:  # pyogrio raises DataSourceError and friends
            out.error(
                "boundaries-unreadable",
                f"the file is not a readable GeoPackage ({exc}); re-export it",
            )
            return None
        if settings.boundaries_layer is not None:
            if settings.boundaries_layer not in layers:
                out.error(
                    "layer-missing",
                    f"expected a layer {settings.boundaries_layer!r} (input.boundaries_layer), "
                    f"got layers {', '.join(map(repr, layers)) or '(none)'}; set "
                    "input.boundaries_layer to one of these",
                    value=settings.boundaries_layer,
                )
                return None
            layer = settings.boundaries_layer
        elif len(layers) != 1:
            out.error(
                "layer-missing",
                f"the GeoPackage holds {len(layers)} layers ({', '.join(map(repr, layers))}); "
                "set input.boundaries_layer to the one with the districts",
            )
            return None
        else:
            layer = layers[0]
    try:
        frame = gpd.read_file(path, engine="pyogrio", layer=layer)
    except Exception as exc:  # pyogrio/GDAL errors have no common public base
        out.error(
            "boundaries-unreadable",
            f"the boundary file cannot be read ({type(exc).__name__}: {exc}); check that it is "
            "a complete GeoJSON, GeoPackage or Shapefile (with its .shx and .dbf)",
        )
        return None
    if len(frame) == 0:
        out.error(
            "boundaries-empty",
            "expected one feature per district, got an empty layer; check the export",
        )
        return None
    return frame


def _check_crs(frame: Any, ext: str, settings: InputSettings, out: FindingCollector) -> Any:
    from pyproj import CRS
    from pyproj.exceptions import CRSError

    declared = None
    if settings.boundaries_crs:
        try:
            declared = CRS.from_user_input(settings.boundaries_crs)
        except CRSError as exc:
            out.error(
                "crs-invalid",
                f"input.boundaries_crs = {settings.boundaries_crs!r} is not a CRS pyproj "
                f"understands ({exc}); give it as e.g. 'EPSG:32630'",
                value=settings.boundaries_crs,
            )
            return None
    if ext in _GEOJSON:
        # GDAL labels every GeoJSON as WGS 84 (RFC 7946); a declaration overrides that.
        if declared is not None:
            frame = frame.set_crs(declared, allow_override=True)
        elif frame.crs is None:
            frame = frame.set_crs("EPSG:4326")
    elif frame.crs is None:
        if declared is None:
            what = "a shapefile without its .prj file" if ext in _SHP else "a file with no CRS"
            out.error(
                "crs-missing",
                f"expected a coordinate reference system, got {what}; supply the .prj file "
                "or declare the CRS with input.boundaries_crs (e.g. 'EPSG:32630'). "
                "sitrep never guesses it",
            )
            return None
        frame = frame.set_crs(declared)
    elif declared is not None and not CRS(frame.crs).equals(declared, ignore_axis_order=True):
        out.error(
            "crs-conflict",
            f"the file says its CRS is {CRS(frame.crs).name} but input.boundaries_crs declares "
            f"{declared.name}; remove the declaration or fix the file (nothing is reprojected "
            "silently)",
            value=settings.boundaries_crs,
        )
        return None
    crs = CRS(frame.crs)
    if crs.is_geographic:
        geoms = frame.geometry[frame.geometry.notna() & ~frame.geometry.is_empty]
        if len(geoms):
            minx, miny, maxx, maxy = geoms.total_bounds
            if minx < -180 or maxx > 180 or miny < -90 or maxy > 90:
                out.error(
                    "crs-coordinates-out-of-range",
                    f"the file is labelled {crs.name} (longitude/latitude in degrees) but its "
                    f"coordinates span x {minx:,.0f}..{maxx:,.0f}, y {miny:,.0f}..{maxy:,.0f}, "
                    "outside -180..180 / -90..90; they are probably metres. Declare the real "
                    "CRS with input.boundaries_crs (e.g. 'EPSG:32630') or re-export as WGS 84",
                    value=f"{minx:.0f},{miny:.0f},{maxx:.0f},{maxy:.0f}",
                )
                return None
    return frame


def _check_features(frame: Any, settings: InputSettings, out: FindingCollector) -> Any:
    import geopandas as gpd
    import pandas as pd
    import shapely

    id_col = settings.boundaries_id_column
    name_col = settings.boundaries_name_column
    present = ", ".join(repr(c) for c in frame.columns if c != frame.geometry.name)
    if id_col not in frame.columns:
        out.error(
            "column-missing",
            f"expected an id column {id_col!r} (input.boundaries_id_column), got columns "
            f"{present}; set input.boundaries_id_column",
            column=id_col,
        )
        return None
    raw_ids = frame[id_col]
    numeric = pd.api.types.is_numeric_dtype(raw_ids.dtype) and not pd.api.types.is_bool_dtype(
        raw_ids
    )
    strip = settings.strip_id_whitespace
    ids: list[str | None] = []
    stripped: list[int] = []
    for k, v in enumerate(raw_ids):
        if v is None or (isinstance(v, float) and np.isnan(v)):
            ids.append(None)
            continue
        if numeric:
            number = float(v)
            if not (number.is_integer() and abs(number) < 2**53):
                out.error(
                    "id-numeric",
                    f"expected a district id in {id_col!r}, got the number {v!r} at feature "
                    f"{k + 1}, which is not a whole number; store the id field as text and "
                    "export again",
                    column=id_col,
                    value=f"feature {k + 1}",
                )
                ids.append(None)
                continue
            ids.append(str(int(number)))
            continue
        text = unicodedata.normalize("NFC", str(v))
        if strip and text.strip() != text and text.strip():
            stripped.append(k + 1)
        ids.append(text.strip() if strip else text)
    if out.has_errors:
        return None
    if stripped:
        out.add(
            Severity.INFO,
            "id-whitespace-stripped",
            f"{len(stripped)} district id{'s' if len(stripped) != 1 else ''} in {id_col!r} had "
            "spaces around them, removed before matching (input.strip_id_whitespace), at "
            f"feature{'s' if len(stripped) != 1 else ''} {line_list(stripped)}",
            column=id_col,
            value=str(len(stripped)),
        )
    if settings.id_zero_pad:
        width = settings.id_zero_pad
        padded = [None if i is None else pad_id(i, width) for i in ids]
        changed = [k for k, (a, b) in enumerate(zip(ids, padded, strict=True)) if a != b]
        if changed:
            out.add(
                Severity.INFO,
                "id-zero-padded",
                f"{len(changed)} district id{'s' if len(changed) != 1 else ''} in {id_col!r} "
                f"were padded with leading zeros to {width} digits (input.id_zero_pad = "
                f"{width}; e.g. {ids[changed[0]]} -> {padded[changed[0]]})",
                column=id_col,
                value=str(len(changed)),
            )
            ids = padded
    if name_col and name_col in frame.columns:
        names = [
            ""
            if v is None or (isinstance(v, float) and np.isnan(v))
            else unicodedata.normalize("NFC", str(v)).strip()
            for v in frame[name_col]
        ]
    else:
        if name_col:
            out.add(
                Severity.WARNING,
                "column-optional-missing",
                f"the name column {name_col!r} (input.boundaries_name_column) is not in the "
                f"layer (columns: {present}); district ids are shown as names",
                column=name_col,
            )
        names = [""] * len(ids)
    names = [n or (i or "") for n, i in zip(names, ids, strict=True)]

    seen: dict[str, int] = {}
    geoms = list(frame.geometry)
    for k, ident in enumerate(ids):
        feature = f"feature {k + 1}"
        if ident is None or ident == "":
            out.error(
                "id-missing",
                f"expected a district id in {id_col!r}, got an empty value at {feature}; fill "
                "in the id or remove the feature",
                column=id_col,
                value=feature,
            )
            continue
        if ident in seen:
            out.error(
                "id-duplicated",
                f"expected one feature per district, got id {ident!r} at features "
                f"{seen[ident] + 1} and {k + 1}; dissolve the parts into one (Multi)Polygon or "
                "correct the id",
                column=id_col,
                district_id=ident,
                value=feature,
            )
            continue
        seen[ident] = k
        g = geoms[k]
        if g is None or g.is_empty:
            out.error(
                "geometry-missing",
                f"district {ident} has no geometry (null or empty) at {feature}; add its "
                "boundary or remove the feature",
                district_id=ident,
                value=feature,
            )
            continue
        if g.geom_type not in ("Polygon", "MultiPolygon"):
            out.error(
                "geometry-not-polygon",
                f"expected a Polygon or MultiPolygon for district {ident}, got a "
                f"{g.geom_type}; districts must be areas. Export the boundary polygons",
                district_id=ident,
                value=g.geom_type,
            )
            continue
        if not shapely.is_valid(g):
            reason = shapely.is_valid_reason(g)
            fixed = _safe_repair(g)
            if fixed is None:
                out.error(
                    "geometry-invalid",
                    f"district {ident} has invalid geometry ({reason}) that cannot be repaired "
                    f"safely (the repaired shape's area would differ by more than "
                    f"{REPAIR_AREA_TOLERANCE:.0%}); fix the polygon in a GIS and export again",
                    district_id=ident,
                    value=reason,
                )
                continue
            geoms[k] = fixed
            out.add(
                Severity.WARNING,
                "geometry-repaired",
                f"district {ident} had invalid geometry ({reason}); it was repaired with "
                f"make_valid, changing its area by {abs(fixed.area - g.area) / max(fixed.area, g.area):.2%} "
                f"(at most {REPAIR_AREA_TOLERANCE:.0%} is accepted). Fix the source file when "
                "convenient",
                district_id=ident,
                value=reason,
            )
    if out.has_errors:
        return None
    result = gpd.GeoDataFrame(
        {
            "district_id": pd.Series(ids, dtype=object),
            "district_name": pd.Series(names, dtype=object),
        },
        geometry=gpd.GeoSeries(geoms, crs=frame.crs),
    )
    order = np.argsort(np.asarray(ids, dtype=str), kind="stable")
    result = result.iloc[order].reset_index(drop=True)
    return result, bool(numeric)


def _safe_repair(geom: Any) -> Any:
    """The make_valid repair of ``geom`` when it is safe (see read_districts), else None."""
    import shapely
    from shapely.geometry import MultiPolygon, Polygon

    fixed = shapely.make_valid(geom)
    if fixed.geom_type == "GeometryCollection":
        parts: list[Polygon] = []
        for part in fixed.geoms:
            if part.geom_type == "Polygon":
                parts.append(part)
            elif part.geom_type == "MultiPolygon":
                parts.extend(part.geoms)
        fixed = MultiPolygon(parts) if len(parts) > 1 else (parts[0] if parts else None)
    if fixed is None or fixed.is_empty or fixed.geom_type not in ("Polygon", "MultiPolygon"):
        return None
    before, after = abs(geom.area), fixed.area
    biggest = max(before, after)
    if biggest <= 0 or abs(after - before) > REPAIR_AREA_TOLERANCE * biggest:
        return None
    return fixed


def _check_extent(frame: Any, settings: InputSettings, out: FindingCollector) -> bool:
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


def _check_gaps(frame: Any, out: FindingCollector) -> None:
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


def _check_glyphs(frame: Any, settings: InputSettings, out: FindingCollector) -> None:
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
