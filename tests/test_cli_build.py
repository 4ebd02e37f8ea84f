"""Tests of the `build` verb's labels: an already archived week, batch statuses, exit codes.

An already archived week is made by writing a one-file bundle with
``write_bundle`` into the test's archive (the build refuses the week before
any analysis, so no report needs to be built first). Exit codes are the
table in ``sitrep.cli`` (0 done, 1 blocked, 2 usage, 3 delivery, 5 already
archived); the README lists the same codes.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from toml_fixtures import demo_config_file

from sitrep import cli
from sitrep.batch import JobResult, batch_exit_code, run_batch, summary_table
from sitrep.deliver.archive import write_bundle

ROOT = Path(__file__).resolve().parent.parent
TODAY = "2026-11-30"  # the Monday after the demo week 2026-W47
WEEK = "2026-W47"


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = cli.main(list(argv))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def _archived(folder: Path, jurisdiction: str = "Province of Quillmarsh") -> Path:
    """A v1 bundle of the demo week in ``folder/archive`` (its content does not matter here)."""
    bundle = write_bundle(folder / "archive", jurisdiction, WEEK, {"report.html": b"<p>v1</p>"}, {})
    return bundle.path


def test_rebuilding_an_archived_week_says_already_archived_and_exits_5(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    config = demo_config_file(tmp_path, output__pdf=False)
    v1 = _archived(tmp_path)
    code, out, err = _run(capsys, "build", "--config", str(config), "--today", TODAY)
    assert code == cli.EXIT_ARCHIVED == 5
    assert "delivery failed" not in err
    assert f"{WEEK} is already archived as {v1}" in err
    assert "--no-archive" in err and "--reissue" in err  # the preview and the correction
    assert not (tmp_path / "out").exists()  # nothing written, nothing built
    assert sorted(p.name for p in v1.parent.iterdir()) == ["v1"]
    # the way to preview it again works and archives nothing
    code, out, err = _run(
        capsys, "build", "--config", str(config), "--today", TODAY, "--no-archive"
    )
    assert code == cli.EXIT_OK, err
    assert (tmp_path / "out" / "report.html").is_file()
    assert sorted(p.name for p in v1.parent.iterdir()) == ["v1"]


def test_exit_code_5_is_documented_in_help_and_readme(capsys: pytest.CaptureFixture[str]) -> None:
    _, out, _ = _run(capsys, "build", "--help")
    assert re.search(r"5 already archived", out)
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert re.search(r"5 already archived", readme)


def _job(status: str, code: int, week: str = WEEK) -> JobResult:
    return JobResult("x.toml", f"J{code}", week, status, code, 0.0, None, "m")  # type: ignore[arg-type]


@pytest.mark.parametrize(
    ("codes", "expected"),
    [
        ((0, 0), 0),
        ((0, 5), 5),  # already archived is no fault, but not "done" either
        ((5, 1), 1),  # a blocked week is more serious than an archived one
        ((3, 5, 0), 3),
        ((1, 2, 5), 2),  # among faults the largest code, as before
    ],
)
def test_batch_exit_code_puts_faults_before_already_archived(
    codes: tuple[int, ...], expected: int
) -> None:
    status = {0: "ok", 1: "blocked", 2: "failed", 3: "failed", 5: "already-archived"}
    assert batch_exit_code([_job(status[c], c) for c in codes]) == expected


def test_batch_reports_an_archived_week_with_its_own_status_and_its_week(tmp_path: Path) -> None:
    north = demo_config_file(tmp_path / "north", report__jurisdiction="North", output__pdf=False)
    south = demo_config_file(
        tmp_path / "south",
        report__jurisdiction="South",
        output__pdf=False,
        analysis__permutations=99,
    )
    v1 = _archived(tmp_path / "north", "North")
    import datetime as dt

    results = run_batch([north, south], workers=1, today=dt.date(2026, 11, 30))
    archived, built = results
    assert (archived.status, archived.week, archived.exit_code) == ("already-archived", WEEK, 5)
    assert str(v1) in archived.message and "--reissue" in archived.message
    assert archived.bundle is None
    assert built.status == "ok" and built.week == WEEK
    assert batch_exit_code(results) == 5
    table = summary_table(results).splitlines()
    row = next(line.split() for line in table if line.startswith("North"))
    assert row[1:3] == [WEEK, "already-archived"]
    assert table[-1] == "2 jurisdiction(s): 1 ok, 1 already archived, 0 blocked, 0 failed"
    assert not any("failed North" in line for line in table)
