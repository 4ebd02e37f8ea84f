"""Small, invented ingest fixtures: a clean count table and clean district polygons.

Every defect test starts from these and changes one thing. Nothing here reads
the demo files. Rows are lists of cell text in HEADER order; the row at index
``i`` of a table body is written on line ``i + 2`` (the header is line 1).
"""

from __future__ import annotations

import copy
import dataclasses
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from sitrep.config import ColumnMap, InputSettings

HEADER = [
    "district_id",
    "district_name",
    "epi_week",
    "reporting_sites",
    "ili_visits",
    "total_visits",
]
IDS = ["001", "002", "003", "004", "005", "006"]
NAMES = ["Arden", "Thévrisande", "Coldwater", "Dunmere", "Eastfold", "Fennick"]
WEEKS = ["2026-W44", "2026-W45", "2026-W46", "2026-W47"]  # MMWR; W47 = 2026-11-22..28
COL = {name: k for k, name in enumerate(HEADER)}


def counts(d: int, w: int) -> tuple[int, int, int]:
    """(reporting_sites, ili_visits, total_visits) of district index d in week index w."""
    return 3 + d % 3, 10 + 3 * d + 2 * w, 600 + 50 * d + 7 * w


def clean_rows(weeks: Sequence[str] = WEEKS, ids: Sequence[str] = IDS) -> list[list[str]]:
    """Body rows (no header), sorted by week then id, with no defect of any kind."""
    rows = []
    for w, week in enumerate(weeks):
        for d, ident in enumerate(ids):
            sites, ili, total = counts(d, w)
            rows.append([ident, NAMES[d % len(NAMES)], week, str(sites), str(ili), str(total)])
    return rows


def line_of(rows: list[list[str]], ident: str, week: str) -> int:
    """File line of the row for ``ident`` and ``week`` (header = line 1)."""
    for i, r in enumerate(rows):
        if r[0] == ident and r[2] == week:
            return i + 2
    raise KeyError((ident, week))


def changed(
    rows: list[list[str]], ident: str, week: str, column: str, value: str
) -> list[list[str]]:
    """A copy of ``rows`` with one cell replaced."""
    out = copy.deepcopy(rows)
    out[line_of(rows, ident, week) - 2][COL[column]] = value
    return out


def without(
    rows: list[list[str]], ident: str | None = None, week: str | None = None
) -> list[list[str]]:
    """A copy of ``rows`` without the rows matching ``ident`` and/or ``week``."""
    return [
        list(r)
        for r in rows
        if not ((ident is None or r[0] == ident) and (week is None or r[2] == week))
    ]


def write_csv(
    path: Path,
    rows: list[list[str]],
    header: Sequence[str] = HEADER,
    *,
    encoding: str = "utf-8",
    delimiter: str = ",",
    newline: str = "\n",
    bom: bool = False,
    tail: str = "",
) -> Path:
    """Write rows as delimited text exactly (no quoting added); ``tail`` is appended raw."""
    text = newline.join(delimiter.join(r) for r in [list(header), *rows]) + newline + tail
    data = text.encode(encoding)
    path.write_bytes((b"\xef\xbb\xbf" if bom else b"") + data)
    return path


def settings(**changes: Any) -> InputSettings:
    """Default input settings with some keys changed (``columns`` may be a dict)."""
    cols = changes.pop("columns", None)
    base = InputSettings()
    if cols is not None:
        changes["columns"] = dataclasses.replace(ColumnMap(), **cols)
    return dataclasses.replace(base, **changes)


# --------------------------------------------------------------------------- polygons

CELL = 10_000.0  # metres
ORIGIN = (500_000.0, 5_500_000.0)  # EPSG:32630 (UTM 30N)


def clean_polygons() -> Any:
    """Six districts on a 3 x 2 grid of 10 km squares in EPSG:32630.

    ``004`` has a hole (a lake, belonging to nobody); ``006`` is multipart: its
    square plus a 1 km islet 2 km east of the grid. Ids are text.
    """
    import geopandas as gpd
    from shapely.geometry import MultiPolygon, Polygon, box

    x0, y0 = ORIGIN
    geoms = []
    for k in range(6):
        col, row = k % 3, k // 3
        geoms.append(
            box(x0 + col * CELL, y0 + row * CELL, x0 + (col + 1) * CELL, y0 + (row + 1) * CELL)
        )
    sq = geoms[3]
    minx, miny, _, _ = sq.bounds
    lake = box(minx + 3000, miny + 3000, minx + 6000, miny + 6000)
    geoms[3] = Polygon(sq.exterior.coords, [lake.exterior.coords])
    islet = box(x0 + 3 * CELL + 2000, y0 + CELL + 2000, x0 + 3 * CELL + 3000, y0 + CELL + 3000)
    geoms[5] = MultiPolygon([geoms[5], islet])
    return gpd.GeoDataFrame(
        {"district_id": list(IDS), "district_name": list(NAMES)}, geometry=geoms, crs="EPSG:32630"
    )


def bow_tie(x0: float = ORIGIN[0], y0: float = ORIGIN[1]) -> Any:
    """A self-intersecting 'figure eight' square whose two loops' signed areas cancel."""
    from shapely.geometry import Polygon

    return Polygon([(x0, y0), (x0 + CELL, y0 + CELL), (x0 + CELL, y0), (x0, y0 + CELL), (x0, y0)])


def square_with_spike(x0: float = ORIGIN[0], y0: float = ORIGIN[1]) -> Any:
    """A 10 km square whose boundary crosses itself in a 1 m wide twisted spike (invalid).

    The spike's bow-tie adds well under 0.01 % of the area, so repair is safe.
    """
    from shapely.geometry import Polygon

    c = CELL
    return Polygon(
        [
            (x0, y0),
            (x0 + c, y0),
            (x0 + c, y0 + 5000),
            (x0 + c + 100, y0 + 5001),
            (x0 + c + 100, y0 + 5000),
            (x0 + c, y0 + 5001),
            (x0 + c, y0 + c),
            (x0, y0 + c),
            (x0, y0),
        ]
    )
