"""Wording functions on constructed cases (docs/methods.md gives the rules behind the words)."""

from __future__ import annotations

import math

import pytest

from sitrep.render.wording import formats as fm
from sitrep.render.wording import methods as mt
from sitrep.render.wording import plain as pl
from sitrep.render.wording import sentences as nv
from sitrep.render.wording import tables as tb

BASE = dict(
    pct_now=2.18,
    pct_before=1.76,
    diff_pp=0.42,
    low_pp=0.27,
    high_pp=0.58,
    confidence=0.95,
    prior_week_number=46,
    min_change_pp=0.5,
)


def verdict(cls: str, p: float, d: float, lo: float, hi: float) -> str:
    return nv.change_verdict(
        change_class=cls, p_value=p, alpha=0.05, diff_pp=d, low_pp=lo, high_pp=hi
    )


def test_clear_increase() -> None:
    v = verdict("increase", 1e-6, 0.8, 0.5, 1.1)
    assert v == "clear increase"
    text = nv.change_sentence(verdict=v, **{**BASE, "diff_pp": 0.8, "low_pp": 0.5, "high_pp": 1.1})
    assert text.startswith("This is a clear increase: the share rose from 1.8% in week 46")
    assert "+0.8 percentage points (95% confidence interval 0.5–1.1 percentage points)" in text


def test_small_detectable_increase_is_not_similar() -> None:
    # the demo week: +0.42 pp, interval 0.27 to 0.58, p about 1e-7, below the 0.5 pp minimum
    v = verdict("similar", 1e-7, 0.42, 0.27, 0.58)
    assert v == "small increase"
    text = nv.change_sentence(verdict=v, **BASE)
    assert (
        "small but detectable rise from 1.8%" in text and "below the 0.5 percentage points" in text
    )
    assert "similar" not in text


def test_no_clear_change_when_interval_includes_zero() -> None:
    assert verdict("similar", 0.2, 1.5, -0.4, 3.4) == "no clear change"
    # a p-value under the level with an interval including 0 is not called a change
    assert verdict("similar", 0.04, 0.3, -0.01, 0.6) == "no clear change"
    text = nv.change_sentence(verdict="no clear change", **{**BASE, "low_pp": -0.1})
    assert text.startswith("There is no clear change from 1.8% in week 46")
    assert "−0.1 to 0.6 percentage points" in text and "rose" not in text


def test_small_decrease_and_clear_decrease_with_completeness_drop() -> None:
    assert verdict("similar", 0.001, -0.3, -0.45, -0.15) == "small decrease"
    text = nv.change_sentence(
        verdict="clear decrease",
        **{**BASE, "pct_now": 1.2, "diff_pp": -0.61},
        completeness_drop=True,
    )
    assert "fell" in text and "missing reports rather than less illness" in text


def test_rising_n_weeks() -> None:
    assert nv.rising_weeks([1.0, 1.2, 1.1, 1.3, 1.5, 1.8]) == 3
    assert nv.rising_weeks([1.0, 0.9]) == 0
    assert nv.rising_weeks([1.0, math.nan, 1.2]) == 0
    text = nv.change_sentence(verdict="small increase", **BASE, rising_for=3)
    assert text.endswith("The share has now risen for 3 weeks in a row.")
    assert "in a row" not in nv.change_sentence(verdict="no clear change", **BASE, rising_for=3)
    assert "3 weeks in a row" in pl.plain_change(
        verdict="clear increase", pct_before=1.76, rising_for=3
    )


def test_cut_point_next_to_a_value() -> None:
    # cut 2.767 with a value 2.80 above it and 2.76 below it: one decimal prints both as 2.8
    values = [2.76, 2.80, 3.1, 1.2]
    d = fm.class_digits(values, [1.36, 2.767], others=[2.79])
    assert d == 2
    assert (
        fm.fmt_pct(2.767, d) == "2.77%"
        and fm.fmt_pct(2.80, d) == "2.80%"
        and fm.fmt_pct(2.76, d) == "2.76%"
    )
    text = nv.tercile_sentence(
        n_classed=4, upper_cut=2.767, ranked=[("B", 2.80), ("A", 3.1)], digits=d
    )
    assert "(ILI above 2.77%), highest first: A (3.10%) and B (2.80%)" in text
    assert fm.class_digits([1.0, 3.0], [2.0]) == 1
    # a cut equal to an epidemic threshold at one decimal is printed with more
    assert fm.class_digits([1.0, 3.0], [2.767], others=[2.79]) == 2


def test_threshold_sensitivity_band() -> None:
    text = nv.threshold_sentence(
        pct=2.18,
        epidemic_threshold=2.15,
        intensity="low",
        baseline=None,
        digits=2,
        band=(2.15, 2.79),
        band_reason=" (season window to week 20 or the whole season)",
    )
    assert text.startswith("This is at or above the epidemic threshold of 2.15% (intensity: low).")
    assert "ranges from 2.15% to 2.79% (season window to week 20 or the whole season)" in text
    assert "not settled" in text
    outside = nv.threshold_sentence(
        pct=3.5, epidemic_threshold=2.15, intensity="medium", baseline=None, band=(2.15, 2.79)
    )
    assert "not settled" not in outside
    assert "too early to say" in pl.plain_season(pct=2.18, threshold=2.15, unsettled=True)


def test_threshold_sentence_without_band() -> None:
    text = nv.threshold_sentence(pct=2.3, epidemic_threshold=1.9, intensity="low", baseline=2.0)
    assert (
        text
        == "This is at or above the epidemic threshold of 1.9% (intensity: low) and above the seasonal baseline of 2.0%."
    )
    assert (
        nv.threshold_sentence(
            pct=1.2, epidemic_threshold=1.9, intensity="below epidemic threshold", baseline=None
        )
        == "This is below the epidemic threshold of 1.9%."
    )
    assert (
        nv.threshold_sentence(
            pct=2.3, epidemic_threshold=None, intensity=None, baseline=None, unavailable_reason="R."
        )
        == "R."
    )


def test_revision_is_stated() -> None:
    text = nv.change_sentence(verdict="no clear change", **BASE, revised_from=1.62)
    assert "revised from 1.6% as late reports arrived" in text
    assert (
        nv.revision_note(published=1.7582790, revised=1.7580543)
        == "revised by −0.0002 percentage points since published (1.7583% then)"
    )
    assert nv.revision_note(published=1.75, revised=1.75) == "unchanged since published"


def test_not_assessable_has_no_nan() -> None:
    text = nv.change_sentence(verdict="not assessable", **{**BASE, "pct_before": math.nan})
    assert "cannot be assessed" in text and "nan" not in text.lower()


@pytest.mark.parametrize("value", [math.nan, math.inf, None])
def test_formatters_never_print_nan(value: float | None) -> None:
    for text in (
        fm.fmt_pct(value),
        fm.fmt_pp(value),
        fm.fmt_count(value),
        fm.fmt_interval(value, 1.0),
    ):
        assert text == fm.NOT_AVAILABLE


def test_true_minus_signs_and_confidence_label() -> None:
    assert fm.fmt_pp(-0.42) == "−0.4 percentage points"
    assert fm.fmt_num(-0.0) == "0.0"
    assert fm.fmt_interval(-0.12, 0.61, " pp") == "−0.1 to 0.6 pp"
    assert fm.confidence_label(0.9) == "90%" and fm.confidence_label(0.995) == "99.5%"
    text = nv.level_sentence(
        week_number=47,
        dates="d",
        jurisdiction="J",
        pct=2.2,
        low=2.1,
        high=2.3,
        confidence=0.9,
        n_reporting=3,
        n_total=4,
    )
    assert "90% confidence interval 2.1–2.3%" in text and "95%" not in text


def test_lists_ranked_or_sorted() -> None:
    assert fm.join_names(["b", "C", "a"]) == "a, b and C"
    assert fm.join_names(["z", "y", "x"], ordered=True) == "z, y and x"
    ranked = [(f"D{i}", float(i)) for i in range(10)]
    text = nv.tercile_sentence(n_classed=30, upper_cut=0.5, ranked=ranked)
    assert "D9 (9.0%), D8 (8.0%)" in text and text.endswith("and 2 more.")


def test_cluster_sentence_and_borderline_transitions() -> None:
    text = nv.cluster_sentence(
        assessable=False, reason="all values were equal.", groups=[], correction="q"
    )
    assert "could not be assessed" in text and "No district" not in text
    none = nv.cluster_sentence(
        assessable=True,
        reason="",
        groups=[],
        correction="c",
        variable="the empirical Bayes smoothed ILI%",
    )
    assert none.startswith("No district formed") and "empirical Bayes" in none
    assert (
        nv.is_borderline(0.046, 0.05)
        and nv.is_borderline(0.063, 0.05)
        and not nv.is_borderline(0.2, 0.05)
    )
    moved = nv.movement_phrase(
        kind="moved", n_before=8, added=["N"], removed=["T"], borderline=True
    )
    assert (
        moved.startswith("which since last week has gained N and lost T")
        and "may not be real" in moved
    )
    assert "may not be real" not in nv.movement_phrase(kind="moved", n_before=8, added=["N"])


def test_data_quality_sentence_in_its_own_section() -> None:
    assert nv.data_quality_sentence(n_warnings=2, highlights=["x (2)"]).endswith(
        "(listed in the data-quality section)."
    )
    assert (
        nv.data_quality_sentence(n_warnings=2, highlights=["x (2)"], in_section=True)
        == "Validation raised 2 data-quality warnings: x (2)."
    )
    assert (
        nv.quality_highlight("value-spike", 3) == "district values far from their recent weeks (3)"
    )
    assert fm.plural(1, "district") == "1 district" and fm.plural(2, "district") == "2 districts"


JARGON = (
    "Moran",
    " q ",
    "q =",
    "Benjamini",
    "confidence interval",
    "CI",
    "cluster",
    "p-value",
    "percentage points",
)


def test_plain_draft_words_have_no_jargon() -> None:
    texts = [
        pl.plain_level(week_number=47, dates="22–28 November 2026", jurisdiction="J", pct=2.18),
        *(pl.plain_change(verdict=v, pct_before=1.76, rising_for=3) for v in nv.VERDICTS),
        pl.plain_season(pct=2.2, threshold=2.8),
        pl.plain_season(pct=2.2, threshold=None),
        pl.plain_highest(ranked=[("A", 3.0), ("B", 4.0)]),
        pl.plain_groups(high_groups=[["A", "B"]], name_groups=False),
        pl.plain_quality(revised=True, n_warnings=3),
    ]
    for text in texts:
        assert not any(word in text for word in JARGON), text
    assert "A" not in pl.plain_groups(high_groups=[["Aston", "Bree"]], name_groups=False)
    assert "Aston and Bree" in pl.plain_groups(high_groups=[["Aston", "Bree"]], name_groups=True)
    assert (
        pl.plain_highest(ranked=[("A", 3.0), ("B", 4.0)])
        == "Levels were highest in B (4.0%) and A (3.0%)."
    )


def test_methods_follow_the_settings() -> None:
    m = mt.MethodSettings(
        jurisdiction="J",
        confidence=0.9,
        interval="wilson",
        min_visits=50,
        change_test="pooled-z",
        change_alpha=0.05,
        min_change_pp=0.5,
        weights="queen",
        knn_k=5,
        link_islands_k=0,
        n_links=10,
        islands=["Isle"],
        cluster_variable="eb_rate",
        permutations=9999,
        seed=1,
        correction="fdr_bh",
        fdr_q=0.05,
        alpha=0.05,
        global_text="g",
        seasonal_text="s",
        week_system="MMWR",
        season_label="2026-27",
        season_start_week=40,
    )
    text = " ".join(t for _, t in mt.methods_sections(m))
    assert "90% confidence" in text and "95%" not in text
    assert "empirical Bayes smoothed ILI%" in text and "9,999" in text
    assert (
        "Moran_Local" not in text and "esda" not in text and "Σ" not in text and "(n−1)" not in text
    )
    seasonal = mt.seasonal_method_text(
        max_seasons=10,
        delta=2.8,
        form="point",
        onset_weeks=3,
        season_start_week=40,
        window_end_week=20,
        baseline_sd=2,
        baseline_seasons_used=3,
        baseline_weeks=122,
        baseline_reason="",
        sd_floor_pp=0.2,
        seasons_used=("2024-25",),
    )
    assert "from week 40 to week 20 of each past season" in seasonal


def test_cautions_carry_case_definition_coverage_completeness_and_overdispersion() -> None:
    cautions = mt.cautions(
        confidence=0.95,
        case_definition=mt.case_definition_sentence("fever and cough"),
        coverage=mt.coverage_sentence(n_sites=12, n_reporting=3, n_total=4),
        completeness=mt.completeness_sentence(visits_now=800, visits_usual=1000.0, weeks=8),
    )
    text = " ".join(cautions)
    assert "Case definition used: fever and cough." in text
    assert "12 sentinel sites in 3 of 4 districts" in text and "not a random sample" in text
    assert (
        "80% of the median of the previous 8 weeks" in text and "less complete than usual" in text
    )
    assert "overdispersion" in text and "binomial" in text
    assert "not for individual clinical decisions" in text and "small-number suppression" in text


def test_global_moran_text_never_prints_p_zero() -> None:
    text = nv.global_moran_text(
        available=True, i=0.669, expectation=-1 / 46, p_sim=1 / 10000, n=47, notes=()
    )
    assert "permutation p < 0.001, over the 47 districts tested" in text and "p = 0.000" not in text
    assert "p = 0.046" in nv.global_moran_text(
        available=True, i=0.1, expectation=-0.02, p_sim=0.046, n=9, notes=()
    )
    assert (
        nv.global_moran_text(
            available=False, i=math.nan, expectation=0, p_sim=0, n=0, notes=("too few.",)
        )
        == "Not computed this week: too few."
    )


def test_tercile_caption_without_cut_points_reads_as_a_sentence() -> None:
    from sitrep.render.wording.captions import tercile_caption

    title, caption, alt = tercile_caption(
        first_week=44, week=47, cuts=None, digits=2, counts="3 with data"
    )
    assert "cut points" not in caption and "Too few districts" in caption
    assert "withheld" in caption and "without tercile classes" in alt
    _, with_cuts, _ = tercile_caption(
        first_week=44, week=47, cuts=(1.36, 2.77), digits=2, counts="15 in the highest third"
    )
    assert "cut points 1.36% and 2.77%" in with_cuts


def test_pdf_table_note_counts_the_rows_and_points_to_the_full_table() -> None:
    note = tb.pdf_table_note(n_shown=15, n_all=42)
    assert note.startswith("The 15 districts with the highest ILI% this week")
    assert "full table of 42 districts" in note
    assert "HTML report" in note and "results.csv" in note
