"""Benjamini-Hochberg and Bonferroni against the 1995 example and statsmodels."""

from __future__ import annotations

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from sitrep.analysis.multitest import benjamini_hochberg, bonferroni
from sitrep.errors import AnalysisError

# Benjamini & Hochberg 1995 (JRSS B 57:289-300) section 4 worked example, 15 p-values
# [PUB-memory, reproduced; docs/methods.md section 5.6].
BH1995 = np.array(
    [
        0.0001,
        0.0004,
        0.0019,
        0.0095,
        0.0201,
        0.0278,
        0.0298,
        0.0344,
        0.0459,
        0.3240,
        0.4262,
        0.5719,
        0.6528,
        0.7590,
        1.000,
    ]
)


def test_bh_1995_example() -> None:
    reject, adjusted = benjamini_hochberg(BH1995, 0.05)
    assert reject.sum() == 4  # BH rejects 4 [PUB-memory: BH 1995 section 4]
    assert reject[:4].all() and not reject[4:].any()
    assert adjusted[3] == pytest.approx(0.035625, abs=1e-12)  # [LIB statsmodels fdr_bh]
    b_reject, b_adjusted = bonferroni(BH1995, 0.05)
    assert b_reject.sum() == 3  # Bonferroni rejects 3 [PUB-memory: BH 1995 section 4]
    assert b_adjusted[2] == pytest.approx(15 * 0.0019)  # min(1, m p) [HAND]


def test_bh_1995_example_shuffled_equals_statsmodels() -> None:
    # Oracle [LIB statsmodels multipletests]: order of the input must not matter.
    rng = np.random.default_rng(5)
    p = rng.permutation(BH1995)
    reject, adjusted = benjamini_hochberg(p, 0.05)
    sm_reject, sm_adjusted, _, _ = multipletests(p, alpha=0.05, method="fdr_bh")
    np.testing.assert_array_equal(reject, sm_reject)
    np.testing.assert_allclose(adjusted, sm_adjusted, rtol=1e-12)


def test_tie_at_the_boundary_uses_less_or_equal() -> None:
    # [LIB, docs/methods.md 5.6]: statsmodels BH rejects 2 because 0.025 <= 2 * 0.05 / 4;
    # esda.fdr's strict "<" gives the cut-off 0.0125 and rejects none.
    p = np.array([0.02, 0.025, 0.9, 0.95])
    reject, adjusted = benjamini_hochberg(p, 0.05)
    np.testing.assert_array_equal(reject, [True, True, False, False])
    np.testing.assert_allclose(adjusted, [0.05, 0.05, 0.95, 0.95])
    import esda

    assert esda.fdr(p, 0.05) == pytest.approx(0.0125)  # the rule we do not follow [LIB esda 2.9.0]
    assert not (p < esda.fdr(p, 0.05)).any()


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("level", [0.05, 0.10])
def test_random_p_values_equal_statsmodels(seed: int, level: float) -> None:
    # Oracle [LIB statsmodels multipletests fdr_bh and bonferroni] on a seeded mixture of
    # small and uniform p-values, with ties from permutation-style rounding (k/1000).
    rng = np.random.default_rng(seed)
    p = np.concatenate([rng.uniform(0, 0.01, 15), rng.uniform(0, 1, 85)])
    p = np.ceil(p * 1000) / 1000
    for ours, name in ((benjamini_hochberg, "fdr_bh"), (bonferroni, "bonferroni")):
        reject, adjusted = ours(p, level)
        sm_reject, sm_adjusted, _, _ = multipletests(p, alpha=level, method=name)
        np.testing.assert_array_equal(reject, sm_reject)
        np.testing.assert_allclose(adjusted, sm_adjusted, rtol=1e-12)


def test_nan_is_not_counted_in_m() -> None:
    # Islands / no-data districts carry NaN [docs/faults.md F1]: same decisions as the
    # 15-value family without them (m stays 15), NaN positions not rejected and adjusted NaN.
    p = np.insert(BH1995, [0, 7, 15], np.nan)
    nan_at = np.isnan(p)
    for func in (benjamini_hochberg, bonferroni):
        reject, adjusted = func(p, 0.05)
        ref_reject, ref_adjusted = func(BH1995, 0.05)
        assert not reject[nan_at].any() and np.isnan(adjusted[nan_at]).all()
        np.testing.assert_array_equal(reject[~nan_at], ref_reject)
        np.testing.assert_allclose(adjusted[~nan_at], ref_adjusted)


def test_adjusted_is_monotone_and_capped() -> None:
    p = np.array([0.04, 0.01, 0.5, 0.9, 0.03, 0.99])
    _, adjusted = benjamini_hochberg(p, 0.05)
    order = np.argsort(p)
    assert (np.diff(adjusted[order]) >= 0).all()
    assert (adjusted <= 1).all() and (adjusted >= p - 1e-15).all()
    _, b = bonferroni(p, 0.05)
    assert b.max() == 1.0


def test_shape_is_kept_and_empty_family_rejects_nothing() -> None:
    reject, adjusted = benjamini_hochberg(BH1995.reshape(3, 5), 0.05)
    assert reject.shape == adjusted.shape == (3, 5)
    assert reject.sum() == 4
    for func in (benjamini_hochberg, bonferroni):
        r, a = func(np.array([np.nan, np.nan]), 0.05)
        assert not r.any() and np.isnan(a).all()
        r, a = func(np.array([]), 0.05)
        assert r.size == 0 and a.size == 0


@pytest.mark.parametrize(
    ("p", "level", "fragment"),
    [
        ([0.1, 1.2], 0.05, r"\[0, 1\]"),
        ([0.1, -0.01], 0.05, r"\[0, 1\]"),
        ([0.1], 0.0, "between 0 and 1"),
        ([0.1], 1.0, "between 0 and 1"),
    ],
)
def test_bad_input_is_refused(p: list[float], level: float, fragment: str) -> None:
    for func in (benjamini_hochberg, bonferroni):
        with pytest.raises(AnalysisError, match=fragment):
            func(np.array(p), level)
