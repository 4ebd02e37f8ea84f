"""Tests of sitrep.analysis.weights (neighbour graphs of districts).

Reference data: libpysal's bundled examples ``columbus`` (49 Columbus, Ohio
neighbourhoods; Anselin 1988, Spatial Econometrics, Table 12.1) and ``sids2``
(100 North Carolina counties; Cressie 1993). Their GAL files are independent
neighbour lists shipped with libpysal: columbus.gal is queen contiguity,
sids2.gal is rook contiguity (docs/methods.md §5.1, checked there with libpysal).
"""

from __future__ import annotations

import warnings

import geopandas as gpd
import libpysal
import numpy as np
import pytest
from libpysal import examples
from shapely.geometry import box

from sitrep.analysis.weights import DistrictGraph, build_graph, graph_from_neighbours, subgraph
from sitrep.errors import AnalysisError


def _gal_neighbours(name: str) -> dict[str, tuple[str, ...]]:
    f = libpysal.io.open(examples.get_path(name))
    try:
        w = f.read()
    finally:
        f.close()
    return {str(k): tuple(sorted(str(j) for j in v)) for k, v in w.neighbors.items()}


def _lattice(
    rows: int, cols: int, *, extra: list[tuple[str, object]] | None = None
) -> gpd.GeoDataFrame:
    """Unit squares r{row}c{col}; optional extra (id, geometry) rows appended."""
    ids, geoms = [], []
    for r in range(rows):
        for c in range(cols):
            ids.append(f"r{r}c{c}")
            geoms.append(box(c, r, c + 1, r + 1))
    for i, g in extra or []:
        ids.append(i)
        geoms.append(g)
    return gpd.GeoDataFrame(
        {"district_id": ids, "district_name": ids}, geometry=geoms, crs="EPSG:3857"
    )


@pytest.fixture(scope="module")
def columbus() -> gpd.GeoDataFrame:
    df = gpd.read_file(examples.get_path("columbus.shp"))
    df["district_id"] = df["POLYID"].astype(str)
    return df


@pytest.fixture(scope="module")
def sids2() -> gpd.GeoDataFrame:
    df = gpd.read_file(examples.get_path("sids2.shp"))
    df["district_id"] = df["FIPS"].astype(str)
    return df


def test_columbus_queen_matches_bundled_gal(columbus: gpd.GeoDataFrame) -> None:
    dg = build_graph(columbus, kind="queen")
    # columbus.gal is queen contiguity with 118 joins (docs/methods.md §5.1 [LIB libpysal 4.14.1]).
    assert dg.neighbours == _gal_neighbours("columbus.gal")
    assert dg.n_links == 118
    assert dg.islands == ()
    assert dg.n_components == 1
    assert dg.ids == tuple(columbus["district_id"])
    assert dg.graph.transformation == "R"


def test_sids2_rook_matches_bundled_gal_and_queen_has_more_joins(sids2: gpd.GeoDataFrame) -> None:
    rook = build_graph(sids2, kind="rook")
    queen = build_graph(sids2, kind="queen")
    # sids2.gal is rook (231 joins); queen from the shapefile has 245 (docs/methods.md §5.1 [LIB]).
    assert rook.neighbours == _gal_neighbours("sids2.gal")
    assert rook.n_links == 231
    assert queen.n_links == 245
    differ = sum(rook.neighbours[i] != queen.neighbours[i] for i in rook.ids)
    assert differ == 26  # docs/methods.md §5.1: "26 counties differ" [LIB]


def test_rook_and_queen_on_a_lattice() -> None:
    # 3x3 unit squares [HAND]: the corner has 2 rook / 3 queen neighbours,
    # the centre 4 rook / 8 queen; joins: rook 12, queen 12 + 8 diagonals = 20.
    frame = _lattice(3, 3)
    rook = build_graph(frame, kind="rook")
    queen = build_graph(frame, kind="queen")
    assert rook.neighbours["r0c0"] == ("r0c1", "r1c0")
    assert queen.neighbours["r0c0"] == ("r0c1", "r1c0", "r1c1")
    assert len(rook.neighbours["r1c1"]) == 4
    assert len(queen.neighbours["r1c1"]) == 8
    assert (rook.n_links, queen.n_links) == (12, 20)


def test_weights_are_row_standardised_in_frame_order(columbus: gpd.GeoDataFrame) -> None:
    # Ids '1'..'49' sort differently as strings ('1', '10', '11', ...) than in frame
    # order; the sparse matrix must follow the frame order (w_ij = 1/|N(i)|, HAND).
    dg = build_graph(columbus, kind="queen")
    dense = dg.graph.sparse.toarray()
    pos = {d: p for p, d in enumerate(dg.ids)}
    expected = np.zeros((dg.n, dg.n))
    for i in dg.ids:
        for j in dg.neighbours[i]:
            expected[pos[i], pos[j]] = 1.0 / len(dg.neighbours[i])
    np.testing.assert_allclose(dense, expected, rtol=0, atol=1e-15)
    np.testing.assert_allclose(dense.sum(axis=1), np.ones(dg.n), rtol=1e-14)


def test_island_is_reported_without_any_warning() -> None:
    frame = _lattice(3, 3, extra=[("far", box(10, 10, 11, 11))])
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        dg = build_graph(frame, kind="queen")
    assert [str(w.message) for w in caught] == []
    assert dg.islands == ("far",)
    assert dg.neighbours["far"] == ()
    assert dg.n_components == 2  # the lattice and the island [HAND]
    assert dg.no_neighbours == ("far",)
    # An island keeps an all-zero row after row-standardisation (docs/methods.md §5.1).
    row = dg.graph.sparse.toarray()[dg.ids.index("far")]
    assert not row.any()
    assert any("far" in n for n in dg.notes)


def test_link_islands_to_nearest_by_boundary_distance() -> None:
    # The island at x in [4, 5], y in [0, 1] is 1 unit from r0c2 and farther from the rest
    # [HAND: boundary-to-boundary distance]; the link is added in both directions.
    frame = _lattice(3, 3, extra=[("isle", box(4, 0, 5, 1))])
    dg = build_graph(frame, kind="queen", link_islands_k=1)
    assert dg.islands == ("isle",)  # still listed: islands are reported before linking
    assert dg.linked_islands == (("isle", ("r0c2",)),)
    assert dg.neighbours["isle"] == ("r0c2",)
    assert "isle" in dg.neighbours["r0c2"]
    assert dg.n_components == 1
    assert dg.no_neighbours == ()
    # k = 2: r0c2 (distance 1) then r1c2 (distance 1, tie with r0c2 broken by id) [HAND]
    dg2 = build_graph(frame, kind="queen", link_islands_k=2)
    assert dg2.linked_islands == (("isle", ("r0c2", "r1c2")),)


def test_knn_has_exactly_k_outgoing_neighbours(columbus: gpd.GeoDataFrame) -> None:
    dg = build_graph(columbus, kind="knn", k=4)
    assert all(len(dg.neighbours[i]) == 4 for i in dg.ids)
    assert dg.islands == ()
    np.testing.assert_allclose(dg.graph.sparse.toarray().sum(axis=1), 1.0, rtol=1e-14)
    with pytest.raises(AnalysisError, match="k <= n - 1"):
        build_graph(columbus, kind="knn", k=49)


def test_subgraph_restricts_and_restandardises() -> None:
    # Chain a - b - c plus d - e; dropping b leaves a and c without neighbours,
    # dropping e leaves d without one [HAND].
    dg = graph_from_neighbours({"a": ["b"], "b": ["a", "c"], "c": ["b"], "d": ["e"], "e": ["d"]})
    sub = subgraph(dg, np.array([True, False, True, True, True]))
    assert sub.ids == ("a", "c", "d", "e")
    assert sub.dropped == ("b",)
    assert sub.islands == ("a", "c")
    assert sub.neighbours == {"a": (), "c": (), "d": ("e",), "e": ("d",)}
    dense = sub.graph.sparse.toarray()
    np.testing.assert_array_equal(dense.sum(axis=1), [0.0, 0.0, 1.0, 1.0])
    assert any("lost every neighbour" in n for n in sub.notes)
    # The parent's weights were not changed (Graph is immutable).
    assert dg.neighbours["b"] == ("a", "c")
    np.testing.assert_allclose(dg.graph.sparse.toarray()[1], [0.5, 0, 0.5, 0, 0])


def test_subgraph_of_a_lattice_equals_graph_built_without_the_district() -> None:
    full = build_graph(_lattice(3, 3), kind="rook")
    keep = np.array([d != "r1c1" for d in full.ids])
    sub = subgraph(full, keep)
    direct = graph_from_neighbours(
        {i: [j for j in full.neighbours[i] if j != "r1c1"] for i in full.ids if i != "r1c1"},
        kind="rook",
    )
    assert sub.neighbours == direct.neighbours
    np.testing.assert_allclose(sub.graph.sparse.toarray(), direct.graph.sparse.toarray())


@pytest.mark.parametrize(
    ("frame", "kwargs", "match"),
    [
        (_lattice(2, 2).drop(columns="district_id"), {}, "no 'district_id' column"),
        (_lattice(2, 2).assign(district_id=["a", "a", "b", "c"]), {}, "duplicates"),
        (_lattice(2, 2), {"kind": "hexagon"}, "must be one of"),
        (_lattice(2, 2), {"link_islands_k": -1}, "link_islands_k"),
    ],
)
def test_bad_input_is_rejected_with_a_message(
    frame: gpd.GeoDataFrame, kwargs: dict[str, object], match: str
) -> None:
    with pytest.raises(AnalysisError, match=match):
        build_graph(frame, **kwargs)  # type: ignore[arg-type]


def test_null_geometry_names_the_district() -> None:
    frame = _lattice(2, 2)
    frame.loc[2, "geometry"] = None
    with pytest.raises(AnalysisError, match="r1c0"):
        build_graph(frame)


def test_graph_from_neighbours_rejects_unknown_ids_and_mask_shape() -> None:
    with pytest.raises(AnalysisError, match="not districts"):
        graph_from_neighbours({"a": ["zz"]})
    dg = graph_from_neighbours({"a": ["b"], "b": ["a"]})
    assert isinstance(dg, DistrictGraph)
    with pytest.raises(AnalysisError, match="keep_mask"):
        subgraph(dg, np.array([1, 0]))
