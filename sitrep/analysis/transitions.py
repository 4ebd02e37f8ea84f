"""How local clusters changed since last week (pure: no I/O).

Two views, both deterministic (ids sorted, never a set's iteration order):

* per district, :func:`district_transitions` compares this week's label with
  last week's (new, persisting, ended, changed type);
* per cluster, :func:`cluster_groups` joins significant districts of the same
  label that are neighbours into groups, and :func:`compare_groups` says which
  groups appeared, grew, shrank, moved, persisted or vanished.
"""

from __future__ import annotations

import dataclasses
import enum
from collections.abc import Sequence

from sitrep.analysis.clusters import SIGNIFICANT_LABELS, ClusterResult
from sitrep.analysis.weights import DistrictGraph
from sitrep.errors import AnalysisError
from sitrep.model import ClusterLabel

__all__ = [
    "LABEL_ORDER",
    "ClusterGroup",
    "ClusterTransitions",
    "GroupChange",
    "Transition",
    "cluster_groups",
    "compare_groups",
    "compare_weeks",
    "district_transitions",
]

LABEL_ORDER: tuple[ClusterLabel, ...] = (
    ClusterLabel.HIGH_HIGH,
    ClusterLabel.LOW_LOW,
    ClusterLabel.HIGH_LOW,
    ClusterLabel.LOW_HIGH,
)
"""Order in which groups are listed: clusters (HH, LL) before outliers (HL, LH)."""

_UNTESTED = frozenset(
    {ClusterLabel.NO_DATA, ClusterLabel.NO_NEIGHBOURS, ClusterLabel.NOT_ASSESSABLE}
)


class Transition(enum.Enum):
    """A district's cluster status this week compared with last week."""

    NEW = "new"
    """Significant now; tested and not significant last week."""
    PERSISTING = "persisting"
    """Significant with the same label in both weeks."""
    ENDED = "ended"
    """Significant last week; tested and not significant now."""
    CHANGED_TYPE = "changed type"
    """Significant in both weeks with different labels (e.g. high-high to low-low)."""
    NOT_COMPARABLE = "not comparable"
    """Significant in one week, not tested in the other (no data, no neighbours,
    or statistic not assessable): neither "new" nor "ended" can be claimed."""
    NONE = ""
    """Not significant in either week (or no comparison available)."""


@dataclasses.dataclass(frozen=True)
class ClusterGroup:
    """Significant districts of one label that are connected through neighbours."""

    label: ClusterLabel
    ids: tuple[str, ...]
    """Sorted district ids."""


@dataclasses.dataclass(frozen=True)
class GroupChange:
    """One group's change between last week and this week.

    ``kind`` is "appeared" (no overlapping group of that label last week),
    "vanished" (no overlapping group now), "persisted" (same districts),
    "grew" (last week's districts plus more), "shrank" (a subset of last
    week's), or "moved" (overlapping, but gained and lost districts).
    Groups that merged or split are compared as the union of the groups
    involved, so ``ids_now`` / ``ids_before`` may span several groups.
    """

    kind: str
    label: ClusterLabel
    ids_now: tuple[str, ...]
    ids_before: tuple[str, ...]

    @property
    def added(self) -> tuple[str, ...]:
        """Sorted ids in the group now but not last week."""
        return tuple(sorted(set(self.ids_now) - set(self.ids_before)))

    @property
    def removed(self) -> tuple[str, ...]:
        """Sorted ids in the group last week but not now."""
        return tuple(sorted(set(self.ids_before) - set(self.ids_now)))


@dataclasses.dataclass(frozen=True)
class ClusterTransitions:
    """Both views of the change, ready for the narrative."""

    ids: tuple[str, ...]
    districts: tuple[Transition, ...]
    """Per-district transition, aligned with ``ids``."""
    groups_now: tuple[ClusterGroup, ...]
    groups_before: tuple[ClusterGroup, ...]
    changes: tuple[GroupChange, ...]
    compared: bool
    """False when there was no last week to compare with (all transitions NONE)."""

    def ids_with(self, transition: Transition) -> tuple[str, ...]:
        """Sorted ids of districts with ``transition``."""
        return tuple(
            sorted(i for i, t in zip(self.ids, self.districts, strict=True) if t is transition)
        )


def _transition(now: ClusterLabel, before: ClusterLabel) -> Transition:
    sig_now = now in SIGNIFICANT_LABELS
    sig_before = before in SIGNIFICANT_LABELS
    if sig_now and sig_before:
        return Transition.PERSISTING if now is before else Transition.CHANGED_TYPE
    if sig_now:
        return Transition.NOT_COMPARABLE if before in _UNTESTED else Transition.NEW
    if sig_before:
        return Transition.NOT_COMPARABLE if now in _UNTESTED else Transition.ENDED
    return Transition.NONE


def district_transitions(
    now: Sequence[ClusterLabel], before: Sequence[ClusterLabel]
) -> tuple[Transition, ...]:
    """Compare each district's label this week with its label last week.

    Parameters
    ----------
    now, before : sequence of ClusterLabel
        Labels aligned with the same district ids.

    Returns
    -------
    tuple of Transition
        NEW, PERSISTING, ENDED, CHANGED_TYPE, NOT_COMPARABLE or NONE per
        district (see :class:`Transition`).

    Raises
    ------
    AnalysisError
        If the two sequences differ in length.

    Examples
    --------
    >>> HH, LL, NS = ClusterLabel.HIGH_HIGH, ClusterLabel.LOW_LOW, ClusterLabel.NOT_SIGNIFICANT
    >>> [t.value for t in district_transitions([HH, HH, NS, LL], [NS, HH, LL, HH])]
    ['new', 'persisting', 'ended', 'changed type']
    """
    if len(now) != len(before):
        raise AnalysisError(
            f"label sequences must be aligned, got {len(now)} labels now and {len(before)} before"
        )
    return tuple(_transition(a, b) for a, b in zip(now, before, strict=True))


def cluster_groups(labels: Sequence[ClusterLabel], dg: DistrictGraph) -> tuple[ClusterGroup, ...]:
    """Join significant districts of the same label that touch into groups.

    Two significant districts with the same label belong to one group when
    they are linked by a path of neighbours (in either direction, so k-nearest
    graphs are symmetrised) that runs only through significant districts of
    that label. A significant district without such neighbours is a group of
    one.

    Parameters
    ----------
    labels : sequence of ClusterLabel
        Labels aligned with ``dg.ids``.
    dg : DistrictGraph
        The neighbour graph used for the statistic.

    Returns
    -------
    tuple of ClusterGroup
        Sorted by label (:data:`LABEL_ORDER`), then by the group's first id.

    Raises
    ------
    AnalysisError
        If ``labels`` is not aligned with ``dg.ids``.
    """
    if len(labels) != dg.n:
        raise AnalysisError(f"expected {dg.n} labels (one per district), got {len(labels)}")
    label_of = dict(zip(dg.ids, labels, strict=True))
    links: dict[str, set[str]] = {i: set() for i in dg.ids}
    for i in dg.ids:
        for j in dg.neighbours[i]:
            links[i].add(j)
            links[j].add(i)
    seen: set[str] = set()
    groups: list[ClusterGroup] = []
    for start in sorted(dg.ids):
        label = label_of[start]
        if label not in SIGNIFICANT_LABELS or start in seen:
            continue
        members = {start}
        stack = [start]
        while stack:
            cur = stack.pop()
            for nb in sorted(links[cur]):
                if nb not in members and label_of[nb] is label:
                    members.add(nb)
                    stack.append(nb)
        seen |= members
        groups.append(ClusterGroup(label, tuple(sorted(members))))
    return tuple(sorted(groups, key=lambda g: (LABEL_ORDER.index(g.label), g.ids)))


def _find(parent: dict[tuple[str, int], tuple[str, int]], x: tuple[str, int]) -> tuple[str, int]:
    """Root of ``x`` in a union-find forest (with path halving)."""
    while parent[x] != x:
        parent[x] = parent[parent[x]]
        x = parent[x]
    return x


def compare_groups(
    now: Sequence[ClusterGroup], before: Sequence[ClusterGroup]
) -> tuple[GroupChange, ...]:
    """Say how each group of this week relates to last week's groups.

    Groups of the same label that share at least one district are linked;
    each connected set of linked groups is compared as the union of its
    districts now (N) and last week (B): N == B "persisted", B a proper
    subset of N "grew", N a proper subset of B "shrank", otherwise "moved".
    A group with no link is "appeared" (now only) or "vanished" (last week
    only). Groups of different labels are never matched (a high-high group
    replaced by a low-low one shows as one vanished and one appeared).

    Parameters
    ----------
    now, before : sequence of ClusterGroup
        Groups from :func:`cluster_groups` for this week and last week.

    Returns
    -------
    tuple of GroupChange
        Sorted by label (:data:`LABEL_ORDER`), then by the first id involved,
        then by kind.
    """
    changes: list[GroupChange] = []
    for label in LABEL_ORDER:
        a = [g for g in now if g.label is label]
        b = [g for g in before if g.label is label]
        # union-find over ("now", k) and ("before", k) nodes linked by shared ids
        parent: dict[tuple[str, int], tuple[str, int]] = {}
        for k in range(len(a)):
            parent[("now", k)] = ("now", k)
        for k in range(len(b)):
            parent[("before", k)] = ("before", k)
        for ka, ga in enumerate(a):
            for kb, gb in enumerate(b):
                if set(ga.ids) & set(gb.ids):
                    ra, rb = _find(parent, ("now", ka)), _find(parent, ("before", kb))
                    if ra != rb:
                        parent[rb] = ra
        components: dict[tuple[str, int], list[tuple[str, int]]] = {}
        for node in sorted(parent):
            components.setdefault(_find(parent, node), []).append(node)
        for nodes in components.values():
            ids_now = sorted({i for side, k in nodes if side == "now" for i in a[k].ids})
            ids_before = sorted({i for side, k in nodes if side == "before" for i in b[k].ids})
            n_set, b_set = set(ids_now), set(ids_before)
            if not b_set:
                kind = "appeared"
            elif not n_set:
                kind = "vanished"
            elif n_set == b_set:
                kind = "persisted"
            elif b_set < n_set:
                kind = "grew"
            elif n_set < b_set:
                kind = "shrank"
            else:
                kind = "moved"
            changes.append(GroupChange(kind, label, tuple(ids_now), tuple(ids_before)))
    return tuple(
        sorted(
            changes,
            key=lambda c: (
                LABEL_ORDER.index(c.label),
                min(c.ids_now + c.ids_before),
                c.kind,
            ),
        )
    )


def compare_weeks(
    now: ClusterResult, before: ClusterResult | None, dg: DistrictGraph
) -> ClusterTransitions:
    """Both views of the change between two weeks' cluster results.

    Parameters
    ----------
    now : ClusterResult
        This week's local clusters.
    before : ClusterResult or None
        Last week's, computed the same way on the same graph; None when there
        is no last week (every transition is then NONE, ``compared`` False).
    dg : DistrictGraph
        The full graph both results were computed on.

    Returns
    -------
    ClusterTransitions

    Raises
    ------
    AnalysisError
        If the results and the graph do not share the same ids in the same order.
    """
    if now.ids != dg.ids or (before is not None and before.ids != dg.ids):
        raise AnalysisError(
            "cluster results must share the graph's district ids in the same order; "
            "compute both weeks on the same DistrictGraph"
        )
    groups_now = cluster_groups(now.labels, dg)
    if before is None:
        return ClusterTransitions(
            ids=dg.ids,
            districts=tuple(Transition.NONE for _ in dg.ids),
            groups_now=groups_now,
            groups_before=(),
            changes=(),
            compared=False,
        )
    groups_before = cluster_groups(before.labels, dg)
    return ClusterTransitions(
        ids=dg.ids,
        districts=district_transitions(now.labels, before.labels),
        groups_now=groups_now,
        groups_before=groups_before,
        changes=compare_groups(groups_now, groups_before),
        compared=True,
    )
