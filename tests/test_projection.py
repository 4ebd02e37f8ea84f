"""Boundaries in longitude/latitude: the CRS chosen for maps and distances.

Reference values:

- UTM zones are 6° of longitude wide, numbered 1..60 eastwards from 180° W
  (zone = floor((longitude + 180) / 6) + 1), with EPSG:326zz north and
  EPSG:327zz south of the equator on WGS 84 (the UTM definition as in NGA's
  "The Universal Grids", DMA TM 8358.2; the EPSG codes from the EPSG
  registry). Away from the antimeridian, geopandas' ``estimate_utm_crs`` (a
  reference library, pyproj's UTM zone query at the layer's centre) must agree.
- Areas on the WGS 84 ellipsoid from pyproj's ``Geod.geometry_area_perimeter``
  (Karney's geodesic algorithms, a reference library). The UTM scale factor
  is k = 0.9996 (1 + (Δλ cos φ)² / 2) to second order (the transverse Mercator
  series, from memory): at most 1.0011 within 3.5° of the central meridian at
  45° (areas within 0.5 %), at most 1.0055 within 6° at the equator (areas
  within 1.2 %).
- One degree of longitude on the WGS 84 ellipsoid is about 111.32 km times
  cos(latitude) (from memory: equatorial circumference 40,075 km / 360).
- A grid of r x c square cells has r(c-1) + c(r-1) rook links and
  2(r-1)(c-1) more queen (corner) links (counting).

The cell grids are made for these tests (squares with shared corners); the
end-to-end case reprojects the invented demo districts to WGS 84 and writes
them as RFC 7946 GeoJSON.
"""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
from conftest import TODAY, demo_config
from pyproj import Geod
from shapely.geometry import box

from sitrep import pipeline
from sitrep.analysis.weights import build_graph
from sitrep.cli import main
from sitrep.errors import ValidationFailed
from sitrep.ingest.geometry import local_crs
from sitrep.render import maps

DEG_KM = 40_075.017 / 360.0


def grid(west: float, south: float, cols: int, rows: int, step: float) -> gpd.GeoDataFrame:
    """cols x rows cells of ``step`` degrees; longitudes beyond 180 are written as -180.. (RFC 7946)."""
    cells, ids = [], []
    for r in range(rows):
        for c in range(cols):
            a, b = west + c * step, west + (c + 1) * step
            if a >= 180.0:
                a, b = a - 360.0, b - 360.0
            cells.append(box(a, south + r * step, b, south + (r + 1) * step))
            ids.append(f"D{r}{c}")
    return gpd.GeoDataFrame({"district_id": ids}, geometry=cells, crs="EPSG:4326")


def geodesic_areas(layer: gpd.GeoDataFrame) -> np.ndarray:
    geod = Geod(ellps="WGS84")
    return np.array([abs(geod.geometry_area_perimeter(g)[0]) for g in layer.geometry])


CASES = {
    # (layer, expected EPSG, longitude span, latitude of the edge nearest the equator)
    # across the zone 31 / zone 32 boundary at 6° E; centre 5.5° E, 45.5° N -> zone 31N
    "utm-zone-boundary": (grid(4.5, 45.0, 4, 2, 0.5), 32631, 2.0, 45.0),
    # southern hemisphere; centre 147.75° E, 42° S -> zone 55S
    "southern": (grid(147.0, -42.5, 3, 2, 0.5), 32755, 1.5, 41.5),
    # near the antimeridian, touching it; centre 178.5° E, 16.5° S -> zone 60S
    "near-antimeridian": (grid(177.0, -17.5, 3, 2, 1.0), 32760, 3.0, 15.5),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_local_crs_is_the_utm_zone_of_the_centre(case: str) -> None:
    layer, epsg, _, _ = CASES[case]
    crs, how = local_crs(layer)
    assert crs.to_epsg() == epsg
    assert layer.estimate_utm_crs().to_epsg() == epsg  # the reference library agrees
    assert f"EPSG:{epsg}" in how


@pytest.mark.parametrize("case", sorted(CASES))
def test_projecting_changes_no_neighbour(case: str) -> None:
    layer, _, _, _ = CASES[case]
    rows, cols = 2, len(layer) // 2
    projected = layer.to_crs(local_crs(layer)[0])
    rook_links = rows * (cols - 1) + cols * (rows - 1)
    for kind, links in (("rook", rook_links), ("queen", rook_links + 2 * (rows - 1) * (cols - 1))):
        a = build_graph(layer, kind=kind)
        b = build_graph(projected, kind=kind)
        assert a.neighbours == b.neighbours
        assert a.n_links == links
    # k nearest neighbours measured in the projected CRS agree with metres measured directly
    a = build_graph(layer, kind="knn", k=2, metric=projected)
    b = build_graph(projected, kind="knn", k=2)
    assert a.neighbours == b.neighbours


@pytest.mark.parametrize("case", sorted(CASES))
def test_maps_draw_at_the_true_size(case: str) -> None:
    layer, _, span, lat = CASES[case]
    projected = layer.to_crs(local_crs(layer)[0])
    assert np.allclose(projected.area.to_numpy(), geodesic_areas(layer), rtol=0.005)
    minx, _, maxx, _ = projected.total_bounds
    # roughly the length of the edge nearest the equator (meridians converge in the projection)
    assert maxx - minx == pytest.approx(
        span * DEG_KM * 1000 * math.cos(math.radians(lat)), rel=0.02
    )
    fig = maps.change_map(projected.geometry, ["increase"] * len(layer), title=None, width_cm=8.4)
    assert fig.axes


def test_a_layer_across_the_antimeridian_is_centred_on_it() -> None:
    # cells from 178° E to 178° W (written as -180..-178), 10° S: centre 180°
    layer = grid(178.0, -10.5, 4, 1, 1.0)
    assert layer.total_bounds[0] == -180.0 and layer.total_bounds[2] == 180.0
    crs, how = local_crs(layer)
    assert crs.to_epsg() in (32701, 32760)  # 180° is the edge of zones 60 and 1
    # the centre of the bounds is 0°, so a zone there (30S or 31S) would be half a world away
    assert layer.estimate_utm_crs().to_epsg() in (32730, 32731)
    projected = layer.to_crs(crs)
    minx, _, maxx, _ = projected.total_bounds
    width_km = (maxx - minx) / 1000
    assert width_km == pytest.approx(4 * DEG_KM * math.cos(math.radians(10)), rel=0.01)
    # the cell written as -180..-179 has the same area as the others, not a globe-wide one
    # (its cells reach 5° from the zone's central meridian, 177° E or W)
    assert np.allclose(projected.area.to_numpy(), geodesic_areas(layer), rtol=0.012)
    fig = maps.change_map(projected.geometry, ["similar"] * 4, title=None, width_cm=8.4)
    assert fig.axes


def test_a_wide_layer_gets_an_equal_area_projection() -> None:
    # 30° of longitude: too wide for one UTM zone; areas are kept
    layer = grid(10.0, 40.0, 6, 2, 5.0)
    crs, how = local_crs(layer)
    assert crs.to_epsg() is None and "equal-area" in how
    assert crs.coordinate_operation.method_name == "Lambert Azimuthal Equal Area"
    # edges densified along the parallels, so that the straight edges of each CRS enclose the
    # same ground: the projected areas equal the ellipsoidal ones
    dense = layer.set_geometry(layer.segmentize(0.05))
    got = dense.to_crs(crs).area.to_numpy()
    assert np.allclose(got, geodesic_areas(dense), rtol=1e-4)
    ease = dense.to_crs("EPSG:6933")  # WGS 84 / NSIDC EASE-Grid 2.0 Global, also equal-area
    assert np.allclose(got, ease.area.to_numpy(), rtol=1e-4)


def _geojson_config(tmp_path: Path, **input_changes):  # type: ignore[no-untyped-def]
    config = demo_config(tmp_path)
    frame = gpd.read_file(config.input.boundaries, layer="districts").to_crs("EPSG:4326")
    path = tmp_path / "districts.geojson"
    frame.to_file(path, driver="GeoJSON", engine="pyogrio")
    changes = {"boundaries": path, "boundaries_layer": None, **input_changes}
    return dataclasses.replace(
        config,
        input=dataclasses.replace(config.input, **changes),
        output=dataclasses.replace(config.output, pdf=False),
    )


@pytest.mark.slow
def test_geojson_in_degrees_builds_with_maps(demo_build, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    config = _geojson_config(tmp_path)
    assert pipeline.check(config, today=TODAY).blocked is False
    result = pipeline.build(config, today=TODAY)
    names = {p.name for p in result.outputs}
    assert {"report.html", "results.csv", "manifest.json"} <= names
    out = config.output.folder
    for key in ("terciles", "change", "clusters", "comparison"):
        assert (out / "figures" / f"{key}.svg").stat().st_size > 1000
    methods = dict(result.context.methods)
    assert "UTM zone 30N (EPSG:32630)" in methods["Maps and distances"]
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["map_projection"]["map_crs"] == "EPSG:32630"
    assert manifest["map_projection"]["reprojected"] is True
    # the same districts in the file's UTM zone give the same neighbours and clusters
    _, demo, _ = demo_build
    assert result.analysis.graph.neighbours == demo.analysis.graph.neighbours
    assert list(result.analysis.table["cluster_label"]) == list(
        demo.analysis.table["cluster_label"]
    )


def test_a_map_crs_in_degrees_is_refused_by_check_and_build(tmp_path: Path) -> None:
    config = _geojson_config(tmp_path, map_crs="EPSG:4326")
    report = pipeline.check(config, today=TODAY)
    assert report.blocked
    [f] = [f for f in report.errors if f.rule == "map-crs-invalid"]
    assert f.file == "districts.geojson" and "not a projected CRS" in f.message
    with pytest.raises(ValidationFailed):
        pipeline.build(config, today=TODAY)


def test_a_map_crs_that_cannot_hold_the_layer_is_refused(tmp_path: Path) -> None:
    # an orthographic view of the far side of the Earth: the districts have no coordinates there
    config = _geojson_config(tmp_path, map_crs="+proj=ortho +lon_0=177 +lat_0=-50 +type=crs")
    report = pipeline.check(config, today=TODAY)
    assert [f.rule for f in report.errors] == ["map-projection-failed"]


def test_check_verb_names_the_map_crs_setting(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    src = demo_config(tmp_path).source
    text = src.read_text().replace(
        'boundaries_id_column = "district_id"',
        'boundaries_id_column = "district_id"\nmap_crs = "EPSG:4258"',  # ETRS89: degrees
    )
    assert "map_crs" in text
    copy = tmp_path / "inputs"
    copy.mkdir()
    for f in src.parent.iterdir():
        if f.is_file():
            (copy / f.name).write_bytes(f.read_bytes())
    (copy / "sitrep.toml").write_text(text)
    code = main(["check", "--config", str(copy / "sitrep.toml"), "--today", TODAY.isoformat()])
    out = capsys.readouterr().out
    assert code == 1
    assert "map-crs-invalid" in out and "input.map_crs" in out
