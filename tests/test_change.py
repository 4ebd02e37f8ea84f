"""Week-over-week change: published rows, statsmodels as oracle, and the class rules."""

from __future__ import annotations

import numpy as np
import pytest
from statsmodels.stats.proportion import confint_proportions_2indep, proportions_ztest
from statsmodels.stats.rates import test_poisson_2indep as poisson_2indep

from sitrep.analysis.change import ChangeTable, week_over_week
from sitrep.errors import AnalysisError
from sitrep.model import ChangeClass

# docs/methods.md section 3 table [LIB statsmodels 0.15.0 unless marked]:
# (x1, n1, x0, n0, diff pp, relative %, pooled-z p, Newcombe 95% CI of the difference).
METHODS_ROWS = [
    (58, 1250, 37, 1200, 1.5567, 50.4865, 0.046031, (0.000196, 0.031132)),
    (2300, 98000, 2100, 100000, 0.2469, 11.7590, 0.000194, (0.001171, 0.003770)),
    (5, 40, 1, 38, 9.8684, 375.0, 0.102083, (-0.030768, 0.236517)),
]
# Newcombe 1998b (Stat Med 17:873-890), method 10 examples, to 4 dp [PUB-memory].
NEWCOMBE_1998B = [
    (56, 70, 48, 80, 20.0, 100 / 3, 0.008045, (0.0524, 0.3339)),
    (9, 10, 3, 10, 60.0, 200.0, 0.006170, (0.1705, 0.8090)),
]


def _row(x1: int, n1: int, x0: int, n0: int, **kw: object) -> ChangeTable:
    return week_over_week(np.array([x1]), np.array([n1]), np.array([x0]), np.array([n0]), **kw)  # type: ignore[arg-type]


@pytest.mark.parametrize(("x1", "n1", "x0", "n0", "diff", "rel", "p", "ci"), METHODS_ROWS)
def test_methods_table_rows(
    x1: int, n1: int, x0: int, n0: int, diff: float, rel: float, p: float, ci: tuple[float, float]
) -> None:
    t = _row(x1, n1, x0, n0)
    assert round(float(t.diff_pp[0]), 4) == diff
    assert 100 * float(t.relative[0]) == pytest.approx(rel, abs=5e-5)
    assert round(float(t.p_value[0]), 6) == p
    np.testing.assert_allclose([t.low_pp[0] / 100, t.high_pp[0] / 100], ci, atol=5e-7)


@pytest.mark.parametrize(("x1", "n1", "x0", "n0", "diff", "rel", "p", "ci"), NEWCOMBE_1998B)
def test_newcombe_1998b_examples(
    x1: int, n1: int, x0: int, n0: int, diff: float, rel: float, p: float, ci: tuple[float, float]
) -> None:
    t = _row(x1, n1, x0, n0)
    assert float(t.diff_pp[0]) == pytest.approx(diff, abs=1e-12)
    assert 100 * float(t.relative[0]) == pytest.approx(rel, abs=1e-9)
    assert (
        round(float(t.p_value[0]), 6) == p
    )  # pooled z p [LIB statsmodels, docs/methods.md section 3]
    assert (round(float(t.low_pp[0]) / 100, 4), round(float(t.high_pp[0]) / 100, 4)) == ci


@pytest.mark.parametrize(
    ("x1", "n1", "x0", "n0", "p"),
    # Poisson score p, Gu et al. 2008 as statsmodels test_poisson_2indep(method="score")
    # [LIB statsmodels 0.15.0, docs/methods.md section 3 last column].
    [
        (58, 1250, 37, 1200, 0.050460),
        (2300, 98000, 2100, 100000, 0.000228),
        (5, 40, 1, 38, 0.116252),
    ],
)
def test_poisson_score_rows(x1: int, n1: int, x0: int, n0: int, p: float) -> None:
    assert round(float(_row(x1, n1, x0, n0, method="poisson-score").p_value[0]), 6) == p


def _random_weeks(seed: int, size: int = 300) -> tuple[np.ndarray, ...]:
    rng = np.random.default_rng(seed)
    n1 = rng.integers(20, 3000, size)
    n0 = rng.integers(20, 3000, size)
    x1 = rng.binomial(n1, rng.uniform(0.005, 0.12, size))
    x0 = rng.binomial(n0, rng.uniform(0.005, 0.12, size))
    x0[:3] = 0  # includes "from 0" rows
    return x1, n1, x0, n0


def test_vectorised_equals_statsmodels_oracles() -> None:
    # Oracles [LIB statsmodels 0.15.0]: proportions_ztest (pooled), confint_proportions_2indep
    # (method="newcomb"), test_poisson_2indep (method="score"), each called row by row.
    x1, n1, x0, n0 = _random_weeks(7)
    z = week_over_week(x1, n1, x0, n0, confidence=0.90)
    s = week_over_week(x1, n1, x0, n0, method="poisson-score")
    for i in range(x1.size):
        # statsmodels divides by x0/n0 for its (unused here) ratio output; silence only that.
        with np.errstate(divide="ignore", invalid="ignore"):
            _, p_ref = proportions_ztest([x1[i], x0[i]], [n1[i], n0[i]])
            lo, hi = confint_proportions_2indep(
                x1[i], n1[i], x0[i], n0[i], method="newcomb", alpha=0.10
            )
            p_score = poisson_2indep(x1[i], n1[i], x0[i], n0[i], method="score").pvalue
        assert z.p_value[i] == pytest.approx(p_ref, rel=1e-9, abs=1e-15)
        assert z.low_pp[i] / 100 == pytest.approx(lo, rel=1e-9, abs=1e-13)
        assert z.high_pp[i] / 100 == pytest.approx(hi, rel=1e-9, abs=1e-13)
        assert s.p_value[i] == pytest.approx(p_score, rel=1e-9, abs=1e-15)


def test_test_choice_changes_the_class_near_alpha() -> None:
    # docs/methods.md section 3 row 1: pooled z p = 0.046031 < 0.05 but Poisson score p = 0.050460
    # [LIB statsmodels]; with |diff| = 1.56 pp >= 0.5 pp the classes differ.
    assert _row(58, 1250, 37, 1200).classes == (ChangeClass.INCREASE,)
    assert _row(58, 1250, 37, 1200, method="poisson-score").classes == (ChangeClass.SIMILAR,)


def test_significant_but_small_change_is_similar() -> None:
    # Row 2 (national-size denominators): p = 0.000194 but diff 0.2469 pp < 0.5 pp [LIB]; the
    # minimum-change rule [CP, docs/methods.md section 3] keeps it "similar".
    assert _row(2300, 98000, 2100, 100000).classes == (ChangeClass.SIMILAR,)
    assert _row(2300, 98000, 2100, 100000, min_change_pp=0.2).classes == (ChangeClass.INCREASE,)
    assert _row(2100, 100000, 2300, 98000, min_change_pp=0.2).classes == (ChangeClass.DECREASE,)
    # Row 3 (district-size denominators): a 4.75-fold rise with p = 0.102 is not flagged [LIB].
    assert _row(5, 40, 1, 38).classes == (ChangeClass.SIMILAR,)


def test_change_equal_to_the_minimum_counts() -> None:
    # 1.5 % vs 1.0 % is 0.5 pp exactly [HAND]; the float difference is 0.49999999999999983, so
    # without the documented slack the threshold would be missed. Pooled z = 3.17, p < 0.05 [HAND].
    t = _row(150, 10000, 100, 10000)
    assert t.p_value[0] < 0.05
    assert t.classes == (ChangeClass.INCREASE,)


def test_zero_denominators_and_missing_are_not_assessable() -> None:
    x1 = np.ma.masked_array([5, 0, 0, 4, 3], mask=[False, False, False, False, True])
    n1 = np.array([100, 0, 100, 80, 90])
    x0 = np.array([0, 4, 0, np.nan, 2])
    n0 = np.array([0, 100, 100, 80, 90])
    t = week_over_week(x1, n1, x0, n0)
    na = ChangeClass.NOT_ASSESSABLE
    assert t.classes == (na, na, ChangeClass.SIMILAR, na, na)
    for arr in (t.diff_pp, t.low_pp, t.high_pp, t.relative, t.p_value):
        assert np.isnan(arr[[0, 1, 3, 4]]).all()
    assert not t.from_zero.any()
    # 0/100 -> 0/100: no events either week, the statistic is 0/0 and p is set to 1.
    assert t.p_value[2] == 1.0 and t.diff_pp[2] == 0.0


def test_from_zero_has_no_relative_change_and_no_inf() -> None:
    t = week_over_week(
        np.array([3, 0, 6]), np.array([100, 90, 100]), np.array([0, 0, 3]), np.array([120, 80, 100])
    )
    np.testing.assert_array_equal(t.from_zero, [True, False, False])
    assert np.isnan(t.relative[:2]).all()
    assert t.relative[2] == pytest.approx(1.0)  # 6 % vs 3 %: +100 % [HAND]
    assert (
        np.isfinite(t.diff_pp).all()
        and np.isfinite(t.low_pp).all()
        and np.isfinite(t.high_pp).all()
    )


def test_identical_weeks_and_swapped_weeks() -> None:
    # Invariants [HAND]: identical weeks give diff 0 and p 1; swapping weeks negates the
    # difference, mirrors the Newcombe interval and keeps the two-sided p.
    x1, n1, x0, n0 = _random_weeks(11, 50)
    same = week_over_week(x1, n1, x1, n1)
    np.testing.assert_array_equal(same.diff_pp, 0.0)
    np.testing.assert_allclose(same.p_value, 1.0)
    assert set(same.classes) == {ChangeClass.SIMILAR}
    for method in ("pooled-z", "poisson-score"):
        a = week_over_week(x1, n1, x0, n0, method=method)
        b = week_over_week(x0, n0, x1, n1, method=method)
        np.testing.assert_allclose(b.diff_pp, -a.diff_pp, atol=1e-12)
        np.testing.assert_allclose(b.low_pp, -a.high_pp, atol=1e-12)
        np.testing.assert_allclose(b.p_value, a.p_value, rtol=1e-12)


def test_table_records_settings_and_is_read_only() -> None:
    t = _row(58, 1250, 37, 1200, method="poisson-score", alpha=0.1, min_change_pp=1.0)
    assert (t.method, t.alpha, t.min_change_pp) == ("poisson-score", 0.1, 1.0)
    assert t.classes == (ChangeClass.INCREASE,)  # p = 0.0505 < 0.1, 1.56 pp >= 1.0 pp
    with pytest.raises(ValueError, match="read-only"):
        t.diff_pp[0] = 0.0


@pytest.mark.parametrize(
    ("kwargs", "fragment"),
    [
        ({"method": "fisher"}, "'pooled-z', 'poisson-score'"),
        ({"alpha": 0.0}, "alpha"),
        ({"min_change_pp": -0.5}, "min_change_pp"),
        ({"confidence": 1.5}, "confidence"),
    ],
)
def test_bad_settings_are_refused(kwargs: dict[str, object], fragment: str) -> None:
    with pytest.raises(AnalysisError, match=fragment):
        _row(5, 40, 1, 38, **kwargs)


def test_misaligned_weeks_are_refused() -> None:
    with pytest.raises(AnalysisError, match="same shape"):
        week_over_week(
            np.array([1, 2]), np.array([10, 10]), np.array([1, 2, 3]), np.array([10, 10, 10])
        )
    with pytest.raises(AnalysisError, match="must not exceed"):
        week_over_week(np.array([11]), np.array([10]), np.array([1]), np.array([10]))


def test_class_follows_the_printed_interval_when_test_and_interval_disagree() -> None:
    # 4/20 vs 0/20: pooled z = 0.2 / sqrt(0.1 * 0.9 * 0.1) = 2.108, p = 0.0350 [HAND; LIB statsmodels
    # proportions_ztest], but the Newcombe interval is -0.000509 to 0.4160 [LIB statsmodels
    # confint_proportions_2indep(method="newcomb")], which includes 0: no class (docs/methods.md section 3).
    t = _row(4, 20, 0, 20, min_change_pp=0.0)
    assert t.p_value[0] == pytest.approx(0.035015, abs=1e-6)
    assert t.low_pp[0] == pytest.approx(-0.0509127, abs=1e-6) and t.high_pp[0] == pytest.approx(
        41.60174, abs=1e-4
    )
    assert t.classes == (ChangeClass.SIMILAR,)
