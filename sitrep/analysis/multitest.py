"""Multiple-testing corrections for a week's district p-values (pure: no I/O).

Both functions accept p-values of any shape, leave NaN entries (districts not
tested, e.g. islands or districts without data) out of the family, and return
arrays of the input's shape.
"""

from __future__ import annotations

import numpy as np

from sitrep.analysis.proportions import BoolArray, FloatArray
from sitrep.errors import AnalysisError

__all__ = ["benjamini_hochberg", "bonferroni"]


def _checked(p: FloatArray, level: float, level_name: str) -> tuple[FloatArray, BoolArray]:
    """p as a float array and the mask of tested (non-NaN) entries, after range checks."""
    if not 0.0 < level < 1.0:
        raise AnalysisError(
            f"{level_name} must be strictly between 0 and 1 (e.g. 0.05), got {level!r}"
        )
    arr = np.asarray(np.ma.filled(np.ma.asarray(p, dtype=np.float64), np.nan))
    tested = ~np.isnan(arr)
    bad = tested & ~((arr >= 0.0) & (arr <= 1.0))
    if bad.any():
        raise AnalysisError(
            f"p-values must lie in [0, 1] (NaN for 'not tested'), got {arr[bad].ravel()[0]!r}"
        )
    return arr, tested


def benjamini_hochberg(p: FloatArray, q: float) -> tuple[BoolArray, FloatArray]:
    """Benjamini-Hochberg (1995) step-up procedure controlling the FDR at ``q``.

    With the ``m`` non-NaN p-values sorted, ``p_(1) <= ... <= p_(m)``, find the
    largest ``k`` with ``p_(k) <= k q / m`` and reject the hypotheses of
    ``p_(1) ... p_(k)`` (none if there is no such ``k``). The adjusted p-value
    is ``min(1, min_{j >= i} m p_(j) / j)``, monotone in ``p``; in exact
    arithmetic a hypothesis is rejected when its adjusted p-value is at most ``q``.

    Parameters
    ----------
    p : numpy.ndarray of float
        p-values in [0, 1]; NaN marks a district that was not tested.
    q : float
        False discovery rate, strictly between 0 and 1.

    Returns
    -------
    reject : numpy.ndarray of bool
        True where the hypothesis is rejected; False for NaN entries.
    adjusted : numpy.ndarray of float
        BH-adjusted p-values (NaN where ``p`` is NaN).

    Raises
    ------
    AnalysisError
        If ``q`` is outside (0, 1) or a p-value is outside [0, 1].

    Notes
    -----
    The comparison is the published "<=" rule, as in statsmodels
    ``multipletests(method="fdr_bh")``. ``esda.fdr`` differs: it uses a strict
    "<" and falls back to ``q/m`` when nothing passes, so for
    ``[0.02, 0.025, 0.9, 0.95]`` at 0.05 it rejects nothing while this rule
    rejects two (0.025 <= 2 * 0.05 / 4). NaN entries are not counted in
    ``m``: an untested district must not make the others harder to flag.
    FDR control holds under independence or positive dependence of the tests.

    Examples
    --------
    >>> reject, adj = benjamini_hochberg(np.array([0.02, 0.025, 0.9, 0.95]), 0.05)
    >>> reject, adj
    (array([ True,  True, False, False]), array([0.05, 0.05, 0.95, 0.95]))
    """
    arr, tested = _checked(p, q, "q")
    reject = np.zeros(arr.shape, dtype=bool)
    adjusted = np.full(arr.shape, np.nan)
    values = arr[tested]
    m = values.size
    if m == 0:
        return reject, adjusted
    order = np.argsort(values, kind="stable")
    ranked = values[order]
    k = np.arange(1, m + 1)
    passing = np.nonzero(ranked <= k * q / m)[0]
    rejected_sorted = np.zeros(m, dtype=bool)
    if passing.size:
        rejected_sorted[: passing[-1] + 1] = True
    adj_sorted = np.minimum(1.0, np.minimum.accumulate((m * ranked / k)[::-1])[::-1])
    flat_reject = np.empty(m, dtype=bool)
    flat_adj = np.empty(m)
    flat_reject[order] = rejected_sorted
    flat_adj[order] = adj_sorted
    reject[tested] = flat_reject
    adjusted[tested] = flat_adj
    return reject, adjusted


def bonferroni(p: FloatArray, alpha: float) -> tuple[BoolArray, FloatArray]:
    """Bonferroni correction controlling the family-wise error rate at ``alpha``.

    Reject where ``p <= alpha / m``; adjusted p-value ``min(1, m p)``, with
    ``m`` the number of non-NaN p-values.

    Parameters
    ----------
    p : numpy.ndarray of float
        p-values in [0, 1]; NaN marks a district that was not tested.
    alpha : float
        Family-wise error rate, strictly between 0 and 1.

    Returns
    -------
    reject : numpy.ndarray of bool
        True where rejected; False for NaN entries.
    adjusted : numpy.ndarray of float
        ``min(1, m p)``; NaN where ``p`` is NaN.

    Raises
    ------
    AnalysisError
        If ``alpha`` is outside (0, 1) or a p-value is outside [0, 1].

    Notes
    -----
    With permutation p-values the smallest possible p is ``1/(R + 1)``, so
    Bonferroni can reject only if ``alpha / m >= 1/(R + 1)``, i.e. with
    ``R >= m / alpha - 1`` permutations.

    Examples
    --------
    >>> bonferroni(np.array([0.01, 0.03, np.nan]), 0.05)
    (array([ True, False, False]), array([0.02, 0.06,  nan]))
    """
    arr, tested = _checked(p, alpha, "alpha")
    m = int(tested.sum())
    reject = np.zeros(arr.shape, dtype=bool)
    adjusted = np.full(arr.shape, np.nan)
    if m:
        reject[tested] = arr[tested] <= alpha / m
        adjusted[tested] = np.minimum(1.0, m * arr[tested])
    return reject, adjusted
