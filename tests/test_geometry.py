"""Reading and checking district boundaries (sitrep.ingest.geometry).

Boundaries are the six invented fixture squares (EPSG:32630), written in each
format and then changed in one way per test. GeoJSON expectations follow
RFC 7946 section 4 (coordinates are WGS 84 longitude/latitude in degrees).
"""

from __future__ import annotations

import json
import unicodedata
from pathlib import Path

import geopandas as gpd
import pytest
import shapely
from ingest_fixtures import IDS, bow_tie, clean_polygons, settings, square_with_spike
from ingest_fixtures import settings as settings_
from shapely.geometry import LineString, Polygon

from sitrep.errors import InputError
from sitrep.ingest.geometry import RULES, read_districts
from sitrep.model import Severity


def write(gdf: gpd.GeoDataFrame, path: Path, **kw) -> Path:
    gdf.to_file(path, engine="pyogrio", **kw)
    return path


def one(report, rule: str):
    hits = [f for f in report.findings if f.rule == rule]
    assert len(hits) == 1, (rule, report.findings)
    return hits[0]


def test_rule_ids_unique() -> None:
    ids = [r for r, _ in RULES]
    assert len(ids) == len(set(ids))


def test_clean_geopackage(tmp_path: Path) -> None:
    gdf = clean_polygons().iloc[::-1]  # written out of order
    path = write(gdf, tmp_path / "d.gpkg", layer="districts")
    districts, report = read_districts(path, settings(boundaries_layer="districts"))
    assert report.findings == ()
    f = districts.frame
    assert list(f.columns) == ["district_id", "district_name", "geometry"]
    assert districts.ids == tuple(IDS)  # sorted by id
    assert f.crs.to_epsg() == 32630
    # multipart and holes are kept as they are
    assert f.geometry.iloc[5].geom_type == "MultiPolygon" and len(f.geometry.iloc[5].geoms) == 2
    assert shapely.get_num_interior_rings(shapely.get_parts(f.geometry.iloc[3])).sum() == 1
    assert f.geometry.iloc[3].area == pytest.approx(1e8 - 9e6)
    assert districts.source.size_bytes == path.stat().st_size


def test_geopackage_layer_choice(tmp_path: Path) -> None:
    path = write(clean_polygons(), tmp_path / "d.gpkg", layer="districts")
    write(clean_polygons(), path, layer="old_districts")
    _, report = read_districts(path, settings())
    assert "2 layers" in one(report, "layer-missing").message
    _, report = read_districts(path, settings(boundaries_layer="regions"))
    f = one(report, "layer-missing")
    assert "'districts'" in f.message and "'old_districts'" in f.message
    districts, report = read_districts(path, settings(boundaries_layer="old_districts"))
    assert report.findings == () and len(districts.ids) == 6


def test_geojson_in_wgs84(tmp_path: Path) -> None:
    path = write(clean_polygons().to_crs("EPSG:4326"), tmp_path / "d.geojson", driver="GeoJSON")
    districts, report = read_districts(path, settings())
    assert report.findings == ()
    assert districts.frame.crs.to_epsg() == 4326
    assert districts.ids == tuple(IDS)


def _metre_geojson(path: Path) -> Path:
    """A GeoJSON whose coordinates are UTM metres but which (per RFC 7946) claims WGS 84."""
    gdf = clean_polygons()
    features = [
        {
            "type": "Feature",
            "properties": {"district_id": i, "district_name": n},
            "geometry": shapely.geometry.mapping(g),
        }
        for i, n, g in zip(gdf["district_id"], gdf["district_name"], gdf.geometry, strict=True)
    ]
    path.write_text(
        json.dumps({"type": "FeatureCollection", "features": features}), encoding="utf-8"
    )
    return path


def test_geojson_in_metres_labelled_wgs84_is_an_error(tmp_path: Path) -> None:
    districts, report = read_districts(_metre_geojson(tmp_path / "m.geojson"), settings())
    f = one(report, "crs-coordinates-out-of-range")
    assert districts is None and f.severity is Severity.ERROR
    assert "input.boundaries_crs" in f.message


def test_geojson_in_metres_with_declared_crs(tmp_path: Path) -> None:
    path = _metre_geojson(tmp_path / "m.geojson")
    districts, report = read_districts(path, settings(boundaries_crs="EPSG:32630"))
    assert report.findings == () and districts.frame.crs.to_epsg() == 32630


def test_shapefile_needs_its_prj(tmp_path: Path) -> None:
    # dBASE field names hold at most 10 characters, so the columns are mapped
    gdf = clean_polygons().rename(columns={"district_id": "dist_id", "district_name": "dist_name"})
    path = write(gdf, tmp_path / "d.shp")

    def settings(**kw):  # noqa: F811 - the shapefile's column map
        return settings_(boundaries_id_column="dist_id", boundaries_name_column="dist_name", **kw)

    districts, report = read_districts(path, settings())
    assert report.findings == () and districts.frame.crs.to_epsg() == 32630
    path.with_suffix(".prj").unlink()
    districts, report = read_districts(path, settings())
    f = one(report, "crs-missing")
    assert districts is None and f.severity is Severity.ERROR and ".prj" in f.message
    districts, report = read_districts(path, settings(boundaries_crs="EPSG:32630"))
    assert report.findings == () and districts.frame.crs.to_epsg() == 32630


def test_declared_crs_conflicting_with_file(tmp_path: Path) -> None:
    path = write(clean_polygons(), tmp_path / "d.gpkg", layer="d")
    _, report = read_districts(path, settings(boundaries_crs="EPSG:32631"))
    assert one(report, "crs-conflict").severity is Severity.ERROR
    _, report = read_districts(path, settings(boundaries_crs="not a crs"))
    assert one(report, "crs-invalid").severity is Severity.ERROR


def _with_geometry(k: int, geom) -> gpd.GeoDataFrame:
    gdf = clean_polygons()
    geoms = list(gdf.geometry)
    geoms[k] = geom
    return gpd.GeoDataFrame(gdf.drop(columns="geometry"), geometry=geoms, crs=gdf.crs)


def test_bow_tie_is_an_error_naming_the_id(tmp_path: Path) -> None:
    path = write(_with_geometry(1, bow_tie()), tmp_path / "d.gpkg", layer="d")
    districts, report = read_districts(path, settings())
    f = one(report, "geometry-invalid")
    assert (districts, f.severity, f.district_id) == (None, Severity.ERROR, "002")
    assert "Self-intersection" in f.value


def test_small_self_intersection_is_repaired_with_a_warning(tmp_path: Path) -> None:
    path = write(_with_geometry(0, square_with_spike()), tmp_path / "d.gpkg", layer="d")
    districts, report = read_districts(path, settings())
    f = one(report, "geometry-repaired")
    assert (f.severity, f.district_id) == (Severity.WARNING, "001")
    g = districts.frame.geometry.iloc[0]
    assert g.is_valid and g.geom_type in ("Polygon", "MultiPolygon")
    assert g.area == pytest.approx(1e8, rel=1e-4)


def test_null_and_empty_geometry(tmp_path: Path) -> None:
    path = write(_with_geometry(2, None), tmp_path / "d.gpkg", layer="d")
    districts, report = read_districts(path, settings())
    f = one(report, "geometry-missing")
    assert (districts, f.severity, f.district_id) == (None, Severity.ERROR, "003")
    path = write(_with_geometry(4, Polygon()), tmp_path / "e.gpkg", layer="d")
    _, report = read_districts(path, settings())
    assert one(report, "geometry-missing").district_id == "005"


def test_line_geometry_is_not_a_district(tmp_path: Path) -> None:
    gdf = _with_geometry(4, LineString([(500000, 5500000), (510000, 5510000)]))
    path = write(gdf, tmp_path / "d.geojson", driver="GeoJSON")
    _, report = read_districts(path, settings(boundaries_crs="EPSG:32630"))
    f = one(report, "geometry-not-polygon")
    assert (f.severity, f.district_id, f.value) == (Severity.ERROR, "005", "LineString")


def test_duplicate_id(tmp_path: Path) -> None:
    gdf = clean_polygons()
    gdf.loc[4, "district_id"] = "002"
    districts, report = read_districts(write(gdf, tmp_path / "d.gpkg", layer="d"), settings())
    f = one(report, "id-duplicated")
    assert (districts, f.severity, f.district_id) == (None, Severity.ERROR, "002")
    assert "features 2 and 5" in f.message


def test_ids_are_nfc_text_and_stripped(tmp_path: Path) -> None:
    gdf = clean_polygons()
    gdf.loc[0, "district_id"] = " 001 "
    gdf.loc[1, "district_name"] = unicodedata.normalize("NFD", "Thévrisande")
    districts, report = read_districts(write(gdf, tmp_path / "d.gpkg", layer="d"), settings())
    (note,) = report.findings
    assert (note.rule, note.severity, note.value) == ("id-whitespace-stripped", Severity.INFO, "1")
    assert note.message.endswith("at feature 1")
    assert districts.ids[0] == "001" and districts.names["002"] == "Thévrisande"


def test_whole_number_ids_are_read_as_digits_fractions_are_errors(tmp_path: Path) -> None:
    gdf = clean_polygons()
    gdf["district_id"] = [int(i) for i in gdf["district_id"]]
    districts, report = read_districts(write(gdf, tmp_path / "d.gpkg", layer="d"), settings())
    assert report.errors == ()
    assert districts.ids == ("1", "2", "3", "4", "5", "6")
    assert (districts.id_column, districts.numeric_ids) == ("district_id", True)
    # padded to the width the table uses when the setting asks for it
    districts, report = read_districts(tmp_path / "d.gpkg", settings(id_zero_pad=3))
    assert districts.ids == tuple(IDS)
    assert one(report, "id-zero-padded").value == "6"
    gdf["district_id"] = [1.0, 2.5, 3.0, 4.0, 5.0, 6.0]
    districts, report = read_districts(write(gdf, tmp_path / "f.gpkg", layer="d"), settings())
    f = one(report, "id-numeric")
    assert districts is None and f.severity is Severity.ERROR and f.value == "feature 2"


def test_missing_id_column_and_missing_name_column(tmp_path: Path) -> None:
    gdf = clean_polygons().rename(columns={"district_id": "code"})
    _, report = read_districts(write(gdf, tmp_path / "d.gpkg", layer="d"), settings())
    f = one(report, "column-missing")
    assert "'code'" in f.message
    gdf = clean_polygons().drop(columns="district_name")
    districts, report = read_districts(write(gdf, tmp_path / "n.gpkg", layer="d"), settings())
    assert one(report, "column-optional-missing").severity is Severity.WARNING
    assert districts.names["003"] == "003"


def test_unreadable_and_unknown_files(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="nothere.gpkg"):
        read_districts(tmp_path / "nothere.gpkg", settings())
    bad = tmp_path / "bad.gpkg"
    bad.write_bytes(b"not a geopackage")
    districts, report = read_districts(bad, settings())
    assert districts is None and report.blocked
    other = tmp_path / "d.kml"
    other.write_text("<kml/>")
    _, report = read_districts(other, settings())
    assert [f.rule for f in report.findings] == ["boundaries-format-unknown"]
    broken = tmp_path / "b.geojson"
    broken.write_text('{"type": "FeatureCollection", "features": [', encoding="utf-8")
    districts, report = read_districts(broken, settings())
    assert districts is None and report.blocked
