"""Tercile ranks: docs/methods.md section 4 table, pandas/mapclassify as oracles, edge cases."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sitrep.analysis.ranks import NO_DATA, tercile_ranks

NAN = np.nan

# docs/methods.md section 4 table: input, breaks (q1, q2), classes (0 = low, -1 = no data), counts.
# Breaks are Hyndman & Fan (1996, Am Stat 50:361) type 7 [HAND]; classes and counts as
# recorded there with mapclassify 2.10.0 / pandas 3.1.1 [LIB].
TABLE = [
    ("1..9", list(range(1, 10)), (3.666667, 6.333333), "000111222", (3, 3, 3)),
    ("1..10", list(range(1, 11)), (4.0, 7.0), "0000111222", (4, 3, 3)),
    ("1..11", list(range(1, 12)), (4.333333, 7.666667), "00001112222", (4, 3, 4)),
    ("ties", [1, 2, 2, 2, 3, 4, 5], (2.0, 3.0), "0000122", (4, 1, 2)),
    ("empty middle", [0, 0, 0, 0, 0, 0, 1, 2, 3], (0.0, 0.333333), "000000222", (6, 0, 3)),
    (
        "realistic ILI%",
        [2.1, 3.4, 1.8, 5.6, 4.0, 2.9, 3.4, 6.2, 1.2, 2.5],
        (2.5, 3.4),
        [0, 1, 0, 2, 2, 1, 1, 2, 0, 0],
        (4, 3, 3),
    ),
    (
        "with NaN",
        [2.1, NAN, 1.8, 5.6, 4.0, 2.9, NAN, 6.2, 1.2],
        (2.1, 4.0),
        [0, -1, 0, 2, 1, 1, -1, 2, 0],
        (3, 2, 2),
    ),
]


@pytest.mark.parametrize(
    ("values", "cuts", "classes", "counts"),
    [row[1:] for row in TABLE],
    ids=[row[0] for row in TABLE],
)
def test_methods_table(
    values: list[float],
    cuts: tuple[float, float],
    classes: str | list[int],
    counts: tuple[int, int, int],
) -> None:
    result = tercile_ranks(np.array(values, dtype=float))
    assert result.cuts is not None
    np.testing.assert_allclose(result.cuts, cuts, atol=5e-7)
    expected = [int(c) + 1 for c in classes]  # table class 0..2 -> rank 1..3; -1 -> NO_DATA
    np.testing.assert_array_equal(result.ranks, expected)
    assert result.counts == counts


def _type7(sorted_values: np.ndarray, p: float) -> float:
    """Hyndman & Fan (1996) definition 7, written out from the paper's formula [PUB]."""
    h = (sorted_values.size - 1) * p + 1
    lo = int(np.floor(h))
    hi = min(lo + 1, sorted_values.size)
    return float(sorted_values[lo - 1] + (h - lo) * (sorted_values[hi - 1] - sorted_values[lo - 1]))


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_equals_pandas_qcut_and_type7_formula(seed: int) -> None:
    # Oracle [LIB pandas.qcut(q=3), docs/methods.md section 4]: identical classes on NaN-free input
    # with unique breaks; cut points equal the written-out type-7 formula.
    rng = np.random.default_rng(seed)
    rates = np.round(rng.gamma(2.0, 1.5, size=int(rng.integers(5, 80))), 1)
    result = tercile_ranks(rates)
    s = np.sort(rates)
    assert result.cuts == pytest.approx((_type7(s, 1 / 3), _type7(s, 2 / 3)), rel=1e-12)
    expected = pd.qcut(rates, 3, labels=False)
    np.testing.assert_array_equal(result.ranks, np.asarray(expected) + 1)


def test_equals_mapclassify_quantiles() -> None:
    # Oracle [LIB mapclassify Quantiles(k=3), docs/methods.md section 4]; mapclassify is not a
    # dependency of sitrep, so this runs only where it is installed.
    mapclassify = pytest.importorskip("mapclassify")
    rates = np.array([2.1, 3.4, 1.8, 5.6, 4.0, 2.9, 3.4, 6.2, 1.2, 2.5, 0.7, 3.9])
    q = mapclassify.Quantiles(rates, k=3)
    np.testing.assert_array_equal(tercile_ranks(rates).ranks, q.yb + 1)
    np.testing.assert_allclose(tercile_ranks(rates).cuts, q.bins[:2])


def test_nan_is_dropped_before_the_quantiles() -> None:
    # docs/methods.md section 4 [LIB]: mapclassify fed NaN gives bins [2.633, 5.8, nan] and puts the
    # maximum 6.2 in the lowest class; here 6.2 is high and the NaN districts have no rank.
    result = tercile_ranks(np.array([2.1, NAN, 1.8, 5.6, 4.0, 2.9, NAN, 6.2, 1.2]))
    assert result.ranks[7] == 3
    assert result.ranks[1] == result.ranks[6] == NO_DATA
    assert result.note == ""


def test_valid_mask_excludes_districts_from_breaks() -> None:
    # Suppressed districts are "no data" and do not move the breaks [CP, docs/methods.md 6.2]:
    # masking the two NaN positions of the table row gives the same cuts as the NaN row.
    values = np.array([2.1, 99.0, 1.8, 5.6, 4.0, 2.9, 50.0, 6.2, 1.2])
    valid = np.array([True, False, True, True, True, True, False, True, True])
    result = tercile_ranks(values, valid=valid)
    np.testing.assert_allclose(result.cuts, (2.1, 4.0))
    np.testing.assert_array_equal(result.ranks, [1, 0, 1, 3, 2, 2, 0, 3, 1])


def test_empty_middle_is_explained() -> None:
    result = tercile_ranks(np.array([0, 0, 0, 0, 0, 0, 1, 2, 3], dtype=float))
    assert result.counts[1] == 0
    assert "middle third is empty" in result.note and "tied" in result.note
    equal = tercile_ranks(np.array([1, 1, 1, 1, 1, 2, 3], dtype=float))  # q1 = q2 = 1 [HAND]
    assert equal.cuts == (1.0, 1.0)
    assert equal.counts == (5, 0, 2)
    assert "cut points equal" in equal.note


def test_all_equal_values_share_one_class() -> None:
    result = tercile_ranks(np.full(6, 2.5))
    np.testing.assert_array_equal(result.ranks, 1)
    assert result.counts == (6, 0, 0)
    assert "same value" in result.note


@pytest.mark.parametrize("values", [[], [1.0], [1.0, NAN, 2.0], [NAN, NAN, NAN, NAN]])
def test_fewer_than_three_values_are_not_classed(values: list[float]) -> None:
    result = tercile_ranks(np.array(values, dtype=float))
    assert result.cuts is None
    assert (result.ranks == NO_DATA).all() and result.ranks.shape == (len(values),)
    assert result.counts == (0, 0, 0)
    assert "at least 3" in result.note


def test_result_is_read_only_and_bad_shapes_refused() -> None:
    from sitrep.errors import AnalysisError

    result = tercile_ranks(np.arange(6.0))
    with pytest.raises(ValueError, match="read-only"):
        result.ranks[0] = 3
    with pytest.raises(AnalysisError, match="one-dimensional"):
        tercile_ranks(np.ones((2, 3)))
    with pytest.raises(AnalysisError, match="shape"):
        tercile_ranks(np.arange(6.0), valid=np.ones(5, dtype=bool))


@settings(max_examples=60, deadline=None, derandomize=True)
@given(st.lists(st.one_of(st.floats(0, 30, allow_nan=False), st.just(NAN)), max_size=40))
def test_ranks_are_ordered_and_ties_share(values: list[float]) -> None:
    # Invariants [HAND, common practice: property-style invariants]: ranks in {0..3}; 0 exactly for NaN; a larger
    # value never gets a lower rank; counts add up to the values with data.
    arr = np.array(values, dtype=float)
    result = tercile_ranks(arr)
    assert set(result.ranks.tolist()) <= {0, 1, 2, 3}
    present = ~np.isnan(arr)
    if present.sum() >= 3:
        assert ((result.ranks == 0) == ~present).all()
        order = np.argsort(arr[present], kind="stable")
        assert (np.diff(result.ranks[present][order]) >= 0).all()
        assert sum(result.counts) == int(present.sum())
