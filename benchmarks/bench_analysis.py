"""Timing of the spatial analysis on synthetic irregular geographies (not a test).

Districts are the Voronoi cells of uniformly random points in a square
(shapely ``voronoi_polygons``, clipped to the square), which gives irregular
polygons with about six queen neighbours each, like real districts. For each
size the script times building the queen graph, one Local Moran's I with 999
permutations, and a whole :func:`sitrep.analysis.week.analyse_week` (two
weeks of counts, so Local Moran's I runs twice plus the global statistic).

Run::

    .venv/bin/python benchmarks/bench_analysis.py            # N = 500, 3000, 10000
    .venv/bin/python benchmarks/bench_analysis.py 500 2000   # chosen sizes
    .venv/bin/python benchmarks/bench_analysis.py --side-by-side 3000 9999

``--side-by-side N R`` times :func:`analyse_week` at N districts and R
permutations with this week's and last week's local Moran's I one after the
other (``SITREP_PARALLEL=0``) and side by side on two cores, best of three
each, and checks that the two district tables are identical.
"""

from __future__ import annotations

import os
import sys
import time
import warnings
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from shapely.geometry import MultiPoint, box

from sitrep.analysis.clusters import local_clusters
from sitrep.analysis.week import analyse_week
from sitrep.analysis.weights import build_graph
from sitrep.config import AnalysisSettings
from sitrep.model import CountTable, Districts, InputFile
from sitrep.weeks import EpiWeek, WeekSystem

SIZES = (500, 3000, 10000)


def voronoi_districts(n: int, seed: int = 1) -> gpd.GeoDataFrame:
    """``n`` Voronoi cells of random points in a 1000 x 1000 m square, ids in point order."""
    rng = np.random.default_rng(seed)
    side = 1000.0
    points = rng.uniform(0, side, size=(n, 2))
    frame = box(0, 0, side, side)
    cells = shapely.voronoi_polygons(MultiPoint(points), extend_to=frame)
    polys = [shapely.intersection(c, frame) for c in shapely.get_parts(cells)]
    # voronoi_polygons returns cells in arbitrary order: match each to its point.
    tree = shapely.STRtree(polys)
    owner = tree.query(shapely.points(points), predicate="within")
    order = np.empty(n, dtype=np.int64)
    order[owner[0]] = owner[1]
    geoms = [polys[k] for k in order]
    ids = [f"D{k:05d}" for k in range(n)]
    return gpd.GeoDataFrame(
        {"district_id": ids, "district_name": ids}, geometry=geoms, crs="EPSG:3035"
    )


def counts_table(ids: list[str], weeks: list[EpiWeek], seed: int = 2) -> CountTable:
    """Binomial ILI counts with a smooth spatial trend (so clusters exist)."""
    rng = np.random.default_rng(seed)
    rows = []
    trend = np.linspace(0.01, 0.06, len(ids))
    for w in weeks:
        visits = rng.integers(20, 600, size=len(ids))
        ili = rng.binomial(visits, trend)
        rows.append(
            pd.DataFrame(
                {
                    "district_id": ids,
                    "district_name": "",
                    "week": [w] * len(ids),
                    "reporting_sites": 2.0,
                    "ili_visits": ili.astype("int64"),
                    "total_visits": visits.astype("int64"),
                    "line": 0,
                }
            )
        )
    frame = pd.concat(rows, ignore_index=True)
    return CountTable(
        frame, WeekSystem.MMWR, InputFile("table", Path("synthetic.csv"), "0" * 64, 0)
    )


def bench(n: int) -> tuple[float, float, float, int]:
    frame = voronoi_districts(n)
    t0 = time.perf_counter()
    dg = build_graph(frame, kind="queen")
    t_graph = time.perf_counter() - t0

    y = np.random.default_rng(3).normal(size=n)
    t0 = time.perf_counter()
    local_clusters(y, dg, permutations=999, seed=12345)
    t_local = time.perf_counter() - t0

    weeks = [EpiWeek(2026, 3, WeekSystem.MMWR), EpiWeek(2026, 4, WeekSystem.MMWR)]
    table = counts_table(list(frame["district_id"]), weeks)
    districts = Districts(frame, InputFile("boundaries", Path("synthetic.gpkg"), "0" * 64, 0))
    t0 = time.perf_counter()
    analyse_week(table, None, districts, dg, AnalysisSettings(permutations=999))
    t_week = time.perf_counter() - t0
    return t_graph, t_local, t_week, dg.n_links


def side_by_side(n: int, permutations: int, repeats: int = 3) -> None:
    """Print sequential and side-by-side times of one week's analysis and whether they agree."""
    districts = Districts(voronoi_districts(n), InputFile("boundaries", Path("b.gpkg"), "0", 0))
    dg = build_graph(districts.frame)
    weeks = [EpiWeek(2025, 47, WeekSystem.MMWR), EpiWeek(2025, 48, WeekSystem.MMWR)]
    table = counts_table(list(districts.ids), weeks)
    settings = AnalysisSettings(permutations=permutations)
    times: dict[str, list[float]] = {"0": [], "1": []}
    tables = {}
    for switch in ("0", "1") * repeats:
        os.environ["SITREP_PARALLEL"] = switch
        t0 = time.perf_counter()
        result = analyse_week(table, None, districts, dg, settings)
        times[switch].append(time.perf_counter() - t0)
        tables[switch] = result.table
    os.environ.pop("SITREP_PARALLEL")
    same = tables["0"].equals(tables["1"])
    print(
        f"N={n} R={permutations}: one after the other best {min(times['0']):.2f} s, "
        f"side by side best {min(times['1']):.2f} s (cores {len(os.sched_getaffinity(0))}); "
        f"identical tables: {same}"
    )


def main(argv: list[str]) -> int:
    if argv[:1] == ["--side-by-side"]:
        warnings.simplefilter("error")
        side_by_side(int(argv[1]), int(argv[2]))
        return 0
    sizes = tuple(int(a) for a in argv) or SIZES
    warnings.simplefilter("error")  # the analysis must not warn
    print(f"{'N':>7} {'links':>7} {'graph s':>9} {'local 999 s':>12} {'analyse_week s':>15}")
    for n in sizes:
        t_graph, t_local, t_week, links = bench(n)
        print(f"{n:>7} {links:>7} {t_graph:>9.2f} {t_local:>12.2f} {t_week:>15.2f}", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
