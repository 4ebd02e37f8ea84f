"""Empirical Bayes smoothing of small-denominator rates (pure: no I/O).

Both functions use the global (aspatial) moment estimates of Marshall (1991):
with ``r_i = e_i / n_i`` over the units that have a denominator,

    m   = sum(e) / sum(n)                      (overall rate)
    s^2 = sum(n_i (r_i - m)^2) / sum(n)        (weighted variance of the rates)
    A   = s^2 - m / nbar                       (between-unit variance; nbar = mean n_i)

Units with ``n_i == 0`` or a missing count get NaN and are left out of every
sum and of ``nbar``. For ILI, ``e`` = ILI visits and ``n`` = all visits, and
the results are proportions (multiply by 100 for percent). Smoothed values are
for a map layer labelled "smoothed", never for the table of reported counts.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import numpy.typing as npt

from sitrep.analysis.proportions import BoolArray, CountArray, FloatArray
from sitrep.errors import AnalysisError

__all__ = ["EBMoments", "assuncao_reis_z", "eb_moments", "eb_rates"]


@dataclasses.dataclass(frozen=True)
class EBMoments:
    """Global moment estimates behind :func:`eb_rates` (for the methods note).

    Attributes
    ----------
    m : float
        Overall rate ``sum(e) / sum(n)``.
    s2 : float
        Weighted variance of the rates ``sum(n_i (r_i - m)^2) / sum(n)``.
    nbar : float
        Mean denominator over the units with ``n_i > 0``.
    a_raw : float
        ``s2 - m / nbar`` before truncation (may be negative).
    a : float
        ``max(a_raw, 0)``, the value :func:`eb_rates` uses.
    units : int
        Number of units with a denominator (``n_i > 0``, counts present).
    """

    m: float
    s2: float
    nbar: float
    a_raw: float
    a: float
    units: int

    @property
    def truncated(self) -> bool:
        """True when ``a_raw < 0`` was set to 0 (every smoothed rate equals ``m``)."""
        return self.a_raw < 0


def _moments(
    events: npt.ArrayLike, population: npt.ArrayLike
) -> tuple[FloatArray, FloatArray, BoolArray, float, float, float]:
    """Checked inputs and ``(rates, n, ok, m, s2, nbar)`` over the units with ``n > 0``."""
    e = _as_float(events, "events")
    n = _as_float(population, "population")
    if e.shape != n.shape or e.ndim != 1:
        raise AnalysisError(
            f"events and population must be 1-D arrays of the same length (one value per "
            f"district), got shapes {e.shape} and {n.shape}"
        )
    ok = ~np.isnan(e) & ~np.isnan(n) & (n > 0)
    rates = np.full(e.shape, np.nan)
    rates[ok] = e[ok] / n[ok]
    if not ok.any():
        return rates, n, ok, np.nan, np.nan, np.nan
    total_n = n[ok].sum()
    m = float(e[ok].sum() / total_n)
    s2 = float((n[ok] * (rates[ok] - m) ** 2).sum() / total_n)
    nbar = float(n[ok].mean())
    return rates, n, ok, m, s2, nbar


def _as_float(values: npt.ArrayLike, name: str) -> FloatArray:
    arr = np.asarray(np.ma.filled(np.ma.asarray(values, dtype=np.float64), np.nan))
    present = ~np.isnan(arr)
    if (present & ~np.isfinite(arr)).any() or (present & (arr < 0)).any():
        bad = arr[present & (~np.isfinite(arr) | (arr < 0))][0]
        raise AnalysisError(
            f"{name} must be finite and non-negative (NaN for missing), got {bad!r}; "
            "pass raw counts"
        )
    return arr


def eb_moments(events: CountArray, population: CountArray) -> EBMoments:
    """Moment estimates ``m, s^2, nbar, A`` of Marshall (1991) (module docstring).

    Parameters
    ----------
    events, population : numpy.ndarray of int, shape (n,)
        Events and population at risk per unit.

    Returns
    -------
    EBMoments
        All fields NaN (``units = 0``) when no unit has a denominator.

    Raises
    ------
    AnalysisError
        If the arrays are not 1-D of equal length or hold negative or
        infinite values.
    """
    _, _, ok, m, s2, nbar = _moments(events, population)
    a_raw = s2 - m / nbar if ok.any() else np.nan
    a = max(a_raw, 0.0) if ok.any() else np.nan
    return EBMoments(m=m, s2=s2, nbar=nbar, a_raw=a_raw, a=a, units=int(ok.sum()))


def eb_rates(events: CountArray, population: CountArray) -> FloatArray:
    """Global empirical Bayes rates (Marshall 1991), with ``A >= 0``.

    Each unit's rate is shrunk towards the overall rate ``m``:
    ``theta_i = m + C_i (r_i - m)`` with ``C_i = A / (A + m / n_i)``, where
    ``A`` is the moment estimate of the between-unit variance (see the module
    docstring), **set to 0 when negative**. Units with small denominators
    are shrunk most.

    Parameters
    ----------
    events : numpy.ndarray of int, shape (n,)
        Events per unit (ILI visits).
    population : numpy.ndarray of int, shape (n,)
        Population at risk per unit (all visits).

    Returns
    -------
    numpy.ndarray of float, shape (n,)
        Smoothed rates as proportions; NaN where ``population == 0`` or a
        count is missing. All equal to ``m`` when ``A`` is truncated to 0;
        all 0 when there are no events at all.

    Raises
    ------
    AnalysisError
        If the arrays are not 1-D of equal length or hold negative or
        infinite values.

    Notes
    -----
    Marshall's estimator requires ``A >= 0``: a negative moment estimate
    means the rates vary less than Poisson noise alone would make them, and
    the best estimate of every unit is the overall rate. ``esda.smoothing
    .Empirical_Bayes`` (2.9.0) does not truncate and returns weights outside
    [0, 1] (even negative rates) in that case; for ``A > 0`` the two agree.

    Examples
    --------
    >>> eb_rates(np.array([10, 11, 9, 10]), np.array([1000, 1000, 1000, 1000]))
    array([0.01, 0.01, 0.01, 0.01])
    """
    rates, n, ok, m, s2, nbar = _moments(events, population)
    out = np.full(rates.shape, np.nan)
    if not ok.any():
        return out
    a = max(s2 - m / nbar, 0.0)
    prior_var = m / n[ok]
    denom = a + prior_var
    # denom == 0 only when m == 0 (no events anywhere); every rate is then 0 = m.
    weight = np.divide(a, denom, out=np.zeros_like(denom), where=denom > 0)
    out[ok] = m + weight * (rates[ok] - m)
    return out


def assuncao_reis_z(events: CountArray, population: CountArray) -> FloatArray:
    """EB-standardised rates for the rate-adjusted Moran's I (Assuncao & Reis 1999).

    ``z_i = (r_i - b) / sqrt(v_i)`` with ``b = m`` the overall rate,
    ``v_i = a + b / n_i`` and ``a = s^2 - b / nbar`` (module docstring); where
    ``v_i < 0`` the Poisson variance ``b / n_i`` is used instead. ``a`` itself
    is **not** truncated here (the published standardisation), unlike in
    :func:`eb_rates`.

    Parameters
    ----------
    events : numpy.ndarray of int, shape (n,)
        Events per unit.
    population : numpy.ndarray of int, shape (n,)
        Population at risk per unit.

    Returns
    -------
    numpy.ndarray of float, shape (n,)
        Standardised rates (dimensionless); NaN where ``population == 0`` or
        a count is missing, and everywhere when there are no events at all
        (``b = 0`` makes every ``v_i = 0``, so the standardisation is undefined
        and the caller must report the statistic as not computable).

    Raises
    ------
    AnalysisError
        If the arrays are not 1-D of equal length or hold negative or
        infinite values.

    Notes
    -----
    Moran's I computed on these values is the rate-adjusted statistic of
    Assuncao & Reis; it equals ``esda.moran.Moran_Rate(e, n, w,
    adjusted=True)`` on complete data, and ``esda.smoothing.assuncao_rate``
    gives the same values (its docstring cites another author).

    Examples
    --------
    >>> e = np.array([30, 25, 25, 15, 33, 21, 30, 20])
    >>> b = np.array([100, 100, 110, 90, 100, 90, 110, 90])
    >>> np.round(assuncao_reis_z(e, b)[:4], 6)
    array([ 1.038436, -0.040991, -0.562504, -1.730619])
    """
    rates, n, ok, b, s2, nbar = _moments(events, population)
    out = np.full(rates.shape, np.nan)
    if not ok.any() or b == 0.0:
        return out
    a = s2 - b / nbar
    v = a + b / n[ok]
    v = np.where(v < 0, b / n[ok], v)
    out[ok] = (rates[ok] - b) / np.sqrt(v)
    return out
