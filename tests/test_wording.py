"""Sentences from numbers: wording rules (direction words only when the test fires, no 'nan')."""

from __future__ import annotations

import math

import pytest

from sitrep.render.wording import formats as fm
from sitrep.render.wording import sentences as nv

BASE = dict(pct_now=2.34, pct_before=1.81, diff_pp=0.53, low_pp=0.31, high_pp=0.75, prior_week_number=46)


def test_increase_uses_direction_word_and_numbers() -> None:
    text = nv.change_sentence(change_class="increase", **BASE)
    assert "rose from 1.8% in week 46" in text
    assert "+0.5 percentage points" in text
    assert "0.3 to 0.8" in text


def test_similar_never_says_rose_or_fell() -> None:
    text = nv.change_sentence(change_class="similar", **BASE)
    assert "similar to 1.8%" in text
    assert "rose" not in text and "fell" not in text


def test_equal_rounded_values_are_never_an_increase() -> None:
    text = nv.change_sentence(change_class="increase", **{**BASE, "pct_now": 1.84, "pct_before": 1.81})
    assert "rose" not in text


def test_decrease_during_completeness_drop_is_qualified() -> None:
    text = nv.change_sentence(change_class="decrease", **{**BASE, "pct_now": 1.2, "diff_pp": -0.61}, completeness_drop=True)
    assert "fell" in text and "missing reports rather than less illness" in text


def test_revision_is_stated() -> None:
    text = nv.change_sentence(change_class="similar", **BASE, revised_from=1.62)
    assert "revised from 1.6% as late reports arrived" in text


def test_not_assessable_has_no_nan() -> None:
    text = nv.change_sentence(change_class="not assessable", **{**BASE, "pct_before": math.nan})
    assert "cannot be assessed" in text and "nan" not in text.lower()


@pytest.mark.parametrize("value", [math.nan, math.inf, None])
def test_formatters_never_print_nan(value: float | None) -> None:
    for text in (nv.fmt_pct(value), nv.fmt_pp(value), nv.fmt_count(value), nv.fmt_interval(value, 1.0)):
        assert text == nv.NOT_AVAILABLE


def test_lists_are_sorted_and_counted() -> None:
    assert nv.join_names(["b", "C", "a"]) == "a, b and C"
    text = nv.tercile_sentence(n_high=2, n_classed=9, upper_cut=2.5, names=["Zeta", "Alpha"])
    assert text.startswith("2 of 9 ranked districts") and "Alpha and Zeta" in text


def test_cluster_sentence_never_claims_no_clusters_when_not_computable() -> None:
    text = nv.cluster_sentence(assessable=False, reason="all values were equal.", groups=[], correction="q")
    assert "could not be assessed" in text and "No district" not in text
    none = nv.cluster_sentence(assessable=True, reason="", groups=[], correction="BH q = 0.05")
    assert none.startswith("No district formed")
    some = nv.cluster_sentence(assessable=True, reason="", groups=[("high-high", ["B", "A"], "new this week")], correction="c")
    assert "high-value cluster of 2 districts (A and B), new this week" in some


def test_threshold_sentence() -> None:
    text = nv.threshold_sentence(pct=2.3, epidemic_threshold=1.9, intensity="low", baseline=2.0)
    assert text == "This is at or above the epidemic threshold of 1.9% (intensity: low) and above the seasonal baseline of 2.0%."
    assert nv.threshold_sentence(pct=2.3, epidemic_threshold=None, intensity=None, baseline=None, unavailable_reason="R.") == "R."


def test_below_threshold_does_not_print_an_intensity() -> None:
    text = nv.threshold_sentence(pct=1.2, epidemic_threshold=1.9, intensity="below epidemic threshold", baseline=None)
    assert text == "This is below the epidemic threshold of 1.9%."


def test_clear_but_small_change_is_called_similar_with_the_reason() -> None:
    text = nv.change_sentence(change_class="similar", **{**BASE, "diff_pp": 0.4}, p_value=0.001, min_change_pp=0.5)
    assert "similar to 1.8%" in text and "smaller than the 0.5 percentage points" in text
    assert "rose" not in text


def test_quality_highlight_uses_words() -> None:
    assert nv.quality_highlight("value-spike", 3) == "district values far from their recent weeks (3)"
    assert nv.quality_highlight("some-new-rule", 1) == "some new rule (1)"
