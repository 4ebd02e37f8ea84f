"""``sitrep init``: a first configuration from files nobody here exported.

The inputs are the invented demo week rewritten as another system might export it: an XLSX
workbook with a "Read me" sheet first and unusual headers (the week as year + week number), and a
Shapefile whose id and name fields were cut to 10 characters by the dBASE format (the field-name
limit of dBASE III, which GDAL's Shapefile driver enforces with a warning). The check is the
outcome a user needs: ``sitrep build`` succeeds on the written configuration and reports the
same districts and week as the demo.
"""

from __future__ import annotations

import tomllib
import warnings
from pathlib import Path

import geopandas as gpd
import pandas as pd
import pytest
from conftest import DEMO, TODAY

from sitrep import cli
from sitrep.errors import InputError
from sitrep.starter import propose


def _exports(folder: Path) -> tuple[Path, Path]:
    t = pd.read_csv(DEMO / "extract_2026-W47.csv", dtype={"district_id": str})
    table = pd.DataFrame(
        {
            "Health District Code": t["district_id"],
            "District": t["district_name"],
            "Epi Yr": t["epi_week"].str[:4].astype(int),
            "Wk": t["epi_week"].str[6:].astype(int),
            "ILI pts": t["ili_visits"],
            "Total Pts Seen": t["total_visits"],
            "No. of Sentinel Sites": t["reporting_sites"],
        }
    )
    xlsx = folder / "ili export.xlsx"
    with pd.ExcelWriter(xlsx) as book:
        pd.DataFrame({"About": ["Weekly ILI export", "one row per district and week"]}).to_excel(
            book, sheet_name="Read me", index=False
        )
        table.to_excel(book, sheet_name="Data", index=False)
    b = gpd.read_file(DEMO / "districts.gpkg", layer="districts").rename(
        columns={"district_id": "DISTRICT_CODE", "district_name": "DISTRICT_NAME"}
    )
    shp = folder / "districts.shp"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # GDAL warns that it truncates the field names
        b.to_file(shp, engine="pyogrio")
    assert set(gpd.read_file(shp).columns) == {"DISTRICT_C", "DISTRICT_N", "geometry"}
    return xlsx, shp


@pytest.mark.slow
def test_init_on_unusual_exports_gives_a_config_that_builds(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    xlsx, shp = _exports(tmp_path)
    cfg = tmp_path / "sitrep.toml"
    code = cli.main(
        [
            "init",
            "--table",
            str(xlsx),
            "--boundaries",
            str(shp),
            "--out",
            str(cfg),
            "--today",
            TODAY.isoformat(),
        ]
    )
    out = capsys.readouterr().out
    assert code == cli.EXIT_OK, out
    assert "no findings" in out or "0 error(s)" in out
    doc = tomllib.loads(cfg.read_text(encoding="utf-8"))
    assert doc["input"]["boundaries_id_column"] == "DISTRICT_C"
    assert doc["input"]["boundaries_name_column"] == "DISTRICT_N"
    assert doc["input"]["sheet"] == "Data"
    assert doc["input"]["columns"] == {
        "district_id": "Health District Code",
        "district_name": "District",
        "week": "",
        "year": "Epi Yr",
        "week_number": "Wk",
        "ili_visits": "ILI pts",
        "total_visits": "Total Pts Seen",
        "reporting_sites": "No. of Sentinel Sites",
    }
    text = cfg.read_text(encoding="utf-8")
    assert text.count("# GUESS") >= 10
    for line in text.splitlines():
        if line.startswith(("district_id =", "boundaries_id_column =", "ili_visits =")):
            assert "# GUESS" in line
    # a second init does not overwrite the file
    assert (
        cli.main(["init", "--table", str(xlsx), "--boundaries", str(shp), "--out", str(cfg)])
        == cli.EXIT_USAGE
    )
    capsys.readouterr()
    code = cli.main(["build", "--config", str(cfg), "--today", TODAY.isoformat(), "--no-archive"])
    out = capsys.readouterr().out
    assert code == cli.EXIT_OK, out
    assert "week 2026-W47: done" in out
    results = pd.read_csv(tmp_path / "sitrep-out" / "results.csv", dtype={"district_id": str})
    demo = pd.read_csv(DEMO / "extract_2026-W47.csv", dtype={"district_id": str})
    assert sorted(results["district_id"]) == sorted(demo["district_id"].unique())


def test_init_reads_dates_and_a_percent_column(tmp_path: Path) -> None:
    # week-ending Saturdays (MMWR weeks end on Saturday) and a rate in percent, in a ';' CSV
    t = pd.read_csv(DEMO / "extract_2026-W47.csv", dtype={"district_id": str})
    t = t[t["epi_week"] == "2026-W47"]
    table = pd.DataFrame(
        {
            "code": t["district_id"],
            "wk_ending": "2026-11-28",
            "ili": t["ili_visits"],
            "all_visits": t["total_visits"],
            "ili_pct": (t["ili_visits"] / t["total_visits"] * 100).round(3),
        }
    )
    path = tmp_path / "week.csv"
    table.to_csv(path, sep=";", index=False)
    prop = propose(path, DEMO / "districts.gpkg")
    assert prop.delimiter == ";"
    assert prop.columns["district_id"][0] == "code"
    assert prop.boundaries_id[0] == "district_id" and prop.layer == "districts"
    assert prop.columns["week_end"][0] == "wk_ending"
    assert prop.week_system[0] == "mmwr"
    assert (
        prop.columns["ili_visits"][0] == "ili" and prop.columns["total_visits"][0] == "all_visits"
    )
    assert (
        prop.columns["rate"][0] == "ili_pct" and prop.rate_scale and prop.rate_scale[0] == "percent"
    )


def test_init_says_when_no_id_matches(tmp_path: Path) -> None:
    path = tmp_path / "t.csv"
    path.write_text("area,week,ili,total\nX1,2026-W47,1,10\n", encoding="utf-8")
    with pytest.raises(InputError, match="district ids must be written the same way"):
        propose(path, DEMO / "districts.gpkg")
    code = cli.main(
        [
            "init",
            "--table",
            str(path),
            "--boundaries",
            str(DEMO / "districts.gpkg"),
            "--out",
            str(tmp_path / "c.toml"),
        ]
    )
    assert code == cli.EXIT_BLOCKED and not (tmp_path / "c.toml").exists()
