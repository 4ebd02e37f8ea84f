"""Tests of sitrep.progress and of the progress a build prints.

The input is the invented grid of tests/hardening_helpers.py (13 districts, MMWR week
2026-W47) with 199 permutations and no PDF. A terminal is stood in for by a text buffer
whose ``isatty()`` is true; the bar is asked for after 0 s, so a test does not depend on
how fast the machine is. Bundles are compared by the SHA-256 of every file (FIPS 180-4 via
hashlib).
"""

from __future__ import annotations

import io
import re
from pathlib import Path

import pytest
from hardening_helpers import TODAY, build, make_week, tree_hashes

from sitrep import cli
from sitrep.pipeline import STAGES
from sitrep.progress import STAGE_LABELS, Progress, TextProgress

pytestmark = pytest.mark.slow


class Terminal(io.StringIO):
    """A text buffer that says it is a terminal."""

    def isatty(self) -> bool:
        return True


class Recorder(Progress):
    def __init__(self) -> None:
        self.events: list[tuple[str, ...]] = []

    def start(self, stage: str, detail: str = "") -> None:
        self.events.append(("start", stage, detail))

    def step(self, stage: str, done: int, total: int) -> None:
        self.events.append(("step", stage, f"{done}/{total}"))

    def finish(self, stage: str, seconds: float) -> None:
        assert seconds >= 0
        self.events.append(("finish", stage))


def test_every_stage_has_words() -> None:
    assert set(STAGE_LABELS) == set(STAGES)
    assert all(label and "_" not in label for label in STAGE_LABELS.values())


def test_bar_is_drawn_in_place_on_a_terminal_then_replaced_by_the_stage_line() -> None:
    screen = Terminal()
    progress = TextProgress(screen, bar_after=0.0, width=10, tick=60.0)
    progress.start("maps")
    progress.step("maps", 0, 5)
    progress.step("maps", 2, 5)
    progress.finish("maps", 1.25)
    progress.close()
    text = screen.getvalue()
    assert "\r  maps and charts [----------] 0/5" in text
    assert "\r  maps and charts [####------] 2/5" in text
    last = text.split("\r")[-1]
    assert re.fullmatch(r"  maps and charts +1\.2 s\n", last)  # the bar line was cleared


def test_no_bar_before_the_delay_and_none_when_not_a_terminal() -> None:
    screen = Terminal()
    progress = TextProgress(screen, bar_after=3600.0, tick=60.0)
    progress.start("analysis", "9,999 permutations")
    progress.step("analysis", 1, 3)
    progress.finish("analysis", 0.5)
    progress.close()
    assert (
        screen.getvalue()
        == f"  {'statistics and permutation tests (9,999 permutations)':<56}    0.5 s\n"
    )
    log = io.StringIO()  # a log file or a pipe
    plain = TextProgress(log, bar_after=0.0)
    plain.start("maps")
    plain.step("maps", 3, 5)
    plain.finish("maps", 2.0)
    plain.close()
    assert "\r" not in log.getvalue() and "[" not in log.getvalue()
    assert log.getvalue().startswith("  maps and charts")


@pytest.fixture(scope="module")
def week(tmp_path_factory: pytest.TempPathFactory):  # type: ignore[no-untyped-def]
    return make_week(tmp_path_factory.mktemp("progress"), pdf=False)


def test_build_reports_each_stage_in_order_with_steps_for_permutations_and_maps(week) -> None:  # type: ignore[no-untyped-def]
    recorder = Recorder()
    build(week, archive=False, progress=recorder)
    started = [e[1] for e in recorder.events if e[0] == "start"]
    finished = [e[1] for e in recorder.events if e[0] == "finish"]
    expected = [s for s in STAGES if s != "pdf"]  # no PDF in this configuration
    assert started == finished == expected
    assert ("start", "analysis", "199 permutations") in recorder.events
    steps = [e[1:] for e in recorder.events if e[0] == "step"]
    # three permutation runs: this week's local and global statistics, last week's local one
    assert [s for s in steps if s[0] == "analysis"] == [("analysis", f"{k}/3") for k in range(4)]
    assert [s for s in steps if s[0] == "maps"] == [("maps", f"{k}/5") for k in range(6)]


def test_progress_never_reaches_the_bundle(week, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    import dataclasses

    config = week.config()
    quiet_cfg = dataclasses.replace(
        config,
        output=dataclasses.replace(config.output, folder=tmp_path / "q", archive=tmp_path / "qa"),
    )
    loud_cfg = dataclasses.replace(
        config,
        output=dataclasses.replace(config.output, folder=tmp_path / "l", archive=tmp_path / "la"),
    )
    from sitrep import pipeline

    quiet = pipeline.build(quiet_cfg, today=TODAY)
    screen = Terminal()
    loud = pipeline.build(loud_cfg, today=TODAY, progress=TextProgress(screen, bar_after=0.0))
    assert "\r" in screen.getvalue() and "statistics and permutation tests" in screen.getvalue()
    assert tree_hashes(quiet.bundle.path) == tree_hashes(loud.bundle.path)
    for path in loud.bundle.path.rglob("*"):
        if path.is_file():
            assert b"permutation tests (" not in path.read_bytes(), path


def test_cli_build_prints_plain_stage_lines_to_stderr_and_nothing_with_quiet(
    week,
    tmp_path: Path,
    capsys: pytest.CaptureFixture[str],  # type: ignore[no-untyped-def]
) -> None:
    from sitrep import pipeline

    config = str(week.config_path)
    pipeline._GRAPH_CACHE.clear()  # as in a new process: the weights come from disk or are built
    code = cli.main(["build", "--config", config, "--no-archive", "--today", TODAY.isoformat()])
    out, err = capsys.readouterr()
    assert code == cli.EXIT_OK, err
    lines = err.splitlines()
    assert "\r" not in err  # captured stderr is not a terminal
    assert [line.split("  ")[1].strip() for line in lines][:2] == [
        STAGE_LABELS["read"],
        STAGE_LABELS["validate"],
    ]
    assert all(re.search(r"\d+\.\d s$", line) for line in lines)
    assert "neighbours: " in out and "weights cache" not in out  # the cache in words
    assert "wrote " in out
    pipeline._GRAPH_CACHE.clear()
    code = cli.main(
        ["build", "--config", config, "--no-archive", "--quiet", "--today", TODAY.isoformat()]
    )
    out, err = capsys.readouterr()
    assert code == cli.EXIT_OK
    assert err == ""
    assert "wrote " in out and "neighbours" not in out
