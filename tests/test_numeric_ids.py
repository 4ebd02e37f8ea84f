"""Spreadsheet exports with numeric district codes, and findings grouped per rule and column.

Each case builds its own invented jurisdiction (``hardening_helpers.make_week``) and
runs the real pipeline or the real CLI: district codes typed as numbers in an XLSX
export and in a Shapefile's dBASE table, codes that lost a leading zero, codes that
are not whole numbers, and one systematic fault repeated on 1,000 rows.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
from hardening_helpers import HEADER, TODAY, build, grid_frame, make_week, run_cli

XLSX_HEADER = ("Area Code", "Area", "Week", "Sites", "ILI", "Visits")


def write_xlsx(path: Path, rows: list[list[str]], id_cell: Any = int) -> Path:
    """Rows (in HEADER order) as an XLSX sheet whose id cells are ``id_cell(text)``, counts numbers."""
    import openpyxl

    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "Week extract"
    sheet.append(list(XLSX_HEADER))
    for r in rows:
        sheet.append([id_cell(r[0]), r[1], r[2], int(r[3]), int(r[4]), int(r[5])])
    book.save(path)
    return path


def body(path: Path) -> list[list[str]]:
    import csv

    with path.open(encoding="utf-8", newline="") as handle:
        return [row for row in csv.reader(handle)][1:]


def xlsx_week(
    tmp_path: Path,
    ids: list[str],
    *,
    boundary_ids: list[str] | None = None,
    shapefile: bool = False,
    id_cell: Any = int,
) -> Any:
    """The invented week with both extracts as XLSX; boundaries as GeoPackage or Shapefile."""
    week = make_week(tmp_path / "week", ids=ids, pdf=False)
    table = write_xlsx(week.folder / "extract_2026-W47.xlsx", body(week.table), id_cell)
    prior = write_xlsx(week.folder / "extract_2026-W46.xlsx", body(week.prior), id_cell)
    frame = grid_frame(boundary_ids or ids, week.names, 4, island=True)
    input_keys: dict[str, Any] = {"table": table.name, "prior_table": prior.name}
    if shapefile:
        # dBASE stores a numeric field as integers: the codes come back as numbers
        frame = frame.rename(columns={"district_id": "AREA_CODE", "district_name": "AREA_NAME"})
        frame["AREA_CODE"] = [int(i) for i in frame["AREA_CODE"]]
        shp = week.folder / "districts.shp"
        frame.to_file(shp)
        input_keys |= {
            "boundaries": shp.name,
            "boundaries_layer": None,
            "boundaries_id_column": "AREA_CODE",
            "boundaries_name_column": "AREA_NAME",
        }
    else:
        frame.to_file(week.boundaries, layer="districts", driver="GPKG")
    columns = dict(
        zip(
            (
                "district_id",
                "district_name",
                "week",
                "reporting_sites",
                "ili_visits",
                "total_visits",
            ),
            XLSX_HEADER,
            strict=True,
        )
    )
    week.raw["input"].pop("boundaries_layer", None) if shapefile else None
    week.write_config(
        input={**{k: v for k, v in input_keys.items() if v is not None}, "columns": columns}
    )
    return week


CODES = [str(4101 + k) for k in range(13)]


def test_xlsx_integer_codes_match_shapefile_integer_codes(tmp_path: Path) -> None:
    import geopandas as gpd

    week = xlsx_week(tmp_path, CODES, shapefile=True)
    shp = gpd.read_file(week.folder / "districts.shp")
    assert shp["AREA_CODE"].dtype.kind == "i"  # the Shapefile really stores integers
    result = build(week, archive=False)
    notes = [f for f in result.validation.findings if f.rule == "id-numeric-as-text"]
    # one note per file: the table's column and the boundary field
    assert [(f.file, f.column) for f in notes] == [
        ("districts.shp", "AREA_CODE"),
        ("extract_2026-W47.xlsx", "Area Code"),
    ]
    assert f"all {len(CODES)} matched the boundaries" in notes[1].message
    assert "stored as numbers" in notes[1].message and "all 13 match the table" in notes[0].message
    assert result.validation.errors == ()
    table = result.analysis.table
    assert set(table["district_id"]) == set(CODES) and (table["total_visits"] > 0).all()


def test_codes_that_lost_a_leading_zero_need_the_padding_setting(tmp_path: Path) -> None:
    padded = [c.zfill(5) for c in CODES]  # the boundaries keep '04101'; the sheet has 4101
    week = xlsx_week(tmp_path, padded, boundary_ids=padded, id_cell=lambda text: int(text))
    code, out, err = run_cli(["check", "--config", str(week.config_path), "--today", str(TODAY)])
    assert code == 1
    lines = [line for line in out.splitlines() if "id-leading-zeros" in line]
    # one grouped line names how many ids and the setting; the per-id findings are in --json
    assert len(lines) == 1, out
    assert "13 districts, lines 2-14" in lines[0] and "input.id_zero_pad = 5" in lines[0]
    code, out, _ = run_cli(
        ["check", "--config", str(week.config_path), "--today", str(TODAY), "--json"]
    )
    doc = json.loads(out)
    assert (
        sorted(f["district_id"] for f in doc["findings"] if f["rule"] == "id-leading-zeros")
        == CODES
    )
    week.write_config(input={"id_zero_pad": 5})
    result = build(week, archive=False)
    assert result.validation.errors == ()
    padded_notes = [f for f in result.validation.findings if f.rule == "id-zero-padded"]
    assert {f.file for f in padded_notes} == {"extract_2026-W47.xlsx", "extract_2026-W46.xlsx"}
    assert all(f.severity.value == "info" for f in padded_notes)
    table = result.analysis.table
    assert set(table["district_id"]) == set(padded) and (table["total_visits"] > 0).all()


def test_codes_that_are_not_whole_numbers_are_one_grouped_error(tmp_path: Path) -> None:
    week = xlsx_week(tmp_path, CODES, id_cell=lambda text: int(text) + 0.5)
    code, out, _ = run_cli(["check", "--config", str(week.config_path), "--today", str(TODAY)])
    assert code == 1
    lines = [line for line in out.splitlines() if "id-numeric" in line]
    # one line per file: this week's extract and last week's
    assert [line.split()[2].split(":")[0] for line in lines] == [
        "extract_2026-W47.xlsx",
        "extract_2026-W46.xlsx",
    ]
    rows = len(CODES) * 8
    assert f"{rows} cells, lines 2-{rows + 1}" in lines[0]
    assert "4101.5" in lines[0] and "first 5 shown" in lines[0]


@pytest.mark.parametrize("pdf", [False])
def test_a_fault_on_1000_rows_prints_a_screenful_and_validation_json_keeps_all(
    tmp_path: Path, pdf: bool
) -> None:
    """125 districts x 8 weeks, a supplied rate column exported per 1,000 but read as percent."""

    def with_rate(rows: list[list[str]]) -> list[list[str]]:
        return [r + [f"{1000 * int(r[4]) / int(r[5]):.3f}"] for r in rows]

    week = make_week(
        tmp_path / "week",
        cols=5,
        rows=25,
        island=False,
        pdf=pdf,
        header=(*HEADER, "ili_rate"),
        edit_table=with_rate,
        edit_prior=with_rate,
        config={"input": {"columns": {"rate": "ili_rate"}}},
    )
    code, out, _ = run_cli(["check", "--config", str(week.config_path), "--today", str(TODAY)])
    assert code == 0
    assert len(out.splitlines()) <= 10, out
    (line,) = [x for x in out.splitlines() if "rate-mismatch" in x]
    assert "1000 cells, lines 2-1001" in line
    result = build(week, archive=False)
    doc = json.loads((week.out / "validation.json").read_text(encoding="utf-8"))
    assert sum(1 for f in doc["findings"] if f["rule"] == "rate-mismatch") == 1000
    # the report's data-quality table follows the same grouping: one row for the rule
    assert [q.rule for q in result.context.quality].count("rate-mismatch") == 1
    assert any("1000 cells" in q.message for q in result.context.quality)
