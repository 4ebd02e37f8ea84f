"""Empirical Bayes rates and Assuncao-Reis standardisation on libpysal's sids2 data."""

from __future__ import annotations

import esda
import libpysal
import numpy as np
import pytest
from libpysal import examples

from sitrep.analysis.smoothing import assuncao_reis_z, eb_moments, eb_rates
from sitrep.errors import AnalysisError


@pytest.fixture(scope="module")
def sids74() -> tuple[np.ndarray, np.ndarray, list[str]]:
    """North Carolina SIDS 1974 (libpysal bundled sids2; Cressie 1993): deaths, births, names."""
    table = libpysal.io.open(examples.get_path("sids2.dbf"))
    try:
        e = np.array(table.by_col("SID74"), dtype=np.int64)
        b = np.array(table.by_col("BIR74"), dtype=np.int64)
        names = list(table.by_col("NAME"))
    finally:
        table.close()
    return e, b, names


def test_sids2_moments(sids74: tuple[np.ndarray, np.ndarray, list[str]]) -> None:
    # docs/methods.md 6.1 [LIB, own implementation = esda]: m = 667/329,962, s^2, A, nbar.
    e, b, _ = sids74
    mom = eb_moments(e, b)
    assert 1000 * mom.m == pytest.approx(2.021445, abs=5e-7)
    assert mom.m == 667 / 329962  # [HAND]
    assert mom.s2 == pytest.approx(1.381923e-06, rel=1e-6)
    assert mom.a == pytest.approx(7.692931e-07, rel=1e-6)
    assert mom.nbar == pytest.approx(3299.62, abs=1e-9)
    assert not mom.truncated and mom.units == 100


@pytest.mark.parametrize(
    ("county", "eb_per_1000", "weight"),
    # docs/methods.md 6.1 check values, SID74/BIR74 per 1,000 births [LIB esda 2.9.0 / own code].
    [
        ("Ashe", 1.697297, 0.293385),
        ("Alleghany", 1.705378, 0.156357),
        ("Surry", 1.773087, None),
        ("Currituck", 2.012868, None),
        ("Northampton", 3.534913, 0.350980),
        ("Anson", 4.838804, None),
        ("Tyrrell", 1.847114, None),
    ],
)
def test_sids2_county_values(
    sids74: tuple[np.ndarray, np.ndarray, list[str]],
    county: str,
    eb_per_1000: float,
    weight: float | None,
) -> None:
    e, b, names = sids74
    i = names.index(county)
    theta = eb_rates(e, b)
    assert 1000 * theta[i] == pytest.approx(eb_per_1000, abs=5e-7)
    if weight is not None:
        mom = eb_moments(e, b)
        shrink = mom.a / (mom.a + mom.m / b[i])  # C_i = A / (A + m / n_i) [Marshall 1991]
        assert shrink == pytest.approx(weight, abs=5e-7)
        assert theta[i] == pytest.approx(mom.m + shrink * (e[i] / b[i] - mom.m), rel=1e-12)


def test_sids2_spread_and_esda_agreement(sids74: tuple[np.ndarray, np.ndarray, list[str]]) -> None:
    # Population SD (ddof=0) across counties: raw 1.565454, EB 0.609520 per 1,000
    # [LIB, docs/methods.md 6.1]; with A > 0, equal to esda.smoothing.Empirical_Bayes [LIB].
    e, b, _ = sids74
    theta = eb_rates(e, b)
    assert np.std(1000 * e / b) == pytest.approx(1.565454, abs=5e-7)
    assert np.std(1000 * theta) == pytest.approx(0.609520, abs=5e-7)
    np.testing.assert_allclose(theta, esda.smoothing.Empirical_Bayes(e, b).r.ravel(), rtol=1e-12)


def test_negative_a_is_truncated() -> None:
    # Marshall 1991 requires A >= 0 [PUB]; docs/methods.md 6.1: e = [10, 11, 9, 10], n = 1000 each
    # gives A = -9.5e-6 and Marshall's estimate 0.01 everywhere; esda 2.9.0 returns
    # [0.010, -0.009, 0.029, 0.010] [LIB], which we do not follow.
    e, n = np.array([10, 11, 9, 10]), np.array([1000] * 4)
    mom = eb_moments(e, n)
    assert mom.a_raw == pytest.approx(-9.5e-6, rel=1e-9)
    assert mom.a == 0.0 and mom.truncated
    np.testing.assert_allclose(eb_rates(e, n), 0.01, rtol=1e-12)
    np.testing.assert_allclose(
        esda.smoothing.Empirical_Bayes(e, n).r.ravel(), [0.010, -0.009, 0.029, 0.010], atol=1e-12
    )


def test_zero_population_is_nan_and_left_out(
    sids74: tuple[np.ndarray, np.ndarray, list[str]],
) -> None:
    # A district without visits gets NaN and must not change anybody else's estimate [HAND].
    e, b, _ = sids74
    e2, b2 = np.append(e, 0), np.append(b, 0)
    for func in (eb_rates, assuncao_reis_z):
        out = func(e2, b2)
        assert np.isnan(out[-1])
        np.testing.assert_allclose(out[:-1], func(e, b), rtol=1e-12)
    assert eb_moments(e2, b2).units == 100


def test_shrinkage_properties() -> None:
    # Relationships [HAND]: EB lies between the raw rate and m, and the smaller denominator is
    # shrunk more for the same raw rate.
    e = np.array([2, 20, 5, 40, 1, 12])
    n = np.array([100, 1000, 600, 1500, 50, 900])
    theta, raw, m = eb_rates(e, n), e / n, eb_moments(e, n).m
    assert eb_moments(e, n).a > 0
    assert (np.minimum(raw, m) <= theta + 1e-15).all() and (
        theta <= np.maximum(raw, m) + 1e-15
    ).all()
    # units 0 and 1 both have raw rate 0.02; unit 0 (n = 100) is pulled closer to m.
    assert abs(theta[0] - m) < abs(theta[1] - m)


def test_no_events_at_all() -> None:
    assert (eb_rates(np.zeros(4, dtype=int), np.array([10, 20, 30, 40])) == 0).all()
    assert np.isnan(assuncao_reis_z(np.zeros(4, dtype=int), np.array([10, 20, 30, 40]))).all()
    assert np.isnan(eb_rates(np.array([0, 0]), np.array([0, 0]))).all()


def test_assuncao_reis_sids2_first_five(sids74: tuple[np.ndarray, np.ndarray, list[str]]) -> None:
    # esda.smoothing.assuncao_rate(SID74, BIR74)[:5] [LIB esda 2.9.0, docs/methods.md 5.4].
    e, b, _ = sids74
    np.testing.assert_allclose(
        assuncao_reis_z(e, b)[:5], [-0.682304, -0.911328, -0.382448, -0.024295, 2.912637], atol=5e-7
    )


def test_assuncao_reis_esda_docstring_toy() -> None:
    # esda.smoothing.assuncao_rate docstring example [PUB: esda docstring, docs/methods.md 5.4].
    e = np.array([30, 25, 25, 15, 33, 21, 30, 20])
    b = np.array([100, 100, 110, 90, 100, 90, 110, 90])
    np.testing.assert_allclose(
        assuncao_reis_z(e, b)[:4], [1.03843594, -0.04099089, -0.56250375, -1.73061861], atol=5e-9
    )


def test_assuncao_reis_negative_variance_falls_back_to_poisson() -> None:
    # v_i = a + b/n_i < 0 for the large unit when rates hardly vary [HAND, Assuncao & Reis 1999]:
    # there the Poisson variance b/n_i is used; esda.smoothing.assuncao_rate does the same [LIB].
    e, n = np.array([9, 11, 10, 101]), np.array([1000, 1000, 1000, 10000])
    b = e.sum() / n.sum()
    r = e / n
    s2 = (n * (r - b) ** 2).sum() / n.sum()
    a = s2 - b / n.mean()
    assert a + b / n[3] < 0  # the fallback is exercised
    z = assuncao_reis_z(e, n)
    assert z[3] == pytest.approx((r[3] - b) / np.sqrt(b / n[3]), rel=1e-12)
    assert z[0] == pytest.approx((r[0] - b) / np.sqrt(a + b / n[0]), rel=1e-12)
    np.testing.assert_allclose(z, esda.smoothing.assuncao_rate(e, n), rtol=1e-12)


def test_rate_moran_on_sids2_gal(sids74: tuple[np.ndarray, np.ndarray, list[str]]) -> None:
    # Moran's I of the EB-standardised SID74 rates with the bundled sids2.gal (rook) weights,
    # row-standardised: I = 0.271403 [LIB esda 2.9.0 Moran_Rate(adjusted=True), docs/methods.md 5.4].
    e, b, _ = sids74
    gal = libpysal.io.open(examples.get_path("sids2.gal"))
    try:
        w = gal.read()
    finally:
        gal.close()
    w.transform = "r"
    moran = esda.Moran(assuncao_reis_z(e, b), w, permutations=0)
    assert moran.I == pytest.approx(0.271403, abs=5e-7)


@pytest.mark.parametrize(
    ("e", "n", "fragment"),
    [
        ([1, -2], [10, 10], "non-negative"),
        ([1, 2], [10, np.inf], "finite"),
        ([1, 2, 3], [10, 10], "same length"),
    ],
)
def test_bad_input_is_refused(e: list[float], n: list[float], fragment: str) -> None:
    for func in (eb_rates, assuncao_reis_z, eb_moments):
        with pytest.raises(AnalysisError, match=fragment):
            func(np.array(e), np.array(n))
