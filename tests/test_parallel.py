"""Tests of sitrep.analysis.parallel (two computations on two cores) and of its use by analyse_week.

What is checked is behaviour, not speed (speed is in benchmarks/bench_analysis.py): the child's
result is the sequential one, a failing side is raised from this process, no child is left behind,
and the week's analysis is the same whether its two local Moran's I run side by side or not. The
permutation p-values are compared with esda's Moran_Local run directly with the same seed
(reference library).
"""

from __future__ import annotations

import os
import pickle
import threading
from pathlib import Path

import esda
import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from shapely.geometry import box

from sitrep.analysis import parallel, week
from sitrep.analysis.clusters import local_clusters
from sitrep.analysis.parallel import can_fork, side_by_side
from sitrep.analysis.week import analyse_week
from sitrep.analysis.weights import build_graph
from sitrep.config import AnalysisSettings
from sitrep.model import CountTable, Districts, InputFile
from sitrep.weeks import EpiWeek, WeekSystem

needs_fork = pytest.mark.skipif(
    not (hasattr(os, "fork") and parallel.usable_cores() >= 2),
    reason="no fork or fewer than two usable cores",
)


@pytest.fixture(autouse=True)
def _idle_threads_of_other_tests(monkeypatch: pytest.MonkeyPatch) -> None:
    """Admit threads that earlier tests of this run left idle (e.g. a Dask offload thread).

    These tests are about the fork itself; in a real build any unknown thread keeps both
    computations in one process (test_another_thread_keeps_both_computations_here).
    """
    main = threading.main_thread()
    left = {t.name for t in threading.enumerate() if t is not main}
    monkeypatch.setattr(parallel, "FORK_TOLERANT_THREADS", parallel.FORK_TOLERANT_THREADS | left)
    monkeypatch.delenv("SITREP_PARALLEL", raising=False)


def _children() -> set[int]:
    """Process ids of this process's children, running or unreaped (Linux /proc)."""
    path = f"/proc/{os.getpid()}/task/{os.getpid()}/children"
    if not os.path.exists(path):  # pragma: no cover - other systems
        return set()
    with open(path) as f:
        return {int(p) for p in f.read().split()}


@needs_fork
def test_the_second_computation_runs_in_another_process_and_returns_its_value() -> None:
    here, there = side_by_side(os.getpid, os.getpid)
    assert here == os.getpid()
    assert there != os.getpid()


@needs_fork
def test_seeded_results_from_the_child_equal_the_sequential_ones() -> None:
    def draw() -> np.ndarray:
        return np.random.default_rng(12345).permutation(1000)

    _, from_child = side_by_side(lambda: None, draw)
    np.testing.assert_array_equal(from_child, draw())


@needs_fork
def test_a_child_that_fails_is_run_again_here_and_raises_here() -> None:
    parent = os.getpid()

    def fails_in_child() -> str:
        if os.getpid() != parent:
            raise RuntimeError("only in the child")
        return "computed here"

    assert side_by_side(lambda: 1, fails_in_child) == (1, "computed here")

    def always_fails() -> None:
        raise ValueError("bad input")

    before = _children()
    with pytest.raises(ValueError, match="bad input"):
        side_by_side(lambda: 1, always_fails)
    assert _children() <= before


@needs_fork
def test_when_the_first_computation_raises_the_child_is_stopped() -> None:
    def slow() -> int:
        import time

        time.sleep(30)
        return 1

    def broken() -> int:
        raise KeyError("first side")

    before = _children()
    with pytest.raises(KeyError, match="first side"):
        side_by_side(broken, slow)
    assert _children() <= before


def test_parallel_switch_off_runs_both_here(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("SITREP_PARALLEL", "0")
    assert not can_fork()
    assert side_by_side(os.getpid, os.getpid) == (os.getpid(), os.getpid())
    assert side_by_side(os.getpid, os.getpid, fork=False) == (os.getpid(), os.getpid())


def test_one_core_runs_both_here(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(parallel, "usable_cores", lambda: 1)
    assert not can_fork()


def _lattice(side: int) -> Districts:
    ids = [f"Q{r:02d}{c:02d}" for r in range(side) for c in range(side)]
    frame = gpd.GeoDataFrame(
        {"district_id": ids, "district_name": ids},
        geometry=[box(c, r, c + 1, r + 1) for r in range(side) for c in range(side)],
        crs="EPSG:3035",
    )
    return Districts(frame, InputFile("boundaries", Path("lattice.gpkg"), "0" * 64, 1))


def test_a_cluster_result_pickles_with_read_only_arrays() -> None:
    districts = _lattice(5)
    dg = build_graph(districts.frame)
    values = np.arange(25, dtype=float)
    result = local_clusters(values, dg, permutations=99, seed=7)
    again = pickle.loads(pickle.dumps(result))
    np.testing.assert_array_equal(again.p_values, result.p_values)
    assert again.labels == result.labels
    assert not again.p_values.flags.writeable
    assert not again.tested.flags.writeable


def _two_weeks(districts: Districts) -> CountTable:
    rng = np.random.default_rng(2026)
    rows = []
    for k in (10, 11):
        for i, d in enumerate(districts.ids):
            n = int(rng.integers(2000, 4000))
            rate = 0.03 + 0.08 * (i % 30 < 12) + 0.01 * (k - 10)
            rows.append(
                {
                    "district_id": d,
                    "district_name": d,
                    "week": EpiWeek(2026, k, WeekSystem.MMWR),
                    "reporting_sites": 1.0,
                    "ili_visits": int(rng.binomial(n, rate)),
                    "total_visits": n,
                    "line": len(rows) + 2,
                }
            )
    return CountTable(
        pd.DataFrame(rows), WeekSystem.MMWR, InputFile("table", Path("table.csv"), "0" * 64, 1)
    )


@needs_fork
def test_the_week_is_the_same_with_its_two_local_statistics_side_by_side(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    districts = _lattice(12)
    dg = build_graph(districts.frame)
    table = _two_weeks(districts)
    settings = AnalysisSettings(permutations=199, seed=99)
    steps: list[tuple[int, int]] = []

    monkeypatch.setattr(week, "PARALLEL_MIN_WORK", 0)
    together = analyse_week(
        table, None, districts, dg, settings, on_step=lambda d, t: steps.append((d, t))
    )
    monkeypatch.setenv("SITREP_PARALLEL", "0")
    apart = analyse_week(table, None, districts, dg, settings)

    pd.testing.assert_frame_equal(together.table, apart.table)
    assert together.prior_clusters is not None and apart.prior_clusters is not None
    np.testing.assert_array_equal(together.prior_clusters.p_values, apart.prior_clusters.p_values)
    assert steps == [(0, 3), (1, 3), (2, 3), (3, 3)]
    # Reference: esda's Moran_Local on last week's ILI% with the same seed and permutations.
    last = EpiWeek(2026, 10, WeekSystem.MMWR)
    rows = table.frame[[w == last for w in table.frame["week"]]]
    y = (100.0 * rows["ili_visits"] / rows["total_visits"]).to_numpy()
    reference = esda.Moran_Local(
        y, dg.graph, transformation="r", permutations=199, seed=99, n_jobs=1
    )
    np.testing.assert_allclose(together.prior_clusters.p_values, reference.p_sim)


@needs_fork
def test_the_progress_bar_thread_does_not_keep_the_week_from_running_side_by_side() -> None:
    import io

    from sitrep.progress import TextProgress

    progress = TextProgress(io.StringIO(), terminal=True, bar_after=0.0)
    progress.start("analysis")
    progress.step("analysis", 0, 3)
    try:
        names = {t.name for t in threading.enumerate()} - {threading.main_thread().name}
        assert "sitrep-progress" in names and names <= parallel.FORK_TOLERANT_THREADS
        assert can_fork()
        here, there = side_by_side(os.getpid, os.getpid)
        assert there != here
    finally:
        progress.close()


def test_another_thread_keeps_both_computations_here() -> None:
    release = threading.Event()
    other = threading.Thread(target=release.wait, name="someone-else")
    other.start()
    try:
        assert not can_fork()
        assert side_by_side(os.getpid, os.getpid) == (os.getpid(), os.getpid())
    finally:
        release.set()
        other.join()
