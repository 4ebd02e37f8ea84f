"""ILI percentages and binomial confidence intervals (pure: no I/O).

Every function here works elementwise on arrays of counts, so one call covers
all districts of a week. A district with no visits (``n == 0``) or missing
counts (NaN or a masked entry) gets NaN, never ``inf`` and never 0.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt
from scipy import special, stats

from sitrep.errors import AnalysisError

__all__ = [
    "INTERVAL_METHODS",
    "BoolArray",
    "CountArray",
    "FloatArray",
    "IntArray",
    "check_counts",
    "ili_percent",
    "pooled_percent",
    "proportion_interval",
    "z_value",
]

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]
BoolArray = npt.NDArray[np.bool_]
CountArray = IntArray | FloatArray
"""Whole-number counts; a float array may carry NaN for a missing count."""

INTERVAL_METHODS = ("wilson", "clopper-pearson")
"""Interval methods accepted by :func:`proportion_interval`."""


def check_counts(
    x: npt.ArrayLike, n: npt.ArrayLike, *, x_name: str = "ili", n_name: str = "visits"
) -> tuple[FloatArray, FloatArray, BoolArray]:
    """Check a pair of count arrays and return them as floats with a missing mask.

    Parameters
    ----------
    x, n : array_like of int (NaN or masked entries allowed)
        Event counts and their denominators, of equal shape (or broadcastable,
        e.g. a scalar against an array).
    x_name, n_name : str
        Names used in error messages.

    Returns
    -------
    x, n : numpy.ndarray of float
        The counts, broadcast to a common shape; missing entries are NaN.
    missing : numpy.ndarray of bool
        True where either count is NaN or masked.

    Raises
    ------
    AnalysisError
        If the shapes do not match, or a present count is infinite, negative,
        not a whole number, or ``x > n``. The message gives the first offending
        position and value.
    """
    xs = _float_counts(x, x_name)
    ns = _float_counts(n, n_name)
    try:
        xs, ns = np.broadcast_arrays(xs, ns)
    except ValueError as exc:
        raise AnalysisError(
            f"{x_name} and {n_name} must have the same shape, got {np.shape(xs)} and "
            f"{np.shape(ns)}; pass one value per district for both"
        ) from exc
    xs, ns = np.array(xs, dtype=np.float64), np.array(ns, dtype=np.float64)
    missing = np.isnan(xs) | np.isnan(ns)
    over = ~missing & (xs > ns)
    if over.any():
        i = _first(over)
        raise AnalysisError(
            f"{x_name} must not exceed {n_name}; got {x_name} = {xs[i]:g} > {n_name} = "
            f"{ns[i]:g} at position {i}; check the counts of that district"
        )
    return xs, ns, missing


def _float_counts(values: npt.ArrayLike, name: str) -> FloatArray:
    """Counts as a float array with NaN for masked entries, checked to be whole and >= 0."""
    arr = np.ma.filled(np.ma.asarray(values, dtype=np.float64), np.nan)
    arr = np.asarray(arr, dtype=np.float64)
    present = ~np.isnan(arr)
    for bad, what in (
        (present & ~np.isfinite(arr), "finite"),
        (present & np.isfinite(arr) & (arr < 0), "non-negative"),
        (present & np.isfinite(arr) & (arr != np.floor(arr)), "whole numbers"),
    ):
        if bad.any():
            i = _first(bad)
            raise AnalysisError(
                f"{name} counts must be {what}; got {arr[i]!r} at position {i}; "
                "pass unrounded integer counts, not rates"
            )
    return arr


def _first(mask: BoolArray) -> tuple[int, ...] | int:
    """Index of the first True entry (an int for 1-D input)."""
    idx = tuple(int(v[0]) for v in np.nonzero(mask))
    return idx[0] if len(idx) == 1 else idx


def z_value(confidence: float) -> float:
    """Two-sided standard-normal quantile ``z = Phi^-1(1 - (1 - confidence)/2)``.

    Raises
    ------
    AnalysisError
        If ``confidence`` is not strictly between 0 and 1.
    """
    if not 0.0 < confidence < 1.0:
        raise AnalysisError(
            f"confidence must be strictly between 0 and 1 (e.g. 0.95), got {confidence!r}"
        )
    return float(special.ndtri(1.0 - (1.0 - confidence) / 2.0))


def ili_percent(ili: CountArray, visits: CountArray) -> FloatArray:
    """ILI visits as a percentage of all visits, ``100 * x / n``.

    Parameters
    ----------
    ili : numpy.ndarray of int
        ILI visits per district (``x``).
    visits : numpy.ndarray of int
        All outpatient visits per district (``n``), same shape.

    Returns
    -------
    numpy.ndarray of float
        ``100 * x / n``; NaN where ``n == 0`` or a count is missing (never
        ``inf``).

    Raises
    ------
    AnalysisError
        If the counts are not whole non-negative numbers with ``x <= n``, or
        the shapes differ.

    Examples
    --------
    >>> ili_percent(np.array([3, 0, 5]), np.array([150, 0, 100]))
    array([ 2., nan,  5.])
    """
    x, n, missing = check_counts(ili, visits, x_name="ili", n_name="visits")
    out = np.full(x.shape, np.nan)
    ok = ~missing & (n > 0)
    out[ok] = 100.0 * x[ok] / n[ok]
    return out


def proportion_interval(
    x: CountArray,
    n: CountArray,
    *,
    confidence: float = 0.95,
    method: str = "wilson",
) -> tuple[FloatArray, FloatArray]:
    """Two-sided confidence interval of a binomial proportion ``x / n``, elementwise.

    Parameters
    ----------
    x : numpy.ndarray of int
        Event counts (ILI visits), unrounded.
    n : numpy.ndarray of int
        Trials (all visits), same shape as ``x``.
    confidence : float, default 0.95
        Two-sided coverage, strictly between 0 and 1.
    method : {"wilson", "clopper-pearson"}, default "wilson"
        ``"wilson"``: Wilson (1927) score interval in closed form, with
        ``z = Phi^-1(1 - alpha/2)``, ``alpha = 1 - confidence``::

            centre = (x + z^2/2) / (n + z^2)
            half   = z * sqrt(x (n - x) / n + z^2/4) / (n + z^2)

        clipped to [0, 1], with the lower limit exactly 0 at ``x = 0`` and the
        upper limit exactly 1 at ``x = n``.
        ``"clopper-pearson"``: the exact (1934) interval from beta quantiles,
        ``low = B^-1(alpha/2; x, n - x + 1)`` (0 when ``x = 0``),
        ``high = B^-1(1 - alpha/2; x + 1, n - x)`` (1 when ``x = n``).

    Returns
    -------
    low, high : numpy.ndarray of float
        Limits as **proportions** in [0, 1] (multiply by 100 for percent);
        NaN where ``n == 0`` or a count is missing.

    Raises
    ------
    AnalysisError
        If ``method`` is unknown, ``confidence`` is outside (0, 1), or the
        counts are invalid (see :func:`check_counts`).

    Notes
    -----
    Wilson is the default: Newcombe (1998a) and Brown, Cai & DasGupta (2001)
    recommend it, and unlike the Wald interval it does not collapse to width
    0 at ``x = 0``. Clopper-Pearson is conservative (coverage at least the
    nominal level). Both assume binomial sampling of visits; visits cluster
    within practices, so the true uncertainty is larger. Compute from
    unrounded counts and round only for display.

    Examples
    --------
    >>> low, high = proportion_interval(np.array([81, 0]), np.array([263, 20]))
    >>> np.round(low, 4), np.round(high, 4)
    (array([0.2553, 0.    ]), array([0.3662, 0.1611]))
    """
    if method not in INTERVAL_METHODS:
        raise AnalysisError(
            f"interval method must be one of {', '.join(map(repr, INTERVAL_METHODS))}, "
            f"got {method!r}"
        )
    z = z_value(confidence)
    xs, ns, missing = check_counts(x, n, x_name="x", n_name="n")
    ok = ~missing & (ns > 0)
    low = np.full(xs.shape, np.nan)
    high = np.full(xs.shape, np.nan)
    xo, no = xs[ok], ns[ok]
    if method == "wilson":
        z2 = z * z
        centre = (xo + z2 / 2.0) / (no + z2)
        half = z * np.sqrt(xo * (no - xo) / no + z2 / 4.0) / (no + z2)
        lo = np.clip(centre - half, 0.0, 1.0)
        hi = np.clip(centre + half, 0.0, 1.0)
    else:
        alpha = 1.0 - confidence
        # Substitute valid shape parameters where the limit is fixed (x = 0 or x = n)
        # so that scipy is never asked for a degenerate beta distribution.
        lo = stats.beta.ppf(alpha / 2.0, np.where(xo > 0, xo, 1.0), no - xo + 1.0)
        hi = stats.beta.ppf(1.0 - alpha / 2.0, xo + 1.0, np.where(xo < no, no - xo, 1.0))
    low[ok] = np.where(xo == 0, 0.0, lo)
    high[ok] = np.where(xo == no, 1.0, hi)
    return low, high


def pooled_percent(ili: CountArray, visits: CountArray) -> tuple[float, float, float]:
    """Jurisdiction-wide ILI% pooled over districts, with its Wilson 95% interval.

    Parameters
    ----------
    ili, visits : numpy.ndarray of int
        Per-district ILI visits and all visits, same shape. Districts with a
        missing count (NaN or masked) are left out of both sums.

    Returns
    -------
    percent, low, high : float
        ``100 * sum(x) / sum(n)`` and the Wilson 95% limits of the pooled
        proportion, all in **percent**; all three NaN when ``sum(n) == 0``.

    Raises
    ------
    AnalysisError
        If the counts are invalid (see :func:`check_counts`).

    Notes
    -----
    This is the pooled ratio of all visits (each visit counts once), not a
    population-weighted mean of district percentages; the two differ, and the
    report states that it uses the pooled ratio. The interval treats the
    pooled visits as one binomial sample.

    Examples
    --------
    >>> [round(v, 4) for v in pooled_percent(np.array([30, 51]), np.array([100, 163]))]
    [30.7985, 25.5289, 36.621]
    """
    x, n, missing = check_counts(ili, visits, x_name="ili", n_name="visits")
    sx, sn = float(x[~missing].sum()), float(n[~missing].sum())
    if sn == 0.0:
        return (np.nan, np.nan, np.nan)
    low, high = proportion_interval(np.array([sx]), np.array([sn]), method="wilson")
    return (100.0 * sx / sn, 100.0 * float(low[0]), 100.0 * float(high[0]))
