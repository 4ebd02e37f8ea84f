"""On-disk cache of the spatial weights, keyed by the boundary file's checksum.

Building queen or rook contiguity for tens of thousands of districts takes
seconds, and the boundaries rarely change from one week to the next. This
module keeps the finished neighbour structure of a boundary file in a folder
(by default ``ARCHIVE/.cache/weights/``, see :func:`sitrep.pipeline.build`)
and gives it back on the next run.

What is stored: one line ``sitrep-weights <format> <sha256>`` followed by a
JSON document (never pickle: the folder may be writable by others, and
loading must not run code) holding the district ids, each district's
neighbours as positions in that id list, the islands, the links added to
islands by design and the methods notes, together with the key it was made
for; the SHA-256 on the first line is that of the JSON bytes.

The key is the SHA-256 of the boundary file plus every setting that shapes
the districts or their neighbours (layer, id column, declared CRS, id
whitespace rule; weights kind, k, island links) and the versions of
libpysal, shapely (with its GEOS) and geopandas, and a format number. The
file name is the SHA-256 of that key.

A cached entry is never trusted blindly. It is used only when all of these
hold; otherwise the graph is rebuilt (and the entry rewritten):

* the first line is well formed, and the SHA-256 of the rest matches it;
* the rest parses as JSON;
* the stored key equals the key of this run, field by field;
* the stored ids equal this run's district ids, in order;
* every neighbour position is in range, no district is its own neighbour,
  and for contiguity every link is symmetric.

The graph is then rebuilt from the neighbour lists with
:func:`sitrep.analysis.weights.graph_from_neighbours`, which applies the same
binary weights and row standardisation as
:func:`~sitrep.analysis.weights.build_graph`, so a cached graph gives the
same statistics as a fresh one. Entries are written atomically (a temporary
file in the same folder, flushed, then ``os.replace``); a failed write leaves
no partial file and does not fail the run.
"""

from __future__ import annotations

import contextlib
import dataclasses
import hashlib
import json
import os
import tempfile
from collections.abc import Callable
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path
from typing import Any

from sitrep.analysis.weights import DistrictGraph, graph_from_neighbours
from sitrep.config import AnalysisSettings, InputSettings
from sitrep.model import Districts

__all__ = ["FORMAT", "CacheOutcome", "cached_graph", "graph_key", "load_graph", "save_graph"]

FORMAT = 1
"""Version of the stored layout; a different number is a miss."""

_CONTIGUITY = ("queen", "rook")
_MAGIC = "sitrep-weights"


@dataclasses.dataclass(frozen=True)
class CacheOutcome:
    """What the cache did for one run.

    Attributes
    ----------
    status : {"hit", "miss", "rebuilt", "off"}
        ``hit``: the stored graph was used. ``miss``: none was stored.
        ``rebuilt``: one was stored but failed a check (``reason``).
        ``off``: no cache folder was given.
    reason : str
        Why a stored entry was not used, or why writing failed ('' otherwise).
    path : Path or None
        The entry's file.
    """

    status: str
    reason: str = ""
    path: Path | None = None


def _version(name: str) -> str:
    try:
        return version(name)
    except PackageNotFoundError:
        return "not installed"


def graph_key(
    districts: Districts, input_settings: InputSettings, analysis: AnalysisSettings
) -> dict[str, Any]:
    """Everything the neighbour structure of ``districts`` depends on (JSON-ready).

    Parameters
    ----------
    districts : Districts
        The boundaries as read (their ``source.sha256`` is the file's checksum).
    input_settings : InputSettings
        How the boundary file was read.
    analysis : AnalysisSettings
        The weights settings.

    Returns
    -------
    dict
        Format number, file checksum, reading and weights settings, library versions.
    """
    import shapely

    return {
        "format": FORMAT,
        "boundaries_sha256": districts.source.sha256,
        "boundaries_layer": input_settings.boundaries_layer,
        "boundaries_id_column": input_settings.boundaries_id_column,
        "boundaries_crs": input_settings.boundaries_crs,
        "map_crs": input_settings.map_crs,
        "strip_id_whitespace": input_settings.strip_id_whitespace,
        "weights": analysis.weights,
        "knn_k": analysis.knn_k if analysis.weights == "knn" else None,
        "link_islands_k": analysis.link_islands_k,
        "libpysal": _version("libpysal"),
        "shapely": _version("shapely"),
        "geos": shapely.geos_version_string,
        "geopandas": _version("geopandas"),
    }


def _canonical(value: Any) -> bytes:
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=True).encode(
        "ascii"
    )


def _entry_path(folder: Path, key: dict[str, Any]) -> Path:
    return Path(folder) / f"{hashlib.sha256(_canonical(key)).hexdigest()}.json"


def save_graph(folder: Path, key: dict[str, Any], graph: DistrictGraph) -> Path:
    """Write ``graph`` under ``key`` into ``folder`` atomically; return the entry's path.

    Raises
    ------
    OSError
        If the folder cannot be created or written (the caller decides; a
        partly written temporary file is removed).
    """
    position = {d: i for i, d in enumerate(graph.ids)}
    payload = {
        "key": key,
        "ids": list(graph.ids),
        "kind": graph.kind,
        "neighbours": [[position[j] for j in graph.neighbours[i]] for i in graph.ids],
        "islands": list(graph.islands),
        "linked_islands": [[i, list(t)] for i, t in graph.linked_islands],
        "notes": list(graph.notes),
    }
    body = _canonical(payload)
    document = f"{_MAGIC} {FORMAT} {hashlib.sha256(body).hexdigest()}\n".encode("ascii") + body
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    target = _entry_path(folder, key)
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=".json", dir=folder)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(document)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, target)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
    return target


class _Invalid(Exception):
    """A stored entry failed a check (the message says which)."""


def load_graph(folder: Path, key: dict[str, Any], ids: tuple[str, ...]) -> DistrictGraph | None:
    """The stored graph for ``key`` and ``ids``, or None when there is none.

    Raises
    ------
    ValueError
        If an entry exists but fails one of the checks of the module notes
        (the message names the check); the caller rebuilds.
    """
    path = _entry_path(folder, key)
    try:
        raw = path.read_bytes()
    except (FileNotFoundError, NotADirectoryError):
        return None
    except OSError as exc:
        raise ValueError(f"cannot read {path.name}: {exc}") from exc
    try:
        return _decode(raw, key, ids)
    except _Invalid as exc:
        raise ValueError(str(exc)) from None
    except (ValueError, TypeError, KeyError, IndexError, AttributeError) as exc:
        raise ValueError(f"malformed entry ({type(exc).__name__}: {exc})") from None


def _decode(raw: bytes, key: dict[str, Any], ids: tuple[str, ...]) -> DistrictGraph:
    head, _, body = raw.partition(b"\n")
    fields = head.decode("ascii", errors="replace").split(" ")
    if len(fields) != 3 or fields[0] != _MAGIC:
        raise _Invalid("not a sitrep weights cache entry")
    if fields[1] != str(FORMAT):
        raise _Invalid(f"stored in format {fields[1]}, this sitrep reads {FORMAT}")
    if hashlib.sha256(body).hexdigest() != fields[2]:
        raise _Invalid("checksum does not match the content")
    payload = json.loads(body.decode("ascii"))
    if payload["key"] != key:
        changed = sorted(
            k for k in set(key) | set(payload["key"]) if payload["key"].get(k) != key.get(k)
        )
        raise _Invalid(f"made for other settings or versions ({', '.join(changed)})")
    stored_ids = tuple(payload["ids"])
    if stored_ids != ids:
        raise _Invalid("district ids differ from the boundary file's")
    n = len(ids)
    lists = payload["neighbours"]
    if len(lists) != n:
        raise _Invalid(f"{len(lists)} neighbour lists for {n} districts")
    sets: list[set[int]] = []
    for i, nbs in enumerate(lists):
        if not all(isinstance(j, int) and not isinstance(j, bool) and 0 <= j < n for j in nbs):
            raise _Invalid(f"district {ids[i]!r} has a neighbour position out of range")
        if i in nbs:
            raise _Invalid(f"district {ids[i]!r} is listed as its own neighbour")
        sets.append(set(nbs))
    kind = payload["kind"]
    if kind != key["weights"]:
        raise _Invalid(f"stored kind {kind!r} is not {key['weights']!r}")
    if kind in _CONTIGUITY and any(i not in sets[j] for i, s in enumerate(sets) for j in s):
        raise _Invalid("a contiguity link is not symmetric")
    neighbours = {ids[i]: [ids[j] for j in lists[i]] for i in range(n)}
    graph = graph_from_neighbours(neighbours, ids=ids, kind=kind)
    islands = tuple(str(i) for i in payload["islands"])
    linked = tuple(
        (str(i), tuple(str(t) for t in targets)) for i, targets in payload["linked_islands"]
    )
    known = set(ids)
    if not set(islands) <= known or not all(i in known and set(t) <= known for i, t in linked):
        raise _Invalid("islands name districts that are not in the boundary file")
    return dataclasses.replace(
        graph,
        islands=islands,
        linked_islands=linked,
        notes=tuple(str(note) for note in payload["notes"]),
    )


def cached_graph(
    folder: Path | None,
    districts: Districts,
    input_settings: InputSettings,
    analysis: AnalysisSettings,
    build: Callable[[], DistrictGraph],
) -> tuple[DistrictGraph, CacheOutcome]:
    """The district graph from the cache in ``folder``, or ``build()`` it and store it.

    Parameters
    ----------
    folder : Path or None
        Cache folder; None turns the disk cache off (``build()`` is called).
    districts, input_settings, analysis :
        See :func:`graph_key`.
    build : callable
        Makes the graph from scratch (e.g. :func:`sitrep.analysis.weights.build_graph`).

    Returns
    -------
    (DistrictGraph, CacheOutcome)
        The graph and what the cache did. Errors of the cache itself never
        propagate: an unusable entry is rebuilt and a failed write is
        reported in the outcome's ``reason``.
    """
    if folder is None:
        return build(), CacheOutcome("off")
    key = graph_key(districts, input_settings, analysis)
    path = _entry_path(folder, key)
    status, reason = "miss", ""
    try:
        graph = load_graph(folder, key, districts.ids)
    except ValueError as exc:
        graph, status, reason = None, "rebuilt", str(exc)
    if graph is not None:
        return graph, CacheOutcome("hit", path=path)
    graph = build()
    try:
        save_graph(folder, key, graph)
    except OSError as exc:
        reason = (reason + "; " if reason else "") + f"could not write the cache: {exc}"
    return graph, CacheOutcome(status, reason, path)
