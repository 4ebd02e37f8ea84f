"""Tests of results.csv / results.json (sitrep.render.results) and their data dictionary.

The input is an invented 3 x 4 grid of districts plus an island (tests/hardening_helpers.py,
MMWR week 2026-W47), with accented names, one district whose reporting-sites cell is
blank and one with fewer visits than ``analysis.min_visits`` (suppressed). References:
the byte order mark EF BB BF as the UTF-8 signature (Unicode Standard, §23.8 "Specials",
and RFC 3629 §6); RFC 4180 for the CSV; the dates of MMWR week 2026-W47 from the
reference library epiweeks (``Week(2026, 47).startdate()`` / ``enddate()``).
"""

from __future__ import annotations

import csv
import io
import json
import types
from pathlib import Path

import epiweeks
import pytest
from hardening_helpers import WEEKS, build, make_week, read_outputs

from sitrep.render.dictionary import (
    DISTRICTS,
    FIELDS,
    SUMMARY,
    TOP,
    dictionary_csv,
    dictionary_markdown,
    names_in,
)
from sitrep.render.results import COUNT_COLUMNS, RESULT_COLUMNS

pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parent.parent
BOM = b"\xef\xbb\xbf"  # Unicode §23.8 / RFC 3629 §6
NAMES = [
    "Árvore Alta",
    "Brännoch",
    "Côte-Lumière",
    "Dunmere",
    "Eastfold",
    "Fennick",
    "Garrow",
    "Holloway",
    "Ivel",
    "Juniper",
    "Kestrel",
    "Larkmoor",
    "Ñorrin Isle",
]
JURISDICTION = "Région des Marches"


def _edit(rows: list[list[str]]) -> list[list[str]]:
    for row in rows:
        if row[2] == WEEKS[-1] and row[0] == "D03":
            row[3] = ""  # no reporting-sites figure for this district this week
        if row[2] == WEEKS[-1] and row[0] == "D05":
            row[4], row[5] = "1", "30"  # below min_visits (50): suppressed
    return rows


@pytest.fixture(scope="module")
def built(tmp_path_factory: pytest.TempPathFactory) -> types.SimpleNamespace:
    week = make_week(
        tmp_path_factory.mktemp("results"),
        names=NAMES,
        edit_table=_edit,
        pdf=False,
        config={"report": {"jurisdiction": JURISDICTION}},
    )
    result = build(week)
    return types.SimpleNamespace(week=week, result=result, out=read_outputs(result))


def _rows(data: bytes) -> list[dict[str, str]]:
    return list(csv.DictReader(io.StringIO(data.decode("utf-8-sig"), newline="")))


# --------------------------------------------------------------------------- results.csv


def test_csv_starts_with_a_bom_and_keeps_accents_json_is_plain_utf8(
    built: types.SimpleNamespace,
) -> None:
    data = built.out["results.csv"]
    assert data.startswith(BOM) and not data[3:].startswith(BOM)
    rows = _rows(data)
    assert list(rows[0]) == list(RESULT_COLUMNS)  # the header is clean, no "\ufeff" left in it
    assert [r["district_name"] for r in rows] == NAMES
    assert {r["jurisdiction"] for r in rows} == {JURISDICTION}
    raw = built.out["results.json"]
    assert not raw.startswith(BOM)
    doc = json.loads(raw.decode("utf-8"))
    assert [d["district_name"] for d in doc["districts"]] == NAMES
    assert doc["jurisdiction_name"] == JURISDICTION


def test_counts_are_whole_numbers_and_blanks_stay_blank(built: types.SimpleNamespace) -> None:
    rows = {r["district_id"]: r for r in _rows(built.out["results.csv"])}
    assert rows["D03"]["reporting_sites"] == ""  # blank in the table, blank here
    assert rows["D05"]["suppressed"] == "true" and rows["D05"]["ili_visits"] == ""
    assert rows["D05"]["total_visits"] == ""  # withheld too (docs/methods.md §6.2)
    for ident, row in rows.items():
        for column in COUNT_COLUMNS:
            cell = row[column]
            assert cell == "" or cell.isdigit(), (ident, column, cell)  # "12", never "12.0"
    # the counts are the ones written into the table (tests/hardening_helpers.counts)
    assert rows["D01"]["reporting_sites"] == "3" and rows["D02"]["reporting_sites"] == "4"
    records = {d["district_id"]: d for d in json.loads(built.out["results.json"])["districts"]}
    assert isinstance(records["D01"]["reporting_sites"], int)
    shown = next(d for d in records.values() if not d["suppressed"])  # D01 is D05's complement
    assert isinstance(shown["total_visits"], int) and isinstance(shown["ili_visits"], int)
    assert records["D03"]["reporting_sites"] is None


def test_rows_carry_the_week_dates_and_jurisdiction_so_weeks_stack(
    built: types.SimpleNamespace,
) -> None:
    reference = epiweeks.Week(2026, 47)  # MMWR, the library's default system
    rows = _rows(built.out["results.csv"])
    assert {(r["week"], r["week_start"], r["week_end"]) for r in rows} == {
        ("2026-W47", reference.startdate().isoformat(), reference.enddate().isoformat())
    }
    doc = json.loads(built.out["results.json"])
    assert (doc["week_start"], doc["week_end"]) == ("2026-11-22", "2026-11-28")
    # two weekly files stacked keep one row per jurisdiction, week and district
    other = [dict(r, week="2026-W48", week_start="2026-11-29", week_end="2026-12-05") for r in rows]
    keys = [(r["jurisdiction"], r["week"], r["district_id"]) for r in rows + other]
    assert len(set(keys)) == len(keys) == 2 * len(NAMES)


# --------------------------------------------------------------------------- data dictionary


def test_every_results_column_and_key_has_a_dictionary_entry(built: types.SimpleNamespace) -> None:
    header = next(csv.reader(io.StringIO(built.out["results.csv"].decode("utf-8-sig"))))
    doc = json.loads(built.out["results.json"])
    found = {
        DISTRICTS: set(header) | {k for d in doc["districts"] for k in d},
        TOP: set(doc),
        SUMMARY: set(doc["jurisdiction"]),
    }
    for where, names in found.items():
        documented = set(names_in(where))
        assert names - documented == set(), f"{where}: columns without a dictionary entry"
        assert documented - names == set(), f"{where}: dictionary entries for no column"
    assert names_in(DISTRICTS) == RESULT_COLUMNS  # same order as the file
    for field in FIELDS:
        assert field.meaning and field.unit and field.method, field.name
    assert len({(f.where, f.name) for f in FIELDS}) == len(FIELDS)


def test_dictionary_is_in_the_docs_and_in_the_bundle(built: types.SimpleNamespace) -> None:
    import importlib.util

    spec = importlib.util.spec_from_file_location(
        "make_dict", ROOT / "tools" / "make_results_dictionary.py"
    )
    assert spec is not None and spec.loader is not None
    tool = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(tool)
    page = (ROOT / "docs" / "results-dictionary.md").read_text(encoding="utf-8")
    assert page == tool.page(), "run python tools/make_results_dictionary.py"
    assert dictionary_markdown() in page
    bundle = built.result.bundle.path
    archived = (bundle / "results-dictionary.csv").read_bytes()
    assert archived == built.out["results-dictionary.csv"] == dictionary_csv()
    manifest = json.loads((bundle / "manifest.json").read_text(encoding="utf-8"))
    assert "results-dictionary.csv" in manifest["files"]
    rows = _rows(archived)
    assert list(rows[0]) == ["name", "appears_in", "meaning", "unit", "method"]
    assert [r["name"] for r in rows if r["appears_in"] == DISTRICTS] == list(RESULT_COLUMNS)
    assert next(r for r in rows if r["name"] == "change_pp")["unit"] == "percentage points"
