"""`sitrep check` refuses whatever would make `sitrep build` refuse, with the same reason.

Each case is the invented grid of tests/hardening_helpers.py (13 districts, MMWR weeks
2026-W40 to W47, no PDF, 199 permutations) with one thing made wrong: in the tables, the
boundaries, the settings, the override templates or the output folders. For each, `check
--json` and `build` run through the CLI on the same files; whenever the build exits
non-zero, check must exit non-zero too and name the same rule ids as the build's error
lines (and the other way round: check blocks only what build refuses); a configuration or
archive error gives both the same exit code and message. The rule of the
project (common practice, no source): a check that passes means a build that runs.
"""

from __future__ import annotations

import json
import re
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest
from hardening_helpers import TODAY, WEEKS, Week, make_week, run_cli

pytestmark = pytest.mark.slow

Case = Callable[[Path], tuple[Week, list[str]]]


def _week(folder: Path, **kwargs: Any) -> Week:
    kwargs.setdefault("pdf", False)
    return make_week(folder, **kwargs)


def _latest(rows: list[list[str]]) -> list[list[str]]:
    return [r for r in rows if r[2] == WEEKS[-1]]


def clean(folder: Path) -> tuple[Week, list[str]]:
    return _week(folder), []


def report_week_not_in_table(folder: Path) -> tuple[Week, list[str]]:
    return _week(folder, config={"weeks": {"report_week": "2026-W30"}}), []


def knn_more_neighbours_than_districts(folder: Path) -> tuple[Week, list[str]]:
    return _week(folder, config={"analysis": {"weights": "knn", "knn_k": 20}}), []


def template_folder_missing(folder: Path) -> tuple[Week, list[str]]:
    return _week(folder, config={"report": {"template_dir": "no-such-folder"}}), []


def _templates(folder: Path, name: str, text: str) -> Week:
    (folder / "mine").mkdir(parents=True)
    (folder / "mine" / name).write_text(text, encoding="utf-8")
    return _week(folder, config={"report": {"template_dir": "mine"}})


def template_syntax_error(folder: Path) -> tuple[Week, list[str]]:
    return _templates(folder, "email.txt.j2", "{{ c.title }}\n{% for m in c.key_messages %}\n"), []


def template_unknown_field(folder: Path) -> tuple[Week, list[str]]:
    return _templates(folder, "draft.md.j2", "# {{ c.title }}\n{{ c.headline_number }}\n"), []


def template_unknown_variable(folder: Path) -> tuple[Week, list[str]]:
    return _templates(folder, "email.txt.j2", "{{ c.title }} {{ report_date }}\n"), []


def template_not_utf8(folder: Path) -> tuple[Week, list[str]]:
    (folder / "mine").mkdir(parents=True)
    (folder / "mine" / "email.txt.j2").write_bytes("{{ c.title }} Région\n".encode("latin-1"))
    return _week(folder, config={"report": {"template_dir": "mine"}}), []


def output_folder_is_a_file(folder: Path) -> tuple[Week, list[str]]:
    week = _week(folder)
    week.out.write_text("not a folder", encoding="utf-8")
    return week, []


def output_file_links_outside(folder: Path) -> tuple[Week, list[str]]:
    week = _week(folder)
    week.out.mkdir()
    (folder / "elsewhere.html").write_text("keep", encoding="utf-8")
    (week.out / "report.html").symlink_to(folder / "elsewhere.html")
    return week, []


def archive_is_a_file(folder: Path) -> tuple[Week, list[str]]:
    week = _week(folder)
    week.archive.write_text("not a folder", encoding="utf-8")
    return week, ["--archive"]


def boundaries_in_degrees(folder: Path) -> tuple[Week, list[str]]:
    week = _week(folder)
    from hardening_helpers import grid_frame

    frame = grid_frame(week.ids, week.names, 4, island=True, crs="EPSG:4326")
    frame.to_file(week.boundaries, layer="districts", driver="GPKG")
    return week, []


def week_in_the_future(folder: Path) -> tuple[Week, list[str]]:
    return _week(folder), ["--today", "2026-11-01"]


def duplicated_district_row(folder: Path) -> tuple[Week, list[str]]:
    return _week(folder, edit_table=lambda rows: [*rows, list(_latest(rows)[0])]), []


def count_not_a_number(folder: Path) -> tuple[Week, list[str]]:
    def edit(rows: list[list[str]]) -> list[list[str]]:
        _latest(rows)[2][4] = "twelve"
        return rows

    return _week(folder, edit_table=edit), []


def mapped_column_missing(folder: Path) -> tuple[Week, list[str]]:
    return _week(folder, config={"input": {"columns": {"ili_visits": "ili_cases"}}}), []


def no_visits_anywhere_this_week(folder: Path) -> tuple[Week, list[str]]:
    def edit(rows: list[list[str]]) -> list[list[str]]:
        for row in _latest(rows):
            row[4] = row[5] = "0"
        return rows

    return _week(folder, edit_table=edit), []


def every_district_suppressed(folder: Path) -> tuple[Week, list[str]]:
    return _week(folder, config={"analysis": {"min_visits": 1_000_000}}), []


def signing_key_missing(folder: Path) -> tuple[Week, list[str]]:
    return _week(folder, config={"output": {"signing_key": "no-such-key.pem"}}), ["--archive"]


def report_week_is_last_week(folder: Path) -> tuple[Week, list[str]]:
    return _week(folder, config={"weeks": {"report_week": WEEKS[-2]}}), []


CASES: list[Case] = [
    clean,
    report_week_not_in_table,
    knn_more_neighbours_than_districts,
    template_folder_missing,
    template_syntax_error,
    template_unknown_field,
    template_unknown_variable,
    template_not_utf8,
    output_folder_is_a_file,
    output_file_links_outside,
    archive_is_a_file,
    boundaries_in_degrees,
    week_in_the_future,
    duplicated_district_row,
    count_not_a_number,
    mapped_column_missing,
    no_visits_anywhere_this_week,
    every_district_suppressed,
    signing_key_missing,
    report_week_is_last_week,
]

MUST_BLOCK = {
    "report_week_not_in_table": "report-week-missing",
    "knn_more_neighbours_than_districts": "neighbours-impossible",
    "template_folder_missing": "template-folder-missing",
    "template_syntax_error": "template-invalid",
    "template_unknown_field": "template-invalid",
    "template_unknown_variable": "template-invalid",
    "template_not_utf8": "template-invalid",
    "output_folder_is_a_file": "output-folder-unusable",
    "output_file_links_outside": "output-folder-unusable",
    "archive_is_a_file": "output-folder-unusable",
    "week_in_the_future": "week-future",
}
"""Cases whose refusal is known, with the rule that names it (the others are found out)."""


def test_every_blocking_rule_is_listed_with_a_description() -> None:
    from sitrep.pipeline import PREFLIGHT_RULES

    listed = dict(PREFLIGHT_RULES)
    assert len(listed) == len(PREFLIGHT_RULES) and all(listed.values())
    assert set(MUST_BLOCK.values()) - {"week-future"} <= set(listed)


def _error_rules_in_table(text: str) -> set[str]:
    """Rule ids of the error lines of a printed findings table (sitrep.cli.common.print_findings)."""
    return {m.group(1) for m in re.finditer(r"(?m)^error\s+(\S+)", text)}


@pytest.mark.parametrize("case", CASES, ids=lambda c: c.__name__)
def test_check_refuses_what_build_refuses_for_the_same_reason(case: Case, tmp_path: Path) -> None:
    week, extra = case(tmp_path)
    archive = "--archive" in extra
    extra = [a for a in extra if a != "--archive"]
    today = extra[extra.index("--today") + 1] if "--today" in extra else TODAY.isoformat()
    config = str(week.config_path)
    check_code, check_out, check_err = run_cli(
        ["check", "--config", config, "--json", "--today", today]
    )
    build_args = ["build", "--config", config, "--today", today, "--quiet"]
    if not archive:
        build_args.append("--no-archive")
    build_code, _, build_err = run_cli(build_args)
    assert "Traceback" not in check_err + build_err
    if build_code in (2, 3):  # a configuration or archive error: the same code and message
        assert check_code == build_code
        assert check_err.strip() and check_err.strip() == build_err.strip()
        return
    assert check_code in (0, 1), check_err
    doc = json.loads(check_out)
    check_rules = {f["rule"] for f in doc["findings"] if f["severity"] == "error"}
    build_rules = _error_rules_in_table(build_err)
    if build_code != 0:
        assert check_code != 0, f"check passed, build refused: {build_err}"
        assert check_rules and check_rules == build_rules, (check_rules, build_err)
    else:
        assert check_code == 0, f"check refused what build made: {check_rules}"
    if case.__name__ in MUST_BLOCK:
        assert build_code == 1 and MUST_BLOCK[case.__name__] in check_rules
        first = next(f for f in doc["findings"] if f["rule"] == MUST_BLOCK[case.__name__])
        assert first["message"] in build_err.replace("\n", " ") or first["rule"] in build_err
    if case is clean:
        assert build_code == 0
    if case in (no_visits_anywhere_this_week, every_district_suppressed):
        assert build_code == 0  # the report says what could not be computed; it is still made


def test_check_notes_an_archived_week_that_build_would_refuse(tmp_path: Path) -> None:
    week = _week(tmp_path)
    config = str(week.config_path)
    assert run_cli(["build", "--config", config, "--today", TODAY.isoformat(), "--quiet"])[0] == 0
    code, out, _ = run_cli(["check", "--config", config, "--json", "--today", TODAY.isoformat()])
    assert code == 0  # not bad input: --no-archive previews it, --reissue corrects it
    note = next(f for f in json.loads(out)["findings"] if f["rule"] == "week-archived")
    assert note["severity"] == "info"
    assert "--no-archive" in note["message"] and "--reissue" in note["message"]
    code, _, err = run_cli(["build", "--config", config, "--today", TODAY.isoformat(), "--quiet"])
    assert code == 5 and "already archived" in err
