"""Hardening, what comes in: ids, CRS, geometry, encodings, duplicates, impossible values,
Unicode normalisation, and random tables fed to `sitrep check`.

docs/faults.md items F2, F13, F14, F15, F16, F17 and F22, plus the property-based test
of the Hardening issue. Every table is the invented week of ``hardening_helpers`` with one
thing changed; findings are asserted through ``sitrep check --json`` (``cli.main``) or the
reader itself. References: RFC 4180 (CSV), RFC 7946 (GeoJSON is WGS 84 lon/lat; bbox order
west, south, east, north), Unicode Standard Annex #15 (NFC/NFD), OGC Simple Features
validity as implemented by GEOS (``shapely.is_valid``).
"""

from __future__ import annotations

import csv
import io
import json
import unicodedata
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from hardening_helpers import (
    HEADER,
    WEEKS,
    build,
    make_week,
    read_outputs,
    run_cli,
    table_rows,
    write_csv,
)
from hypothesis import HealthCheck, event, example, given, settings
from hypothesis import strategies as st

from sitrep.analysis.weights import build_graph
from sitrep.ingest.read import read_count_table
from sitrep.weeks import WeekSystem

IDS = [f"{k + 1:03d}" for k in range(13)]


@pytest.fixture(scope="module")
def week(tmp_path_factory: pytest.TempPathFactory) -> Any:
    """The invented week with text ids '001'..'013' (leading zeros), no PDF."""
    return make_week(tmp_path_factory.mktemp("inputs") / "week", ids=IDS, pdf=False)


def check(week: Any, table: Path | None = None, *extra: str) -> tuple[int, dict[str, Any], str]:
    """`sitrep check --json` on the week's configuration (optionally another table)."""
    args = ["check", "--config", str(week.config_path), "--json", "--today", "2026-11-30"]
    if table is not None:
        args += ["--table", str(table)]
    code, out, err = run_cli(args + list(extra))
    return code, (json.loads(out) if out.strip() else {"findings": []}), err


def findings(doc: dict[str, Any], rule: str) -> list[dict[str, Any]]:
    return [f for f in doc["findings"] if f["rule"] == rule]


def body(week: Any) -> list[list[str]]:
    return table_rows(week.ids, week.names, WEEKS, 4)


def line_of(rows: list[list[str]], ident: str, label: str) -> int:
    return next(i + 2 for i, r in enumerate(rows) if r[0] == ident and r[2] == label)


# --------------------------------------------------------------------------- F2


def test_h02_unmatched_ids_are_listed_with_lines_and_nothing_is_lost(
    week: Any, tmp_path: Path
) -> None:
    rows = body(week)
    latest = WEEKS[-1]
    renamed = {"001": "1", "003": " 003", "004": "004 "}
    for r in rows:
        if r[2] == latest and r[0] in renamed:
            r[0] = renamed[r[0]]
    rows = [r for r in rows if not (r[0] == "002" and r[2] == latest)]
    rows.append(["999", "Nowhere", latest, "3", "10", "500"])
    table = write_csv(tmp_path / "ids.csv", rows)
    code, doc, _ = check(week, table)
    assert code == 1
    unknown = {f["district_id"]: f for f in findings(doc, "id-not-in-boundaries")}
    assert set(unknown) == {"999"}  # ' 003' and '004 ' follow the declared strip rule
    (lost,) = findings(doc, "id-leading-zeros")  # '1' is '001' without its zeros
    assert lost["line"] == line_of(rows, "1", latest) and "'001'" in lost["message"]
    assert "input.id_zero_pad = 3" in lost["message"]
    (stripped,) = findings(doc, "id-whitespace-stripped")
    assert stripped["severity"] == "info" and stripped["value"] == "2"
    assert unknown["999"]["line"] == len(rows) + 1 and unknown["999"]["column"] == "district_id"
    assert [f["district_id"] for f in findings(doc, "district-missing-latest")] == ["001", "002"]
    # without the strip rule the padded ids are unmatched too, each with its near match
    week.write_config(input={"strip_id_whitespace": False})
    try:
        _, doc, _ = check(week, table)
    finally:
        week.write_config(input={"strip_id_whitespace": True})
    unknown = {f["district_id"]: f for f in findings(doc, "id-not-in-boundaries")}
    assert set(unknown) == {" 003", "004 ", "999"}
    assert "'003'" in unknown[" 003"]["message"] and "'004'" in unknown["004 "]["message"]


def test_h02_ids_stay_text_in_csv_xlsx_and_parquet(week: Any, tmp_path: Path) -> None:
    import openpyxl
    import pyarrow as pa
    import pyarrow.parquet as pq

    config = week.config()
    table, report = read_count_table(week.table, config.input, WeekSystem.MMWR)
    assert not report.errors and set(table.frame["district_id"]) == set(IDS)
    # XLSX: one id typed as a number in the spreadsheet
    rows = body(week)
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.append(list(HEADER))
    for r in rows:
        sheet.append([r[0], r[1], r[2], int(r[3]), int(r[4]), int(r[5])])
    sheet.cell(row=5, column=1).value = 4  # '004' entered as the number 4
    xlsx = tmp_path / "ids.xlsx"
    book.save(xlsx)
    code, doc, _ = check(week, xlsx)
    # the number 4 is read as '4', which matches '004' only with the zeros it lost
    (lost,) = findings(doc, "id-leading-zeros")
    assert code == 1 and (lost["line"], lost["column"], lost["value"]) == (5, "district_id", "4")
    assert "the table stored it as a number" in lost["message"]
    (note,) = findings(doc, "id-numeric-as-text")
    assert note["severity"] == "info" and "0 of 1 matched" in note["message"]
    # Parquet: an integer id column, likewise
    frame = {h: [r[k] for r in rows] for k, h in enumerate(HEADER)}
    frame["district_id"] = [int(x) for x in frame["district_id"]]
    for h in ("reporting_sites", "ili_visits", "total_visits"):
        frame[h] = [int(x) for x in frame[h]]
    parquet = tmp_path / "ids.parquet"
    pq.write_table(pa.table(frame), parquet)
    code, doc, _ = check(week, parquet)
    assert code == 1 and {f["column"] for f in findings(doc, "id-leading-zeros")} == {"district_id"}
    assert len(findings(doc, "id-leading-zeros")) == len(IDS)
    # ... and accepted once the padding is declared
    week.write_config(input={"id_zero_pad": 3})
    try:
        code, doc, _ = check(week, parquet)
    finally:
        week.raw["input"].pop("id_zero_pad")
        week.write_config()
    assert code == 0, doc
    # and a Parquet string column keeps the zeros
    frame["district_id"] = [r[0] for r in rows]
    pq.write_table(pa.table(frame), parquet)
    code, doc, _ = check(week, parquet)
    assert code == 0, doc


def test_h02_a_district_without_a_row_is_kept_and_labelled_not_reported(tmp_path: Path) -> None:
    week = make_week(
        tmp_path / "week",
        ids=IDS,
        pdf=False,
        edit_table=lambda rows: [r for r in rows if not (r[0] == "002" and r[2] == WEEKS[-1])],
    )
    result = build(week)
    table = result.analysis.table
    assert len(table) == len(IDS) and set(table["district_id"]) == set(IDS)
    row = next(r for r in result.context.districts if r.district_id == "002")
    assert (row.ili_pct, row.total_visits, row.notes) == ("no data", "—", "not reported this week")
    alts = {f.key: f.alt for f in result.context.figures}
    assert "no data / suppressed 1" in alts["terciles"] and "1 district no data" in alts["clusters"]
    csv_row = next(
        r
        for r in csv.DictReader(
            io.StringIO(read_outputs(result)["results.csv"].decode("utf-8-sig"))
        )
        if r["district_id"] == "002"
    )
    assert csv_row["total_visits"] == "" and csv_row["ili_percent"] == ""


# --------------------------------------------------------------------------- F13


def _geojson(frame: Any, path: Path, *, swap: bool = False) -> Path:
    doc = json.loads(frame.to_json())
    doc.pop("crs", None)
    if swap:
        for feature in doc["features"]:
            geometry = feature["geometry"]
            geometry["coordinates"] = [
                [[y, x] for x, y in ring] for ring in geometry["coordinates"]
            ]
    path.write_text(json.dumps(doc), encoding="utf-8")
    return path


def test_h13_crs_errors_are_refused_and_a_reprojection_changes_nothing(
    week: Any, tmp_path: Path
) -> None:
    import geopandas as gpd

    utm = gpd.read_file(week.boundaries)
    lonlat = utm.to_crs("EPSG:4326")
    cases = {
        "metres.geojson": (
            _geojson(utm, tmp_path / "metres.geojson"),
            "crs-coordinates-out-of-range",
        ),
    }
    shp = tmp_path / "noprj.shp"  # dBASE field names are at most 10 characters
    utm.rename(columns={"district_id": "did", "district_name": "name"}).to_file(shp)
    shp.with_suffix(".prj").unlink()
    cases["noprj.shp"] = (shp, "crs-missing")
    # the extent this jurisdiction declares: a little around the real one (RFC 7946 bbox order)
    west, south, east, north = lonlat.total_bounds
    extent = [
        round(west - 0.5, 3),
        round(south - 0.5, 3),
        round(east + 0.5, 3),
        round(north + 0.5, 3),
    ]
    cases["swapped.geojson"] = (
        _geojson(lonlat, tmp_path / "swapped.geojson", swap=True),
        "boundaries-outside-extent",
    )
    try:
        for name, (path, rule) in cases.items():
            short = name.endswith(".shp")
            layer = {
                "boundaries": str(path),
                "boundaries_layer": "",
                "boundaries_extent": extent,
                "boundaries_id_column": "did" if short else "district_id",
                "boundaries_name_column": "name" if short else "district_name",
            }
            week.raw["input"].pop("boundaries_layer", None)
            week.write_config(input={k: v for k, v in layer.items() if v != ""})
            code, doc, err = check(week)
            errors = [f["rule"] for f in doc["findings"] if f["severity"] == "error"]
            assert (code, errors) == (1, [rule]), (name, doc, err)
        # the same districts in WGS 84, correctly labelled, pass inside the extent
        week.write_config(input={"boundaries": str(_geojson(lonlat, tmp_path / "ok.geojson"))})
        code, doc, _ = check(week)
        assert code == 0, doc
    finally:
        week.raw["input"].pop("boundaries_extent", None)
        week.write_config(
            input={
                "boundaries": str(week.boundaries),
                "boundaries_layer": "districts",
                "boundaries_id_column": "district_id",
                "boundaries_name_column": "district_name",
            }
        )
    # the declared extent itself is checked when the configuration is loaded
    from sitrep.config import config_from_dict
    from sitrep.errors import ConfigError

    for bad in ([-3, 49], [-2, 49, -3, 50], [10, 95, 11, 96], ["w", 1, 2, 3]):
        with pytest.raises(ConfigError, match="boundaries_extent"):
            config_from_dict({"input": {"boundaries_extent": bad}})
    # an irregular tiling (no distance ties) plus an island: UTM and WGS 84 give identical
    # neighbours for contiguity, k-nearest and linked islands (distances in metres either way)
    from shapely.geometry import box

    xs, ys = [0, 7_000, 19_000, 26_000, 40_000], [0, 9_000, 21_000, 30_000]
    x0, y0 = 500_000, 5_500_000
    cells = [
        box(x0 + xs[c], y0 + ys[r], x0 + xs[c + 1], y0 + ys[r + 1])
        for r in range(3)
        for c in range(4)
    ]
    cells.append(box(x0 + 55_000, y0 + 3_000, x0 + 59_000, y0 + 8_000))
    tiling = gpd.GeoDataFrame({"district_id": IDS}, geometry=cells, crs="EPSG:32630")
    geographic = tiling.to_crs("EPSG:4326")
    for kind, options in (
        ("queen", {}),
        ("rook", {}),
        ("knn", {"k": 3}),
        ("queen", {"link_islands_k": 2}),
    ):
        a = build_graph(tiling, kind=kind, **options)
        b = build_graph(geographic, kind=kind, **options)
        assert a.neighbours == b.neighbours, (kind, options)
        if kind == "knn" or options:
            assert any("measured in metres" in note for note in b.notes)


# --------------------------------------------------------------------------- F14


def test_h14_bad_geometry_is_named_before_any_neighbour_is_built(week: Any, tmp_path: Path) -> None:
    import geopandas as gpd
    from shapely.geometry import LineString, Polygon

    base = gpd.read_file(week.boundaries)
    bad = base.copy()
    x0, y0, x1, y1 = bad.geometry.iloc[1].bounds
    bad.loc[1, "geometry"] = Polygon([(x0, y0), (x1, y1), (x1, y0), (x0, y1), (x0, y0)])  # bow-tie
    bad.loc[2, "geometry"] = Polygon()
    bad.loc[3, "geometry"] = LineString([(x0, y0), (x1, y1)])
    bad.loc[5, "geometry"] = None
    bad.loc[6, "district_id"] = "001"
    path = tmp_path / "bad.gpkg"
    bad.to_file(path, layer="districts")
    week.write_config(input={"boundaries": str(path)})
    try:
        code, doc, _ = check(week)
    finally:
        week.write_config(input={"boundaries": str(week.boundaries)})
    errors = {(f["rule"], f["district_id"]) for f in doc["findings"] if f["severity"] == "error"}
    assert code == 1 and errors == {
        ("geometry-invalid", "002"),
        ("geometry-missing", "003"),
        ("geometry-not-polygon", "004"),
        ("geometry-missing", "006"),
        ("id-duplicated", "001"),
    }


def test_h14_shrunk_polygons_warn_and_holes_and_enclaves_keep_their_neighbours(
    week: Any, tmp_path: Path
) -> None:
    import geopandas as gpd
    from shapely.geometry import Polygon, box

    shrunk = gpd.read_file(week.boundaries)
    shrunk["geometry"] = shrunk.geometry.buffer(-5)  # 5 m gaps between 10 km squares
    path = tmp_path / "shrunk.gpkg"
    shrunk.to_file(path, layer="districts")
    week.write_config(input={"boundaries": str(path)})
    try:
        code, doc, _ = check(week)
    finally:
        week.write_config(input={"boundaries": str(week.boundaries)})
    gaps = {f["district_id"] for f in findings(doc, "geometry-gap")}
    assert code == 0 and gaps == set(IDS[:-1])  # every grid district; the far island is sea
    # a hole stays a hole; an enclave filling it has its host as neighbour
    host = Polygon(
        [(0, 0), (300, 0), (300, 300), (0, 300)], [[(100, 100), (200, 100), (200, 200), (100, 200)]]
    )
    frame = gpd.GeoDataFrame(
        {"district_id": ["host", "enclave", "east"]},
        geometry=[host, box(100, 100, 200, 200), box(300, 0, 600, 300)],
        crs="EPSG:32630",
    )
    graph = build_graph(frame)
    assert graph.neighbours["enclave"] == ("host",)
    assert graph.neighbours["host"] == ("east", "enclave")
    assert len(frame.geometry.iloc[0].interiors) == 1


def test_h14_shrunk_polygons_never_give_a_no_clusters_claim(tmp_path: Path) -> None:
    import geopandas as gpd

    week = make_week(tmp_path / "week", pdf=False)
    shrunk = gpd.read_file(week.boundaries)
    shrunk["geometry"] = shrunk.geometry.buffer(-5)
    shrunk.to_file(week.boundaries, layer="districts")
    result = build(week)
    assert result.analysis.graph.n_links == 0 and not result.analysis.clusters.assessable
    assert "No district formed" not in result.context.key_messages[3]
    assert any(f.rule == "geometry-gap" for f in result.validation.warnings)


# --------------------------------------------------------------------------- F15


def test_h15_bom_crlf_latin1_and_decimal_comma_follow_declared_rules(
    week: Any, tmp_path: Path
) -> None:
    config = week.config()
    rows = body(week)
    rows[4][1] = "Brännoch"  # a non-ASCII name in line 6
    clean = write_csv(tmp_path / "clean.csv", rows)
    text = clean.read_text(encoding="utf-8")

    def frame(path: Path, **changes: Any) -> Any:
        import dataclasses

        settings = dataclasses.replace(config.input, **changes)
        table, report = read_count_table(path, settings, WeekSystem.MMWR)
        assert table is not None, report.findings
        return table.frame.drop(columns="line")

    reference = frame(clean)
    bom = tmp_path / "bom.csv"
    bom.write_bytes(b"\xef\xbb\xbf" + text.encode("utf-8"))  # Excel "CSV UTF-8"
    crlf = tmp_path / "crlf.csv"
    crlf.write_bytes((text.replace("\n", "\r\n") + ",,,,,\r\n").encode("utf-8"))
    for path in (bom, crlf):
        assert frame(path).equals(reference), path.name
    latin = tmp_path / "latin1.csv"
    latin.write_bytes(text.encode("latin-1"))
    code, doc, _ = check(week, latin)
    bad = findings(doc, "file-encoding")
    assert code == 1 and [(f["line"], f["column"], f["value"]) for f in bad] == [
        (6, "district_name", "0xe4")
    ]
    assert frame(latin, encoding="latin-1").equals(reference)  # declared encoding: same table
    # ';' with decimal commas in a supplied rate column
    header = [*HEADER, "ili_pct"]
    rate_rows = [r + [f"{100 * int(r[4]) / int(r[5]):.3f}".replace(".", ",")] for r in rows]
    semi = tmp_path / "semi.csv"
    semi.write_text("\n".join(";".join(r) for r in [header, *rate_rows]) + "\n", encoding="utf-8")
    week.write_config(input={"delimiter": ";", "columns": {"rate": "ili_pct"}})
    try:
        code, doc, _ = check(week, semi)
        refused = findings(doc, "cell-not-number")
        assert code == 1 and len(refused) == len(rows)
        assert all(
            f["column"] == "ili_pct" and f["line"] and "input.decimal" in f["message"]
            for f in refused
        )
        week.write_config(input={"decimal": ","})
        table, report = read_count_table(semi, week.config().input, WeekSystem.MMWR)
    finally:
        week.raw["input"].pop("columns", None)
        week.write_config(input={"delimiter": ",", "decimal": "."})
    assert table is not None and not report.errors
    expected = np.array([round(100 * int(r[4]) / int(r[5]), 3) for r in rows])
    got = table.frame.sort_values("line")["rate_percent"].to_numpy()
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-9)


# --------------------------------------------------------------------------- F16, F17


def test_h16_duplicate_rows_and_duplicate_headers_are_errors(week: Any, tmp_path: Path) -> None:
    rows = body(week)
    extra = list(rows[-1])
    extra[4] = str(int(extra[4]) + 7)
    rows.append(extra)
    code, doc, _ = check(week, write_csv(tmp_path / "dup.csv", rows))
    dup = findings(doc, "row-duplicate")
    assert code == 1 and len(dup) == 1
    assert (
        dup[0]["line"] == len(rows) + 1
        and f"lines {len(rows)}, {len(rows) + 1}" in dup[0]["message"]
    )
    twice = write_csv(
        tmp_path / "twice.csv", [r + [r[4]] for r in body(week)], [*HEADER, "ili_visits"]
    )
    code, doc, _ = check(week, twice)
    assert code == 1 and [(f["line"], f["column"]) for f in findings(doc, "column-duplicated")] == [
        (1, "ili_visits")
    ]


def test_h17_every_impossible_value_is_listed_in_one_report(week: Any, tmp_path: Path) -> None:
    # stage 1 (typing): every cell that is not a plain number, in one report
    rows = body(week)
    bad_text = {
        ("001", "ili_visits"): "n/a",
        ("002", "ili_visits"): "<5",
        ("003", "total_visits"): "1,234",
        ("004", "ili_visits"): "5%",
        ("005", "reporting_sites"): "three",
    }
    col = {name: k for k, name in enumerate(HEADER)}
    for (ident, column), value in bad_text.items():
        rows[line_of(rows, ident, WEEKS[-1]) - 2][col[column]] = value
    code, doc, _ = check(week, write_csv(tmp_path / "text.csv", rows))
    got = {(f["line"], f["column"], f["value"]) for f in findings(doc, "cell-not-number")}
    assert code == 1 and got == {
        (line_of(rows, i, WEEKS[-1]), c, v) for (i, c), v in bad_text.items()
    }
    # stage 2 (values): ILI above total, negatives, zero denominator, in one report
    rows = body(week)
    cells = {
        ("006", "ili_visits"): "9999",
        ("007", "ili_visits"): "-3",
        ("008", "total_visits"): "0",
        ("009", "reporting_sites"): "-1",
    }
    for (ident, column), value in cells.items():
        rows[line_of(rows, ident, WEEKS[-1]) - 2][col[column]] = value
    code, doc, _ = check(week, write_csv(tmp_path / "values.csv", rows))
    listed = {
        (f["rule"], f["line"], f["column"]) for f in doc["findings"] if f["severity"] == "error"
    }
    line = {i: line_of(rows, i, WEEKS[-1]) for i, _ in cells}
    assert code == 1 and listed == {
        ("count-ili-exceeds-total", line["006"], "ili_visits"),
        ("count-negative", line["007"], "ili_visits"),
        ("count-zero-total", line["008"], "total_visits"),
        ("count-ili-exceeds-total", line["008"], "ili_visits"),  # also true: ILI > 0 = total
        ("count-negative", line["009"], "reporting_sites"),
    }


# --------------------------------------------------------------------------- F22


def test_h22_nfd_table_matches_nfc_boundaries(tmp_path: Path) -> None:
    ids = ["É01", *IDS[1:]]
    names = ["Thévrisande-sur-Mérelle", *[f"District {k}" for k in range(2, 14)]]
    nfd = [unicodedata.normalize("NFD", x) for x in (ids[0], names[0])]
    assert nfd[0] != ids[0] and unicodedata.normalize("NFC", nfd[0]) == ids[0]  # UAX #15

    def decompose(rows: list[list[str]]) -> list[list[str]]:
        return [[*nfd, *r[2:]] if r[0] == ids[0] else r for r in rows]

    week = make_week(tmp_path / "week", ids=ids, names=names, pdf=False, edit_table=decompose)
    assert unicodedata.normalize("NFD", ids[0]).encode() in week.table.read_bytes()
    code, doc, _ = check(week)
    assert code == 0
    assert not findings(doc, "district-name-differs") and not findings(doc, "id-not-in-boundaries")
    table, _ = read_count_table(week.table, week.config().input, WeekSystem.MMWR)
    assert ids[0] in set(table.frame["district_id"])


# --------------------------------------------------------------------------- property test

CELL_VALUES = [
    "",
    " ",
    "0",
    "12",
    "-1",
    "1.5",
    "12.0",
    "n/a",
    "<5",
    "1,234",
    "5%",
    "1e3",
    "９",
    "\u00a0",
    '"',
    "'",
    "=1+1",
    "2026-W99",
    "2026-W7",
    "2026W47",
    "NaN",
    "inf",
    "99999999999999999999999",
    "001",
    "Ωmega",
    "a;b",
    "x\ny",
]
CELL_RULES = {
    "id-missing",
    "id-numeric",
    "cell-missing",
    "cell-not-number",
    "count-not-integer",
    "week-invalid",
    "week-date-weekday",
    "count-negative",
    "count-ili-exceeds-total",
    "count-zero-total",
    "row-duplicate",
    "id-not-in-boundaries",
    "week-future",
    "week-mixed",
    "column-duplicated",
    "column-missing",
}


@st.composite
def weekly_tables(draw: st.DrawFn) -> bytes:
    """A clean season-to-date table, then a few random defects (cells, rows, bytes)."""
    rows = [list(r) for r in table_rows(IDS, [f"N{k}" for k in range(13)], WEEKS[-3:], 4)]
    header = list(HEADER)
    for _ in range(draw(st.integers(0, 3))):
        kind = draw(
            st.sampled_from(
                ["cell"] * 6
                + ["drop-cell", "dup-row", "drop-row", "header", "blank-line", "extra-cell"]
            )
        )
        i = draw(st.integers(0, len(rows) - 1))
        j = draw(st.integers(0, len(header) - 1))
        if kind == "cell":
            value = draw(st.one_of(st.sampled_from(CELL_VALUES), st.text(max_size=6)))
            rows[i][min(j, len(rows[i]) - 1)] = value
        elif kind == "drop-cell" and len(rows[i]) > 1:
            rows[i].pop(j)
        elif kind == "dup-row":
            rows.insert(i, list(rows[i]))
        elif kind == "drop-row" and len(rows) > 1:
            rows.pop(i)
        elif kind == "header":
            header[j] = draw(st.sampled_from(["", "district_id", "ili_visits", "epi week", "ILI"]))
        elif kind == "blank-line":
            rows.insert(i, [""] * len(header))
        elif kind == "extra-cell":
            rows[i].append("extra")
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator=draw(st.sampled_from(["\n", "\r\n"])))
    writer.writerow(header)
    writer.writerows(rows)
    data = buffer.getvalue().encode(
        draw(st.sampled_from(["utf-8", "utf-8", "latin-1"])), errors="replace"
    )
    tail = draw(st.sampled_from(["none"] * 5 + ["bom", "truncate", "bytes"]))
    if tail == "bom":
        data = b"\xef\xbb\xbf" + data
    elif tail == "truncate":
        data = data[: draw(st.integers(0, len(data)))]
    elif tail == "bytes":
        data += draw(st.binary(max_size=12))
    return data


def _table_bytes(edit: Any = None) -> bytes:
    rows = [list(r) for r in table_rows(IDS, [f"N{k}" for k in range(13)], WEEKS[-3:], 4)]
    if edit is not None:
        edit(rows)
    buffer = io.StringIO()
    csv.writer(buffer, lineterminator="\n").writerows([list(HEADER), *rows])
    return buffer.getvalue().encode("utf-8")


CLEAN = _table_bytes()


def _bad_cells(rows: list[list[str]]) -> None:
    rows[3][4], rows[5][5], rows[7][2], rows[9][0] = "n/a", "1,234", "2026-W99", ""


@pytest.fixture(scope="module")
def scratch(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return tmp_path_factory.mktemp("property")


@settings(
    max_examples=60,
    derandomize=True,
    deadline=None,
    database=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
@given(data=weekly_tables())
@example(data=CLEAN)
@example(data=_table_bytes(_bad_cells))
@example(data=CLEAN.replace(b"\n", b"\r", 3))
def test_property_sitrep_check_never_crashes_and_locates_every_cell_error(
    week: Any, scratch: Path, data: bytes
) -> None:
    path = scratch / "table.csv"
    path.write_bytes(data)
    code, out, err = run_cli(
        [
            "check",
            "--config",
            str(week.config_path),
            "--table",
            str(path),
            "--json",
            "--today",
            "2026-11-30",
        ]
    )
    assert code in (0, 1, 2), (code, err)
    assert "Traceback" not in out + err and "internal error" not in err, err
    doc = json.loads(out)
    assert doc["blocked"] == (code == 1)
    if data == CLEAN:  # positive control: the undamaged table passes
        assert code == 0, doc
    event(f"exit {code}")
    for rule in sorted({f["rule"] for f in doc["findings"] if f["severity"] == "error"}):
        event(rule)
    for f in doc["findings"]:
        if f["severity"] == "error" and f["rule"] in CELL_RULES:
            assert f["line"] is not None and f["column"], f
        if f["severity"] == "error" and f["rule"].startswith("row-"):
            assert f["line"] is not None, f
