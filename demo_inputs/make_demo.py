"""Generate the invented demo scenario for sitrep: the Province of Quillmarsh.

Every place name, shape and number written here is invented. Run as
``python demo_inputs/make_demo.py``; the outputs are written next to this file
and are byte-identical on every run (seeded RNG, sorted rows, fixed formats,
pinned GeoPackage timestamp).
"""

from __future__ import annotations

import os

os.environ["OGR_CURRENT_DATE"] = "2026-11-29T00:00:00Z"  # pins the gpkg timestamp

from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from epiweeks import Week
from esda import Moran_Local
from libpysal.graph import Graph

HERE = Path(__file__).resolve().parent
PROVINCE = "Province of Quillmarsh"
CRS = "EPSG:32630"
CX, CY = 500_000.0, 5_500_000.0  # centre of the province, metres
N_MAINLAND = 47  # plus one island district = 48
ISLAND_ANGLE, ISLET_ANGLE = np.radians(165.0), np.radians(300.0)  # seen from the centre
SEASONS = (2021, 2022, 2023, 2024, 2025)  # past seasons, by starting year
CURRENT = 2026
COLUMNS = "district_id,district_name,epi_week,reporting_sites,ili_visits,total_visits".split(",")
ISLAND_ID, SMALL_ID = "048", "042"  # the offshore island; the district with ~30 visits/week
# Ranges of (centre peak season-week, amplitude, sd in weeks, direction deg, speed km/week).
WAVE_RANGES = ((10, 20), (0.03, 0.065), (2.5, 4.0), (0, 360), (20, 40))
# Invented district names, assigned in id order (048 is the island).
NAMES = (
    "Brannoch Vale|Ostrelle|Kelmarrow Downs|Thévrisande|Skelvane & Orrowby|"
    "Quillhaven|Dunmorrow Fen|Astravel|Corrindale|Veshmoor|Pellowick|Tarnweald|"
    "Gloamridge|Ferrowgate|Yennimead|Murrowtide|Halvessy|Orlundy Cross|Brisselmark|"
    "Cauldry Reach|Ivvenhold|Sorrelwyn|Thrennock|Quennelshaw|Lorvant|Mistlecairn|"
    "Dravelmoss|Uppervask|Stellingmire|Fallowmist|Kessivane|Pemberlith|Rookhallow|"
    "Selmorrin|Talvenny|Gruvenholt|Ambrelle Point|Wickmarrow|Othrelfell|Brackenvoy|"
    "Nimmerlee|Cindrevale|Frostinghay|Murgavel|Whistlemere|Peverick|Quillmouth|"
    "Isle of Ventmorrow"
).split("|")


def _coast_radius(theta: np.ndarray, harmonics: np.ndarray) -> np.ndarray:
    """Return the radius (m) of the wobbly star-shaped coastline at ``theta``."""
    k = np.arange(2, 2 + len(harmonics))[:, None]
    amp, phase = harmonics[:, 0:1], harmonics[:, 1:2]
    return 95_000.0 * (1.0 + (amp * np.sin(k * theta + phase)).sum(axis=0))


def _blob(rng: np.random.Generator, x: float, y: float, r: float) -> shapely.Polygon:
    """Return a small irregular roundish polygon of mean radius ``r`` at (x, y)."""
    t = np.linspace(0.0, 2 * np.pi, 48, endpoint=False)
    rr = r * (
        1.0
        + 0.18 * np.sin(2 * t + rng.uniform(0, 2 * np.pi))
        + 0.08 * np.sin(5 * t + rng.uniform(0, 2 * np.pi))
    )
    return shapely.Polygon(np.column_stack([x + rr * np.cos(t), y + rr * np.sin(t)]))


def make_districts(rng: np.random.Generator) -> gpd.GeoDataFrame:
    """Build 48 districts: Voronoi cells in a wobbly coastline, one island, one islet.

    Parameters
    ----------
    rng : numpy.random.Generator
        Seeded generator; consumed in a fixed order.

    Returns
    -------
    geopandas.GeoDataFrame
        Columns ``district_id``, ``district_name``, ``geometry`` in EPSG:32630.
    """
    # Harmonics 2..9 of the coastline: decaying amplitudes, random phases.
    harmonics = np.column_stack([0.09 / np.arange(1, 9) ** 0.8, rng.uniform(0, 2 * np.pi, 8)])
    theta = np.linspace(0.0, 2 * np.pi, 720, endpoint=False)
    r = _coast_radius(theta, harmonics)
    coast = shapely.set_precision(
        shapely.Polygon(np.column_stack([CX + r * np.cos(theta), CY + r * np.sin(theta)])), 1.0
    )
    # Seeds: rejection sampling with a minimum spacing, then three Lloyd steps.
    x0, y0, x1, y1 = coast.bounds
    seeds: list[tuple[float, float]] = []
    while len(seeds) < N_MAINLAND:
        p = (rng.uniform(x0, x1), rng.uniform(y0, y1))
        if coast.contains(shapely.Point(p)) and all(
            np.hypot(p[0] - q[0], p[1] - q[1]) > 18_000 for q in seeds
        ):
            seeds.append(p)
    pts = np.array(seeds)
    for _ in range(3):
        vor = shapely.voronoi_polygons(shapely.MultiPoint(pts), extend_to=coast.buffer(50_000))
        cells = [c.intersection(coast) for c in vor.geoms]
        # voronoi_polygons does not keep input order: match each cell to its seed.
        cells = [next(c for c in cells if c.contains(shapely.Point(p))) for p in pts]
        pts = np.array([[c.centroid.x, c.centroid.y] for c in cells])
    cells = [shapely.set_precision(c, 1.0) for c in cells]
    assert all(c.geom_type == "Polygon" for c in cells), "a Voronoi cell split at the coast"

    # Island district offshore, and a small islet belonging to a coastal cell.
    def offshore(angle: float, gap: float) -> tuple[float, float]:
        rad = float(_coast_radius(np.array([angle]), harmonics)[0]) + gap
        return CX + rad * np.cos(angle), CY + rad * np.sin(angle)

    island = shapely.set_precision(_blob(rng, *offshore(ISLAND_ANGLE, 11_000), 5_500), 1.0)
    islet = shapely.set_precision(_blob(rng, *offshore(ISLET_ANGLE, 4_500), 1_600), 1.0)
    host = int(np.argmin([c.distance(islet) for c in cells]))
    cells[host] = shapely.MultiPolygon([cells[host], islet])
    # District ids in reading order: north to south in 25 km bands, then west to east.
    keys = [(-round(c.centroid.y / 25_000), c.centroid.x) for c in cells]
    order = sorted(range(N_MAINLAND), key=lambda i: keys[i])
    geoms = [cells[i] for i in order] + [island]
    gdf = gpd.GeoDataFrame(
        {"district_id": [f"{i + 1:03d}" for i in range(len(geoms))], "district_name": NAMES},
        geometry=geoms,
        crs=CRS,
    )
    _check_districts(gdf, coast)
    return gdf


def _check_districts(gdf: gpd.GeoDataFrame, coast: shapely.Polygon) -> None:
    """Assert validity, no slivers/overlaps/gaps, one island, one multipart."""
    g = gdf.geometry
    assert g.is_valid.all() and len(gdf) == 48
    mainland = shapely.union_all(g.iloc[:-1].values)
    assert g.iloc[:-1].area.sum() - mainland.area < 1e3  # no overlaps
    assert coast.symmetric_difference(mainland.intersection(coast)).area < 1e3  # no gaps
    main_parts = [max(getattr(x, "geoms", [x]), key=lambda p: p.area) for x in g]
    compact = [4 * np.pi * p.area / p.length**2 for p in main_parts]
    assert min(p.area for p in main_parts) > 50e6 and min(compact) > 0.3, "sliver found"
    assert (g.geom_type == "MultiPolygon").sum() == 1
    graph = Graph.build_contiguity(gdf.set_index("district_id"), rook=False)
    assert list(graph.isolates) == [ISLAND_ID], graph.isolates
    multi = gdf.loc[g.geom_type == "MultiPolygon"].iloc[0]
    islet = min(multi.geometry.geoms, key=lambda p: p.area)
    assert all(islet.distance(o) > 1_000 for o in g.drop(multi.name))


def _season_weeks(year: int, last: int = 39) -> list[Week]:
    """MMWR weeks from week 40 of ``year`` to week ``last`` (of year+1 if < 40)."""
    w, end = Week(year, 40, system="CDC"), Week(year + (last < 40), last, system="CDC")
    out = []
    while w <= end:
        out.append(w)
        w += 1
    return out


def _label(w: Week) -> str:
    """Return the week label used in the tables, e.g. ``2026-W47``."""
    return f"{w.year}-W{w.week:02d}"


def simulate(rng: np.random.Generator, gdf: gpd.GeoDataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Simulate weekly counts with a wave that travels across the province.

    Each season's peak time at a district is ``centre_peak + s / speed`` where
    ``s`` is the district's distance (km) along the season's direction of
    travel; ILI visits are binomial given total visits and the true rate.

    Parameters
    ----------
    rng : numpy.random.Generator
        Seeded generator.
    gdf : geopandas.GeoDataFrame
        The districts.

    Returns
    -------
    history, current : pandas.DataFrame
        Past five seasons, and the current season W40..W47 (final values).
    """
    n = len(gdf)
    cen = gdf.geometry.representative_point()
    xy = np.column_stack([(cen.x - CX) / 1000.0, (cen.y - CY) / 1000.0])  # km from centre
    baseline = (
        0.0115
        + 0.002 * np.sin(xy[:, 0] / 60 + 1) * np.cos(xy[:, 1] / 70)
        + rng.normal(0, 0.0005, n)
    )
    baseline = np.clip(baseline, 0.008, 0.015)
    visits = np.clip(np.exp(rng.normal(np.log(1100), 0.55, n)), 300, 4000)
    visits[gdf["district_id"].to_numpy() == SMALL_ID] = 30.0
    sites = np.clip(np.round(visits / 330), 2, 12).astype(int)
    susceptibility = np.exp(rng.normal(0, 0.08, n))
    # Season -> list of waves, each (centre peak season-week, amplitude, sd, direction, speed).
    waves = {y: [tuple(rng.uniform(lo, hi) for lo, hi in WAVE_RANGES)] for y in SEASONS}
    waves[2023] = [(11.0, 0.045, 2.8, 300.0, 30.0), (21.0, 0.035, 3.2, 90.0, 25.0)]  # double peak
    waves[CURRENT] = [(14.0, 0.05, 3.0, 45.0, 25.0)]  # from the south-west towards the north-east
    frames = []
    for year in (*SEASONS, CURRENT):
        weeks = _season_weeks(year, 39 if year < CURRENT else 47)
        t = np.arange(1, len(weeks) + 1, dtype=float)[:, None]  # season week, W40 = 1
        rate = np.repeat(baseline[None, :], len(weeks), axis=0)
        for peak, amp, sd, direction, speed in waves[year]:
            d = np.radians(direction)
            s = xy[:, 0] * np.cos(d) + xy[:, 1] * np.sin(d)
            rate += amp * susceptibility * np.exp(-0.5 * ((t - peak - s / speed) / sd) ** 2)
        rate *= np.exp(rng.normal(0, 0.06, rate.shape))
        wk = np.array([w.week for w in weeks])[:, None]
        season_factor = 1 + 0.06 * np.cos(2 * np.pi * (wk - 3) / 52) - 0.12 * np.isin(wk, (52, 1))
        down = (rng.random(rate.shape) < 0.04) & (sites > 2)
        n_sites = sites - down
        # Fewer sites -> fewer visits; ILI adds a little to the total load.
        mean = visits * season_factor * (n_sites / sites) * (1 + 3 * (rate - baseline))
        total = rng.poisson(mean * np.exp(rng.normal(0, 0.05, rate.shape)))
        ili = rng.binomial(total, np.clip(rate, 0, 1))
        frames.append(
            pd.DataFrame(
                {
                    "district_id": np.tile(gdf["district_id"].to_numpy(), len(weeks)),
                    "district_name": np.tile(gdf["district_name"].to_numpy(), len(weeks)),
                    "epi_week": np.repeat([_label(w) for w in weeks], n),
                    "reporting_sites": n_sites.ravel(),
                    "ili_visits": ili.ravel(),
                    "total_visits": total.ravel(),
                }
            )
        )
    return pd.concat(frames[:-1], ignore_index=True), frames[-1]


def make_extracts(
    rng: np.random.Generator, current: pd.DataFrame
) -> tuple[pd.DataFrame, pd.DataFrame, list[str]]:
    """Split the current season into last week's and this week's extract.

    Last week's extract (W40..W46) is the base. This week's copies it, revises
    two W45 cells, adds late reports to W46 for five districts, appends W47.

    Returns
    -------
    extract_w46, extract_w47 : pandas.DataFrame
    notes : list of str
        Human-readable description of every revised cell.
    """
    w46 = current[current["epi_week"] <= "2026-W46"].reset_index(drop=True)
    w47 = current.copy()
    candidates = [f"{i:03d}" for i in range(1, 48) if f"{i:03d}" != SMALL_ID]  # mainland only
    picked = rng.choice(candidates, size=7, replace=False)
    notes = []

    def idx(district: str, week: str) -> int:
        return int(w47.index[(w47["district_id"] == district) & (w47["epi_week"] == week)][0])

    a, b = idx(picked[0], "2026-W45"), idx(picked[1], "2026-W45")
    w47.loc[a, "ili_visits"] += 4  # late-coded ILI visits
    w47.loc[b, "total_visits"] += 37  # corrected denominator
    for i, col in ((a, "ili_visits"), (b, "total_visits")):
        d = w47.loc[i, "district_id"]
        notes.append(f"2026-W45 district {d}: {col} {w46.loc[i, col]} -> {w47.loc[i, col]}")
    for d in sorted(picked[2:]):
        i = idx(d, "2026-W46")
        tot, ili = int(w46.loc[i, "total_visits"]), int(w46.loc[i, "ili_visits"])
        extra = int(round(tot * rng.uniform(0.05, 0.20)))
        extra_ili = max(1, int(rng.binomial(extra, ili / tot)))
        w47.loc[i, ["total_visits", "ili_visits"]] = [tot + extra, ili + extra_ili]
        notes.append(f"2026-W46 district {d}: total_visits {tot} -> {tot + extra}, ")
        notes[-1] += f"ili_visits {ili} -> {ili + extra_ili}"
    assert (w47["ili_visits"] <= w47["total_visits"]).all()
    return w46, w47, notes


def lisa_clusters(
    gdf: gpd.GeoDataFrame, extract: pd.DataFrame, week: str
) -> tuple[list[str], list[str]]:
    """High-high and low-low district ids of Local Moran's I on ILI% in ``week``.

    Queen contiguity, row-standardised, 999 permutations, seed 12345,
    significant at ``p_sim < 0.05``. The island district has no neighbours
    and is left out.
    """
    mainland = gdf[gdf["district_id"] != ISLAND_ID].set_index("district_id")
    w = Graph.build_contiguity(mainland, rook=False).transform("r")
    rows = extract[extract["epi_week"] == week].set_index("district_id").loc[mainland.index]
    lisa = Moran_Local(
        (rows["ili_visits"] / rows["total_visits"]).to_numpy(), w, permutations=999, seed=12345
    )
    sig = lisa.p_sim < 0.05
    return list(mainland.index[sig & (lisa.q == 1)]), list(mainland.index[sig & (lisa.q == 3)])


def check_clusters(gdf: gpd.GeoDataFrame, extract: pd.DataFrame) -> None:
    """Assert a south-western high-high cluster at W47 that differs from W46's.

    Parameters
    ----------
    gdf : geopandas.GeoDataFrame
        The districts.
    extract : pandas.DataFrame
        This week's extract (W46 as revised, and W47).
    """
    hh46, ll46 = lisa_clusters(gdf, extract, "2026-W46")
    hh47, ll47 = lisa_clusters(gdf, extract, "2026-W47")
    print(f"2026-W46 (revised): HH {hh46}  LL {ll46}")
    print(f"2026-W47:           HH {hh47}  LL {ll47}")
    cen = gdf.set_index("district_id").geometry.representative_point()[hh47]
    assert len(hh47) >= 3 and len(ll47) >= 2 and set(hh47) != set(hh46)
    sw = (cen.x - CX) + (cen.y - CY)  # negative: south-west of the NW-SE diagonal
    assert (sw < 0).all() and cen.x.mean() < CX and cen.y.mean() < CY, "HH cluster not south-west"


def _write_csv(df: pd.DataFrame, name: str) -> None:
    df = df[COLUMNS].sort_values(["epi_week", "district_id"], kind="stable")
    df.to_csv(HERE / name, index=False, lineterminator="\n", encoding="utf-8")


def main() -> None:
    """Generate every demo input file and run the self-checks."""
    rng = np.random.default_rng(20261129)
    gdf = make_districts(rng)
    history, current = simulate(rng, gdf)
    w46, w47, notes = make_extracts(rng, current)
    gpkg = HERE / "districts.gpkg"
    gpkg.unlink(missing_ok=True)
    gdf.to_file(
        gpkg,
        layer="districts",
        driver="GPKG",
        engine="pyogrio",
        promote_to_multi=True,
        layer_options={"DESCRIPTION": f"{PROVINCE} (invented demo districts)"},
    )
    _write_csv(history, "history.csv")
    _write_csv(w46, "extract_2026-W46.csv")
    _write_csv(w47, "extract_2026-W47.csv")
    print("\n".join(notes))
    hh, ll = lisa_clusters(gdf, w46, "2026-W46")
    print(f"2026-W46 (as sent): HH {hh}  LL {ll}")
    check_clusters(gdf, w47)


if __name__ == "__main__":
    main()
