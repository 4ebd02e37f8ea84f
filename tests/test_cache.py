"""Tests of sitrep.cache (the on-disk spatial weights cache).

Reference data: libpysal's bundled ``columbus`` example (49 Columbus, Ohio
neighbourhoods; Anselin 1988, Spatial Econometrics, Table 12.1) and its
``columbus.gal``, the independent queen-contiguity neighbour list shipped
with libpysal (the same reference as tests/test_weights.py). A cached graph
must give back exactly the graph :func:`build_graph` makes, and the same
Local Moran's I (esda, fixed seed) as a fresh one; every damaged or foreign
entry must be rebuilt, never used.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import os
from pathlib import Path

import geopandas as gpd
import libpysal
import numpy as np
import pytest
from libpysal import examples
from shapely.geometry import box

from sitrep import cache
from sitrep.analysis.clusters import local_clusters
from sitrep.analysis.weights import DistrictGraph, build_graph
from sitrep.config import AnalysisSettings, Config, InputSettings, OutputSettings
from sitrep.model import Districts, InputFile


def _districts(frame: gpd.GeoDataFrame, digest: str) -> Districts:
    return Districts(frame, InputFile("boundaries", Path("b.gpkg"), digest, 0))


@pytest.fixture(scope="module")
def columbus() -> Districts:
    df = gpd.read_file(examples.get_path("columbus.shp"))
    df["district_id"] = df["POLYID"].astype(str)
    df["district_name"] = df["district_id"]
    return _districts(df[["district_id", "district_name", "geometry"]], "c" * 64)


@pytest.fixture()
def with_island() -> Districts:
    """A 3 x 3 lattice of unit squares plus an island square two units east."""
    ids, geoms = [], []
    for r in range(3):
        for c in range(3):
            ids.append(f"r{r}c{c}")
            geoms.append(box(c, r, c + 1, r + 1))
    ids.append("island")
    geoms.append(box(5, 1, 6, 2))
    frame = gpd.GeoDataFrame(
        {"district_id": ids, "district_name": ids}, geometry=geoms, crs="EPSG:3857"
    )
    return _districts(frame, "1" * 64)


def _gal_neighbours(name: str) -> dict[str, tuple[str, ...]]:
    f = libpysal.io.open(examples.get_path(name))
    try:
        w = f.read()
    finally:
        f.close()
    return {str(k): tuple(sorted(str(j) for j in v)) for k, v in w.neighbors.items()}


def _builder(d: Districts, a: AnalysisSettings, calls: list[int]):  # type: ignore[no-untyped-def]
    def build() -> DistrictGraph:
        calls.append(1)
        return build_graph(d.frame, kind=a.weights, k=a.knn_k, link_islands_k=a.link_islands_k)

    return build


def _same_graph(a: DistrictGraph, b: DistrictGraph) -> None:
    for field in (
        "ids",
        "kind",
        "islands",
        "linked_islands",
        "n_components",
        "n_links",
        "neighbours",
        "dropped",
        "notes",
    ):
        assert getattr(a, field) == getattr(b, field), field
    assert a.graph.transformation == b.graph.transformation == "R"
    assert a.graph.adjacency.index.equals(b.graph.adjacency.index)
    np.testing.assert_array_equal(a.graph.adjacency.to_numpy(), b.graph.adjacency.to_numpy())


def _entry(folder: Path) -> Path:
    (path,) = [p for p in folder.iterdir() if p.suffix == ".json"]
    return path


@pytest.mark.parametrize(
    "settings",
    [
        AnalysisSettings(weights="queen"),
        AnalysisSettings(weights="rook"),
        AnalysisSettings(weights="knn", knn_k=4),
    ],
    ids=["queen", "rook", "knn4"],
)
def test_hit_returns_exactly_the_built_graph(columbus: Districts, tmp_path: Path, settings) -> None:  # type: ignore[no-untyped-def]
    calls: list[int] = []
    build = _builder(columbus, settings, calls)
    first, miss = cache.cached_graph(tmp_path, columbus, InputSettings(), settings, build)
    second, hit = cache.cached_graph(tmp_path, columbus, InputSettings(), settings, build)
    assert (miss.status, hit.status, len(calls)) == ("miss", "hit", 1)
    assert hit.path == miss.path == _entry(tmp_path)
    _same_graph(first, second)
    if settings.weights == "queen":  # and the cached graph is still the published neighbour list
        assert dict(second.neighbours) == _gal_neighbours("columbus.gal")


def test_cached_graph_gives_the_same_local_moran(columbus: Districts, tmp_path: Path) -> None:
    settings = AnalysisSettings()
    build = _builder(columbus, settings, [])
    fresh, _ = cache.cached_graph(tmp_path, columbus, InputSettings(), settings, build)
    cached, outcome = cache.cached_graph(tmp_path, columbus, InputSettings(), settings, build)
    assert outcome.status == "hit"
    crime = columbus.frame.assign(y=gpd.read_file(examples.get_path("columbus.shp"))["CRIME"])["y"]
    one = local_clusters(crime.to_numpy(float), fresh, permutations=999, seed=12345)
    two = local_clusters(crime.to_numpy(float), cached, permutations=999, seed=12345)
    np.testing.assert_array_equal(one.local_i, two.local_i)
    np.testing.assert_array_equal(one.p_values, two.p_values)
    assert one.labels == two.labels


def test_islands_links_and_notes_survive_the_round_trip(
    with_island: Districts, tmp_path: Path
) -> None:
    settings = AnalysisSettings(link_islands_k=2)
    build = _builder(with_island, settings, [])
    fresh, _ = cache.cached_graph(tmp_path, with_island, InputSettings(), settings, build)
    cached, outcome = cache.cached_graph(tmp_path, with_island, InputSettings(), settings, build)
    assert outcome.status == "hit"
    assert fresh.islands == ("island",) and fresh.linked_islands and fresh.notes
    _same_graph(fresh, cached)


def _rewrite(path: Path, change) -> None:  # type: ignore[no-untyped-def]
    """Apply ``change`` to the stored payload and store it again with a valid checksum."""
    head, _, body = path.read_bytes().partition(b"\n")
    payload = json.loads(body)
    change(payload)
    body = json.dumps(payload, sort_keys=True, separators=(",", ":")).encode()
    magic, fmt, _ = head.decode().split(" ")
    path.write_bytes(f"{magic} {fmt} {hashlib.sha256(body).hexdigest()}\n".encode() + body)


def _swap_first_neighbour(p: dict) -> None:  # type: ignore[type-arg]
    first = next(i for i, nbs in enumerate(p["neighbours"]) if nbs)
    p["neighbours"][first] = [(p["neighbours"][first][0] + 7) % len(p["ids"])]


@pytest.mark.parametrize(
    ("damage", "reason"),
    [
        (lambda path: path.write_bytes(path.read_bytes()[:-40]), "checksum"),
        (
            lambda path: path.write_bytes(path.read_bytes().replace(b'"kind"', b'"KIND"', 1)),
            "checksum",
        ),
        (lambda path: path.write_bytes(b"\x00\xff garbage"), "not a sitrep weights cache entry"),
        (lambda path: path.write_bytes(path.read_bytes().replace(b" 1 ", b" 99 ", 1)), "format 99"),
        (lambda path: _rewrite(path, lambda p: p["ids"].reverse()), "district ids differ"),
        (lambda path: _rewrite(path, _swap_first_neighbour), "not symmetric"),
        (lambda path: _rewrite(path, lambda p: p["neighbours"][0].append(10_000)), "out of range"),
        (lambda path: _rewrite(path, lambda p: p["neighbours"][3].append(3)), "its own neighbour"),
        (lambda path: _rewrite(path, lambda p: p["key"].update(libpysal="0.0")), "libpysal"),
        (lambda path: _rewrite(path, lambda p: p.pop("notes")), "malformed"),
    ],
    ids=[
        "truncated",
        "edited",
        "garbage",
        "format",
        "ids",
        "asymmetric",
        "range",
        "self",
        "foreign-key",
        "missing-field",
    ],
)
def test_a_damaged_entry_is_rebuilt_never_used(
    columbus: Districts, tmp_path: Path, damage, reason
) -> None:  # type: ignore[no-untyped-def]
    settings = AnalysisSettings()
    calls: list[int] = []
    build = _builder(columbus, settings, calls)
    fresh, _ = cache.cached_graph(tmp_path, columbus, InputSettings(), settings, build)
    damage(_entry(tmp_path))
    again, outcome = cache.cached_graph(tmp_path, columbus, InputSettings(), settings, build)
    assert outcome.status == "rebuilt" and reason in outcome.reason and len(calls) == 2
    _same_graph(fresh, again)
    third, healed = cache.cached_graph(tmp_path, columbus, InputSettings(), settings, build)
    assert healed.status == "hit" and len(calls) == 2  # the entry was rewritten


def test_key_covers_file_reading_weights_and_versions(columbus: Districts) -> None:
    base = cache.graph_key(columbus, InputSettings(), AnalysisSettings())
    assert base["boundaries_sha256"] == "c" * 64 and base["format"] == cache.FORMAT
    assert base["libpysal"] == libpysal.__version__
    changed = [
        cache.graph_key(columbus, InputSettings(boundaries_id_column="POLYID"), AnalysisSettings()),
        cache.graph_key(columbus, InputSettings(boundaries_crs="EPSG:3857"), AnalysisSettings()),
        cache.graph_key(columbus, InputSettings(), AnalysisSettings(weights="rook")),
        cache.graph_key(columbus, InputSettings(), AnalysisSettings(link_islands_k=1)),
        cache.graph_key(_districts(columbus.frame, "d" * 64), InputSettings(), AnalysisSettings()),
    ]
    assert all(k != base for k in changed)
    # knn_k matters only for knn weights
    assert cache.graph_key(columbus, InputSettings(), AnalysisSettings(knn_k=7)) == base


def test_an_unwritable_folder_still_gives_the_graph(columbus: Districts, tmp_path: Path) -> None:
    blocker = tmp_path / "not-a-folder"
    blocker.write_text("x", encoding="utf-8")
    settings = AnalysisSettings()
    graph, outcome = cache.cached_graph(
        blocker / "weights", columbus, InputSettings(), settings, _builder(columbus, settings, [])
    )
    assert outcome.status == "miss" and "could not write the cache" in outcome.reason
    assert graph.n == 49


def test_a_failed_write_leaves_no_partial_file(
    columbus: Districts, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    settings = AnalysisSettings()
    graph = build_graph(columbus.frame)
    key = cache.graph_key(columbus, InputSettings(), settings)

    def broken_replace(src: str, dst: str) -> None:
        raise OSError("disk full")

    monkeypatch.setattr(os, "replace", broken_replace)
    with pytest.raises(OSError, match="disk full"):
        cache.save_graph(tmp_path, key, graph)
    assert list(tmp_path.iterdir()) == []
    monkeypatch.undo()
    path = cache.save_graph(tmp_path, key, graph)
    assert [p.name for p in tmp_path.iterdir()] == [path.name]
    assert cache.load_graph(tmp_path, key, graph.ids) is not None


def test_pipeline_uses_the_cache_under_the_archive_root(tmp_path: Path) -> None:
    from sitrep import pipeline

    frame = gpd.GeoDataFrame(
        {"district_id": ["a", "b", "c"], "district_name": ["A", "B", "C"]},
        geometry=[box(0, 0, 1, 1), box(1, 0, 2, 1), box(2, 0, 3, 1)],
        crs="EPSG:3857",
    )
    d = _districts(frame, "e" * 64)
    config = Config(output=OutputSettings(archive=tmp_path / "archive"))
    lines: list[str] = []
    pipeline._GRAPH_CACHE.clear()
    first = pipeline._graph(d, config, lines.append)
    pipeline._GRAPH_CACHE.clear()  # a new process: only the disk cache is left
    second = pipeline._graph(d, config, lines.append)
    assert lines == [pipeline._CACHE_WORDS["miss"], pipeline._CACHE_WORDS["hit"]]
    assert lines[1] == "neighbours: reused from an earlier run (same boundary file and settings)"
    assert (tmp_path / "archive" / pipeline.WEIGHTS_CACHE_FOLDER).is_dir()
    assert (
        dict(first.neighbours)
        == dict(second.neighbours)
        == {"a": ("b",), "b": ("a", "c"), "c": ("b",)}
    )
    assert (
        pipeline._graph(d, dataclasses.replace(config, output=OutputSettings()), lines.append)
        is second
    )
