"""Spatial weights between districts (pure: no I/O, no plotting).

One function builds the neighbour structure of the boundary file once per
run, :func:`build_graph`; :func:`subgraph` restricts it to the districts that
have data in a given week. Both return a :class:`DistrictGraph`, which wraps a
row-standardised :class:`libpysal.graph.Graph` (immutable, so esda cannot
change it behind our back) together with the facts the report must state:
which districts have no neighbour, which links were added by design, and how
many connected parts the map has.
"""

from __future__ import annotations

import dataclasses
import warnings
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Literal

import numpy as np
import numpy.typing as npt

from sitrep.errors import AnalysisError

if TYPE_CHECKING:
    import geopandas as gpd
    from libpysal.graph import Graph

__all__ = ["DistrictGraph", "GraphKind", "build_graph", "graph_from_neighbours", "subgraph"]

GraphKind = Literal["queen", "rook", "knn"]
_KINDS: tuple[str, ...] = ("queen", "rook", "knn")

BoolArray = npt.NDArray[np.bool_]


@dataclasses.dataclass(frozen=True, eq=False)
class DistrictGraph:
    """Neighbour structure of the districts, with its caveats spelled out.

    Attributes
    ----------
    graph : libpysal.graph.Graph
        Row-standardised weights (``transformation == "R"``): each
        district's neighbours share a weight of 1 in equal parts; a district
        with no neighbour keeps an all-zero row (a zero-weight self-loop, the
        libpysal convention). Node order is ``ids``.
    ids : tuple of str
        District ids in the order of the boundary frame.
    kind : {"queen", "rook", "knn"}
        How neighbours were defined (``"subset"`` is never used: a
        :func:`subgraph` keeps the kind of its parent).
    islands : tuple of str
        Sorted ids that had no neighbour under ``kind`` before any linking.
        For a :func:`subgraph`, the ids left without a neighbour among the
        kept districts (original islands and those isolated by dropping).
    linked_islands : tuple of (str, tuple of str)
        Each island that was linked by design and the districts it was
        linked to (both directions), sorted by island id.
    n_components : int
        Number of connected parts of the (symmetrised) neighbour graph after
        linking; a remaining island is a part on its own.
    n_links : int
        Number of unordered district pairs linked in at least one direction
        (contiguity: the number of joins).
    neighbours : dict of str to tuple of str
        Binary neighbour sets after linking, each sorted by id. For k-nearest
        neighbours these are the *outgoing* links (not symmetric). Read only.
    dropped : tuple of str
        Sorted ids of the parent graph that a :func:`subgraph` left out
        (empty for a graph from :func:`build_graph`).
    notes : tuple of str
        Plain-language remarks for the methods section.
    """

    graph: Graph
    ids: tuple[str, ...]
    kind: str
    islands: tuple[str, ...]
    linked_islands: tuple[tuple[str, tuple[str, ...]], ...]
    n_components: int
    n_links: int
    neighbours: dict[str, tuple[str, ...]]
    dropped: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()

    @property
    def n(self) -> int:
        """Number of districts in the graph."""
        return len(self.ids)

    @property
    def no_neighbours(self) -> tuple[str, ...]:
        """Sorted ids that have no neighbour *now* (after linking)."""
        return tuple(sorted(i for i in self.ids if not self.neighbours[i]))

    def cardinalities(self) -> npt.NDArray[np.int64]:
        """Number of neighbours of each district, aligned with ``ids``."""
        return np.array([len(self.neighbours[i]) for i in self.ids], dtype=np.int64)

    def summary(self) -> dict[str, object]:
        """JSON-ready facts for the manifest and the methods note."""
        return {
            "kind": self.kind,
            "n_districts": self.n,
            "n_links": self.n_links,
            "n_components": self.n_components,
            "islands": list(self.islands),
            "linked_islands": [[i, list(nb)] for i, nb in self.linked_islands],
            "dropped": list(self.dropped),
        }


def build_graph(
    frame: gpd.GeoDataFrame,
    *,
    kind: GraphKind = "queen",
    k: int = 5,
    link_islands_k: int = 0,
    metric: gpd.GeoDataFrame | None = None,
) -> DistrictGraph:
    """Build the row-standardised neighbour graph of the districts.

    Neighbours are found with :meth:`libpysal.graph.Graph.build_contiguity`
    (``kind="queen"``: a shared boundary point is enough; ``"rook"``: a shared
    edge is needed; vertex-set method, ``strict=False``, which assumes a clean
    coverage) or :meth:`~libpysal.graph.Graph.build_knn` on each district's
    ``representative_point()`` (always inside the polygon; euclidean distance
    in ``metric`` when given, else in the frame's CRS, or in metres in the CRS
    chosen by :func:`sitrep.ingest.geometry.local_crs` when the frame's CRS is
    geographic: degrees of longitude and latitude are not comparable
    lengths). Contiguity is always found on ``frame`` itself. Weights are binary, then row-standardised
    (``transform("r")``), so w_ij = 1/|N(i)| for j in N(i).

    Parameters
    ----------
    frame : geopandas.GeoDataFrame
        Boundaries with a ``district_id`` column (unique strings) and a
        geometry column; row order defines the order of the graph.
    kind : {"queen", "rook", "knn"}, default "queen"
        Neighbour definition.
    k : int, default 5
        Number of nearest neighbours when ``kind="knn"``; must be below the
        number of districts.
    link_islands_k : int, default 0
        When positive, link each island (district without neighbour under
        ``kind``) to its ``link_islands_k`` nearest districts, measured
        boundary to boundary (``GeoSeries.distance``, in metres as for knn
        when the CRS is geographic; ties broken by id), in both directions.
        0 leaves islands unlinked.
    metric : geopandas.GeoDataFrame, optional
        The same districts, in the same row order, in the projected CRS in
        which distances are measured (``Districts.map_frame``).

    Returns
    -------
    DistrictGraph
        The weights and their facts (islands, links added, components).

    Raises
    ------
    AnalysisError
        If ``district_id`` is missing or not unique, a geometry is null,
        ``kind`` is unknown, ``k`` is not in 1..n-1, ``link_islands_k`` is
        negative, or libpysal cannot build the graph.

    Notes
    -----
    libpysal's island and disconnected-component warnings are caught here and
    reported through ``islands``, ``n_components`` and ``notes`` instead; the
    function emits no warning. An island is never given a p-value by
    :mod:`sitrep.analysis.clusters`.
    """
    ids = _checked_ids(frame, kind, k, link_islands_k)
    indexed = frame.set_axis(list(ids), axis=0)
    notes: list[str] = []
    if metric is not None:
        if len(metric) != len(ids):
            raise AnalysisError(
                f"the projected districts have {len(metric)} rows for {len(ids)} districts"
            )
        metric = metric.set_axis(list(ids), axis=0)
    elif (
        (kind == "knn" or link_islands_k > 0) and frame.crs is not None and frame.crs.is_geographic
    ):
        metric, note = _projected(indexed)
        notes.append(note)
    else:
        metric = indexed
    neighbours = _neighbours_of(_libpysal_graph(indexed, metric, kind, k), ids)
    islands = tuple(sorted(i for i in ids if not neighbours[i]))
    linked: list[tuple[str, tuple[str, ...]]] = []
    if islands and link_islands_k > 0:
        neighbours, linked = _link_islands(neighbours, islands, metric, link_islands_k)
        notes.append(
            f"{len(islands)} district(s) without a {kind} neighbour were linked to their "
            f"{link_islands_k} nearest district(s): "
            + "; ".join(f"{i} -> {', '.join(t)}" for i, t in linked)
        )
    elif islands:
        notes.append(
            f"{len(islands)} district(s) have no {kind} neighbour and are not tested for "
            f"clusters: {', '.join(islands)}"
        )
    return _assemble(ids, neighbours, kind, islands, tuple(linked), (), tuple(notes))


def _checked_ids(
    frame: gpd.GeoDataFrame, kind: str, k: int, link_islands_k: int
) -> tuple[str, ...]:
    """The district ids in row order, after checking the settings and the frame can build a graph."""
    if kind not in _KINDS:
        raise AnalysisError(
            f"weights kind must be one of {', '.join(_KINDS)}, got {kind!r}; "
            "set analysis.weights in the configuration"
        )
    if link_islands_k < 0:
        raise AnalysisError(
            f"link_islands_k must be 0 (do not link) or positive, got {link_islands_k}"
        )
    if "district_id" not in frame.columns:
        raise AnalysisError(
            "boundary frame has no 'district_id' column; columns present: "
            + ", ".join(map(str, frame.columns))
        )
    ids = tuple(str(i) for i in frame["district_id"])
    if len(set(ids)) != len(ids):
        dupes = sorted({i for i in ids if ids.count(i) > 1})
        raise AnalysisError(
            f"district ids must be unique to build neighbours, got duplicates {dupes}"
        )
    null = [ids[j] for j in np.flatnonzero(frame.geometry.isna().to_numpy())]
    if null:
        raise AnalysisError(
            f"district(s) {null} have no geometry; fix the boundary file before building neighbours"
        )
    n = len(ids)
    if kind == "knn" and not 1 <= k <= n - 1:
        raise AnalysisError(
            f"knn needs 1 <= k <= n - 1 = {n - 1} districts, got k={k}; lower analysis.knn_k"
        )
    return ids


def _libpysal_graph(
    indexed: gpd.GeoDataFrame, metric: gpd.GeoDataFrame, kind: str, k: int
) -> Graph:
    """libpysal's contiguity graph of ``indexed`` or knn graph of ``metric``, warnings caught."""
    from libpysal.graph import Graph

    with warnings.catch_warnings():
        # libpysal reports islands and components by warning; we report them as fields.
        warnings.filterwarnings("ignore", message=r".*island.*", category=UserWarning)
        warnings.filterwarnings("ignore", message=r".*disconnected.*", category=UserWarning)
        try:
            if kind == "knn":
                return Graph.build_knn(metric.geometry.representative_point(), k=k)
            return Graph.build_contiguity(indexed.geometry, rook=(kind == "rook"))
        except (ValueError, TypeError, AttributeError) as exc:
            raise AnalysisError(f"could not build {kind} neighbours: {exc}") from exc


def _link_islands(
    neighbours: dict[str, tuple[str, ...]],
    islands: tuple[str, ...],
    metric: gpd.GeoDataFrame,
    link_islands_k: int,
) -> tuple[dict[str, tuple[str, ...]], list[tuple[str, tuple[str, ...]]]]:
    """Each island linked both ways to its nearest districts; the new neighbours and the links."""
    sets = {i: set(nb) for i, nb in neighbours.items()}
    linked: list[tuple[str, tuple[str, ...]]] = []
    for island in islands:
        targets = _nearest(metric, island, link_islands_k)
        linked.append((island, targets))
        for t in targets:
            sets[island].add(t)
            sets[t].add(island)
    return {i: tuple(sorted(sets[i])) for i in neighbours}, linked


def graph_from_neighbours(
    neighbours: Mapping[str, Sequence[str]],
    *,
    ids: Sequence[str] | None = None,
    kind: str = "queen",
) -> DistrictGraph:
    """Build a :class:`DistrictGraph` from explicit neighbour lists.

    For test fixtures, documented hand-made links and GAL files read
    elsewhere. Weights are binary then row-standardised, as in
    :func:`build_graph`; an empty list makes an island.

    Parameters
    ----------
    neighbours : mapping of str to sequence of str
        Neighbour ids of each district (self-links are ignored).
    ids : sequence of str, optional
        Node order; default the mapping's key order.
    kind : str, default "queen"
        Recorded as the graph's kind.

    Returns
    -------
    DistrictGraph

    Raises
    ------
    AnalysisError
        If a neighbour id is not itself a district or ids are not unique.
    """
    order = tuple(str(i) for i in (ids if ids is not None else neighbours.keys()))
    if len(set(order)) != len(order):
        raise AnalysisError("district ids must be unique")
    known = set(order)
    clean: dict[str, tuple[str, ...]] = {}
    for i in order:
        nbs = {str(j) for j in neighbours.get(i, ()) if str(j) != i}
        unknown = sorted(nbs - known)
        if unknown:
            raise AnalysisError(
                f"district {i!r} lists neighbour(s) {unknown} that are not districts"
            )
        clean[i] = tuple(sorted(nbs))
    islands = tuple(sorted(i for i in order if not clean[i]))
    return _assemble(order, clean, kind, islands, (), (), ())


def subgraph(dg: DistrictGraph, keep_mask: npt.ArrayLike) -> DistrictGraph:
    """Restrict the graph to the districts in ``keep_mask``.

    Neighbour sets are intersected with the kept districts and the weights
    re-standardised by row over the remaining neighbours. A kept district
    whose neighbours were all dropped becomes a district with no neighbours
    (listed in ``islands`` of the result), exactly like an original island.

    Parameters
    ----------
    dg : DistrictGraph
        The full graph.
    keep_mask : array-like of bool, shape (dg.n,)
        True for districts to keep, aligned with ``dg.ids``.

    Returns
    -------
    DistrictGraph
        Graph over the kept districts (in ``dg.ids`` order) with ``dropped``
        listing the others and ``linked_islands`` restricted to kept ones.

    Raises
    ------
    AnalysisError
        If the mask does not have one boolean per district.
    """
    mask = np.asarray(keep_mask)
    if mask.shape != (dg.n,) or mask.dtype != np.bool_:
        raise AnalysisError(
            f"keep_mask must be {dg.n} booleans aligned with the graph's ids, "
            f"got shape {mask.shape} and dtype {mask.dtype}"
        )
    kept = tuple(i for i, m in zip(dg.ids, mask, strict=True) if m)
    keep = set(kept)
    neighbours = {i: tuple(j for j in dg.neighbours[i] if j in keep) for i in kept}
    islands = tuple(sorted(i for i in kept if not neighbours[i]))
    dropped = tuple(sorted(i for i, m in zip(dg.ids, mask, strict=True) if not m))
    linked = tuple(
        (i, tuple(t for t in nb if t in keep)) for i, nb in dg.linked_islands if i in keep
    )
    notes = list(dg.notes)
    new = sorted(set(islands) - set(dg.no_neighbours))
    if new:
        notes.append(
            f"{len(new)} district(s) lost every neighbour when districts without data were "
            f"left out and are not tested: {', '.join(new)}"
        )
    return _assemble(kept, neighbours, dg.kind, islands, linked, dropped, tuple(notes))


def _neighbours_of(g: Graph, ids: tuple[str, ...]) -> dict[str, tuple[str, ...]]:
    """Positive-weight neighbour sets of a Graph, sorted, self excluded."""
    adj = g.adjacency
    focal = adj.index.get_level_values("focal").astype(str).to_numpy()
    nbr = adj.index.get_level_values("neighbor").astype(str).to_numpy()
    weight = adj.to_numpy()
    sets: dict[str, set[str]] = {i: set() for i in ids}
    for f, t, w in zip(focal, nbr, weight, strict=True):
        if w != 0 and f != t:
            sets[f].add(t)
    return {i: tuple(sorted(sets[i])) for i in ids}


def _projected(frame: gpd.GeoDataFrame) -> tuple[gpd.GeoDataFrame, str]:
    """``frame`` in the UTM zone of its centre, for distances in metres, and a note saying so."""
    from sitrep.ingest.geometry import local_crs

    try:
        crs, how = local_crs(frame)
        projected = frame.to_crs(crs)
    except Exception as exc:  # pyproj raises several types for impossible transforms
        raise AnalysisError(
            f"distances cannot be measured in metres: the boundaries are in a geographic CRS "
            f"and cannot be projected ({type(exc).__name__}: {exc}); set input.map_crs"
        ) from exc
    return projected, (
        f"distances between districts were measured in metres in {how} (the boundaries "
        "are in longitude/latitude, where distances in degrees are not comparable)"
    )


def _nearest(frame: gpd.GeoDataFrame, island: str, k: int) -> tuple[str, ...]:
    """The ``k`` districts nearest to ``island`` by boundary distance (ties by id)."""
    geoms = frame.geometry
    target = geoms.loc[island]
    others = [i for i in frame.index if i != island]
    dist = geoms.loc[others].distance(target).to_numpy()
    order = sorted(range(len(others)), key=lambda j: (float(dist[j]), others[j]))
    return tuple(sorted(others[j] for j in order[:k]))


def _assemble(
    ids: tuple[str, ...],
    neighbours: dict[str, tuple[str, ...]],
    kind: str,
    islands: tuple[str, ...],
    linked: tuple[tuple[str, tuple[str, ...]], ...],
    dropped: tuple[str, ...],
    notes: tuple[str, ...],
) -> DistrictGraph:
    """Binary Graph from neighbour sets (isolates as 0-weight self-loops), then row-standardise."""
    import pandas as pd
    from libpysal.graph import Graph
    from scipy.sparse import coo_array
    from scipy.sparse.csgraph import connected_components

    heads: list[str] = []
    tails: list[str] = []
    weights: list[float] = []
    position = {i: p for p, i in enumerate(ids)}
    rows: list[int] = []
    cols: list[int] = []
    for i in ids:
        nbs = neighbours[i]
        if not nbs:
            heads.append(i)
            tails.append(i)
            weights.append(0.0)
            continue
        for j in sorted(nbs, key=position.__getitem__):
            heads.append(i)
            tails.append(j)
            weights.append(1.0)
            rows.append(position[i])
            cols.append(position[j])
    n = len(ids)
    adjacency = pd.Series(
        np.asarray(weights, dtype=float),
        name="weight",
        index=pd.MultiIndex.from_arrays(
            [pd.Index(heads, dtype=object), pd.Index(tails, dtype=object)],
            names=["focal", "neighbor"],
        ),
    )
    graph = Graph(adjacency, "B").transform("r")
    a = coo_array((np.ones(len(rows)), (rows, cols)), shape=(n, n)).tocsr()
    n_components = int(connected_components(a, directed=True, connection="weak")[0]) if n else 0
    n_links = int((a + a.T).nnz // 2)
    return DistrictGraph(
        graph=graph,
        ids=ids,
        kind=kind,
        islands=islands,
        linked_islands=linked,
        n_components=n_components,
        n_links=n_links,
        neighbours=dict(neighbours),
        dropped=dropped,
        notes=notes,
    )
