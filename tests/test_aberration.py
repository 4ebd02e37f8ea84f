"""Tests of sitrep.analysis.aberration: C1, C2, C3 on weekly series.

Check values: docs/methods.md 8.1 worked example [HAND] (weekly counts y0..y12 =
20 22 19 21 23 20 22 24 21 35 40 38 30), to 4 decimals; others derived by hand in the
comment beside each assertion.
"""

from __future__ import annotations

import numpy as np
import pytest

from sitrep.analysis.aberration import (
    DEFAULT_SD_FLOOR,
    AberrationWeek,
    aberration_series,
    aberration_this_week,
)

Y81 = np.array([20, 22, 19, 21, 23, 20, 22, 24, 21, 35, 40, 38, 30], dtype=float)
TOL4 = 5e-5  # values quoted to 4 dp


def test_methods_81_worked_example() -> None:
    r = aberration_series(Y81, sd_floor=1.0)  # counts -> floor of 1 count (does not bind)
    # docs/methods.md 8.1 [HAND]: t=9 C1 7.8984, C2 9.8995; t=10 C1 3.1594, C2 10.7252;
    # t=11 C1 1.4821, C2 9.6444, C3 27.2691; t=12 C1 0.1639, C2 1.2194, C3 18.5890.
    np.testing.assert_allclose(r.c1[9:], [7.8984, 3.1594, 1.4821, 0.1639], atol=TOL4)
    np.testing.assert_allclose(r.c2[9:], [9.8995, 10.7252, 9.6444, 1.2194], atol=TOL4)
    np.testing.assert_allclose(r.c3[11:], [27.2691, 18.5890], atol=TOL4)
    # docs/methods.md 8.1: C3(11) = 8.8995 + 9.7252 + 8.6444 = sum of (C2 - 1) over t = 9..11
    assert r.c3[11] == pytest.approx(np.sum(r.c2[9:12] - 1), abs=1e-12)
    # docs/methods.md 8.1 intermediate values at t=9: C1 baseline mean 21.428571, SD 1.718249
    base = Y81[2:9]
    assert base.mean() == pytest.approx(21.428571, abs=1e-6)
    assert base.std(ddof=1) == pytest.approx(1.718249, abs=1e-6)
    assert r.c1[9] == pytest.approx((35 - base.mean()) / base.std(ddof=1), abs=1e-12)
    # alarms (docs/methods.md 8.1 asterisks): C1 t=9,10; C2 t=9,10,11; C3 t=11,12
    assert np.flatnonzero(r.c1_alarm).tolist() == [9, 10]
    assert np.flatnonzero(r.c2_alarm).tolist() == [9, 10, 11]
    assert np.flatnonzero(r.c3_alarm).tolist() == [11, 12]


def test_history_requirements() -> None:
    # hand: C1 needs weeks t-7..t-1 -> first at t=7; C2 t-9..t-3 -> t=9; C3 needs C2 at
    # t-2..t -> t=11. Earlier weeks are NaN with no alarm.
    r = aberration_series(Y81, sd_floor=1.0)
    assert np.isnan(r.c1[:7]).all() and not np.isnan(r.c1[7:]).any()
    assert np.isnan(r.c2[:9]).all() and not np.isnan(r.c2[9:]).any()
    assert np.isnan(r.c3[:11]).all() and not np.isnan(r.c3[11:]).any()
    assert not r.c1_alarm[:7].any() and not r.c3_alarm[:11].any()
    # hand: C1 at t=7: baseline y0..y6 mean 21, SD 1.414214 -> (24 - 21) / 1.414214 = 2.1213
    assert r.c1[7] == pytest.approx(3 / np.sqrt(2), abs=1e-12)


def test_sd_floor_case() -> None:
    # hand: flat baseline of 7 weeks at 20 counts -> SD 0; with the 1-count floor
    # C1 = (23 - 20) / 1 = 3.0, not an alarm (strictly > 3); 24 -> 4.0, an alarm.
    r = aberration_series([20.0] * 7 + [23.0], sd_floor=1.0)
    assert r.c1[7] == pytest.approx(3.0, abs=1e-12) and not r.c1_alarm[7]
    r = aberration_series([20.0] * 7 + [24.0], sd_floor=1.0)
    assert r.c1[7] == pytest.approx(4.0, abs=1e-12) and r.c1_alarm[7]
    # hand: ILI% default floor 0.2 pp: flat 1.0% baseline, 1.5% -> C1 = 0.5 / 0.2 = 2.5.
    assert DEFAULT_SD_FLOOR == 0.2
    r = aberration_series([1.0] * 7 + [1.5])
    assert r.c1[7] == pytest.approx(2.5, abs=1e-12) and not r.c1_alarm[7]
    # hand: floor 0.1 -> 5.0, alarm
    assert aberration_series([1.0] * 7 + [1.5], sd_floor=0.1).c1[7] == pytest.approx(5.0)
    # no floor and a flat baseline: undefined -> NaN, no alarm, with a reason
    wk = aberration_this_week([1.0] * 7 + [1.5], sd_floor=0.0)
    assert np.isnan(wk.c1.values[0]) and not wk.c1.alarms[0]
    assert wk.c1.reasons == (
        "C1 not computed: the baseline weeks are all equal and no SD floor is set.",
    )


def test_floor_does_not_change_values_when_sd_is_larger() -> None:
    # relation: the worked example's SDs (>= 1.414) exceed both floors.
    a = aberration_series(Y81, sd_floor=1.0)
    b = aberration_series(Y81, sd_floor=0.2)
    np.testing.assert_array_equal(a.c2, b.c2)
    np.testing.assert_array_equal(a.c3, b.c3)


def test_vectorised_over_districts_matches_single_series() -> None:
    y = np.vstack([Y81, Y81 / 10, np.r_[Y81[:-1], np.nan]])
    wk = aberration_this_week(y, sd_floor=1.0)
    assert isinstance(wk, AberrationWeek)
    assert wk.week_index == 12
    # district 0 = docs/methods.md 8.1 at t=12: C1 0.1639, C2 1.2194, C3 18.5890 [HAND]
    assert wk.c1.values[0] == pytest.approx(0.1639, abs=TOL4)
    assert wk.c2.values[0] == pytest.approx(1.2194, abs=TOL4)
    assert wk.c3.values[0] == pytest.approx(18.5890, abs=TOL4)
    assert (wk.c1.alarms[0], wk.c2.alarms[0], wk.c3.alarms[0]) == (False, False, True)
    # district 1: values / 10 with floor 1 -> SD floored (SDs 0.17..) -> differs from row 0
    single = aberration_series(Y81 / 10, sd_floor=1.0)
    assert wk.c2.values[1] == pytest.approx(single.c2[12], abs=1e-12)
    # district 2 has no value this week
    assert np.isnan(wk.c1.values[2]) and not wk.c1.alarms[2]
    assert wk.c1.reasons[2] == "C1 not computed: no value this week."
    assert wk.c3.reasons[2] == "C3 not computed: C2 not available for week(s) t."
    assert wk.c1.reasons[:2] == ("", "")
    assert (wk.c1.alarm_threshold, wk.c2.alarm_threshold, wk.c3.alarm_threshold) == (3, 3, 2)
    # an earlier week via week_index
    wk9 = aberration_this_week(y, week_index=9, sd_floor=1.0)
    assert wk9.c1.values[0] == pytest.approx(7.8984, abs=TOL4)
    assert wk9.c3.reasons[0] == (
        "C3 not computed: 9 week(s) of history before this week, 11 needed (C2 for weeks t-2 to t)."
    )
    # series form keeps the 2-D shape
    assert aberration_series(y, sd_floor=1.0).c1.shape == (3, 13)


def test_missing_baseline_weeks() -> None:
    # hand: two NaN among C1's 7 baseline weeks (default needs >= 5 reported) -> computed
    # from the 5 reported weeks; three NaN -> not computed.
    y = Y81[:10].copy()
    y[[3, 5]] = np.nan
    base = y[2:9][~np.isnan(y[2:9])]  # 19, 23, 22, 24, 21
    r = aberration_series(y, sd_floor=1.0)
    assert r.c1[9] == pytest.approx((35 - base.mean()) / base.std(ddof=1), abs=1e-12)
    y[7] = np.nan
    wk = aberration_this_week(y, sd_floor=1.0)
    assert np.isnan(wk.c1.values[0]) and not wk.c1.alarms[0]
    assert wk.c1.reasons[0] == (
        "C1 not computed: 4 of the 7 baseline weeks reported, at least 5 needed."
    )
    # strict Hutwagner setting: all 7 needed
    y2 = Y81[:10].copy()
    y2[4] = np.nan
    assert np.isnan(aberration_series(y2, sd_floor=1.0, min_baseline_weeks=7).c1[9])


def test_short_history_reason() -> None:
    wk = aberration_this_week(Y81[:8], sd_floor=1.0)
    assert wk.c1.reasons == ("",)
    assert np.isnan(wk.c2.values[0])
    assert wk.c2.reasons[0] == (
        "C2 not computed: 7 week(s) of history before this week, 9 "
        "needed (baseline weeks t-9 to t-3)."
    )


def test_results_are_read_only() -> None:
    r = aberration_series(Y81)
    with pytest.raises(ValueError):
        r.c1[0] = 1.0
    wk = aberration_this_week(Y81)
    with pytest.raises(ValueError):
        wk.c2.alarms[0] = True


def test_rejects_bad_arguments() -> None:
    with pytest.raises(ValueError, match=r"got shape \(2, 2, 2\)"):
        aberration_series(np.zeros((2, 2, 2)))
    with pytest.raises(ValueError, match="sd_floor must be a finite number >= 0, got -0.1"):
        aberration_series(Y81, sd_floor=-0.1)
    with pytest.raises(ValueError, match="min_baseline_weeks must be between 2 and 7, got 1"):
        aberration_series(Y81, min_baseline_weeks=1)
    with pytest.raises(ValueError, match=r"week_index must be in \[-13, 12\] for 13 weeks, got 13"):
        aberration_this_week(Y81, week_index=13)
    with pytest.raises(ValueError, match="infinite"):
        aberration_series(np.r_[Y81, np.inf])
