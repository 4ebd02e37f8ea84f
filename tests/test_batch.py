"""Batch builds: many jurisdictions, one bundle each, one failure not stopping the rest.

Three copies of the demo configuration are written into a temporary folder,
pointing at the demo files by absolute path: "North" and "South" (different
jurisdiction names, so different archive folders) and "Broken", whose column
mapping names an ILI column the table does not have, so its validation blocks.
The same batch is built one after another in this process, on a local pool of
two processes, and on a Dask LocalCluster on 127.0.0.1; the bundles must be
byte-identical (SHA-256 of every file, FIPS 180-4 via hashlib) wherever they
were built, because a week's bundle depends only on its inputs and settings
(SOURCE_DATE_EPOCH is derived from the report week).

Permutations are lowered to 99 (the smallest the configuration accepts).
North keeps its PDF, so the comparison covers the PDF render process started
from pool and cluster workers; South is built without a PDF to keep the file
fast.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import re
from pathlib import Path

import pytest

from sitrep import cli
from sitrep.batch import JobResult, batch_exit_code, configs_in, run_batch, summary_table
from sitrep.errors import ConfigError

pytestmark = pytest.mark.slow

DEMO = Path(__file__).resolve().parent.parent / "demo_inputs"
TODAY = dt.date(2026, 11, 30)  # the Monday after the demo week 2026-W47
NAMES = ("North", "South")


def _set(text: str, key: str, value: str) -> str:
    """Replace the value of ``key = ...`` (first occurrence at the start of a line)."""
    new, count = re.subn(rf"(?m)^{re.escape(key)}\s*=\s*[^#\n]*", f"{key} = {value}", text, count=1)
    assert count == 1, key
    return new


def write_configs(folder: Path) -> list[Path]:
    """North, South and Broken configurations in ``folder`` (archive ``folder/archive``)."""
    folder.mkdir(parents=True, exist_ok=True)
    base = (DEMO / "sitrep.toml").read_text(encoding="utf-8")
    for key, name in (
        ("table", "extract_2026-W47.csv"),
        ("prior_table", "extract_2026-W46.csv"),
        ("history", "history.csv"),
        ("boundaries", "districts.gpkg"),
    ):
        base = _set(base, key, f'"{(DEMO / name).as_posix()}"')
    base = _set(base, "inbox", f'"{DEMO.as_posix()}"')
    base = _set(base, "permutations", "99")
    base = _set(base, "archive", f'"{(folder / "archive").as_posix()}"')
    paths = []
    for name in (*NAMES, "Broken"):
        text = _set(base, "jurisdiction", f'"{name}"')
        text = _set(text, "folder", f'"{(folder / ("out-" + name.lower())).as_posix()}"')
        if name == "Broken":
            text = _set(text, "ili_visits", '"ili_cases"')  # no such column in the table
        if name == "South":
            text = _set(text, "pdf", "false")  # keeps the test fast; North has the PDF
        path = folder / f"{name.lower()}.toml"
        path.write_text(text, encoding="utf-8")
        paths.append(path)
    return paths


def bundle_hashes(result: JobResult) -> dict[str, str]:
    assert result.bundle is not None
    root = Path(result.bundle)
    return {
        str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(root.rglob("*"))
        if p.is_file()
    }


@pytest.fixture(scope="module")
def serial(tmp_path_factory: pytest.TempPathFactory) -> list[JobResult]:
    north, _, broken = write_configs(tmp_path_factory.mktemp("serial"))
    return run_batch([north, broken], workers=1, today=TODAY)


@pytest.fixture(scope="module")
def pooled(tmp_path_factory: pytest.TempPathFactory) -> list[JobResult]:
    configs = write_configs(tmp_path_factory.mktemp("pool"))
    return run_batch(configs, workers=2, today=TODAY)


def test_broken_config_is_blocked_and_the_others_still_produce_bundles(
    pooled: list[JobResult],
) -> None:
    assert [r.jurisdiction for r in pooled] == [*NAMES, "Broken"]
    assert [r.status for r in pooled] == ["ok", "ok", "blocked"]
    assert [r.exit_code for r in pooled] == [0, 0, 1]
    for r in pooled[:2]:
        assert r.week == "2026-W47"
        assert r.bundle is not None and (Path(r.bundle) / "report.html").is_file()
        assert Path(r.bundle).parts[-3:] == (r.jurisdiction.lower(), "2026-W47", "v1")
    assert (Path(pooled[0].bundle or "") / "report.pdf").is_file()
    broken = pooled[2]
    assert broken.bundle is None and broken.week == ""
    assert "validation found" in broken.message and "ili_cases" in broken.message
    assert not (Path(broken.config).parent / "out-broken").exists()  # nothing written
    assert batch_exit_code(pooled) == 1
    assert bundle_hashes(pooled[0]) != bundle_hashes(pooled[1])  # the name reaches the bundle


def test_serial_gives_the_same_statuses_and_identical_bundles(
    serial: list[JobResult], pooled: list[JobResult]
) -> None:
    assert [r.status for r in serial] == ["ok", "blocked"]
    assert serial[0].bundle != pooled[0].bundle  # two archives ...
    assert bundle_hashes(serial[0]) == bundle_hashes(pooled[0])  # ... with the same bytes


def test_dask_cluster_gives_identical_bundles(
    tmp_path_factory: pytest.TempPathFactory, serial: list[JobResult]
) -> None:
    distributed = pytest.importorskip("distributed")
    configs = write_configs(tmp_path_factory.mktemp("dask"))
    with distributed.LocalCluster(
        n_workers=1,
        threads_per_worker=1,
        processes=False,  # keeps the test light: the worker runs in this process's threads
        protocol="tcp",
        host="127.0.0.1",
        dashboard_address=None,
    ) as cluster:
        results = run_batch([configs[0]], scheduler=cluster.scheduler_address, today=TODAY)
    assert [r.status for r in results] == ["ok"]
    assert bundle_hashes(results[0]) == bundle_hashes(serial[0])


def test_summary_table_lists_every_jurisdiction_with_its_status(pooled: list[JobResult]) -> None:
    table = summary_table(pooled)
    lines = table.splitlines()
    assert lines[0].split() == ["jurisdiction", "week", "status", "seconds", "bundle"]
    rows = {line.split()[0]: line.split() for line in lines[2:5]}
    assert rows["North"][1:3] == ["2026-W47", "ok"] and rows["North"][4] == pooled[0].bundle
    assert rows["Broken"][1:3] == ["-", "blocked"] and rows["Broken"][4] == "-"
    assert any(line.startswith("blocked Broken (") for line in lines)
    assert lines[-1] == "3 jurisdiction(s): 2 ok, 1 blocked, 0 failed"


def test_cli_batch_reports_each_result_and_exits_with_the_worst_code(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    broken = write_configs(tmp_path)[2]
    unreadable = tmp_path / "unreadable.toml"
    unreadable.write_text("[report\njurisdiction = 1\n", encoding="utf-8")  # not TOML
    code = cli.main(
        ["build", "--config", str(broken), "--config", str(unreadable), "--workers", "1"]
    )
    out = capsys.readouterr().out
    assert code == cli.EXIT_USAGE  # worst of 1 (blocked) and 2 (configuration error)
    assert "2 jurisdiction(s): 0 ok, 1 blocked, 1 failed" in out
    assert re.search(r"failed unreadable\.toml \(.*\): configuration error: .*not valid TOML", out)


def test_configs_dir_and_usage_errors(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    written = write_configs(tmp_path / "many")
    assert configs_in(tmp_path / "many") == sorted(written)
    empty = tmp_path / "empty"
    empty.mkdir()
    with pytest.raises(ConfigError, match="holds no"):
        configs_in(empty)
    assert cli.main(["build", "--configs-dir", str(empty)]) == cli.EXIT_USAGE
    assert cli.main(["build"]) == cli.EXIT_USAGE
    assert "needs --config" in capsys.readouterr().err
    with pytest.raises(ConfigError, match="at least 1"):
        run_batch(written, workers=0)
    # Two jurisdictions writing the same output folder are refused before anything runs.
    twin = tmp_path / "twin.toml"
    twin.write_text(
        _set(written[0].read_text(encoding="utf-8"), "jurisdiction", '"Twin"'), encoding="utf-8"
    )
    with pytest.raises(ConfigError, match="both write to"):
        run_batch([written[0], twin], workers=1)


def _fake_build(config, label, options):  # type: ignore[no-untyped-def]
    """Stands in for run_job in pool processes: dies for one configuration, succeeds for the rest."""
    import os

    if label.endswith("south.toml"):
        os._exit(9)  # the worker process dies, as when it is killed for lack of memory
    return JobResult(label, config.report.jurisdiction, "2026-W47", "ok", 0, 0.0, None, "fake")


def test_a_worker_that_dies_fails_only_its_own_job(tmp_path: Path) -> None:
    north, south, broken = write_configs(tmp_path)
    results = run_batch([north, south, broken], workers=2, today=TODAY, _function=_fake_build)
    assert [r.status for r in results] == ["ok", "failed", "ok"]
    assert "worker process died" in results[1].message and results[1].jurisdiction == "South"
    assert batch_exit_code(results) == 1


def test_scheduler_without_dask_installed_is_a_clear_usage_error(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import sys

    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed -> ImportError
    with pytest.raises(ConfigError, match=r"dask\.distributed, which is not installed"):
        run_batch(write_configs(tmp_path)[:1], scheduler="tcp://127.0.0.1:1", today=TODAY)
