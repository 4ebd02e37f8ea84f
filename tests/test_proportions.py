"""ILI% and binomial intervals against published tables and reference libraries."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.proportion import proportion_confint

from sitrep.analysis.proportions import ili_percent, pooled_percent, proportion_interval
from sitrep.errors import AnalysisError

Z95 = 1.959963984540054  # Phi^-1(0.975), standard normal quantile [HAND]


def _one(x: int, n: int, method: str, confidence: float = 0.95) -> tuple[float, float]:
    low, high = proportion_interval(
        np.array([x]), np.array([n]), confidence=confidence, method=method
    )
    return float(low[0]), float(high[0])


# Newcombe 1998a (Stat Med 17:857-872) Table II, 95% intervals to 4 dp [PUB-memory, reproduced
# by statsmodels 0.15.0 as recorded in docs/methods.md section 2].
NEWCOMBE_1998A = [
    # x, n, Wilson (low, high), Clopper-Pearson (low, high)
    (81, 263, (0.2553, 0.3662), (0.2527, 0.3676)),
    (15, 148, (0.0624, 0.1605), (0.0578, 0.1617)),
    (0, 20, (0.0000, 0.1611), (0.0000, 0.1684)),
    (1, 29, (0.0061, 0.1718), (0.0009, 0.1776)),
]


@pytest.mark.parametrize(("x", "n", "wilson", "cp"), NEWCOMBE_1998A)
def test_newcombe_1998a_table_ii(
    x: int, n: int, wilson: tuple[float, float], cp: tuple[float, float]
) -> None:
    assert np.round(_one(x, n, "wilson"), 4).tolist() == list(wilson)
    assert np.round(_one(x, n, "clopper-pearson"), 4).tolist() == list(cp)


# statsmodels 0.15.0 proportion_confint, 6 dp [LIB, docs/methods.md section 2 "More" list].
STATSMODELS_6DP = [
    (20, 20, "wilson", (0.838875, 1.0)),
    (20, 20, "clopper-pearson", (0.831567, 1.0)),
    (0, 250, "wilson", (0.0, 0.015133)),
    (0, 250, "clopper-pearson", (0.0, 0.014647)),
    (250, 250, "wilson", (0.984867, 1.0)),
    (0, 1, "wilson", (0.0, 0.793451)),
    (0, 1, "clopper-pearson", (0.0, 0.975)),
    (5, 100, "wilson", (0.021544, 0.111750)),
    (5, 100, "clopper-pearson", (0.016432, 0.112835)),
    (37, 1200, "wilson", (0.022451, 0.042210)),
    (37, 1200, "clopper-pearson", (0.021800, 0.042251)),
    (123, 4567, "wilson", (0.022620, 0.032040)),
    (3, 10, "wilson", (0.107791, 0.603222)),
    (3, 10, "clopper-pearson", (0.066740, 0.652453)),
    (50, 100, "wilson", (0.403832, 0.596168)),
]


@pytest.mark.parametrize(("x", "n", "method", "expected"), STATSMODELS_6DP)
def test_statsmodels_six_decimals(
    x: int, n: int, method: str, expected: tuple[float, float]
) -> None:
    np.testing.assert_allclose(_one(x, n, method), expected, atol=5e-7)


def test_closed_forms_at_the_edges() -> None:
    # Closed forms [HAND, docs/methods.md section 2]: Wilson upper at x = 0 is z^2/(n + z^2);
    # Clopper-Pearson upper at x = 0 is 1 - (alpha/2)^(1/n), lower at x = n is (alpha/2)^(1/n).
    n = 37
    assert _one(0, n, "wilson") == (0.0, pytest.approx(Z95**2 / (n + Z95**2), rel=1e-12))
    assert _one(0, n, "clopper-pearson") == (0.0, pytest.approx(1 - 0.025 ** (1 / n), rel=1e-12))
    assert _one(n, n, "clopper-pearson") == (pytest.approx(0.025 ** (1 / n), rel=1e-12), 1.0)
    assert _one(n, n, "wilson")[1] == 1.0


@pytest.mark.parametrize(
    ("method", "sm_method"), [("wilson", "wilson"), ("clopper-pearson", "beta")]
)
@pytest.mark.parametrize("confidence", [0.95, 0.90])
def test_vectorised_equals_statsmodels_on_random_grid(
    method: str, sm_method: str, confidence: float
) -> None:
    # Oracle: statsmodels proportion_confint [LIB]; seeded grid including x = 0 and x = n.
    rng = np.random.default_rng(20260112)
    n = rng.integers(1, 5000, size=400)
    x = np.floor(rng.random(400) ** 3 * (n + 1)).astype(np.int64)
    x[:5], x[5:10] = 0, n[5:10]
    low, high = proportion_interval(x, n, confidence=confidence, method=method)
    sm_low, sm_high = proportion_confint(x, n, alpha=1 - confidence, method=sm_method)
    np.testing.assert_allclose(low, sm_low, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(high, sm_high, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize(("x", "n"), [(81, 263), (1, 29), (0, 7), (12, 12), (431, 10007)])
def test_matches_scipy_binomtest(x: int, n: int) -> None:
    # Second oracle: scipy.stats.binomtest(...).proportion_ci, "wilson" and "exact" [LIB].
    ci_w = stats.binomtest(x, n).proportion_ci(confidence_level=0.95, method="wilson")
    ci_e = stats.binomtest(x, n).proportion_ci(confidence_level=0.95, method="exact")
    np.testing.assert_allclose(_one(x, n, "wilson"), (ci_w.low, ci_w.high), atol=1e-10)
    np.testing.assert_allclose(_one(x, n, "clopper-pearson"), (ci_e.low, ci_e.high), atol=1e-10)


def test_interval_contains_estimate_and_cp_is_wider() -> None:
    # Relationship [HAND]: both intervals contain x/n, and Clopper-Pearson (conservative)
    # is at least as wide as Wilson except near x = 0 or x = n; check on mid-range x.
    n = np.arange(20, 220)
    x = n // 3
    wl, wh = proportion_interval(x, n)
    cl, ch = proportion_interval(x, n, method="clopper-pearson")
    p = x / n
    assert np.all((wl <= p) & (p <= wh) & (cl <= p) & (p <= ch))
    assert np.all(ch - cl >= wh - wl)


def test_zero_denominator_and_missing_give_nan() -> None:
    x = np.ma.masked_array([3, 0, 4, 2], mask=[False, False, False, True])
    n = np.ma.masked_array([100, 0, 50, 40], mask=[False, False, False, False])
    low, high = proportion_interval(x, n)
    assert np.isnan(low[[1, 3]]).all() and np.isnan(high[[1, 3]]).all()
    assert np.isfinite(low[[0, 2]]).all()
    np.testing.assert_array_equal(
        ili_percent(np.array([3.0, np.nan]), np.array([150, 20])), [2.0, np.nan]
    )


def test_ili_percent_is_never_inf() -> None:
    # 100 x / n [HAND]; a district without visits is NaN (filterwarnings=error also fails on
    # any divide-by-zero RuntimeWarning).
    out = ili_percent(np.array([3, 0, 0, 7]), np.array([150, 0, 80, 7]))
    np.testing.assert_array_equal(out, [2.0, np.nan, 0.0, 100.0])
    assert not np.isinf(out).any()


def test_pooled_percent_is_ratio_of_sums() -> None:
    # 81/263 split across three districts plus one without counts: the pooled ratio and its
    # Wilson interval equal Newcombe 1998a Table II row 81/263 (0.2553-0.3662) [PUB-memory].
    pct, low, high = pooled_percent(np.array([30, 40, 11, np.nan]), np.array([100, 120, 43, 50]))
    assert pct == pytest.approx(100 * 81 / 263, rel=1e-12)
    assert (round(low / 100, 4), round(high / 100, 4)) == (0.2553, 0.3662)
    # Not the mean of district percentages [HAND]: (30 + 33.33 + 25.58)/3 = 29.64 != 30.80.
    assert pct != pytest.approx(np.mean(100 * np.array([30, 40, 11]) / np.array([100, 120, 43])))
    assert all(np.isnan(pooled_percent(np.array([0, 0]), np.array([0, 0]))))


@pytest.mark.parametrize(
    ("x", "n", "fragment"),
    [
        ([5, 3], [4, 10], "must not exceed"),
        ([-1, 3], [4, 10], "non-negative"),
        ([1.5, 3], [4, 10], "whole numbers"),
        ([1, 3], [np.inf, 10], "finite"),
        ([1, 2, 3], [4, 10], "same shape"),
    ],
)
def test_bad_counts_are_refused_with_a_message(
    x: list[float], n: list[float], fragment: str
) -> None:
    with pytest.raises(AnalysisError, match=fragment):
        proportion_interval(np.array(x), np.array(n))


def test_bad_settings_are_refused() -> None:
    with pytest.raises(AnalysisError, match="'wilson', 'clopper-pearson'"):
        proportion_interval(np.array([1]), np.array([10]), method="wald")
    with pytest.raises(AnalysisError, match="between 0 and 1"):
        proportion_interval(np.array([1]), np.array([10]), confidence=95)
