"""Stage 1 of validation: reading and typing count tables (sitrep.ingest.read).

Each defect test starts from the clean fixture table and changes one thing.
Line numbers follow the project contract (1-based, header = line 1).
"""

from __future__ import annotations

import datetime as dt
import hashlib
import os
import unicodedata
from pathlib import Path

import pandas as pd
import pytest
from hypothesis import HealthCheck, given
from hypothesis import settings as hsettings
from hypothesis import strategies as st
from ingest_fixtures import HEADER, IDS, WEEKS, changed, clean_rows, line_of, settings, write_csv

from sitrep.errors import InputError
from sitrep.ingest import raw_table as read_mod
from sitrep.ingest.findings import FindingCollector
from sitrep.ingest.read import RULES, read_count_table
from sitrep.model import Severity
from sitrep.weeks import EpiWeek, WeekSystem

MMWR, ISO = WeekSystem.MMWR, WeekSystem.ISO


def read(path: Path, system: WeekSystem = MMWR, **kw):
    return read_count_table(path, settings(**kw), system)


def only(report, rule: str):
    hits = [f for f in report.findings if f.rule == rule]
    assert hits, f"no {rule!r} finding in {[f.rule for f in report.findings]}"
    return hits


def comparable(table) -> pd.DataFrame:
    frame = table.frame.copy()
    frame["week"] = frame["week"].astype(str)
    return frame


@pytest.fixture
def clean(tmp_path: Path) -> Path:
    return write_csv(tmp_path / "clean.csv", clean_rows())


# ----------------------------------------------------------------------------- clean table


def test_clean_csv_types_every_column(clean: Path) -> None:
    table, report = read(clean)
    assert report.findings == ()
    f = table.frame
    assert list(f.columns) == [
        "district_id",
        "district_name",
        "week",
        "reporting_sites",
        "ili_visits",
        "total_visits",
        "line",
    ]
    assert len(f) == 24
    # ids stay text with leading zeros; rows sorted by week then id (model.CountTable contract)
    assert f["district_id"].tolist()[:6] == IDS
    assert f["week"].iloc[0] == EpiWeek(2026, 44, MMWR)
    assert table.latest_week == EpiWeek(2026, 47, MMWR)
    assert str(f["ili_visits"].dtype) == "int64" and str(f["total_visits"].dtype) == "int64"
    assert str(f["reporting_sites"].dtype) == "float64"
    # the first data row is line 2 (header = 1)
    assert f["line"].tolist() == list(range(2, 26))
    assert table.source.sha256 == hashlib.sha256(clean.read_bytes()).hexdigest()
    assert table.source.size_bytes == clean.stat().st_size
    assert table.columns.week == "epi_week" and table.columns.district_id == "district_id"
    assert not f.attrs  # the file's column names travel as a typed field, not in attrs


def test_rule_ids_are_stable_kebab_case() -> None:
    ids = [r for r, _ in RULES]
    assert len(ids) == len(set(ids))
    assert all(r == r.lower() and " " not in r and "_" not in r for r in ids)


def test_unsorted_file_is_sorted_by_week_then_id(tmp_path: Path) -> None:
    rows = clean_rows()[::-1]
    table, _ = read(write_csv(tmp_path / "rev.csv", rows))
    assert table.frame["district_id"].tolist()[:6] == IDS
    assert table.frame["line"].iloc[0] == len(rows) + 1  # (001, W44) was written last


# ----------------------------------------------------------------------------- encodings (F15)


def test_bom_gives_identical_results(tmp_path: Path, clean: Path) -> None:
    a, _ = read(clean)
    b, report = read(write_csv(tmp_path / "bom.csv", clean_rows(), bom=True))
    assert report.findings == ()
    pd.testing.assert_frame_equal(comparable(a), comparable(b))


def test_crlf_and_trailing_empty_lines_give_identical_results(tmp_path: Path, clean: Path) -> None:
    a, _ = read(clean)
    path = write_csv(tmp_path / "crlf.csv", clean_rows(), newline="\r\n", tail=",,,,,\r\n\r\n")
    b, report = read(path)
    assert report.findings == ()
    pd.testing.assert_frame_equal(comparable(a), comparable(b))


def test_latin1_read_with_declared_encoding(tmp_path: Path) -> None:
    path = write_csv(tmp_path / "l1.csv", clean_rows(), encoding="latin-1")
    table, report = read(path, encoding="latin-1")
    assert report.findings == ()
    assert "Thévrisande" in set(table.frame["district_name"])


def test_latin1_without_declared_encoding_names_first_bad_line(tmp_path: Path) -> None:
    rows = clean_rows()
    path = write_csv(tmp_path / "l1.csv", rows, encoding="latin-1")
    table, report = read(path)
    assert table is None
    (f,) = only(report, "file-encoding")
    # the first row holding 'é' is district 002 in the first week
    assert (f.severity, f.line) == (Severity.ERROR, line_of(rows, "002", WEEKS[0]))
    assert "latin-1" in f.message


def test_semicolon_and_decimal_comma_declared(tmp_path: Path) -> None:
    header = HEADER + ["ili_rate"]
    rows = [r + [f"{100 * int(r[4]) / int(r[5]):.2f}".replace(".", ",")] for r in clean_rows()]
    path = write_csv(tmp_path / "eu.csv", rows, header, delimiter=";")
    table, report = read(path, delimiter=";", decimal=",", columns={"rate": "ili_rate"})
    assert report.findings == ()
    first = table.frame.iloc[0]
    # 10 ILI of 600 visits = 1.67 % (rounded in the file), read as a number, not as 167
    assert first["rate_percent"] == pytest.approx(1.67)
    assert first["ili_visits"] == 10


def test_decimal_comma_undeclared_is_rejected_with_hint(tmp_path: Path) -> None:
    header = HEADER + ["ili_rate"]
    rows = [r + ["1,67"] for r in clean_rows()]
    path = write_csv(tmp_path / "eu.csv", rows, header, delimiter=";")
    table, report = read(path, delimiter=";", columns={"rate": "ili_rate"})
    assert table is None
    hits = only(report, "cell-not-number")
    assert len(hits) == 24 and hits[0].column == "ili_rate" and hits[0].line == 2
    assert "input.decimal" in hits[0].message


def test_rate_per_1000_is_converted_to_percent(tmp_path: Path) -> None:
    header = HEADER + ["rate"]
    rows = [r + [f"{1000 * int(r[4]) / int(r[5]):.3f}"] for r in clean_rows()]
    path = write_csv(tmp_path / "r.csv", rows, header)
    table, _ = read(path, columns={"rate": "rate", "rate_scale": "per_1000"})
    # 10 / 600 = 16.667 per 1,000 = 1.6667 %
    assert table.frame["rate_percent"].iloc[0] == pytest.approx(1.6667, abs=1e-4)


# ----------------------------------------------------------------------------- ids (F2, F22)


def test_ids_are_text_stripped_and_nfc(tmp_path: Path) -> None:
    rows = clean_rows()
    rows = changed(rows, "001", WEEKS[0], "district_id", "1")
    rows = changed(rows, "003", WEEKS[0], "district_id", " 003")
    rows = changed(rows, "003", WEEKS[1], "district_id", "003 ")
    nfd = unicodedata.normalize("NFD", "Thévrisande")
    assert nfd != "Thévrisande"
    rows = changed(rows, "002", WEEKS[0], "district_name", nfd)
    table, report = read(write_csv(tmp_path / "ids.csv", rows))
    # the stripped ids are reported as one note listing their lines
    (note,) = report.findings
    stripped_lines = [line_of(rows, " 003", WEEKS[0]), line_of(rows, "003 ", WEEKS[1])]
    assert (note.rule, note.severity, note.line, note.column, note.value) == (
        "id-whitespace-stripped",
        Severity.INFO,
        stripped_lines[0],
        "district_id",
        "2",
    )
    assert note.message.endswith(f"on lines {stripped_lines[0]}, {stripped_lines[1]}")
    w0 = table.frame[table.frame["week"] == EpiWeek(2026, 44, MMWR)]
    assert "1" in set(w0["district_id"])  # never padded to '001' silently
    assert set(table.frame["district_id"]) == set(IDS) | {"1"}
    assert set(table.frame.loc[table.frame["district_id"] == "002", "district_name"]) == {
        "Thévrisande"
    }


def test_id_whitespace_kept_when_rule_is_off(tmp_path: Path) -> None:
    rows = changed(clean_rows(), "003", WEEKS[0], "district_id", " 003")
    table, _ = read(write_csv(tmp_path / "ids.csv", rows), strip_id_whitespace=False)
    assert " 003" in set(table.frame["district_id"])


def test_empty_id_is_an_error(tmp_path: Path) -> None:
    rows = changed(clean_rows(), "004", WEEKS[2], "district_id", "")
    table, report = read(write_csv(tmp_path / "ids.csv", rows))
    (f,) = only(report, "id-missing")
    assert (f.severity, f.line, f.column) == (
        Severity.ERROR,
        line_of(clean_rows(), "004", WEEKS[2]),
        "district_id",
    )
    assert table is None


def test_xlsx_text_ids_read_like_csv(tmp_path: Path, clean: Path) -> None:
    import openpyxl

    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "counts"
    sheet.append(HEADER)
    for r in clean_rows():
        sheet.append([r[0], r[1], r[2], int(r[3]), int(r[4]), int(r[5])])
    path = tmp_path / "t.xlsx"
    book.save(path)
    a, _ = read(clean)
    b, report = read(path, sheet="counts")
    assert [f for f in report.findings if f.severity is not Severity.INFO] == []
    pd.testing.assert_frame_equal(comparable(a), comparable(b))


def test_xlsx_whole_number_ids_are_read_as_digits_and_their_lines_kept(tmp_path: Path) -> None:
    import openpyxl

    book = openpyxl.Workbook()
    sheet = book.active
    sheet.append(HEADER)
    rows = clean_rows()
    for k, r in enumerate(rows):
        ident: object = int(r[0]) if k in (0, 7) else r[0]  # two ids typed as numbers
        sheet.append([ident, r[1], r[2], int(r[3]), int(r[4]), int(r[5])])
    path = tmp_path / "t.xlsx"
    book.save(path)
    table, report = read(path)
    assert report.errors == ()
    # the digits are kept as they are (never padded silently); the boundary check judges them
    assert {"1", "2"} <= set(table.frame["district_id"])
    assert table.numeric_id_lines == (2, 9)


def test_xlsx_ids_that_are_not_whole_numbers_are_errors_per_cell(tmp_path: Path) -> None:
    import openpyxl

    book = openpyxl.Workbook()
    sheet = book.active
    sheet.append(HEADER)
    rows = clean_rows()
    odd = {0: 4101.5, 7: 1.0e20}  # a fraction, and a float too large to hold every digit
    for k, r in enumerate(rows):
        sheet.append([odd.get(k, r[0]), r[1], r[2], int(r[3]), int(r[4]), int(r[5])])
    path = tmp_path / "t.xlsx"
    book.save(path)
    table, report = read(path)
    hits = only(report, "id-numeric")
    assert [(f.line, f.column, f.value, f.severity) for f in hits] == [
        (2, "district_id", "4101.5", Severity.ERROR),
        (9, "district_id", "1e+20", Severity.ERROR),
    ]
    assert "whole number" in hits[0].message and "Text" in hits[0].message
    assert table is None


def test_zero_pad_setting_pads_all_digit_ids_with_one_note(tmp_path: Path) -> None:
    rows = changed(clean_rows(), "003", WEEKS[0], "district_id", "3")
    table, report = read(write_csv(tmp_path / "ids.csv", rows), id_zero_pad=3)
    (note,) = only(report, "id-zero-padded")
    assert (note.severity, note.line, note.value) == (
        Severity.INFO,
        line_of(rows, "3", WEEKS[0]),
        "1",
    )
    assert "3 -> 003" in note.message and "input.id_zero_pad = 3" in note.message
    assert set(table.frame["district_id"]) == set(IDS)


def test_xlsx_missing_sheet(tmp_path: Path) -> None:
    import openpyxl

    book = openpyxl.Workbook()
    book.active.append(HEADER)
    path = tmp_path / "t.xlsx"
    book.save(path)
    _, report = read(path, sheet="Week 47")
    (f,) = only(report, "sheet-missing")
    assert "Sheet" in f.message


def test_parquet_text_ids_read_like_csv(tmp_path: Path, clean: Path) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    rows = clean_rows()
    data = {h: [r[k] for r in rows] for k, h in enumerate(HEADER)}
    for h in ("reporting_sites", "ili_visits", "total_visits"):
        data[h] = [int(v) for v in data[h]]
    pq.write_table(pa.table(data), tmp_path / "t.parquet")
    a, _ = read(clean)
    b, report = read(tmp_path / "t.parquet")
    assert report.findings == ()
    assert b.frame["line"].tolist() == list(range(2, 26))
    pd.testing.assert_frame_equal(comparable(a), comparable(b))


def test_parquet_integer_ids_are_read_as_digits_fractions_are_errors(tmp_path: Path) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    rows = clean_rows()
    data = {h: [r[k] for r in rows] for k, h in enumerate(HEADER)}
    data["district_id"] = [int(v) for v in data["district_id"]]
    for h in ("reporting_sites", "ili_visits", "total_visits"):
        data[h] = [int(v) for v in data[h]]
    pq.write_table(pa.table(data), tmp_path / "t.pq")
    table, report = read(tmp_path / "t.pq")
    assert report.errors == ()
    assert set(table.frame["district_id"]) == {str(int(i)) for i in IDS}
    assert table.numeric_id_lines == tuple(range(2, len(rows) + 2))
    data["district_id"] = [
        float(v) + (0.5 if k == 3 else 0.0) for k, v in enumerate(data["district_id"])
    ]
    pq.write_table(pa.table(data), tmp_path / "f.pq")
    table, report = read(tmp_path / "f.pq")
    (f,) = only(report, "id-numeric")
    assert (f.severity, f.column, f.line, f.value) == (Severity.ERROR, "district_id", 5, "4.5")
    assert table is None


# ----------------------------------------------------------------------------- structure (F16, F23)


def test_empty_file(tmp_path: Path) -> None:
    path = tmp_path / "empty.csv"
    path.write_bytes(b"")
    table, report = read(path)
    (f,) = only(report, "file-empty")
    assert table is None and f.severity is Severity.ERROR


def test_header_only_file(tmp_path: Path) -> None:
    table, report = read(write_csv(tmp_path / "h.csv", []))
    (f,) = only(report, "file-header-only")
    assert (table, f.severity, f.line) == (None, Severity.ERROR, 1)


def test_duplicated_header_column(tmp_path: Path) -> None:
    header = HEADER + ["ili_visits"]
    rows = [r + ["5"] for r in clean_rows()]
    table, report = read(write_csv(tmp_path / "d.csv", rows, header))
    (f,) = only(report, "column-duplicated")
    assert (table, f.severity, f.line, f.column) == (None, Severity.ERROR, 1, "ili_visits")
    assert "columns 5, 7" in f.message


def test_missing_mapped_column_lists_columns_present(tmp_path: Path) -> None:
    header = [h if h != "total_visits" else "total_visit" for h in HEADER]
    table, report = read(write_csv(tmp_path / "m.csv", clean_rows(), header))
    (f,) = only(report, "column-missing")
    assert (table, f.severity, f.line, f.column) == (None, Severity.ERROR, 1, "total_visits")
    assert "'total_visit'" in f.message and "did you mean" in f.message


def test_optional_column_missing_is_a_warning(tmp_path: Path) -> None:
    header = HEADER[:3] + HEADER[4:]
    rows = [r[:3] + r[4:] for r in clean_rows()]
    table, report = read(write_csv(tmp_path / "o.csv", rows, header))
    (f,) = only(report, "column-optional-missing")
    assert (f.severity, f.column) == (Severity.WARNING, "reporting_sites")
    assert table is not None and table.frame["reporting_sites"].isna().all()


def test_ragged_row_is_named_by_line(tmp_path: Path) -> None:
    rows = clean_rows()
    rows[4] = rows[4] + ["9"]
    table, report = read(write_csv(tmp_path / "r.csv", rows))
    (f,) = only(report, "row-field-count")
    assert (table, f.severity, f.line) == (None, Severity.ERROR, 6)


def test_quoted_newline_keeps_true_line_numbers(tmp_path: Path) -> None:
    rows = changed(clean_rows(), "002", WEEKS[0], "district_name", '"Two\nlines"')
    table, report = read(write_csv(tmp_path / "q.csv", rows))
    assert report.findings == ()
    f = table.frame
    # the record for 002 starts on line 3 and spans 2 lines, so 003 is on line 5
    assert (
        f.loc[(f["district_id"] == "003") & (f["week"] == EpiWeek(2026, 44, MMWR)), "line"].item()
        == 5
    )
    assert "Two\nlines" in set(f["district_name"])


def test_blank_lines_inside_table_keep_true_line_numbers(tmp_path: Path) -> None:
    rows = clean_rows()
    path = tmp_path / "b.csv"
    lines = [",".join(HEADER)] + [",".join(r) for r in rows]
    lines.insert(3, "")  # an empty line 4
    lines.insert(5, ",,,,,")  # a row of empty cells on line 6
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    table, report = read(path)
    assert [(f.rule, f.severity, f.line) for f in report.findings] == [
        ("row-blank", Severity.INFO, 6)
    ]
    # data rows 3 and 4 now sit on lines 5 and 7
    assert table.frame["line"].tolist()[:5] == [2, 3, 5, 7, 8]


def test_size_cap_is_checked_before_parsing(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    path = tmp_path / "huge.csv"
    with path.open("wb") as fh:
        fh.truncate(3 * 1_000_000)  # sparse: 3 MB of nothing on disk

    def no_read(self: Path) -> bytes:
        raise AssertionError("the file was read although it is above the cap")

    monkeypatch.setattr(Path, "read_bytes", no_read)
    table, report = read(path, max_input_mb=2.0)
    assert [f.rule for f in report.findings] == ["file-too-large"]
    assert report.findings[0].severity is Severity.ERROR and table is None


def test_unknown_extension(tmp_path: Path) -> None:
    path = tmp_path / "t.ods"
    path.write_bytes(b"x")
    _, report = read(path)
    assert [f.rule for f in report.findings] == ["file-format-unknown"]


def test_missing_file_raises_input_error_with_path(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="nothere.csv"):
        read(tmp_path / "nothere.csv")
    with pytest.raises(InputError, match="folder"):
        read(tmp_path)


@pytest.mark.skipif(os.geteuid() == 0, reason="root ignores file permissions")
def test_unreadable_file_raises_input_error(tmp_path: Path, clean: Path) -> None:
    clean.chmod(0)
    try:
        with pytest.raises(InputError, match="clean.csv"):
            read(clean)
    finally:
        clean.chmod(0o644)


# ----------------------------------------------------------------------------- cells (F17)


def test_every_bad_cell_is_listed_in_one_report(tmp_path: Path) -> None:
    rows = clean_rows()
    rows = changed(rows, "001", WEEKS[1], "ili_visits", "n/a")
    rows = changed(rows, "002", WEEKS[1], "ili_visits", "<5")
    rows = changed(rows, "003", WEEKS[1], "total_visits", "1.234")  # read as 1.234 -> not integer
    rows = changed(rows, "004", WEEKS[1], "total_visits", '"1,234"')
    rows = changed(rows, "005", WEEKS[1], "ili_visits", "12%")
    rows = changed(rows, "006", WEEKS[1], "total_visits", "")
    rows = changed(rows, "006", WEEKS[2], "reporting_sites", "2.5")
    table, report = read(write_csv(tmp_path / "bad.csv", rows))
    assert table is None
    got = [(f.rule, f.line, f.column, f.value) for f in report.findings]
    L = lambda i, w: line_of(rows, i, WEEKS[w])  # noqa: E731
    assert got == [
        ("cell-not-number", L("001", 1), "ili_visits", "n/a"),
        ("cell-not-number", L("002", 1), "ili_visits", "<5"),
        ("count-not-integer", L("003", 1), "total_visits", "1.234"),
        ("cell-not-number", L("004", 1), "total_visits", "1,234"),
        ("cell-not-number", L("005", 1), "ili_visits", "12%"),
        ("cell-missing", L("006", 1), "total_visits", ""),
        ("count-not-integer", L("006", 2), "reporting_sites", "2.5"),
    ]
    assert all(f.severity is Severity.ERROR for f in report.findings)
    assert "thousands separator" in report.findings[3].message
    assert "% sign" in report.findings[4].message


def test_integral_decimal_count_is_accepted(tmp_path: Path) -> None:
    rows = changed(clean_rows(), "001", WEEKS[0], "ili_visits", "10.0")
    table, report = read(write_csv(tmp_path / "d.csv", rows))
    assert report.findings == () and table.frame["ili_visits"].iloc[0] == 10


def test_negative_count_passes_typing_for_the_value_rules(tmp_path: Path) -> None:
    rows = changed(clean_rows(), "001", WEEKS[0], "ili_visits", "-3")
    table, report = read(write_csv(tmp_path / "n.csv", rows))
    assert report.findings == () and table.frame["ili_visits"].iloc[0] == -3


# ----------------------------------------------------------------------------- weeks


def test_invalid_week_labels(tmp_path: Path) -> None:
    rows = changed(clean_rows(), "001", WEEKS[3], "epi_week", "2026-W60")
    # MMWR 2026 has 52 weeks (epiweeks.Year(2026).totalweeks() == 52), so W53 does not exist
    rows = changed(rows, "002", WEEKS[3], "epi_week", "2026-W53")
    rows = changed(rows, "003", WEEKS[3], "epi_week", "Nov 22")
    table, report = read(write_csv(tmp_path / "w.csv", rows))
    hits = only(report, "week-invalid")
    assert [(f.line, f.column, f.value) for f in hits] == [
        (line_of(rows, "001", "2026-W60"), "epi_week", "2026-W60"),
        (line_of(rows, "002", "2026-W53"), "epi_week", "2026-W53"),
        (line_of(rows, "003", "Nov 22"), "epi_week", "Nov 22"),
    ]
    assert table is None


def test_iso_week_53_exists(tmp_path: Path) -> None:
    # ISO 2026 has 53 weeks: date(2026, 12, 28).isocalendar() == (2026, 53, 1) (Python stdlib)
    assert dt.date(2026, 12, 28).isocalendar()[:2] == (2026, 53)
    rows = clean_rows(weeks=["2026-W52", "2026-W53", "2027-W01"])
    table, report = read(write_csv(tmp_path / "iso.csv", rows), ISO)
    assert report.findings == ()
    assert [str(w) for w in table.weeks] == ["2026-W52", "2026-W53", "2027-W01"]


def test_year_and_week_number_columns(tmp_path: Path, clean: Path) -> None:
    rows = [r[:2] + [r[2][:4], str(int(r[2][6:]))] + r[3:] for r in clean_rows()]
    header = HEADER[:2] + ["yr", "wk"] + HEADER[3:]
    table, report = read(
        write_csv(tmp_path / "yw.csv", rows, header), columns={"year": "yr", "week_number": "wk"}
    )
    ref, _ = read(clean)
    assert report.findings == ()
    assert list(table.frame["week"]) == list(ref.frame["week"])


def test_week_start_and_end_dates(tmp_path: Path, clean: Path) -> None:
    ref, _ = read(clean)
    # MMWR week 2026-W44 runs Sunday 2026-11-01 to Saturday 2026-11-07 (epiweeks.Week(2026, 44))
    start = {w: EpiWeek.parse(w).start.isoformat() for w in WEEKS}
    assert start["2026-W44"] == "2026-11-01"
    rows = [r[:2] + [start[r[2]]] + r[3:] for r in clean_rows()]
    header = HEADER[:2] + ["week_start"] + HEADER[3:]
    table, report = read(
        write_csv(tmp_path / "s.csv", rows, header), columns={"week_start": "week_start"}
    )
    assert report.findings == ()
    assert list(table.frame["week"]) == list(ref.frame["week"])
    end_rows = [r[:2] + [EpiWeek.parse(r[2]).end.isoformat()] + r[3:] for r in clean_rows()]
    table, report = read(
        write_csv(tmp_path / "e.csv", end_rows, header[:2] + ["week_end"] + header[3:]),
        columns={"week_end": "week_end"},
    )
    assert report.findings == () and list(table.frame["week"]) == list(ref.frame["week"])


def test_week_start_on_wrong_weekday(tmp_path: Path) -> None:
    start = {w: EpiWeek.parse(w).start.isoformat() for w in WEEKS}
    rows = [r[:2] + [start[r[2]]] + r[3:] for r in clean_rows()]
    rows[0][2] = "2026-11-02"  # a Monday: ISO-style start in an MMWR table
    header = HEADER[:2] + ["week_start"] + HEADER[3:]
    table, report = read(
        write_csv(tmp_path / "s.csv", rows, header), columns={"week_start": "week_start"}
    )
    (f,) = only(report, "week-date-weekday")
    assert (f.severity, f.line, f.column, f.value) == (
        Severity.ERROR,
        2,
        "week_start",
        "2026-11-02",
    )
    assert "Sunday" in f.message and "Monday" in f.message
    assert table is None


def test_declared_date_format_reads_us_dates_and_groups_cells_that_do_not_fit(
    tmp_path: Path, clean: Path
) -> None:
    from sitrep.model import ValidationReport

    ref, _ = read(clean)
    # MMWR 2026-W44 ends Saturday 2026-11-07, written 11/07/2026 month first (epiweeks.Week(2026, 44))
    end = {w: EpiWeek.parse(w).end for w in WEEKS}
    assert end["2026-W44"] == dt.date(2026, 11, 7)
    rows = [r[:2] + [end[r[2]].strftime("%m/%d/%Y")] + r[3:] for r in clean_rows()]
    header = HEADER[:2] + ["week_ending"] + HEADER[3:]
    path = write_csv(tmp_path / "us.csv", rows, header)
    # never guessed: without the declaration every cell is an error naming the setting
    table, report = read(path, columns={"week_end": "week_ending"})
    assert table is None and {f.rule for f in report.findings} == {"week-invalid"}
    assert "input.date_format" in report.findings[0].message
    table, report = read(path, columns={"week_end": "week_ending"}, date_format="%m/%d/%Y")
    assert report.findings == () and list(table.frame["week"]) == list(ref.frame["week"])
    # day-first cells under a month-first declaration (days 14, 21, 28 cannot be months): one
    # group for the column
    rows = [r[:2] + [end[r[2]].strftime("%d/%m/%Y")] + r[3:] for r in clean_rows(weeks=WEEKS[1:])]
    table, report = read(
        write_csv(tmp_path / "eu.csv", rows, header),
        columns={"week_end": "week_ending"},
        date_format="%m/%d/%Y",
    )
    (group,) = ValidationReport(report.errors).grouped()
    assert (group.rule, group.first.column, group.count) == (
        "week-invalid",
        "week_ending",
        len(rows),
    )
    assert "input.date_format = '%m/%d/%Y'" in group.message() and "'14/11/2026'" in group.message()


def test_first_sheet_without_the_columns_names_the_sheet_that_has_them(tmp_path: Path) -> None:
    import openpyxl

    book = openpyxl.Workbook()
    book.active.title = "Read me"
    book.active.append(["This export holds the weekly ILI counts by district."])
    sheet = book.create_sheet("Week 47")
    sheet.append(HEADER)
    for r in clean_rows():
        sheet.append([r[0], r[1], r[2], int(r[3]), int(r[4]), int(r[5])])
    path = tmp_path / "book.xlsx"
    book.save(path)
    table, report = read(path)
    (f,) = report.findings
    assert (f.rule, f.severity, f.value) == ("sheet-elsewhere", Severity.ERROR, "Week 47")
    assert "'Read me'" in f.message and "input.sheet = 'Week 47'" in f.message
    assert table is None
    table, report = read(path, sheet="Week 47")
    assert report.errors == () and len(table.frame) == len(clean_rows())


def test_ambiguous_week_columns(tmp_path: Path, clean: Path) -> None:
    _, report = read(clean, columns={"year": "y"})
    assert [f.rule for f in report.findings] == ["week-columns-ambiguous"]
    _, report = read(clean, columns={"week_start": "a", "week_end": "b"})
    assert [f.rule for f in report.findings] == ["week-columns-ambiguous"]


# ----------------------------------------------------------------------------- robustness


@hsettings(
    max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(st.binary(max_size=400))
def test_no_traceback_for_arbitrary_bytes(tmp_path: Path, blob: bytes) -> None:
    path = tmp_path / "fuzz.csv"
    path.write_bytes(blob)
    table, report = read(path)
    assert (table is None) == report.blocked


@hsettings(
    max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(st.lists(st.text(alphabet='0123456789,;"\n\r -W.aé', max_size=30), max_size=8))
def test_no_traceback_for_mangled_tables(tmp_path: Path, lines: list[str]) -> None:
    path = tmp_path / "fuzz.csv"
    path.write_text(",".join(HEADER) + "\n" + "\n".join(lines), encoding="utf-8")
    table, report = read(path)
    assert (table is None) == report.blocked


@pytest.mark.parametrize("name", ["t.xlsx", "t.parquet", "t.csv"])
@pytest.mark.parametrize("blob", [b"", b"PK\x03\x04 not a zip", b"PAR1garbagePAR1", b"\x00" * 64])
def test_corrupt_files_give_findings_not_tracebacks(tmp_path: Path, name: str, blob: bytes) -> None:
    path = tmp_path / name
    path.write_bytes(blob)
    table, report = read(path)
    assert table is None and report.blocked
    assert all(f.message for f in report.errors)


def test_fast_and_exact_parsers_agree(tmp_path: Path) -> None:
    rows = changed(clean_rows(), "001", WEEKS[0], "district_name", '"Arden, upper"')
    text = write_csv(tmp_path / "q.csv", rows).read_text(encoding="utf-8")
    fast = read_mod._csv_fast(text.encode("utf-8"), text, ",")
    exact = read_mod._csv_exact(text, ",", FindingCollector("q.csv"))
    assert fast is not None and exact is not None
    assert fast.header == exact.header
    assert (fast.lines == exact.lines).all()
    for a, b in zip(fast.columns, exact.columns, strict=True):
        assert list(a.uniques[a.codes]) == list(b.uniques[b.codes])
