"""Tests of sitrep.analysis.transitions on hand-made examples.

Every expected value below is worked out by hand from the definitions in the
module docstrings [HAND]: a 2 x 4 rook lattice (ids a..h) with labels chosen
so that each kind of change occurs once.

    a b c d
    e f g h
"""

from __future__ import annotations

import random

import numpy as np
import pytest

from sitrep.analysis.clusters import local_clusters
from sitrep.analysis.transitions import (
    ClusterGroup,
    GroupChange,
    Transition,
    cluster_groups,
    compare_groups,
    compare_weeks,
    district_transitions,
)
from sitrep.analysis.weights import graph_from_neighbours
from sitrep.errors import AnalysisError
from sitrep.model import ClusterLabel

HH = ClusterLabel.HIGH_HIGH
LL = ClusterLabel.LOW_LOW
HL = ClusterLabel.HIGH_LOW
LH = ClusterLabel.LOW_HIGH
NS = ClusterLabel.NOT_SIGNIFICANT
ND = ClusterLabel.NO_DATA
NN = ClusterLabel.NO_NEIGHBOURS
NA = ClusterLabel.NOT_ASSESSABLE

GRID = graph_from_neighbours(
    {
        "a": ["b", "e"],
        "b": ["a", "c", "f"],
        "c": ["b", "d", "g"],
        "d": ["c", "h"],
        "e": ["a", "f"],
        "f": ["b", "e", "g"],
        "g": ["c", "f", "h"],
        "h": ["d", "g"],
    },
    kind="rook",
)


def test_district_transitions_table() -> None:
    now = [HH, HH, NS, LL, HH, NS, ND, HL, NS]
    before = [NS, HH, LL, HH, ND, NS, HH, HL, NA]
    expected = [
        Transition.NEW,  # NS -> HH
        Transition.PERSISTING,  # HH -> HH
        Transition.ENDED,  # LL -> NS
        Transition.CHANGED_TYPE,  # HH -> LL
        Transition.NOT_COMPARABLE,  # no data last week -> HH now
        Transition.NONE,  # NS -> NS
        Transition.NOT_COMPARABLE,  # HH last week -> no data now: not "ended"
        Transition.PERSISTING,  # HL -> HL (outliers persist too)
        Transition.NONE,  # not assessable -> NS
    ]
    assert district_transitions(now, before) == tuple(expected)
    assert [t.value for t in expected[:4]] == ["new", "persisting", "ended", "changed type"]
    assert Transition.NONE.value == ""
    with pytest.raises(AnalysisError, match="aligned"):
        district_transitions([HH], [HH, NS])


def test_cluster_groups_joins_touching_districts_of_one_label() -> None:
    #   HH HH NS LL
    #   NS HH NS LL      a-b-f form one HH group (b-f touch); d-h one LL group;
    labels = [HH, HH, NS, LL, NS, HH, NS, LL]
    assert cluster_groups(labels, GRID) == (
        ClusterGroup(HH, ("a", "b", "f")),
        ClusterGroup(LL, ("d", "h")),
    )


def test_cluster_groups_diagonal_and_different_labels_do_not_join() -> None:
    #   HH NS HH HL
    #   NS HH NS LH      rook: a and f only touch at a corner -> separate groups;
    #                    c (HH) and d (HL) touch but differ in label -> separate.
    labels = [HH, NS, HH, HL, NS, HH, NS, LH]
    groups = cluster_groups(labels, GRID)
    assert groups == (
        ClusterGroup(HH, ("a",)),
        ClusterGroup(HH, ("c",)),
        ClusterGroup(HH, ("f",)),
        ClusterGroup(HL, ("d",)),
        ClusterGroup(LH, ("h",)),
    )
    with pytest.raises(AnalysisError, match="expected 8 labels"):
        cluster_groups(labels[:3], GRID)


def test_cluster_groups_uses_links_in_either_direction() -> None:
    # k-nearest style one-way link x -> y: still one group.
    dg = graph_from_neighbours({"x": ["y"], "y": [], "z": ["y"]})
    assert cluster_groups([HH, HH, NS], dg) == (ClusterGroup(HH, ("x", "y")),)


def test_compare_groups_every_kind() -> None:
    before = (
        ClusterGroup(HH, ("a", "b")),  # -> grows to a, b, e
        ClusterGroup(HH, ("d",)),  # -> vanishes
        ClusterGroup(LL, ("g", "h")),  # -> shrinks to h
        ClusterGroup(HL, ("c",)),  # -> persists
        ClusterGroup(LH, ("p", "q")),  # -> moves to q, r
    )
    now = (
        ClusterGroup(HH, ("a", "b", "e")),
        ClusterGroup(LL, ("h",)),
        ClusterGroup(LL, ("x",)),  # appears
        ClusterGroup(HL, ("c",)),
        ClusterGroup(LH, ("q", "r")),
    )
    changes = compare_groups(now, before)
    assert changes == (
        GroupChange("grew", HH, ("a", "b", "e"), ("a", "b")),
        GroupChange("vanished", HH, (), ("d",)),
        GroupChange("shrank", LL, ("h",), ("g", "h")),
        GroupChange("appeared", LL, ("x",), ()),
        GroupChange("persisted", HL, ("c",), ("c",)),
        GroupChange("moved", LH, ("q", "r"), ("p", "q")),
    )
    assert changes[0].added == ("e",) and changes[0].removed == ()
    assert changes[5].added == ("r",) and changes[5].removed == ("p",)


def test_compare_groups_merge_split_and_label_switch() -> None:
    # Two HH groups last week merged into one larger group now: one "grew" over the union.
    merged = compare_groups(
        [ClusterGroup(HH, ("a", "b", "c"))], [ClusterGroup(HH, ("a",)), ClusterGroup(HH, ("c",))]
    )
    assert merged == (GroupChange("grew", HH, ("a", "b", "c"), ("a", "c")),)
    # A group split in two and lost its middle: "shrank".
    split = compare_groups(
        [ClusterGroup(HH, ("a",)), ClusterGroup(HH, ("c",))], [ClusterGroup(HH, ("a", "b", "c"))]
    )
    assert split == (GroupChange("shrank", HH, ("a", "c"), ("a", "b", "c")),)
    # The same districts switching from HH to LL are not matched across labels.
    switched = compare_groups([ClusterGroup(LL, ("a",))], [ClusterGroup(HH, ("a",))])
    assert switched == (
        GroupChange("vanished", HH, (), ("a",)),
        GroupChange("appeared", LL, ("a",), ()),
    )


def test_compare_groups_order_does_not_depend_on_input_order() -> None:
    now = [ClusterGroup(HH, (f"n{k}",)) for k in range(6)] + [ClusterGroup(LL, ("a", "b"))]
    before = [ClusterGroup(HH, (f"n{k}",)) for k in range(0, 6, 2)] + [ClusterGroup(LL, ("b",))]
    reference = compare_groups(now, before)
    rng = random.Random(3)
    for _ in range(5):
        a, b = now[:], before[:]
        rng.shuffle(a)
        rng.shuffle(b)
        assert compare_groups(a, b) == reference
    assert [c.kind for c in reference] == [
        "persisted",
        "appeared",
        "persisted",
        "appeared",
        "persisted",
        "appeared",
        "grew",
    ]


def test_compare_weeks_on_real_cluster_results() -> None:
    # With alpha = 0.5 every tested district is significant (esda's folded p is at most
    # (49 + 1)/(99 + 1) = 0.5 for R = 99), so labels are the seed-free quadrants, worked out
    # by hand from the values and rook lags [HAND]:
    # week 1 (mean 4.125): a HH (lag 8.5), b HL (lag 4), c LL, d LL, e HH (lag 5.5),
    #                      f LH (lag 6), g LL, h LL
    # week 2 (mean 4.875): a, b, e, f LL; c, d, g, h HH
    week1 = np.array([9.0, 8.0, 1.0, 1.0, 9.0, 2.0, 1.0, 2.0])
    week2 = np.array([1.0, 2.0, 8.0, 9.0, 1.0, 1.0, 9.0, 8.0])
    r1 = local_clusters(week1, GRID, permutations=99, seed=1, correction="none", alpha=0.5)
    r2 = local_clusters(week2, GRID, permutations=99, seed=1, correction="none", alpha=0.5)
    assert r1.labels == (HH, HL, LL, LL, HH, LH, LL, LL)
    assert r2.labels == (LL, LL, HH, HH, LL, LL, HH, HH)
    t = compare_weeks(r2, r1, GRID)
    assert t.compared
    assert set(t.districts) == {Transition.CHANGED_TYPE}
    assert t.groups_now == (
        ClusterGroup(HH, ("c", "d", "g", "h")),
        ClusterGroup(LL, ("a", "b", "e", "f")),
    )
    assert t.changes == (
        GroupChange("vanished", HH, (), ("a", "e")),
        GroupChange("appeared", HH, ("c", "d", "g", "h"), ()),
        GroupChange("appeared", LL, ("a", "b", "e", "f"), ()),
        GroupChange("vanished", LL, (), ("c", "d", "g", "h")),
        GroupChange("vanished", HL, (), ("b",)),
        GroupChange("vanished", LH, (), ("f",)),
    )
    none = compare_weeks(r2, None, GRID)
    assert not none.compared and set(none.districts) == {Transition.NONE} and none.changes == ()
    other = graph_from_neighbours({"a": ["b"], "b": ["a"]})
    with pytest.raises(AnalysisError, match="same DistrictGraph"):
        compare_weeks(r2, r1, other)
    assert t.ids_with(Transition.CHANGED_TYPE) == ("a", "b", "c", "d", "e", "f", "g", "h")
