"""Findings gathered per severity, rule, file and column (what the terminal and the PDF show)."""

from __future__ import annotations

import dataclasses

from sitrep.model import Finding, Severity, ValidationReport


def cell(rule: str, line: int, column: str = "ili_visits", file: str = "t.csv") -> Finding:
    return Finding(
        Severity.ERROR,
        rule,
        f"bad value on {line}",
        file=file,
        line=line,
        column=column,
        district_id=f"{line:03d}",
        value=str(line),
    )


def test_one_group_per_rule_file_and_column_in_first_seen_order() -> None:
    report = ValidationReport(
        tuple(cell("cell-not-number", k) for k in range(2, 12))
        + (
            cell("cell-not-number", 3, column="total_visits"),
            cell("cell-not-number", 4, file="p.csv"),
            cell("count-negative", 5),
        )
    )
    groups = report.grouped()
    assert [(g.rule, g.first.file, g.first.column, g.count) for g in groups] == [
        ("cell-not-number", "t.csv", "ili_visits", 10),
        ("cell-not-number", "t.csv", "total_visits", 1),
        ("cell-not-number", "p.csv", "ili_visits", 1),
        ("count-negative", "t.csv", "ili_visits", 1),
    ]
    # every per-cell finding is still in the report
    assert sum(g.count for g in groups) == len(report.findings) == 13


def test_group_message_gives_count_span_and_first_five_locations() -> None:
    (group,) = ValidationReport(tuple(cell("cell-not-number", k) for k in range(2, 242))).grouped()
    assert group.span() == "lines 2-241"
    text = group.message()
    assert text.startswith("240 districts, lines 2-241: bad value on 2 [line 2: 2; line 3: 3;")
    assert "line 6: 6; first 5 shown, all 240 in validation.json" in text and "line 7" not in text
    assert group.location() == "t.csv, lines 2-241, column 'ili_visits'"
    assert len(group.districts()) == 240
    # a cell-level rule over fewer districts counts cells; one finding per district counts those
    (per_cell,) = ValidationReport(
        tuple(dataclasses.replace(cell("r", k), district_id=f"{k % 3}") for k in range(2, 12))
    ).grouped()
    assert per_cell.message().startswith("10 cells, lines 2-11:")
    # lines with gaps are given as a range with "to"; a single finding keeps its own message
    (gappy,) = ValidationReport((cell("r", 2), cell("r", 9))).grouped()
    assert gappy.span() == "lines 2 to 9" and gappy.message().endswith("all shown]")
    (single,) = ValidationReport((cell("r", 7),)).grouped()
    assert (
        single.message() == "bad value on 7"
        and single.location() == "t.csv, line 7, column 'ili_visits'"
    )
    assert "lines" not in group.message(span=False).split(":")[0]
