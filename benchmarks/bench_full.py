"""Whole-bundle timing and peak memory of ``pipeline.build`` on synthetic jurisdictions (not a test).

For each size N the script writes an invented jurisdiction into a
temporary folder, once:

* ``districts.gpkg``: N districts in EPSG:32630 (metres): N - 1 Voronoi cells
  of uniformly random points inside a wobbly outline (a circle of radius
  200 km whose radius varies with three sine terms), each cell clipped to the
  outline (so cells at the coast are irregular and a few are multipart),
  plus one island district offshore that touches nothing;
* ``history.csv``: ``--past-seasons`` complete past seasons (MMWR weeks 40
  to 39), every district every week;
* ``extract_2026-W47.csv`` (season to date, 2026-W40 to W47) and
  ``extract_2026-W46.csv`` (last week's extract, with small revisions);
* ``sitrep.toml``: the demo's settings with ``--permutations``.

Counts: each season has a pooled ILI% curve (1.2 % baseline plus a Gaussian
epidemic peak of 3-6 % between season weeks 12 and 20); a district's rate
is the curve times a smooth spatial factor (0.6 to 1.4 west to east, so
clusters exist); total visits are log-normal (median 400, a few below the
suppression threshold) and ILI visits binomial.

Each run is a fresh ``python`` child process (so imports, and any JIT
compilation, count) that calls :func:`sitrep.pipeline.build` with the
``timings`` hook and archives a bundle into its own folder. The child
reports the seconds per stage, its import time and its peak resident memory
(``resource.getrusage(RUSAGE_SELF).ru_maxrss``; the PDF renders in a child
of the render server, whose peak is read from ``RUSAGE_CHILDREN`` after the
server is stopped). The table gives the median
of ``--repeats`` runs; ``total`` is the child's wall-clock time as seen
from this script.

Run::

    .venv/bin/python benchmarks/bench_full.py                          # N = 50, 500, 3000
    .venv/bin/python benchmarks/bench_full.py --sizes 3000 --permutations 9999
    .venv/bin/python benchmarks/bench_full.py --sizes 30000 --repeats 3 --json out.json
    .venv/bin/python benchmarks/bench_full.py --sizes 50 --batch 20 --workers 2   # batch timing

Generated inputs can be kept and reused with ``--workdir DIR``.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

DEFAULT_SIZES = (50, 500, 3000)
STAGES = (
    "read",
    "validate",
    "imports",
    "weights",
    "analysis",
    "thresholds",
    "maps",
    "html",
    "pdf",
    "drafts",
    "results",
    "archive",
)  # the same names as sitrep.pipeline.STAGES (not imported here: the parent stays light)
CRS = "EPSG:32630"
CENTRE = (500_000.0, 5_500_000.0)
RADIUS_M = 200_000.0
TODAY = "2026-11-30"  # the Monday after MMWR 2026-W47 (Sun 22 Nov to Sat 28 Nov 2026)


# --------------------------------------------------------------------------- geography


def _outline(n_vertices: int = 720) -> Any:
    """The wobbly jurisdiction outline (a shapely Polygon)."""
    import numpy as np
    import shapely

    theta = np.linspace(0.0, 2 * math.pi, n_vertices, endpoint=False)
    r = RADIUS_M * (
        1
        + 0.12 * np.sin(3 * theta + 0.4)
        + 0.07 * np.sin(7 * theta + 1.3)
        + 0.04 * np.sin(13 * theta + 2.1)
    )
    x = CENTRE[0] + r * np.cos(theta)
    y = CENTRE[1] + r * np.sin(theta)
    return shapely.Polygon(np.column_stack([x, y]))


def make_geography(n: int, seed: int = 1) -> Any:
    """``n`` districts: ``n - 1`` clipped Voronoi cells and one offshore island (GeoDataFrame)."""
    import geopandas as gpd
    import numpy as np
    import shapely

    if n < 4:
        raise SystemExit(f"sizes must be at least 4 districts, got {n}")
    rng = np.random.default_rng(seed)
    outline = _outline()
    xmin, ymin, xmax, ymax = outline.bounds
    points = np.empty((0, 2))
    while len(points) < n - 1:
        batch = rng.uniform((xmin, ymin), (xmax, ymax), size=(2 * n, 2))
        inside = shapely.contains_xy(outline, batch[:, 0], batch[:, 1])
        points = np.concatenate([points, batch[inside]])[: n - 1]
    cells = shapely.get_parts(
        shapely.voronoi_polygons(shapely.multipoints(points), extend_to=outline.envelope)
    )
    # voronoi_polygons returns the cells in no particular order: match each to its point.
    tree = shapely.STRtree(cells)
    pt_idx, cell_idx = tree.query(shapely.points(points), predicate="within")
    order = np.empty(n - 1, dtype=np.int64)
    order[pt_idx] = cell_idx
    clipped = shapely.intersection(cells[order], outline)
    # An island a little beyond the outline's easternmost point, about one cell in size.
    cell_radius = math.sqrt(outline.area / (n - 1) / math.pi)
    island = shapely.Point(xmax + 3 * cell_radius + 2_000, CENTRE[1]).buffer(
        max(cell_radius, 500.0), quad_segs=8
    )
    geoms = [shapely.MultiPolygon([g]) if g.geom_type == "Polygon" else g for g in clipped]
    geoms.append(shapely.MultiPolygon([island]))
    # Ids run west to east (so the spatial factor below is smooth in id order too).
    xs = np.array([g.centroid.x for g in geoms])
    rank = np.argsort(np.argsort(xs, kind="stable"), kind="stable")
    ids = [f"D{int(r) + 1:05d}" for r in rank]
    names = [f"District {int(r) + 1}" for r in rank]
    frame = gpd.GeoDataFrame({"district_id": ids, "district_name": names}, geometry=geoms, crs=CRS)
    return frame.sort_values("district_id").reset_index(drop=True)


# --------------------------------------------------------------------------- counts


def _season_weeks(start_year: int) -> list[Any]:
    from sitrep.weeks import EpiWeek, WeekSystem, weeks_in_year

    n_first = weeks_in_year(start_year, WeekSystem.MMWR)
    first = [EpiWeek(start_year, w, WeekSystem.MMWR) for w in range(40, n_first + 1)]
    second = [EpiWeek(start_year + 1, w, WeekSystem.MMWR) for w in range(1, 40)]
    return first + second


def _counts(
    weeks: list[Any],
    season_week0: int,
    factor: Any,
    visits_base: Any,
    peak: tuple[float, float],
    rng: Any,
) -> tuple[Any, Any, Any]:
    """Sites, ILI visits and total visits, arrays of shape (weeks, districts)."""
    import numpy as np

    height, centre = peak
    k = np.arange(len(weeks)) + season_week0
    curve = 1.2 + height * np.exp(-0.5 * ((k - centre) / 3.5) ** 2)  # pooled ILI %
    rate = np.clip(curve[:, None] * factor[None, :] / 100.0, 0.001, 0.5)
    total = np.maximum(rng.poisson(visits_base[None, :], size=rate.shape), 1)
    ili = rng.binomial(total, rate)
    sites = np.broadcast_to(np.maximum(1, np.round(visits_base / 150)), rate.shape).astype(int)
    return sites, ili, total


def _write_csv(path: Path, weeks: list[Any], ids: list[str], names: list[str], counts: Any) -> None:
    import numpy as np
    import pandas as pd

    sites, ili, total = counts
    nw, nd = ili.shape
    frame = pd.DataFrame(
        {
            "district_id": np.tile(np.asarray(ids, dtype=object), nw),
            "district_name": np.tile(np.asarray(names, dtype=object), nw),
            "epi_week": np.repeat(np.asarray([str(w) for w in weeks], dtype=object), nd),
            "reporting_sites": sites.reshape(-1),
            "ili_visits": ili.reshape(-1),
            "total_visits": total.reshape(-1),
        }
    )
    frame.to_csv(path, index=False, lineterminator="\n")


def make_inputs(
    folder: Path, n: int, *, past_seasons: int, permutations: int, seed: int = 1
) -> Path:
    """Write the jurisdiction's files into ``folder``; return the config path."""
    import numpy as np

    folder.mkdir(parents=True, exist_ok=True)
    frame = make_geography(n, seed)
    frame.to_file(folder / "districts.gpkg", layer="districts", driver="GPKG")
    ids = list(frame["district_id"])
    names = list(frame["district_name"])
    rng = np.random.default_rng(seed + 1)
    x = frame.geometry.representative_point().x.to_numpy()
    factor = 0.6 + 0.8 * (x - x.min()) / max(x.max() - x.min(), 1.0)
    visits_base = np.exp(rng.normal(math.log(400), 0.8, size=n))
    history_weeks: list[Any] = []
    history_counts: list[Any] = []
    for s in range(past_seasons):
        weeks = _season_weeks(2026 - past_seasons + s)
        peak = (rng.uniform(3.0, 6.0), rng.uniform(12.0, 20.0))
        history_weeks += weeks
        history_counts.append(_counts(weeks, 1, factor, visits_base, peak, rng))
    stacked = tuple(np.concatenate([c[i] for c in history_counts]) for i in range(3))
    _write_csv(folder / "history.csv", history_weeks, ids, names, stacked)
    current = _season_weeks(2026)[:8]  # 2026-W40 .. 2026-W47
    sites, ili, total = _counts(current, 1, factor, visits_base, (4.0, 14.0), rng)
    _write_csv(folder / "extract_2026-W47.csv", current, ids, names, (sites, ili, total))
    # Last week's extract: the same weeks less the newest, the last of them with about
    # 3 % fewer visits (late reports that arrived this week).
    prior = tuple(a[:-1].copy() for a in (sites, ili, total))
    late = rng.binomial(prior[2][-1], 0.97)
    prior[1][-1] = np.minimum(prior[1][-1], late)
    prior[2][-1] = np.maximum(late, 1)
    _write_csv(folder / "extract_2026-W46.csv", current[:-1], ids, names, prior)
    config = folder / "sitrep.toml"
    size_mb = max(p.stat().st_size for p in folder.glob("*.csv")) / 1e6
    config.write_text(
        f"""[report]
jurisdiction = "Synthetic {n}"
top_districts_in_pdf = 15

[input]
table = "extract_2026-W47.csv"
prior_table = "extract_2026-W46.csv"
history = "history.csv"
boundaries = "districts.gpkg"
boundaries_layer = "districts"
max_input_mb = {math.ceil(size_mb * 1.5 + 10)}

[weeks]
system = "mmwr"
season_start_week = 40

[analysis]
min_visits = 50
permutations = {permutations}
seed = 12345

[output]
folder = "out"
archive = "archive"
copy_inputs = true
pdf = true
""",
        encoding="utf-8",
    )
    return config


# --------------------------------------------------------------------------- child


def child(config_path: str, run_dir: str) -> int:
    """One timed build in this (fresh) process; prints one JSON line."""
    import dataclasses
    import datetime as dt
    import resource

    t0 = time.perf_counter()
    from sitrep import pipeline
    from sitrep.config import load_config

    imports = time.perf_counter() - t0
    config = load_config(config_path)
    out = Path(run_dir)
    config = dataclasses.replace(
        config,
        output=dataclasses.replace(config.output, folder=out / "out", archive=out / "archive"),
    )
    timings: dict[str, float] = {}
    t1 = time.perf_counter()
    result = pipeline.build(config, today=dt.date.fromisoformat(TODAY), timings=timings)
    build_s = time.perf_counter() - t1
    from sitrep.deliver import pdf

    if hasattr(pdf, "stop_render_server"):  # absent before the render server existed
        pdf.stop_render_server()  # so that its peak (and its children's) is in RUSAGE_CHILDREN
    self_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    child_kb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    bundle = result.bundle.path if result.bundle is not None else None
    size = sum(p.stat().st_size for p in bundle.rglob("*") if p.is_file()) if bundle else 0
    print(
        json.dumps(
            {
                "imports": imports,
                "build": build_s,
                "stages": timings,
                "peak_mb": self_kb / 1024,
                "peak_child_mb": child_kb / 1024,
                "bundle_mb": size / 1e6,
                "pdf_kb": (out / "out" / "report.pdf").stat().st_size / 1024,
                "html_kb": (out / "out" / "report.html").stat().st_size / 1024,
            }
        )
    )
    return 0


def run_once(config: Path, run_dir: Path) -> dict[str, Any]:
    """Start one child build and collect its figures (plus its wall-clock time)."""
    if run_dir.exists():
        shutil.rmtree(run_dir)
    run_dir.mkdir(parents=True)
    t0 = time.perf_counter()
    proc = subprocess.run(
        [sys.executable, str(Path(__file__).resolve()), "--child", str(config), str(run_dir)],
        capture_output=True,
        text=True,
        check=False,
    )
    wall = time.perf_counter() - t0
    if proc.returncode != 0:
        sys.stderr.write(proc.stdout[-2000:] + proc.stderr[-4000:])
        raise SystemExit(f"child build failed with exit code {proc.returncode}")
    figures = json.loads(proc.stdout.strip().splitlines()[-1])
    figures["total"] = wall
    return figures


def run_batch(config: Path, folder: Path, jurisdictions: int, workers: int) -> dict[str, float]:
    """The issue's batch target: ``jurisdictions`` configs with ``--workers`` in one ``sitrep build``,
    against half as many built one after another by separate ``sitrep build`` commands."""
    text = config.read_text(encoding="utf-8")
    configs = []
    for k in range(jurisdictions):
        path = folder / f"batch_{k:02d}.toml"
        body = text.replace('jurisdiction = "', f'jurisdiction = "Batch {k:02d} ', 1)
        body = body.replace('folder = "out"', f'folder = "out-batch-{k:02d}"', 1)
        path.write_text(body, encoding="utf-8")
        configs.append(path)
    sitrep = [sys.executable, "-m", "sitrep.cli", "build"]
    out: dict[str, float] = {}
    shutil.rmtree(folder / "archive", ignore_errors=True)
    half = configs[: max(jurisdictions // 2, 1)]
    t0 = time.perf_counter()
    for c in half:
        proc = subprocess.run(
            [*sitrep, "--config", str(c)], capture_output=True, text=True, check=False
        )
        if proc.returncode != 0:
            sys.stderr.write(proc.stdout[-3000:] + proc.stderr[-3000:])
            raise SystemExit(f"build of {c} failed with exit code {proc.returncode}")
    out[f"{len(half)} one after another"] = time.perf_counter() - t0
    shutil.rmtree(folder / "archive", ignore_errors=True)
    args = [*sitrep, "--workers", str(workers)]
    for c in configs:
        args += ["--config", str(c)]
    t0 = time.perf_counter()
    proc = subprocess.run(args, capture_output=True, text=True, check=False)
    out[f"{jurisdictions} with --workers {workers}"] = time.perf_counter() - t0
    if proc.returncode != 0:
        sys.stderr.write(proc.stdout[-3000:] + proc.stderr[-3000:])
        raise SystemExit(f"batch build failed with exit code {proc.returncode}")
    return out


# --------------------------------------------------------------------------- table


def _median(runs: list[dict[str, Any]], key: str, stage: bool = False) -> float:
    values = [(r["stages"].get(key, 0.0) if stage else r[key]) for r in runs]
    return float(statistics.median(values))


def summarise(n: int, runs: list[dict[str, Any]]) -> dict[str, Any]:
    return {
        "n": n,
        "runs": len(runs),
        "total_s": _median(runs, "total"),
        "imports_s": _median(
            runs, "imports"
        ),  # before build(); build's own lazy imports: stages_s["imports"]
        "stages_s": {s: _median(runs, s, stage=True) for s in STAGES},
        "peak_mb": _median(runs, "peak_mb"),
        "peak_pdf_child_mb": _median(runs, "peak_child_mb"),
        "bundle_mb": _median(runs, "bundle_mb"),
        "pdf_kb": _median(runs, "pdf_kb"),
        "html_kb": _median(runs, "html_kb"),
        "all_runs": runs,
    }


def print_table(rows: list[dict[str, Any]], permutations: int) -> None:
    cols = ["N", "total", "startup", *STAGES, "peak MB", "pdf MB"]
    print(
        f"median seconds per stage, {permutations} permutations "
        f"({rows[0]['runs'] if rows else 0} runs each; peak = max RSS, pdf = PDF child)"
    )
    print(" ".join(f"{c:>9}" for c in cols))
    for r in rows:
        cells = [f"{r['n']:>9}", f"{r['total_s']:>9.2f}", f"{r['imports_s']:>9.2f}"]
        cells += [f"{r['stages_s'][s]:>9.2f}" for s in STAGES]
        cells += [f"{r['peak_mb']:>9.0f}", f"{r['peak_pdf_child_mb']:>9.0f}"]
        print(" ".join(cells), flush=True)


def main(argv: list[str]) -> int:
    if argv[:1] == ["--child"]:
        return child(argv[1], argv[2])
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument(
        "--sizes",
        default=",".join(map(str, DEFAULT_SIZES)),
        help="comma-separated numbers of districts (default 50,500,3000)",
    )
    parser.add_argument("--repeats", type=int, default=3, help="runs per size (median reported)")
    parser.add_argument("--permutations", type=int, default=999)
    parser.add_argument("--past-seasons", type=int, default=3)
    parser.add_argument("--json", type=Path, default=None, help="also write the figures here")
    parser.add_argument(
        "--workdir",
        type=Path,
        default=None,
        help="keep generated inputs here and reuse them (default: a temp folder)",
    )
    parser.add_argument(
        "--batch",
        type=int,
        default=0,
        help="also time `sitrep build` of this many jurisdictions (smallest size)",
    )
    parser.add_argument("--workers", type=int, default=2, help="workers for --batch")
    args = parser.parse_args(argv)
    sizes = [int(s) for s in args.sizes.split(",") if s.strip()]
    base = args.workdir or Path(tempfile.mkdtemp(prefix="sitrep-bench-"))
    rows = []
    try:
        for n in sizes:
            folder = base / f"n{n}-s{args.past_seasons}-p{args.permutations}"
            config = folder / "sitrep.toml"
            if not config.is_file():
                t0 = time.perf_counter()
                make_inputs(
                    folder, n, past_seasons=args.past_seasons, permutations=args.permutations
                )
                print(f"generated N={n} in {time.perf_counter() - t0:.1f} s", file=sys.stderr)
            runs = [run_once(config, folder / f"run{k}") for k in range(args.repeats)]
            for k in range(args.repeats):
                shutil.rmtree(folder / f"run{k}", ignore_errors=True)
            rows.append(summarise(n, runs))
        print_table(rows, args.permutations)
        report: dict[str, Any] = {
            "permutations": args.permutations,
            "past_seasons": args.past_seasons,
            "repeats": args.repeats,
            "cpus": os.cpu_count(),
            "python": sys.version.split()[0],
            "sizes": rows,
        }
        if args.batch:
            n = sizes[0]
            folder = base / f"n{n}-s{args.past_seasons}-p{args.permutations}"
            batch = run_batch(folder / "sitrep.toml", folder, args.batch, args.workers)
            print(
                f"batch of {args.batch} x N={n}: "
                + ", ".join(f"{k} {v:.1f} s" for k, v in batch.items())
            )
            report["batch"] = {"jurisdictions": args.batch, "n": n, "seconds": batch}
        if args.json:
            args.json.write_text(json.dumps(report, indent=2) + "\n", encoding="utf-8")
    finally:
        if args.workdir is None:
            shutil.rmtree(base, ignore_errors=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
