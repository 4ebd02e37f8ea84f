"""District features of a boundary layer: ids, names and shapes, with safe repairs."""

from __future__ import annotations

import unicodedata
from typing import Any

import numpy as np

from sitrep.config import InputSettings
from sitrep.ingest.findings import FindingCollector, line_list
from sitrep.ingest.id_cells import pad_id
from sitrep.model import Severity

__all__ = ["REPAIR_AREA_TOLERANCE", "check_features"]

REPAIR_AREA_TOLERANCE = 0.01
"""A repair is safe when the area changes by at most this share (see :func:`sitrep.ingest.geometry.read_districts`)."""


def check_features(frame: Any, settings: InputSettings, out: FindingCollector) -> Any:
    """The districts (id, name, geometry; sorted by id) and whether the id column was numeric,
    or None when a feature has no usable id or shape (every such feature is an error)."""
    import geopandas as gpd
    import pandas as pd

    id_col = settings.boundaries_id_column
    present = ", ".join(repr(c) for c in frame.columns if c != frame.geometry.name)
    if id_col not in frame.columns:
        out.error(
            "column-missing",
            f"expected an id column {id_col!r} (input.boundaries_id_column), got columns "
            f"{present}; set input.boundaries_id_column",
            column=id_col,
        )
        return None
    read = _read_ids(frame[id_col], id_col, settings.strip_id_whitespace, out)
    if read is None:
        return None
    ids, numeric = read
    ids = _pad_ids(ids, id_col, settings.id_zero_pad, out)
    names = _feature_names(frame, settings.boundaries_name_column, ids, present, out)
    geoms = _checked_shapes(list(frame.geometry), ids, id_col, out)
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


def _is_missing(v: Any) -> bool:
    return v is None or (isinstance(v, float) and np.isnan(v))


def _read_ids(
    raw_ids: Any, id_col: str, strip: bool, out: FindingCollector
) -> tuple[list[str | None], bool] | None:
    """The id of every feature as text (None when missing) and whether the column is numeric;
    None when a number is not a whole one. Ids that had spaces stripped are noted once."""
    import pandas as pd

    numeric = pd.api.types.is_numeric_dtype(raw_ids.dtype) and not pd.api.types.is_bool_dtype(
        raw_ids
    )
    ids: list[str | None] = []
    stripped: list[int] = []
    for k, v in enumerate(raw_ids):
        if _is_missing(v):
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
    return ids, bool(numeric)


def _pad_ids(
    ids: list[str | None], id_col: str, width: int | None, out: FindingCollector
) -> list[str | None]:
    """``ids`` left-padded with zeros to ``width`` digits (input.id_zero_pad), noted once."""
    if not width:
        return ids
    padded = [None if i is None else pad_id(i, width) for i in ids]
    changed = [k for k, (a, b) in enumerate(zip(ids, padded, strict=True)) if a != b]
    if not changed:
        return ids
    out.add(
        Severity.INFO,
        "id-zero-padded",
        f"{len(changed)} district id{'s' if len(changed) != 1 else ''} in {id_col!r} "
        f"were padded with leading zeros to {width} digits (input.id_zero_pad = "
        f"{width}; e.g. {ids[changed[0]]} -> {padded[changed[0]]})",
        column=id_col,
        value=str(len(changed)),
    )
    return padded


def _feature_names(
    frame: Any, name_col: str | None, ids: list[str | None], present: str, out: FindingCollector
) -> list[str]:
    """The name of every feature (NFC, stripped), its id when blank or without a name column."""
    if name_col and name_col in frame.columns:
        names = [
            "" if _is_missing(v) else unicodedata.normalize("NFC", str(v)).strip()
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
    return [n or (i or "") for n, i in zip(names, ids, strict=True)]


def _checked_shapes(
    geoms: list[Any], ids: list[str | None], id_col: str, out: FindingCollector
) -> list[Any]:
    """The geometries, invalid ones safely repaired; a missing or duplicated id, a missing or
    non-polygonal shape and an unrepairable one are errors."""
    seen: dict[str, int] = {}
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
        elif g.geom_type not in ("Polygon", "MultiPolygon"):
            out.error(
                "geometry-not-polygon",
                f"expected a Polygon or MultiPolygon for district {ident}, got a "
                f"{g.geom_type}; districts must be areas. Export the boundary polygons",
                district_id=ident,
                value=g.geom_type,
            )
        else:
            geoms[k] = _valid_shape(ident, g, out)
    return geoms


def _valid_shape(ident: str, g: Any, out: FindingCollector) -> Any:
    """``g`` when valid, else its safe repair (a warning) or ``g`` with an error."""
    import shapely

    if shapely.is_valid(g):
        return g
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
        return g
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
    return fixed


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
