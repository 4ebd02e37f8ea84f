"""Tests of sitrep.analysis.seasonal: baseline, MEM thresholds, onset, intensity, same week.

Sources of check values (tags as in docs/methods.md):
- docs/methods.md 7.1 worked example [HAND/LIB]: baseline and onset numbers.
- docs/methods.md 7.2 worked example [HAND/own code]: MEM numbers. These are regression values of
  our own computation, not an outside oracle (no published MEM check values were available).
- "hand": derived in the comment beside the assertion from the formula.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from sitrep.analysis.seasonal import (
    Baseline,
    EpidemicPeriod,
    IntensityLevel,
    IntervalForm,
    MapSlope,
    MemThresholds,
    NonInfluenzaRule,
    baseline_from_nonepidemic,
    baseline_from_weeks,
    default_n_per_season,
    epidemic_period,
    intensity_level,
    interpolate_missing,
    map_curve,
    mem_thresholds,
    non_influenza_weeks_by_positivity,
    non_influenza_weeks_by_share,
    round_half_up,
    same_week_past_seasons,
    season_onset,
)
from sitrep.analysis.seasonal.period import _smooth_local_linear

TOL = 1e-6

# --------------------------------------------------------------------------- data
# docs/methods.md 7.1 worked example (invented; 3 prior seasons x 12 weeks; 400 tests/week).
ILI_71 = {
    "S1": np.array([0.9, 1.0, 1.1, 1.3, 2.2, 3.5, 4.1, 3.0, 1.8, 1.2, 1.0, 0.9]),
    "S2": np.array([1.0, 1.0, 1.2, 1.5, 2.8, 4.6, 5.2, 3.9, 2.1, 1.4, 1.1, 1.0]),
    "S3": np.array([0.8, 0.9, 1.0, 1.1, 1.6, 2.9, 3.8, 3.3, 2.0, 1.3, 1.0, 0.9]),
}
POS_71 = {
    "S1": np.array([2, 3, 6, 15, 60, 140, 180, 120, 50, 20, 6, 3], dtype=float),
    "S2": np.array([1, 2, 4, 20, 90, 200, 260, 170, 60, 18, 5, 2], dtype=float),
    "S3": np.array([1, 1, 3, 8, 40, 110, 170, 130, 55, 15, 4, 2], dtype=float),
}
TESTED_71 = np.full(12, 400.0)
CURRENT_71 = np.array([1.0, 1.1, 1.2, 1.1, 1.3, 1.5, 1.9, 2.4, 3.1])

# docs/methods.md 7.2 worked example (invented, 3 seasons x 30 weeks, ILI%).
A = np.array(
    [
        0.6,
        0.7,
        0.7,
        0.8,
        0.8,
        0.9,
        0.9,
        1.0,
        1.1,
        1.2,
        1.6,
        2.4,
        3.8,
        5.6,
        6.4,
        5.0,
        3.2,
        2.0,
        1.4,
        1.1,
        1.0,
        0.9,
        0.8,
        0.8,
        0.7,
        0.7,
        0.6,
        0.6,
        0.6,
        0.5,
    ]
)
B = np.array(
    [
        0.5,
        0.6,
        0.6,
        0.7,
        0.7,
        0.8,
        0.8,
        0.9,
        0.9,
        1.0,
        1.0,
        1.1,
        1.3,
        1.8,
        2.9,
        4.6,
        6.9,
        7.8,
        6.0,
        3.9,
        2.3,
        1.5,
        1.1,
        0.9,
        0.8,
        0.7,
        0.7,
        0.6,
        0.6,
        0.6,
    ]
)
C = np.array(
    [
        0.7,
        0.7,
        0.8,
        0.9,
        1.0,
        1.1,
        1.3,
        1.9,
        3.0,
        4.3,
        5.0,
        4.1,
        2.8,
        1.8,
        1.3,
        1.1,
        1.0,
        0.9,
        0.9,
        0.8,
        0.8,
        0.7,
        0.7,
        0.7,
        0.6,
        0.6,
        0.6,
        0.5,
        0.5,
        0.5,
    ]
)
MEM_72 = {"A": A, "B": B, "C": C}


def thresholds_tuple(m: MemThresholds) -> tuple[float | None, ...]:
    return (
        m.epidemic_threshold,
        m.post_epidemic_threshold,
        m.medium_threshold,
        m.high_threshold,
        m.very_high_threshold,
    )


# --------------------------------------------------------------------------- 7.1 baseline


def test_share_rule_selects_methods_71_weeks() -> None:
    # docs/methods.md 7.1 step 1 [HAND]: S1 {1,2,3,11,12}, S2 {1,2,3,11,12}, S3 {1,2,3,4,11,12}.
    expected = {"S1": [1, 2, 3, 11, 12], "S2": [1, 2, 3, 11, 12], "S3": [1, 2, 3, 4, 11, 12]}
    for label, weeks in expected.items():
        mask = non_influenza_weeks_by_share(POS_71[label])
        assert (np.flatnonzero(mask) + 1).tolist() == weeks


def test_share_rule_needs_runs_of_two() -> None:
    # hand: total 100, 2% = 2; week 2 (1 < 2) is an isolated low week -> not a run of 2.
    pos = np.array([50.0, 1.0, 30.0, 1.0, 1.0, 17.0])
    assert non_influenza_weeks_by_share(pos).tolist() == [False, False, False, True, True, False]
    assert non_influenza_weeks_by_share(pos, min_run=1).tolist() == [
        False,
        True,
        False,
        True,
        True,
        False,
    ]


def test_baseline_share_rule_methods_71() -> None:
    masks = {k: non_influenza_weeks_by_share(v) for k, v in POS_71.items()}
    b = baseline_from_weeks(ILI_71, masks, rule=NonInfluenzaRule.SHARE_OF_SEASON_POSITIVES)
    assert b.available and b.reason == ""
    assert b.n_weeks == 16  # docs/methods.md 7.1 step 2: "those 16 weeks"
    assert b.mean == pytest.approx(0.993750, abs=TOL)  # docs/methods.md 7.1 [HAND/LIB]
    assert b.sd == pytest.approx(0.099791, abs=TOL)  # docs/methods.md 7.1 SD(n-1) [HAND/LIB]
    assert b.value == pytest.approx(1.193333, abs=TOL)  # docs/methods.md 7.1 baseline [HAND/LIB]
    assert b.rounded == 1.2  # docs/methods.md 7.1 "-> 1.2%"
    assert b.seasons_used == ("S1", "S2", "S3")
    assert b.weeks_by_season == ((1, 2, 3, 11, 12), (1, 2, 3, 11, 12), (1, 2, 3, 4, 11, 12))
    assert b.rule is NonInfluenzaRule.SHARE_OF_SEASON_POSITIVES


def test_baseline_share_rule_population_sd_methods_71() -> None:
    masks = {k: non_influenza_weeks_by_share(v) for k, v in POS_71.items()}
    b = baseline_from_weeks(ILI_71, masks, ddof=0)
    assert b.value == pytest.approx(1.186995, abs=TOL)  # docs/methods.md 7.1 "(SD(n) -> 1.186995)"
    assert b.ddof == 0


def test_baseline_positivity_rule_methods_71() -> None:
    masks = {k: non_influenza_weeks_by_positivity(v, TESTED_71) for k, v in POS_71.items()}
    for mask in masks.values():  # docs/methods.md 7.1: weeks {1-4, 10-12} in each season
        assert (np.flatnonzero(mask) + 1).tolist() == [1, 2, 3, 4, 10, 11, 12]
    b = baseline_from_weeks(ILI_71, masks, rule=NonInfluenzaRule.POSITIVITY)
    assert b.n_weeks == 21  # docs/methods.md 7.1 "(21 values)"
    assert b.mean == pytest.approx(1.076190, abs=TOL)  # docs/methods.md 7.1 [HAND/LIB]
    assert b.sd == pytest.approx(0.181397, abs=TOL)  # docs/methods.md 7.1 [HAND/LIB]
    assert b.value == pytest.approx(1.438984, abs=TOL)  # docs/methods.md 7.1 [HAND/LIB]
    assert b.rounded == 1.4  # docs/methods.md 7.1 "-> 1.4%"


def test_onset_methods_71_two_definitions_differ() -> None:
    # docs/methods.md 7.1 step 3 [HAND]: vs 1.2 the first run of 3 weeks >= 1.2 starts at week 5
    # (week 3 reaches 1.2 but week 4 drops); vs 1.4 (10% rule) onset is week 6.
    assert season_onset(CURRENT_71, 1.2) == 5
    assert season_onset(CURRENT_71, 1.4) == 6
    # Using the computed baselines directly, rounded to 1 dp as published:
    masks = {k: non_influenza_weeks_by_share(v) for k, v in POS_71.items()}
    share = baseline_from_weeks(ILI_71, masks)
    assert season_onset(CURRENT_71, share.rounded) == 5
    assert season_onset(CURRENT_71, share.value, decimals=1) == 5


def test_onset_is_at_or_above_and_nan_breaks_run() -> None:
    # hand: ">=": three weeks equal to the threshold are an onset at week 1.
    assert season_onset([1.2, 1.2, 1.2], 1.2) == 1
    # hand: NaN at week 3 breaks the run 2-3-4; next run of 3 is weeks 4-6.
    assert season_onset([1.0, 2.0, np.nan, 2.0, 2.0, 2.0], 1.5) == 4
    assert season_onset([2.0, 2.0, np.nan, 2.0, 2.0], 1.5) is None
    assert season_onset([2.0, 2.0], 1.5) is None  # fewer weeks than k
    assert season_onset([2.0], 1.5, k=1) == 1  # MEM alert rule k = 1
    assert season_onset([2.0, 2.0, 2.0], None) is None  # threshold not available
    # hand: decimals=1 rounds 1.16 -> 1.2 (>= 1.2); unrounded 1.16 < 1.2.
    assert season_onset([1.16, 1.25, 1.3], 1.2, decimals=1) == 1
    assert season_onset([1.16, 1.25, 1.3], 1.2) is None


def test_onset_rejects_bad_arguments() -> None:
    with pytest.raises(ValueError, match="k must be >= 1, got 0"):
        season_onset([1.0], 1.0, k=0)
    with pytest.raises(ValueError, match=r"current must be 1-D, got shape \(1, 2\)"):
        season_onset([[1.0, 2.0]], 1.0)
    with pytest.raises(ValueError, match="threshold must be finite"):
        season_onset([1.0], float("nan"))


def test_round_half_up() -> None:
    # hand: published baselines round half up; Python's round(1.25, 1) gives 1.2.
    assert round_half_up(1.25) == 1.3
    assert round_half_up(1.193333) == 1.2
    assert round_half_up(1.438984) == 1.4
    assert round_half_up(2.05) == 2.1


def test_baseline_needs_three_seasons() -> None:
    two = {k: ILI_71[k] for k in ("S1", "S2")}
    masks = {k: np.ones(12, dtype=bool) for k in two}
    b = baseline_from_weeks(two, masks)
    assert isinstance(b, Baseline)
    assert not b.available
    assert b.value is None and b.rounded is None and b.sd is None
    assert b.reason == "The baseline is not available: 2 past seasons in the history, 3 are needed."


def test_baseline_uses_last_three_seasons() -> None:
    # hand: a fourth, older season full of 9.0 is ignored; the three newest give
    # values {1, 1, 2, 2, 3, 3}: mean 2, SD(n-1) sqrt(4/5) -> 2 + 2*0.894427 = 3.788854.
    seasons = [np.full(2, 9.0), np.array([1.0, 1.0]), np.array([2.0, 2.0]), np.array([3.0, 3.0])]
    masks = [np.ones(2, dtype=bool)] * 4
    b = baseline_from_weeks(seasons, masks)
    assert b.seasons_used == ("2", "3", "4")
    assert b.value == pytest.approx(2 + 2 * math.sqrt(0.8), abs=TOL)


def test_baseline_from_nonepidemic_outside_mem_periods() -> None:
    mem = mem_thresholds(MEM_72)
    b = baseline_from_nonepidemic(MEM_72, mem.periods)
    # docs/methods.md 7.2 periods: A 11-19, B 14-21, C 7-15 -> weeks outside them are pooled.
    outside = np.concatenate([A[:10], A[19:], B[:13], B[21:], C[:6], C[15:]])
    assert b.rule is NonInfluenzaRule.OUTSIDE_MEM_EPIDEMIC
    assert b.n_weeks == 21 + 22 + 21 == outside.size
    assert b.weeks_by_season[1] == tuple(range(1, 14)) + tuple(range(22, 31))
    # independent recomputation of mean + 2 SD(n-1) with numpy on the slices above
    assert b.value == pytest.approx(outside.mean() + 2 * outside.std(ddof=1), abs=1e-12)
    assert b.mean == pytest.approx(outside.mean(), abs=1e-12)


def test_baseline_from_nonepidemic_small_hand_case() -> None:
    # hand: weeks outside the periods are {1, 1.2, 1} {0.8, 1.1, 0.9} {1, 1, 1.2}:
    # mean 9.2/9 = 1.022222, sum of squared deviations 0.135556, SD(n-1) = sqrt(0.135556/8)
    # = 0.130171 -> 1.022222 + 2 * 0.130171 = 1.282564 -> 1.3.
    seasons = {
        "a": [1.0, 1.2, 5.0, 6.0, 1.0],
        "b": [0.8, 4.0, 7.0, 1.1, 0.9],
        "c": [1.0, 1.0, 3.0, 5.0, 1.2],
    }
    periods = [
        EpidemicPeriod("a", 3, 4, 2, 0.0, 5),
        EpidemicPeriod("b", 2, 3, 2, 0.0, 5),
        EpidemicPeriod("c", 3, 4, 2, 0.0, 5),
    ]
    b = baseline_from_nonepidemic(seasons, periods)
    assert b.mean == pytest.approx(9.2 / 9, abs=TOL)
    assert b.sd == pytest.approx(0.130171, abs=TOL)
    assert b.value == pytest.approx(1.282564, abs=TOL)
    assert b.rounded == 1.3


def test_baseline_from_nonepidemic_missing_period_is_an_error() -> None:
    periods = [EpidemicPeriod("A", 11, 19, 9, 64.876, 30)]
    with pytest.raises(ValueError, match="no epidemic period for season 'B'"):
        baseline_from_nonepidemic(MEM_72, periods)


# --------------------------------------------------------------------------- 7.2 MEM


def test_map_curve_increments_methods_72() -> None:
    # docs/methods.md 7.2 raw MAP increments s=1..10 (3 dp) [HAND/own code].
    expected = {
        "A": [13.223, 11.570, 10.331, 7.851, 6.612, 4.959, 4.132, 3.306, 2.893, 2.479],
        "B": [14.286, 12.637, 10.989, 8.425, 7.143, 5.311, 4.212, 3.297, 2.747],
        "C": [12.019, 10.337, 9.856, 7.212, 6.731, 4.567, 4.327, 3.125, 3.125, 2.644],
    }
    for label, inc in expected.items():
        d = np.diff(map_curve(MEM_72[label]))[: len(inc)]
        np.testing.assert_allclose(d, inc, atol=5e-4)


@pytest.mark.parametrize("season", [A, B, C, np.array([0.0, 0.0, 3.0, 0.0]), np.ones(53)])
def test_map_curve_relations(season: np.ndarray) -> None:
    # relation: MAP(0) = 0, non-decreasing, MAP(w) = 100, length w + 1.
    curve = map_curve(season)
    assert curve.shape == (season.size + 1,)
    assert curve[0] == 0.0 and curve[-1] == 100.0
    assert np.all(np.diff(curve) >= -1e-12)


def test_epidemic_periods_methods_72() -> None:
    # docs/methods.md 7.2 [HAND/own code]: A L=9 weeks 11-19 MAP 64.876; B L=8 14-21 66.300;
    # C L=9 7-15 61.298. Own computation, not an outside oracle.
    expected = {"A": (11, 19, 9, 64.876), "B": (14, 21, 8, 66.300), "C": (7, 15, 9, 61.298)}
    for label, (start, end, length, map_pct) in expected.items():
        p = epidemic_period(MEM_72[label], label=label)
        assert (p.start_week, p.end_week, p.length) == (start, end, length)
        assert p.map_percent == pytest.approx(map_pct, abs=5e-4)
        assert p.season == label and p.n_weeks == 30 and p.interpolated_weeks == ()
    assert epidemic_period(A).map_percent == pytest.approx(100 * 31.4 / 48.4, abs=1e-9)  # hand


def test_mem_thresholds_point_n2_methods_72() -> None:
    # docs/methods.md 7.2 [HAND/own code], n = 2 per season, point form. Own computation,
    # not an outside oracle.
    m = mem_thresholds(MEM_72, n_per_season=2)
    assert m.available and m.reason == ""
    assert m.n_per_season == 2
    assert m.seasons_used == ("A", "B", "C")
    assert m.form is IntervalForm.POINT and m.slope is MapSlope.RAW and m.delta == 2.8
    assert [(p.start_week, p.end_week) for p in m.periods] == [(11, 19), (14, 21), (7, 15)]
    assert sorted(m.pre_epidemic_values) == [1.0, 1.1, 1.1, 1.1, 1.2, 1.3]
    assert sorted(m.post_epidemic_values) == [1.0, 1.0, 1.1, 1.1, 1.1, 1.5]
    assert sorted(m.epidemic_values) == [4.3, 5.0, 5.6, 6.4, 6.9, 7.8]
    assert m.epidemic_threshold == pytest.approx(1.303213, abs=TOL)  # docs/methods.md 7.2
    assert m.post_epidemic_threshold == pytest.approx(1.439588, abs=TOL)  # docs/methods.md 7.2
    assert m.medium_threshold == pytest.approx(5.566204, abs=TOL)  # docs/methods.md 7.2
    assert m.high_threshold == pytest.approx(7.786855, abs=TOL)  # docs/methods.md 7.2
    assert m.very_high_threshold == pytest.approx(9.032454, abs=TOL)  # docs/methods.md 7.2
    # docs/methods.md 7.2 intermediate values: mean log 1.772127, SD log 0.218727, GM 5.883355.
    logs = np.log(m.epidemic_values)
    assert logs.mean() == pytest.approx(1.772127, abs=TOL)
    assert logs.std(ddof=1) == pytest.approx(0.218727, abs=TOL)


def test_mem_thresholds_ci_form_n2_methods_72() -> None:
    # docs/methods.md 7.2 CI-of-mean variants [HAND/own code]: 1.202686 (z), 1.218295 (t5);
    # intensity 5.751752 / 6.596658 / 7.008628. Own computation, not an outside oracle.
    m = mem_thresholds(MEM_72, n_per_season=2, form=IntervalForm.CI)
    assert m.form is IntervalForm.CI
    assert m.epidemic_threshold == pytest.approx(1.202686, abs=TOL)
    assert m.medium_threshold == pytest.approx(5.751752, abs=TOL)
    assert m.high_threshold == pytest.approx(6.596658, abs=TOL)
    assert m.very_high_threshold == pytest.approx(7.008628, abs=TOL)
    t = mem_thresholds(MEM_72, n_per_season=2, form="ci-t")  # config string accepted
    assert t.form is IntervalForm.CI_T
    assert t.epidemic_threshold == pytest.approx(1.218295, abs=TOL)
    assert mem_thresholds(MEM_72, n_per_season=2, form="ci").epidemic_threshold == (
        m.epidemic_threshold
    )


def test_mem_thresholds_default_n_methods_72() -> None:
    # docs/methods.md 7.2 [HAND/own code]: default n = round(30/3) = 10 (all pre weeks when fewer
    # exist; 26 pre values): threshold 1.180216; intensity 2.715464 / 6.283175 / 9.103580.
    m = mem_thresholds(MEM_72)
    assert m.n_per_season == 10
    assert len(m.pre_epidemic_values) == 26  # A 10 + B 10 (of 13) + C 6
    assert len(m.epidemic_values) == 26  # all epidemic weeks: 9 + 8 + 9
    assert m.epidemic_threshold == pytest.approx(1.180216, abs=TOL)
    assert m.medium_threshold == pytest.approx(2.715464, abs=TOL)
    assert m.high_threshold == pytest.approx(6.283175, abs=TOL)
    assert m.very_high_threshold == pytest.approx(9.103580, abs=TOL)


def test_mem_smoothed_slope_methods_72_note() -> None:
    # docs/methods.md 7.2 note [HAND/own code]: with kernel smoothing B's smoothed increment
    # D(9) = 2.840 >= 2.8, so L = 9, weeks 14-22. A and C unchanged. Own computation.
    smooth = np.diff(_smooth_local_linear(map_curve(B)))
    assert smooth[8] == pytest.approx(2.840, abs=5e-4)
    p = epidemic_period(B, slope=MapSlope.SMOOTHED)
    assert (p.start_week, p.end_week, p.length) == (14, 22, 9)
    assert (
        epidemic_period(A, slope=MapSlope.SMOOTHED).start_week,
        epidemic_period(C, slope=MapSlope.SMOOTHED).end_week,
    ) == (11, 15)
    m = mem_thresholds(MEM_72, n_per_season=2, slope=MapSlope.SMOOTHED)
    assert m.slope is MapSlope.SMOOTHED
    assert [(q.start_week, q.end_week) for q in m.periods] == [(11, 19), (14, 22), (7, 15)]
    # pre-epidemic weeks are unchanged, so the epidemic threshold is too (docs/methods.md 7.2 value)
    assert m.epidemic_threshold == pytest.approx(1.303213, abs=TOL)


def test_default_n_per_season() -> None:
    # docs/methods.md 7.2 step 4: round half to even like R: 4 seasons -> 8, 12 -> 2; 3 -> 10.
    assert default_n_per_season(3) == 10
    assert default_n_per_season(4) == 8
    assert default_n_per_season(12) == 2
    assert default_n_per_season(40) == 1  # max(1, round(0.75))
    assert default_n_per_season(2) == 15


def test_thresholds_ordered() -> None:
    # relation: medium < high < very high for every form and n.
    for form in IntervalForm:
        for n in (1, 2, 5, None):
            m = mem_thresholds(MEM_72, n_per_season=n, form=form)
            assert m.medium_threshold < m.high_threshold < m.very_high_threshold


# --------------------------------------------------------------------------- hand cases


def test_flat_long_season_gives_one_week_epidemic() -> None:
    # hand: 40 weeks of 2.0: MAP(s) = 2.5 s, D(1) = 2.5 < 2.8 -> L = max(1, 0) = 1 at week 1.
    p = epidemic_period(np.full(40, 2.0))
    assert (p.start_week, p.end_week, p.length) == (1, 1, 1)
    assert p.map_percent == pytest.approx(2.5, abs=1e-12)


def test_flat_short_seasons_are_all_epidemic_and_thresholds_unavailable() -> None:
    # hand: 30 weeks of 2.0: every D(s) = 3.333 >= 2.8 -> L = 30, no pre-epidemic weeks.
    p = epidemic_period(np.full(30, 2.0))
    assert (p.start_week, p.end_week, p.length, p.map_percent) == (1, 30, 30, 100.0)
    m = mem_thresholds({"x": np.full(30, 2.0), "y": np.full(30, 1.0)})
    assert not m.available
    assert thresholds_tuple(m) == (None,) * 5
    assert m.reason == (
        "Epidemic thresholds are not available: 0 pre-epidemic week value(s) "
        "in the 2 seasons used, at least 2 are needed."
    )
    assert len(m.periods) == 2


def test_two_peak_season() -> None:
    # hand: base 0.5 (23 weeks), wave 1 weeks 6-8 = 2,3,2, wave 2 weeks 18-21 = 3,5,6,4;
    # T = 11.5 + 7 + 18 = 36.5. Best windows: 6; 11; 15; 18; 18.5 -> D(5) = 0.5/36.5 = 1.37
    # < 2.8 -> L = 4, weeks 18-21, MAP = 1800/36.5 = 49.315068%. Wave 1 stays pre-epidemic.
    s = np.full(30, 0.5)
    s[5:8] = [2.0, 3.0, 2.0]
    s[17:21] = [3.0, 5.0, 6.0, 4.0]
    p = epidemic_period(s)
    assert (p.start_week, p.end_week, p.length) == (18, 21, 4)
    assert p.map_percent == pytest.approx(1800 / 36.5, abs=1e-9)
    m = mem_thresholds({"1": s, "2": A}, n_per_season=2)
    assert sorted(m.pre_epidemic_values)[-2:] == [2.0, 3.0]  # the first wave's top two


def test_season_shorter_than_window() -> None:
    # hand: 5-week season 1,2,3,2,1 (T = 9): increments 33.3, 22.2, 22.2, 11.1, 11.1, all
    # >= 2.8 -> the whole season is the epidemic, L = 5. It adds nothing to the pre pool.
    short = np.array([1.0, 2.0, 3.0, 2.0, 1.0])
    p = epidemic_period(short)
    assert (p.start_week, p.end_week, p.length, p.n_weeks) == (1, 5, 5, 5)
    m = mem_thresholds({"1": A, "2": short}, n_per_season=2)
    assert m.available
    assert sorted(m.pre_epidemic_values) == [1.1, 1.2]  # from A only
    assert sorted(m.epidemic_values) == [2.0, 3.0, 5.6, 6.4]
    # hand: mean 1.15, SD(n-1) 0.0707107 -> 1.15 + 1.644854 * 0.0707107 = 1.266309
    assert m.epidemic_threshold == pytest.approx(1.266309, abs=TOL)


def test_53_week_season() -> None:
    # hand: 52 weeks of 1.0 and 10.0 in week 53: T = 62, MAP(1) = 16.129032, D(2) = 1.61
    # < 2.8 -> L = 1, the period is week 53 itself.
    s = np.ones(53)
    s[52] = 10.0
    p = epidemic_period(s)
    assert (p.start_week, p.end_week, p.length, p.n_weeks) == (53, 53, 1, 53)
    assert p.map_percent == pytest.approx(1000 / 62, abs=1e-9)
    m = mem_thresholds({"2019-20": A, "2020-21": s}, n_per_season=2)
    assert m.available and m.periods[1].n_weeks == 53
    assert same_week_past_seasons({"2019-20": A, "2020-21": s}, 53) == (
        ("2019-20", None),
        ("2020-21", 10.0),
    )


def test_fewer_seasons_than_needed() -> None:
    one = mem_thresholds({"2023-24": A})
    assert not one.available
    assert thresholds_tuple(one) == (None,) * 5  # None, never 0
    assert one.reason == (
        "Epidemic thresholds are not available: 1 past season in the "
        "history, at least 2 are needed."
    )
    assert one.seasons_used == ("2023-24",)
    none = mem_thresholds({})
    assert none.reason == (
        "Epidemic thresholds are not available: 0 past seasons in the "
        "history, at least 2 are needed."
    )
    three = mem_thresholds(MEM_72, min_seasons=5)
    assert "3 past seasons in the history, at least 5 are needed" in three.reason
    # an all-missing season does not count as usable
    skipped = mem_thresholds({"a": A, "b": np.full(30, np.nan)})
    assert not skipped.available and "1 past season in the history" in skipped.reason
    assert skipped.notes == ("Season b was skipped: it has no reported week.",)
    assert intensity_level(9.0, one) is IntensityLevel.NOT_AVAILABLE


def test_nan_week_is_interpolated_not_zero_filled() -> None:
    # hand: week 14 of A (5.6) missing -> (3.8 + 6.4) / 2 = 5.1.
    a_nan = A.copy()
    a_nan[13] = np.nan
    filled = interpolate_missing(a_nan)
    assert filled[13] == pytest.approx(5.1, abs=1e-12)
    np.testing.assert_array_equal(np.delete(filled, 13), np.delete(A, 13))
    p = epidemic_period(a_nan, label="A")
    assert p.interpolated_weeks == (14,)
    assert (p.start_week, p.end_week) == (11, 19)
    with_nan = mem_thresholds({"A": a_nan, "B": B, "C": C}, n_per_season=2)
    a_interp = A.copy()
    a_interp[13] = 5.1
    explicit = mem_thresholds({"A": a_interp, "B": B, "C": C}, n_per_season=2)
    a_zero = A.copy()
    a_zero[13] = 0.0
    zeroed = mem_thresholds({"A": a_zero, "B": B, "C": C}, n_per_season=2)
    assert thresholds_tuple(with_nan) == pytest.approx(thresholds_tuple(explicit), abs=1e-12)
    assert with_nan.medium_threshold != pytest.approx(zeroed.medium_threshold, abs=1e-3)
    # leading / trailing NaN take the nearest reported value
    np.testing.assert_array_equal(
        interpolate_missing([np.nan, 2.0, np.nan, 4.0, np.nan]), [2.0, 2.0, 3.0, 4.0, 4.0]
    )


def test_at_most_ten_most_recent_seasons() -> None:
    seasons = {f"20{y:02d}-{y + 1:02d}": (A if y % 2 else B) * (1 + y / 100) for y in range(10, 22)}
    m = mem_thresholds(seasons)
    assert len(m.seasons_used) == 10
    assert m.seasons_used[0] == "2012-13" and m.seasons_used[-1] == "2021-22"
    assert m.n_per_season == 3  # round(30 / 10)
    assert m.notes == ("Only the 10 most recent of 12 usable past seasons were used.",)


def test_mem_rejects_bad_input() -> None:
    with pytest.raises(ValueError, match="contains a negative value"):
        mem_thresholds({"a": A, "b": -B})
    with pytest.raises(ValueError, match=r"must be a 1-D array, got shape \(2, 2\)"):
        mem_thresholds({"a": A, "b": [[1.0, 2.0], [3.0, 4.0]]})
    with pytest.raises(ValueError, match="intensity_levels must be three increasing"):
        mem_thresholds(MEM_72, intensity_levels=(0.9, 0.4, 0.975))
    with pytest.raises(ValueError, match="n_per_season must be >= 1 or None, got 0"):
        mem_thresholds(MEM_72, n_per_season=0)
    with pytest.raises(ValueError, match="'median'"):
        mem_thresholds(MEM_72, form="median")
    with pytest.raises(ValueError, match="season total must be > 0"):
        map_curve(np.zeros(4))


# --------------------------------------------------------------------------- intensity


def test_intensity_levels_against_methods_72_thresholds() -> None:
    # thresholds from docs/methods.md 7.2 (point, n=2): 1.303213 | 5.566204 | 7.786855 | 9.032454
    m = mem_thresholds(MEM_72, n_per_season=2)
    assert intensity_level(1.0, m) is IntensityLevel.BELOW_EPIDEMIC_THRESHOLD
    assert intensity_level(m.epidemic_threshold, m) is IntensityLevel.LOW  # at threshold: >=
    assert intensity_level(5.5, m) is IntensityLevel.LOW
    assert intensity_level(5.6, m) is IntensityLevel.MEDIUM
    assert intensity_level(7.8, m) is IntensityLevel.HIGH
    assert intensity_level(9.1, m) is IntensityLevel.VERY_HIGH
    assert intensity_level(None, m) is IntensityLevel.NOT_AVAILABLE
    assert intensity_level(float("nan"), m) is IntensityLevel.NOT_AVAILABLE
    with pytest.raises(ValueError, match="got -1.0"):
        intensity_level(-1.0, m)


def test_intensity_medium_below_epidemic_threshold_skips_low() -> None:
    # hand: with n = 10 the medium threshold (2.715464) is above the epidemic threshold
    # (1.180216), so LOW exists; force medium below by construction to check the order.
    m = mem_thresholds(MEM_72, n_per_season=2)
    odd = MemThresholds(**{**m.__dict__, "medium_threshold": 1.0})
    assert intensity_level(1.4, odd) is IntensityLevel.MEDIUM


def test_intensity_enum_text() -> None:
    assert [level.value for level in IntensityLevel] == [
        "not available",
        "below epidemic threshold",
        "low",
        "medium",
        "high",
        "very high",
    ]


# --------------------------------------------------------------------------- same week


def test_same_week_past_seasons_sorted_and_missing() -> None:
    past = {
        "2023-24": np.array([1.0, 2.5, 3.0]),
        "2021-22": np.array([0.5, np.nan]),
        "2022-23": np.array([0.7, 1.9, 2.2]),
    }
    assert same_week_past_seasons(past, 2) == (
        ("2021-22", None),
        ("2022-23", 1.9),
        ("2023-24", 2.5),
    )
    assert same_week_past_seasons(past, 3) == (
        ("2021-22", None),
        ("2022-23", 2.2),
        ("2023-24", 3.0),
    )
    assert same_week_past_seasons({}, 1) == ()
    with pytest.raises(ValueError, match="season_week must be >= 1 .1-based., got 0"):
        same_week_past_seasons(past, 0)


def test_season_window_stops_at_the_configured_week() -> None:
    from sitrep.analysis.seasonal_context import _window_length

    # a 52-week season starting in week 40: season week k is calendar week 40 + k - 1, wrapping after 52
    calendar = {k: (40 + k - 2) % 52 + 1 for k in range(1, 53)}
    assert calendar[1] == 40 and calendar[13] == 52 and calendar[14] == 1
    assert _window_length(calendar, 40, 20, 52) == 33  # weeks 40..52 (13) and 1..20 (20) [HAND]
    assert _window_length(calendar, 40, 0, 52) == 52  # 0: the whole season
    # a 53-week year only shifts the position of week 20 by one
    calendar53 = {k: (40 + k - 2) % 53 + 1 for k in range(1, 54)}
    assert _window_length(calendar53, 40, 20, 53) == 34
