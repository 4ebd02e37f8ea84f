"""Benchmark: read and validate a 3,000-district, 10-season extract (target < 2 s).

Run with ``.venv/bin/python benchmarks/bench_ingest.py``. The extract is
generated into a temporary folder (never kept): MMWR weeks 2016-W40 to
2026-W39 (522 weeks, including the 53-week years), 3,000 districts, one row
per district and week, plus last week's extract (the same minus the latest
week) for the cross-table rules. Timings are wall-clock, best of 3.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from sitrep.config import InputSettings, ValidationSettings
from sitrep.ingest.read import read_count_table
from sitrep.ingest.validate import validate_against_prior, validate_table
from sitrep.model import Districts, InputFile
from sitrep.weeks import EpiWeek, WeekSystem

N_DISTRICTS = 3_000
FIRST, LAST = EpiWeek(2016, 40), EpiWeek(2026, 39)
TARGET_S = 2.0


def make_counts(n_weeks: int, n_ids: int, seed: int = 1) -> tuple[np.ndarray, ...]:
    """Invented counts: total visits uniform 200..2999, ILI binomial(total, 0.02)."""
    rng = np.random.default_rng(seed)
    total = rng.integers(200, 3000, size=(n_weeks, n_ids))
    return rng.integers(2, 12, size=n_ids), rng.binomial(total, 0.02), total


def write_extract(
    path: Path, weeks: list[EpiWeek], ids: list[str], counts: tuple[np.ndarray, ...]
) -> int:
    sites, ili, total = counts
    with path.open("w", encoding="utf-8", newline="\n") as fh:
        fh.write("district_id,district_name,epi_week,reporting_sites,ili_visits,total_visits\n")
        for w, week in enumerate(weeks):
            label = str(week)
            fh.write(
                "".join(
                    f"{d},District {d},{label},{sites[k]},{ili[w, k]},{total[w, k]}\n"
                    for k, d in enumerate(ids)
                )
            )
    return len(weeks) * len(ids)


def districts_for(ids: list[str]) -> Districts:
    import geopandas as gpd
    from shapely.geometry import box

    geoms = [box(k * 10.0, 0.0, k * 10.0 + 10.0, 10.0) for k in range(len(ids))]
    frame = gpd.GeoDataFrame(
        {"district_id": ids, "district_name": [f"District {d}" for d in ids]},
        geometry=geoms,
        crs="EPSG:32630",
    )
    return Districts(frame=frame, source=InputFile("boundaries", Path("synthetic"), "", 0))


def best_of(n: int, fn):  # type: ignore[no-untyped-def]
    times, result = [], None
    for _ in range(n):
        start = time.perf_counter()
        result = fn()
        times.append(time.perf_counter() - start)
    return min(times), result


def main() -> int:
    ids = [f"{i:04d}" for i in range(1, N_DISTRICTS + 1)]
    weeks = [FIRST + k for k in range(LAST.weeks_since(FIRST) + 1)]
    settings, vsettings, system = (
        InputSettings(max_input_mb=500),
        ValidationSettings(),
        WeekSystem.MMWR,
    )
    districts = districts_for(ids)
    with tempfile.TemporaryDirectory() as tmp:
        current_path, prior_path = Path(tmp) / "current.csv", Path(tmp) / "prior.csv"
        start = time.perf_counter()
        counts = make_counts(len(weeks), len(ids))
        rows = write_extract(current_path, weeks, ids, counts)
        write_extract(prior_path, weeks[:-1], ids, counts)  # last week's: same, one week fewer
        gen = time.perf_counter() - start
        size_mb = current_path.stat().st_size / 1e6

        t_read, (current, report) = best_of(
            3, lambda: read_count_table(current_path, settings, system)
        )
        assert current is not None, report.findings[:5]
        prior, _ = read_count_table(prior_path, settings, system)
        assert prior is not None
        t_val, vreport = best_of(3, lambda: validate_table(current, districts, vsettings))
        t_prior, preport = best_of(3, lambda: validate_against_prior(current, prior, vsettings))

    total = t_read + t_val
    print(
        f"extract: {rows:,} rows ({N_DISTRICTS:,} districts x {len(weeks)} weeks), {size_mb:.1f} MB "
        f"(generated in {gen:.1f} s)"
    )
    print(f"read_count_table        {t_read:6.3f} s")
    print(f"validate_table          {t_val:6.3f} s   ({len(vreport.findings)} findings)")
    print(
        f"read + validate         {total:6.3f} s   target < {TARGET_S:g} s: "
        f"{'met' if total < TARGET_S else 'NOT met'}"
    )
    print(
        f"validate_against_prior  {t_prior:6.3f} s   ({len(preport.findings)} findings; "
        "prior read not counted)"
    )
    return 0 if total < TARGET_S else 1


if __name__ == "__main__":
    sys.exit(main())
