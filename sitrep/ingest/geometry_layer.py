"""The boundary layer as read: the layer of a GeoPackage, and its checked CRS (never guessed)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from sitrep.config import InputSettings
from sitrep.ingest.findings import FindingCollector

__all__ = ["GEOJSON", "GPKG", "SHP", "check_crs", "read_layer"]

GEOJSON = {".geojson", ".json"}
GPKG = {".gpkg"}
SHP = {".shp"}


def read_layer(path: Path, ext: str, settings: InputSettings, out: FindingCollector) -> Any:
    import geopandas as gpd
    import pyogrio

    layer = None
    if ext in GPKG:
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


def check_crs(frame: Any, ext: str, settings: InputSettings, out: FindingCollector) -> Any:
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
    if ext in GEOJSON:
        # GDAL labels every GeoJSON as WGS 84 (RFC 7946); a declaration overrides that.
        if declared is not None:
            frame = frame.set_crs(declared, allow_override=True)
        elif frame.crs is None:
            frame = frame.set_crs("EPSG:4326")
    elif frame.crs is None:
        if declared is None:
            what = "a shapefile without its .prj file" if ext in SHP else "a file with no CRS"
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
