"""The projected CRS of maps and distances: set by input.map_crs, the file's own, or estimated.

A layer in longitude/latitude gets the UTM zone of its centre when it is
narrow enough, else a Lambert azimuthal equal-area projection centred on it.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from sitrep.config import InputSettings
from sitrep.ingest.findings import FindingCollector

__all__ = ["UTM_MAX_SPAN_DEGREES", "local_crs", "project_districts"]

UTM_MAX_SPAN_DEGREES = 6.0
"""A layer in degrees spanning at most this much longitude is mapped in a UTM zone (see :func:`local_crs`)."""


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


def project_districts(
    frame: Any, settings: InputSettings, out: FindingCollector
) -> tuple[Any, str] | None:
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
