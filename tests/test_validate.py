"""Stage 2 of validation: value rules on one table and rules against last week's table.

Tables are written with the fixture builders and read with the real reader,
so every asserted line number is the line in the file (header = 1).
Thresholds are docs/methods.md section 9.4 defaults (common practice).
"""

from __future__ import annotations

import dataclasses
import datetime as dt
from pathlib import Path

import epiweeks
import numpy as np
import pandas as pd
import pytest
from ingest_fixtures import (
    HEADER,
    IDS,
    NAMES,
    WEEKS,
    changed,
    clean_polygons,
    clean_rows,
    line_of,
    without,
    write_csv,
)
from ingest_fixtures import settings as input_settings
from scipy import stats

from sitrep.config import ValidationSettings
from sitrep.ingest.read import read_count_table
from sitrep.ingest.validate import RULES, validate_against_prior, validate_table
from sitrep.model import CountTable, Districts, InputFile, Severity
from sitrep.weeks import EpiWeek, WeekSystem

MMWR, ISO = WeekSystem.MMWR, WeekSystem.ISO
VS = ValidationSettings()


@pytest.fixture(scope="module")
def districts() -> Districts:
    return Districts(frame=clean_polygons(), source=InputFile("boundaries", Path("d.gpkg"), "0", 0))


_counter = iter(range(10**6))


def table(tmp_path: Path, rows, header=HEADER, system=MMWR, **kw) -> CountTable:
    path = write_csv(tmp_path / f"t{next(_counter)}.csv", rows, header)
    t, report = read_count_table(path, input_settings(**kw), system)
    assert t is not None, report.findings
    return t


def rules(report) -> list[str]:
    return [f.rule for f in report.findings]


def one(report, rule: str):
    hits = [f for f in report.findings if f.rule == rule]
    assert len(hits) == 1, (rule, report.findings)
    return hits[0]


def test_rule_ids_unique_and_documented() -> None:
    ids = [r for r, _ in RULES]
    assert len(ids) == len(set(ids)) and all(desc for _, desc in RULES)


def test_clean_table_has_no_findings(tmp_path: Path, districts: Districts) -> None:
    report = validate_table(
        table(tmp_path, clean_rows()), districts, VS, today=dt.date(2026, 11, 30)
    )
    assert report.findings == ()


# ----------------------------------------------------------------------------- single-table errors


def test_duplicate_district_week_lists_both_lines(tmp_path: Path, districts: Districts) -> None:
    rows = clean_rows()
    extra = list(rows[line_of(rows, "003", WEEKS[2]) - 2])
    extra[4] = "99"  # same district-week, different values
    rows = rows + [extra]
    f = one(validate_table(table(tmp_path, rows), districts, VS), "row-duplicate")
    first = line_of(clean_rows(), "003", WEEKS[2])
    assert (f.severity, f.line, f.column, f.district_id) == (
        Severity.ERROR,
        26,
        "district_id",
        "003",
    )
    assert f"lines {first}, 26" in f.message


@pytest.mark.parametrize(
    ("column", "value", "rule", "flag_column"),
    [
        ("ili_visits", "700", "count-ili-exceeds-total", "ili_visits"),
        ("total_visits", "-5", "count-negative", "total_visits"),
        ("reporting_sites", "-1", "count-negative", "reporting_sites"),
    ],
)
def test_impossible_counts(tmp_path: Path, districts, column, value, rule, flag_column) -> None:
    rows = changed(clean_rows(), "002", WEEKS[1], column, value)
    report = validate_table(table(tmp_path, rows), districts, VS)
    f = one(report, rule)
    assert (f.severity, f.line, f.column, f.district_id) == (
        Severity.ERROR,
        line_of(rows, "002", WEEKS[1]),
        flag_column,
        "002",
    )


def test_zero_total_with_ili(tmp_path: Path, districts: Districts) -> None:
    rows = changed(clean_rows(), "002", WEEKS[1], "total_visits", "0")
    report = validate_table(table(tmp_path, rows), districts, VS)
    f = one(report, "count-zero-total")
    assert (f.severity, f.line, f.column) == (
        Severity.ERROR,
        line_of(rows, "002", WEEKS[1]),
        "total_visits",
    )
    # 0 < ili is also > total: both rules name the row
    assert "count-ili-exceeds-total" in rules(report)


def test_zero_total_with_zero_ili_is_fine(tmp_path: Path, districts: Districts) -> None:
    rows = changed(clean_rows(), "002", WEEKS[1], "total_visits", "0")
    rows = changed(rows, "002", WEEKS[1], "ili_visits", "0")
    assert validate_table(table(tmp_path, rows), districts, VS).errors == ()


def test_non_integer_counts_in_a_float_frame(tmp_path: Path) -> None:
    t = table(tmp_path, clean_rows())
    frame = t.frame.copy()
    frame["ili_visits"] = frame["ili_visits"].astype(float)
    frame.loc[3, "ili_visits"] = 12.5
    report = validate_table(CountTable(frame, t.system, t.source), None, VS)
    f = one(report, "count-not-integer")
    assert (f.line, f.column, f.value) == (int(frame.loc[3, "line"]), "ili_visits", "12.5")


def test_ids_not_in_boundaries_one_finding_per_id(tmp_path: Path, districts: Districts) -> None:
    rows = clean_rows()
    for w in WEEKS[:2]:
        rows = changed(rows, "001", w, "district_id", "1")  # lost its leading zeros
    rows = changed(rows, "003", WEEKS[0], "district_id", "0003")
    rows = changed(rows, "005", WEEKS[0], "district_id", "999")
    report = validate_table(table(tmp_path, rows), districts, VS)
    hits = [f for f in report.findings if f.rule == "id-not-in-boundaries"]
    assert [(f.district_id, f.line, f.severity) for f in hits] == [
        ("0003", 4, Severity.ERROR),
        ("999", 6, Severity.ERROR),
    ]
    assert "'003'" in hits[0].message
    assert "no similar id" in hits[1].message
    # an id that lost its leading zeros gets its own rule, naming the padding setting
    lost = one(report, "id-leading-zeros")
    assert (lost.district_id, lost.line, lost.severity) == ("1", 2, Severity.ERROR)
    assert "lines 2, 8" in lost.message and "'001'" in lost.message
    assert "input.id_zero_pad = 3" in lost.message


def test_id_with_spaces_kept_suggests_the_trimmed_id(tmp_path: Path, districts: Districts) -> None:
    rows = changed(clean_rows(), "003", WEEKS[0], "district_id", "003 ")
    t = table(tmp_path, rows, strip_id_whitespace=False)
    f = one(validate_table(t, districts, VS), "id-not-in-boundaries")
    assert f.district_id == "003 " and "'003'" in f.message


def test_district_missing_in_latest_week(tmp_path: Path, districts: Districts) -> None:
    rows = without(clean_rows(), "005", WEEKS[3])
    f = one(validate_table(table(tmp_path, rows), districts, VS), "district-missing-latest")
    assert (f.severity, f.district_id, f.line) == (Severity.WARNING, "005", None)


def test_nfd_names_do_not_differ_but_other_names_do(tmp_path: Path, districts: Districts) -> None:
    import unicodedata

    rows = changed(
        clean_rows(), "002", WEEKS[0], "district_name", unicodedata.normalize("NFD", NAMES[1])
    )
    assert validate_table(table(tmp_path, rows), districts, VS).findings == ()
    rows = changed(clean_rows(), "004", WEEKS[0], "district_name", "Dunmere North")
    f = one(validate_table(table(tmp_path, rows), districts, VS), "district-name-differs")
    assert (f.severity, f.line, f.column) == (
        Severity.INFO,
        line_of(rows, "004", WEEKS[0]),
        "district_name",
    )


def test_mixed_weeks_in_a_weekly_file(tmp_path: Path) -> None:
    rows = [r for r in clean_rows() if r[2] == WEEKS[3]]
    assert validate_table(table(tmp_path, rows), None, VS, weekly_file=True).findings == ()
    rows = rows + [clean_rows()[0]]  # one W44 row slipped in, written on the last line
    f = one(validate_table(table(tmp_path, rows), None, VS, weekly_file=True), "week-mixed")
    assert (f.severity, f.line, f.column, f.value) == (Severity.ERROR, 8, "epi_week", "2026-W44")
    # the message names both weeks with their row counts and the lines of the stray week
    assert "2026-W44 (1 rows), 2026-W47 (6 rows)" in f.message
    assert "rows of 2026-W44 are on line 8" in f.message and "input.weekly_file" in f.message


def test_mixed_weeks_when_one_week_is_inferred_from_the_prior_file(tmp_path: Path) -> None:
    """input.weekly_file unset: last week's file held one week, so this one must too."""
    import tomllib

    from sitrep.config import config_from_dict
    from sitrep.pipeline import read_inputs

    districts_path = tmp_path / "d.gpkg"
    clean_polygons().to_file(districts_path, layer="d", driver="GPKG")
    prior = write_csv(tmp_path / "w46.csv", [r for r in clean_rows() if r[2] == WEEKS[2]])
    mixed = [r for r in clean_rows() if r[2] in (WEEKS[2], WEEKS[3])]
    current = write_csv(tmp_path / "w47.csv", mixed)
    raw = tomllib.loads(
        f"[input]\ntable = '{current}'\nprior_table = '{prior}'\nboundaries = '{districts_path}'\n"
    )
    found = read_inputs(config_from_dict(raw), today=dt.date(2026, 12, 1)).validation
    f = one(found, "week-mixed")
    lines = [line_of(mixed, i, WEEKS[2]) for i in IDS]
    assert (f.severity, f.line, f.value) == (Severity.ERROR, lines[0], "2026-W46")
    assert f"on lines {', '.join(map(str, lines))}" in f.message
    assert "last week's file (input.prior_table) held one week" in f.message
    # declaring a season-to-date extract lifts it
    raw["input"]["weekly_file"] = False
    found = read_inputs(config_from_dict(raw), today=dt.date(2026, 12, 1)).validation
    assert "week-mixed" not in rules(found)


def test_district_with_no_visits_and_no_sites_is_a_located_warning(tmp_path: Path) -> None:
    rows = changed(clean_rows(), "004", WEEKS[3], "total_visits", "0")
    rows = changed(rows, "004", WEEKS[3], "ili_visits", "0")
    closed = changed(rows, "004", WEEKS[3], "reporting_sites", "0")
    f = one(validate_table(table(tmp_path, closed), None, VS), "district-no-visits")
    assert (f.severity, f.line, f.column, f.district_id) == (
        Severity.WARNING,
        line_of(closed, "004", WEEKS[3]),
        "total_visits",
        "004",
    )
    assert "0 reporting sites" in f.message and "closed" in f.message
    # with sites reporting, the message says so; a past week with no visits is not this rule
    f = one(validate_table(table(tmp_path, rows), None, VS), "district-no-visits")
    assert "although 3 sites reported" in f.message  # counts(3, w): 3 + 3 % 3 sites
    past = changed(
        changed(clean_rows(), "004", WEEKS[1], "total_visits", "0"),
        "004",
        WEEKS[1],
        "ili_visits",
        "0",
    )
    assert "district-no-visits" not in rules(validate_table(table(tmp_path, past), None, VS))


def test_future_week(tmp_path: Path) -> None:
    t = table(tmp_path, clean_rows())
    # MMWR 2026-W47 starts Sunday 2026-11-22 (epiweeks.Week(2026, 47).startdate())
    assert epiweeks.Week(2026, 47).startdate() == dt.date(2026, 11, 22)
    f = one(validate_table(t, None, VS, today=dt.date(2026, 11, 21)), "week-future")
    assert (f.severity, f.line, f.value) == (
        Severity.ERROR,
        line_of(clean_rows(), "001", WEEKS[3]),
        "2026-W47",
    )
    assert validate_table(t, None, VS, today=dt.date(2026, 11, 22)).findings == ()


# ----------------------------------------------------------------------------- single-table warnings


def test_week_gap_in_season_to_date_extract(tmp_path: Path) -> None:
    rows = without(clean_rows(), week=WEEKS[1])
    f = one(validate_table(table(tmp_path, rows), None, VS), "week-gap")
    assert (f.severity, f.line, f.column, f.value) == (
        Severity.WARNING,
        line_of(rows, "001", WEEKS[2]),
        "epi_week",
        "2026-W46",
    )
    assert "2026-W45" in f.message


def test_mmwr_week_53_is_contiguous(tmp_path: Path) -> None:
    # epiweeks: MMWR year 2025 has 53 weeks, and Week(2025, 53) + 1 == Week(2026, 1)
    assert epiweeks.Year(2025).totalweeks() == 53
    assert epiweeks.Week(2025, 53) + 1 == epiweeks.Week(2026, 1)
    rows = clean_rows(weeks=["2025-W52", "2025-W53", "2026-W01"])
    assert validate_table(table(tmp_path, rows), None, VS).findings == ()
    rows = clean_rows(weeks=["2025-W51", "2025-W52", "2026-W01"])
    f = one(validate_table(table(tmp_path, rows), None, VS), "week-gap")
    assert "2025-W53" in f.message


def test_iso_week_53_is_contiguous(tmp_path: Path) -> None:
    # Python stdlib: date(2026, 12, 28).isocalendar() is ISO week 53 of 2026
    assert dt.date(2026, 12, 28).isocalendar()[:2] == (2026, 53)
    rows = clean_rows(weeks=["2026-W52", "2026-W53", "2027-W01"])
    assert validate_table(table(tmp_path, rows, system=ISO), None, VS).findings == ()


def test_gap_between_seasons_is_not_flagged(tmp_path: Path) -> None:
    # season 2025-26 runs to 2026-W39, season 2026-27 starts at 2026-W40 (season_start_week 40)
    rows = clean_rows(weeks=["2026-W10", "2026-W11", "2026-W40", "2026-W41"])
    assert validate_table(table(tmp_path, rows), None, VS).findings == ()
    rows = clean_rows(weeks=["2026-W10", "2026-W12", "2026-W40", "2026-W41"])
    f = one(validate_table(table(tmp_path, rows), None, VS), "week-gap")
    assert f.value == "2026-W12" and "2025-26" in f.message


def test_rate_column_disagreeing_with_counts(tmp_path: Path) -> None:
    header = HEADER + ["ili_pct"]
    rows = [r + [f"{100 * int(r[4]) / int(r[5]):.2f}"] for r in clean_rows()]
    assert (
        validate_table(
            table(tmp_path, rows, header, columns={"rate": "ili_pct"}), None, VS
        ).findings
        == ()
    )
    k = line_of(rows, "004", WEEKS[2]) - 2
    rows[k][6] = f"{10 * float(rows[k][6]):.2f}"  # rate column x10 vs counts (docs/faults.md F5)
    f = one(
        validate_table(table(tmp_path, rows, header, columns={"rate": "ili_pct"}), None, VS),
        "rate-mismatch",
    )
    assert (f.severity, f.line, f.column, f.district_id) == (
        Severity.WARNING,
        k + 2,
        "ili_pct",
        "004",
    )


def _spike_rows(last_ili: int, visits_scale: int = 1) -> list[list[str]]:
    weeks = [str(EpiWeek(2026, 38) + k) for k in range(9)]
    rows = clean_rows(weeks=weeks, ids=["001", "002"])
    for week in weeks:  # district 001 stays at 2.0 %: the jurisdiction does not move
        rows = changed(rows, "001", week, "ili_visits", "20")
        rows = changed(rows, "001", week, "total_visits", "1000")
    # district 002: 8 weeks of ILI% 2.0, 2.1, 1.9, 2.0, 2.2, 1.8, 2.0, 2.1 of 100,000 visits
    # (binomial SE of 2% at that size is 0.044 pp, below the MAD, so the MAD sets the scale)
    for k, ili in enumerate([20, 21, 19, 20, 22, 18, 20, 21, last_ili]):
        rows = changed(rows, "002", weeks[k], "ili_visits", str(ili * 100 // visits_scale))
        rows = changed(rows, "002", weeks[k], "total_visits", str(100000 // visits_scale))
    return rows


def test_spike_robust_z(tmp_path: Path) -> None:
    past = np.array([2.0, 2.1, 1.9, 2.0, 2.2, 1.8, 2.0, 2.1])
    # reference: median 2.0 and unscaled MAD 0.1 (scipy.stats.median_abs_deviation, scale=1.0)
    assert np.median(past) == pytest.approx(2.0)
    assert stats.median_abs_deviation(past, scale=1.0) == pytest.approx(0.1)
    # 2.6 % -> z = 0.6 / 0.1 = 6 > 5: flagged; 2.4 % -> z = 4: not flagged (MAD floor 0.1 pp)
    vs = dataclasses.replace(VS, spike_mad_floor_pp=0.1)
    rows = _spike_rows(26)
    f = one(validate_table(table(tmp_path, rows), None, vs), "value-spike")
    assert (f.severity, f.line, f.column, f.district_id) == (
        Severity.WARNING,
        line_of(rows, "002", str(EpiWeek(2026, 46))),
        "ili_visits",
        "002",
    )
    assert "robust z 6.0" in f.message
    assert validate_table(table(tmp_path, _spike_rows(24)), None, vs).findings == ()
    # the history file's last week is not the report week: the rule can be switched off
    assert validate_table(table(tmp_path, rows), None, vs, latest_week_rules=False).findings == ()
    # the default floor (0.2 pp) gives z = 3: not flagged
    assert validate_table(table(tmp_path, rows), None, VS).findings == ()


def test_spike_rule_allows_for_binomial_noise_in_small_districts(tmp_path: Path) -> None:
    # 1,000 visits: SE of 2% = 100*sqrt(0.02*0.98/1000) = 0.443 pp [HAND], so 2.6% gives z = 1.4
    vs = dataclasses.replace(VS, spike_mad_floor_pp=0.1)
    assert (
        validate_table(table(tmp_path, _spike_rows(26, visits_scale=100)), None, vs).findings == ()
    )


def _rising_week(n: int = 30, jump: dict[str, float] | None = None) -> list[list[str]]:
    """n districts, 8 flat weeks at 1.0-2.45 % then a week in which every district doubles.

    Visits are 2,000 to 4,900 per district and week; ``jump`` multiplies a district's
    last-week ILI count further (a data fault such as an extra zero).
    """
    weeks = [str(EpiWeek(2026, 38) + k) for k in range(9)]
    rows = []
    for k, week in enumerate(weeks):
        for d in range(n):
            ident = f"{d + 1:03d}"
            total = 2000 + 100 * d
            base = 0.010 + 0.0005 * d  # each district's own level
            wobble = (0.0, 0.0004, -0.0003, 0.0002, -0.0002, 0.0003, -0.0004, 0.0001)[k % 8]
            share = base + wobble if k < 8 else 2.0 * base
            ili = round(total * share * ((jump or {}).get(ident, 1.0) if k == 8 else 1.0))
            rows.append([ident, f"D{ident}", week, "3", str(ili), str(total)])
    return rows


def test_spike_rule_does_not_flood_in_a_rising_week(tmp_path: Path) -> None:
    """Every district doubling is the jurisdiction's movement, not 30 data faults."""
    rows = _rising_week()
    # judged against its own 8 weeks only, every district would be far out: e.g. district
    # 001 goes from about 1.0 % to 2.0 % with MAD 0.03 pp and a floor of 0.2 pp -> z about 5
    assert "value-spike" not in rules(validate_table(table(tmp_path, rows), None, VS))
    # a ten-fold jump in one district on top of the rise is still caught, and only that one
    rows = _rising_week(jump={"017": 5.0})
    f = one(validate_table(table(tmp_path, rows), None, VS), "value-spike")
    assert (f.district_id, f.line) == ("017", line_of(rows, "017", str(EpiWeek(2026, 46))))
    assert "movement this week (x2.0" in f.message and "other districts' changes" in f.message


def test_spike_rule_with_only_the_prior_week_catches_a_ten_fold_jump(tmp_path: Path) -> None:
    """Weekly files: the reference is last week's file; a rising week is still not flagged."""
    rows = _rising_week(jump={"009": 10.0 / 2.0})
    w45, w46 = str(EpiWeek(2026, 45)), str(EpiWeek(2026, 46))
    prior = table(tmp_path, [r for r in rows if r[2] == w45])
    current_rows = [r for r in rows if r[2] == w46]
    current = table(tmp_path, current_rows)
    # without the prior week the rule has nothing to compare with
    assert "value-spike" not in rules(validate_table(current, None, VS, weekly_file=True))
    report = validate_table(current, None, VS, weekly_file=True, prior=prior)
    f = one(report, "value-spike")
    assert (f.district_id, f.line) == ("009", line_of(current_rows, "009", w46))
    assert "its previous week" in f.message and w45 in f.message
    # the doubling alone, judged on one previous week, flags nobody
    plain = _rising_week()
    prior = table(tmp_path, [r for r in plain if r[2] == w45])
    current = table(tmp_path, [r for r in plain if r[2] == w46])
    assert "value-spike" not in rules(
        validate_table(current, None, VS, weekly_file=True, prior=prior)
    )


# ----------------------------------------------------------------------------- against the prior table


def prior_and_current(tmp_path: Path, prior_rows=None, current_rows=None, system=MMWR):
    prior_rows = prior_rows if prior_rows is not None else without(clean_rows(), week=WEEKS[3])
    current_rows = current_rows if current_rows is not None else clean_rows()
    return table(tmp_path, current_rows, system=system), table(tmp_path, prior_rows, system=system)


def test_clean_pair_has_no_findings(tmp_path: Path) -> None:
    cur, pri = prior_and_current(tmp_path)
    assert validate_against_prior(cur, pri, VS).findings == ()


def test_week_backwards_or_equal(tmp_path: Path) -> None:
    same = without(clean_rows(), week=WEEKS[3])
    cur, pri = prior_and_current(tmp_path, prior_rows=same, current_rows=same)
    f = one(validate_against_prior(cur, pri, VS), "week-backwards")
    assert f.severity is Severity.ERROR and f.column == "epi_week"
    assert f.message.startswith(
        "this week's table ends at 2026-W46 but last week's already reached 2026-W46"
    )
    cur, pri = prior_and_current(tmp_path, prior_rows=clean_rows(), current_rows=same)
    assert "week-backwards" in rules(validate_against_prior(cur, pri, VS))


def test_week_skipped(tmp_path: Path) -> None:
    prior = without(clean_rows(), week=WEEKS[3])
    current = without(clean_rows(weeks=WEEKS + ["2026-W48"]), week=WEEKS[3])
    cur, pri = prior_and_current(tmp_path, prior, current)
    f = one(validate_against_prior(cur, pri, VS), "week-skipped")
    assert (f.severity, f.value) == (Severity.WARNING, "2026-W48")
    assert "over 2 weeks" in f.message


@pytest.mark.parametrize(
    ("system", "prior_weeks", "current_weeks", "skipped"),
    [
        # MMWR: 2025 has 53 weeks (epiweeks.Year(2025).totalweeks() == 53)
        (MMWR, ["2025-W52", "2025-W53"], ["2025-W52", "2025-W53", "2026-W01"], False),
        (MMWR, ["2025-W51", "2025-W52"], ["2025-W51", "2025-W52", "2026-W01"], True),
        # ISO: 2026 has 53 weeks (date(2026, 12, 28).isocalendar())
        (ISO, ["2026-W52", "2026-W53"], ["2026-W52", "2026-W53", "2027-W01"], False),
        (ISO, ["2026-W51", "2026-W52"], ["2026-W51", "2026-W52", "2027-W01"], True),
    ],
)
def test_week_53_sequencing(tmp_path, system, prior_weeks, current_weeks, skipped) -> None:
    cur, pri = prior_and_current(
        tmp_path, clean_rows(prior_weeks), clean_rows(current_weeks), system
    )
    report = validate_against_prior(cur, pri, VS)
    assert ("week-skipped" in rules(report)) is skipped
    assert "week-backwards" not in rules(report)


def test_new_and_dropped_districts(tmp_path: Path) -> None:
    prior = without(without(clean_rows(), week=WEEKS[3]), "006", WEEKS[2])
    current = without(clean_rows(), "002", WEEKS[3])
    cur, pri = prior_and_current(tmp_path, prior, current)
    report = validate_against_prior(cur, pri, VS)
    new = one(report, "district-new")
    assert (new.severity, new.district_id, new.line) == (
        Severity.WARNING,
        "006",
        line_of(current, "006", WEEKS[3]),
    )
    dropped = one(report, "district-dropped")
    assert (dropped.severity, dropped.district_id) == (Severity.WARNING, "002")


def test_small_revision_gives_only_the_summary(tmp_path: Path) -> None:
    # 003 in W45: ILI 18 -> 19 of 707 visits = +0.14 pp, below the 0.5 pp limit
    current = changed(clean_rows(), "003", WEEKS[1], "ili_visits", "19")
    cur, pri = prior_and_current(tmp_path, current_rows=current)
    report = validate_against_prior(cur, pri, VS)
    assert rules(report) == ["revision-summary"]
    f = report.findings[0]
    assert f.severity is Severity.WARNING and f.value == "1"
    assert "1 cell in 1 row of 1 past week" in f.message and "0.14 pp" in f.message


def test_large_revision_is_listed_with_old_and_new_values(tmp_path: Path) -> None:
    # 003 in W45: ILI 18 -> 90 of 707 visits: 2.55 % -> 12.73 % (F7: several times larger)
    current = changed(clean_rows(), "003", WEEKS[1], "ili_visits", "90")
    cur, pri = prior_and_current(tmp_path, current_rows=current)
    report = validate_against_prior(cur, pri, VS)
    f = one(report, "revision-large")
    assert (f.severity, f.line, f.column, f.district_id) == (
        Severity.WARNING,
        line_of(current, "003", WEEKS[1]),
        "ili_visits",
        "003",
    )
    assert "18 -> 90" in f.message and "2.55 -> 12.73" in f.message
    assert "10.18 pp" in one(report, "revision-summary").message


def test_revision_of_total_visits_share(tmp_path: Path) -> None:
    # 001 in W44: total 600 -> 700 (+16.7 % > 10 %); ILI% 1.67 -> 1.43 (0.24 pp < 0.5)
    current = changed(clean_rows(), "001", WEEKS[0], "total_visits", "700")
    cur, pri = prior_and_current(tmp_path, current_rows=current)
    f = one(validate_against_prior(cur, pri, VS), "revision-large")
    assert (f.line, f.column) == (2, "total_visits")


def test_row_removed_from_a_past_week(tmp_path: Path) -> None:
    current = without(clean_rows(), "004", WEEKS[1])
    cur, pri = prior_and_current(tmp_path, current_rows=current)
    f = one(validate_against_prior(cur, pri, VS), "revision-row-removed")
    assert (f.severity, f.district_id, f.value) == (Severity.WARNING, "004", "2026-W45")


def test_completeness_drop(tmp_path: Path) -> None:
    # total visits of W47 cut by 55 % (docs/faults.md F5); ILI visits stay below the totals
    current = clean_rows()
    for ident in IDS:
        k = line_of(current, ident, WEEKS[3]) - 2
        current[k][5] = str(int(current[k][5]) * 45 // 100)
    cur, pri = prior_and_current(tmp_path, current_rows=current)
    f = one(validate_against_prior(cur, pri, VS), "completeness-drop")
    assert (f.severity, f.column) == (Severity.WARNING, "total_visits")
    assert "may reflect reporting, not activity" in f.message


def test_reporting_sites_drop(tmp_path: Path) -> None:
    current = clean_rows()
    for ident in IDS:
        current = changed(current, ident, WEEKS[3], "reporting_sites", "1")
    cur, pri = prior_and_current(tmp_path, current_rows=current)
    f = one(validate_against_prior(cur, pri, VS), "completeness-drop")
    assert f.column == "reporting_sites"


def test_stale_resend(tmp_path: Path) -> None:
    current = clean_rows()
    old = current[line_of(current, "005", WEEKS[2]) - 2]
    for col, k in (("reporting_sites", 3), ("ili_visits", 4), ("total_visits", 5)):
        current = changed(current, "005", WEEKS[3], col, old[k])
    cur, pri = prior_and_current(tmp_path, current_rows=current)
    f = one(validate_against_prior(cur, pri, VS), "stale-resend")
    assert (f.severity, f.line, f.district_id) == (
        Severity.WARNING,
        line_of(current, "005", WEEKS[3]),
        "005",
    )


def test_one_week_files_compare_through_the_prior(tmp_path: Path) -> None:
    prior = [r for r in clean_rows() if r[2] == WEEKS[2]]
    current = [r for r in clean_rows() if r[2] == WEEKS[3]]
    cur, pri = prior_and_current(tmp_path, prior, current)
    assert validate_against_prior(cur, pri, VS).findings == ()
    current = changed(current, "002", WEEKS[3], "ili_visits", prior[1][4])
    current = changed(current, "002", WEEKS[3], "total_visits", prior[1][5])
    current = changed(current, "002", WEEKS[3], "reporting_sites", prior[1][3])
    cur, pri = prior_and_current(tmp_path, prior, current)
    assert rules(validate_against_prior(cur, pri, VS)) == ["stale-resend"]


def test_settings_thresholds_are_used(tmp_path: Path) -> None:
    current = changed(clean_rows(), "003", WEEKS[1], "ili_visits", "19")  # +0.14 pp
    cur, pri = prior_and_current(tmp_path, current_rows=current)
    strict = dataclasses.replace(VS, revision_report_pp=0.1)
    assert "revision-large" in rules(validate_against_prior(cur, pri, strict))


def test_findings_are_sorted(tmp_path: Path, districts: Districts) -> None:
    rows = changed(clean_rows(), "006", WEEKS[3], "ili_visits", "999")
    rows = changed(rows, "001", WEEKS[0], "district_id", "1")
    rows = without(rows, "004", WEEKS[3])
    report = validate_table(table(tmp_path, rows), districts, VS)
    # file-level findings (no line) first, then by line
    assert [(f.rule, f.line) for f in report.findings] == [
        ("district-missing-latest", None),
        ("id-leading-zeros", 2),
        ("count-ili-exceeds-total", line_of(rows, "006", WEEKS[3])),
    ]


def test_vectorised_paths_on_a_full_season(tmp_path: Path) -> None:
    # 300 districts x 52 identical weeks: no rule may fire (MAD 0 and x = median gives z = 0)
    ids = [f"{i:03d}" for i in range(300)]
    weeks = [str(EpiWeek(2025, 40) + k) for k in range(52)]
    rows = [[i, "x", w, "3", "10", "600"] for w in weeks for i in ids]
    t = table(tmp_path, rows)
    report = validate_table(t, None, VS)
    assert rules(report) == []
    assert isinstance(t.frame["week"].dtype, pd.CategoricalDtype)
