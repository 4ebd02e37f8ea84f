"""Week-over-week change of district ILI percentages (pure: no I/O).

Compares this week's counts ``x1/n1`` with last week's ``x0/n0`` (the
*revised* values of last week, taken from this week's table) district by
district: absolute change in percentage points with a Newcombe interval,
relative change, a two-sided test, and a change class that combines the test
with a minimum meaningful change.
"""

from __future__ import annotations

import dataclasses

import numpy as np
from scipy import special

from sitrep.analysis.proportions import (
    BoolArray,
    CountArray,
    FloatArray,
    check_counts,
    proportion_interval,
)
from sitrep.errors import AnalysisError
from sitrep.model import ChangeClass

__all__ = ["CHANGE_METHODS", "ChangeTable", "week_over_week"]

CHANGE_METHODS = ("pooled-z", "poisson-score")
"""Tests accepted by :func:`week_over_week`."""

_PP_TOLERANCE = 1e-9
"""Slack (in pp) when comparing a change with ``min_change_pp``, so that a
change equal to the threshold in exact arithmetic is not lost to rounding."""


@dataclasses.dataclass(frozen=True, eq=False)
class ChangeTable:
    """Week-over-week change per district, aligned with the input arrays.

    Attributes
    ----------
    diff_pp : numpy.ndarray of float
        ``100 * (x1/n1 - x0/n0)``, percentage points; NaN when not assessable.
    low_pp, high_pp : numpy.ndarray of float
        Newcombe (1998b, method 10) hybrid score interval of the difference, pp.
    relative : numpy.ndarray of float
        ``p1/p0 - 1`` (0.5 means 50 % higher); NaN when ``p0 == 0``.
    from_zero : numpy.ndarray of bool
        True where last week was 0 % and this week is above 0 % ("from 0 to
        X %"): the relative change is undefined there and must not be shown as
        a percentage or as infinity.
    p_value : numpy.ndarray of float
        Two-sided p-value of the chosen test; NaN when not assessable.
    classes : tuple of ChangeClass
        One class per district (see :func:`week_over_week`).
    method : str
        The test used (``"pooled-z"`` or ``"poisson-score"``).
    alpha : float
        Significance level of the class rule.
    min_change_pp : float
        Minimum absolute change, in pp, for "increase"/"decrease".
    """

    diff_pp: FloatArray
    low_pp: FloatArray
    high_pp: FloatArray
    relative: FloatArray
    from_zero: BoolArray
    p_value: FloatArray
    classes: tuple[ChangeClass, ...]
    method: str
    alpha: float
    min_change_pp: float

    def __post_init__(self) -> None:
        for field in ("diff_pp", "low_pp", "high_pp", "relative", "from_zero", "p_value"):
            getattr(self, field).setflags(write=False)


def week_over_week(
    x1: CountArray,
    n1: CountArray,
    x0: CountArray,
    n0: CountArray,
    *,
    method: str = "pooled-z",
    alpha: float = 0.05,
    min_change_pp: float = 0.5,
    confidence: float = 0.95,
) -> ChangeTable:
    """Compare this week's ILI proportion with last week's, district by district.

    Parameters
    ----------
    x1, n1 : numpy.ndarray of int
        This week's ILI visits and all visits.
    x0, n0 : numpy.ndarray of int
        Last week's (revised) ILI visits and all visits, same shape and order.
        NaN or masked entries mark a district without counts that week.
    method : {"pooled-z", "poisson-score"}, default "pooled-z"
        Two-sided test of "no change":

        ``"pooled-z"``: pooled two-proportion z test,
        ``z = (p1 - p0) / sqrt(pbar (1 - pbar) (1/n1 + 1/n0))`` with
        ``pbar = (x1 + x0) / (n1 + n0)``, ``p = 2 (1 - Phi(|z|))``; equal to the
        uncorrected Pearson chi-square test (``z^2 = chi^2``) and to
        statsmodels ``proportions_ztest`` with its default pooled variance.

        ``"poisson-score"``: counts as Poisson with exposures ``n``; score test
        of rate ratio 1 (Gu, Ng, Tang & Schucany 2008, method W2A),
        ``z = (x1 - x0 n1/n0) / sqrt((x1 + x0) n1/n0)``, as statsmodels
        ``test_poisson_2indep(x1, n1, x0, n0, method="score")``. Suited to
        small proportions such as ILI%; do not use it for large ones.

        When both weeks have no ILI visits at all (or all visits are ILI in
        both weeks) the statistic is 0/0; the data show no change, so the
        p-value is set to 1.
    alpha : float, default 0.05
        Significance level of the class rule, in (0, 1).
    min_change_pp : float, default 0.5
        Minimum absolute change (percentage points) for a district to be
        called "increase" or "decrease"; must not be negative.
    confidence : float, default 0.95
        Coverage of the Newcombe interval of the difference.

    Returns
    -------
    ChangeTable
        Arrays aligned with the inputs (read-only) and the settings used.

    Raises
    ------
    AnalysisError
        If ``method`` is unknown, ``alpha``/``confidence`` are outside (0, 1),
        ``min_change_pp`` is negative, the four arrays differ in shape, or the
        counts are invalid (negative, not whole, ``x > n``).

    Notes
    -----
    Class rule (one of :class:`~sitrep.model.ChangeClass`):

    - ``NOT_ASSESSABLE`` where ``n1 == 0`` or ``n0 == 0`` or a count is
      missing; every numeric output is NaN there (``from_zero`` False).
    - ``INCREASE`` / ``DECREASE`` only if ``p < alpha`` **and** the Newcombe
      interval excludes 0 **and** ``|diff_pp| >= min_change_pp`` (compared
      with a 1e-9 pp slack for floating-point rounding), by the sign of the
      difference. Requiring the interval too keeps the class consistent with
      the interval printed beside it (docs/methods.md, "Week-over-week change").
    - ``SIMILAR`` otherwise, including detectable changes smaller than
      ``min_change_pp`` (the report words those "small but detectable").

    Decisions: the default test is the pooled z because it is the textbook
    test for two proportions, agrees with the chi-square test staff may
    recompute, and needs no small-proportion approximation; the Poisson
    score test is the documented alternative. The two can fall on different
    sides of 0.05 for the same data (58/1250 vs 37/1200: pooled z p = 0.046,
    Poisson score p = 0.050), which is why the class also requires a minimum
    change in pp and the method is recorded in the table. The displayed
    interval is the Newcombe hybrid score interval built from the two Wilson
    intervals ``(l1, u1)``, ``(l0, u0)``::

        low  = d - sqrt((p1 - l1)^2 + (u0 - p0)^2)
        high = d + sqrt((u1 - p1)^2 + (p0 - l0)^2)

    Near the boundary the test and the interval can disagree; the class then
    follows the more cautious of the two (no class when either includes "no
    change").

    Relative change ``p1/p0 - 1`` is NaN when ``p0 == 0``; when in addition
    ``p1 > 0``, ``from_zero`` is True and the report must say "from 0 % to
    X %" instead of a relative change. All tests assume binomial (or Poisson)
    sampling; clustering of visits within practices makes the p-values too
    small.
    """
    if method not in CHANGE_METHODS:
        raise AnalysisError(
            f"change test must be one of {', '.join(map(repr, CHANGE_METHODS))}, got {method!r}"
        )
    if not 0.0 < alpha < 1.0:
        raise AnalysisError(f"alpha must be strictly between 0 and 1 (e.g. 0.05), got {alpha!r}")
    if not min_change_pp >= 0.0:  # also rejects NaN
        raise AnalysisError(
            f"min_change_pp must be zero or positive (percentage points), got {min_change_pp!r}"
        )
    a1, m1, miss1 = check_counts(x1, n1, x_name="x1", n_name="n1")
    a0, m0, miss0 = check_counts(x0, n0, x_name="x0", n_name="n0")
    if a1.shape != a0.shape:
        raise AnalysisError(
            f"this week's and last week's counts must have the same shape, got {a1.shape} "
            f"and {a0.shape}; align both weeks on the same districts first"
        )
    ok = ~miss1 & ~miss0 & (m1 > 0) & (m0 > 0)

    def full(fill: float = np.nan) -> FloatArray:
        return np.full(a1.shape, fill)

    diff, low, high, rel, pval = full(), full(), full(), full(), full()
    from_zero = np.zeros(a1.shape, dtype=bool)

    y1, t1, y0, t0 = a1[ok], m1[ok], a0[ok], m0[ok]
    p1, p0 = y1 / t1, y0 / t0
    d = p1 - p0
    l1, u1 = proportion_interval(y1, t1, confidence=confidence, method="wilson")
    l0, u0 = proportion_interval(y0, t0, confidence=confidence, method="wilson")
    diff[ok] = 100.0 * d
    low[ok] = 100.0 * (d - np.sqrt((p1 - l1) ** 2 + (u0 - p0) ** 2))
    high[ok] = 100.0 * (d + np.sqrt((u1 - p1) ** 2 + (p0 - l0) ** 2))
    rel[ok] = np.divide(p1, p0, out=np.full(p1.shape, np.nan), where=p0 > 0) - 1.0
    from_zero[ok] = (p0 == 0) & (p1 > 0)
    pval[ok] = _two_sided_p(y1, t1, y0, t0, method)

    # the test is met only when the p-value and the printed interval agree
    significant = ok & (pval < alpha) & ((low > 0) | (high < 0))
    large = ok & (np.abs(diff) >= min_change_pp - _PP_TOLERANCE)
    classes = tuple(
        ChangeClass.NOT_ASSESSABLE
        if not assessable
        else ChangeClass.INCREASE
        if sig and big and dv > 0
        else ChangeClass.DECREASE
        if sig and big and dv < 0
        else ChangeClass.SIMILAR
        for assessable, sig, big, dv in zip(
            ok.ravel(), significant.ravel(), large.ravel(), diff.ravel(), strict=True
        )
    )
    return ChangeTable(
        diff_pp=diff,
        low_pp=low,
        high_pp=high,
        relative=rel,
        from_zero=from_zero,
        p_value=pval,
        classes=classes,
        method=method,
        alpha=float(alpha),
        min_change_pp=float(min_change_pp),
    )


def _two_sided_p(
    x1: FloatArray, n1: FloatArray, x0: FloatArray, n0: FloatArray, method: str
) -> FloatArray:
    """Two-sided normal p-values of the chosen test (all ``n > 0``); 1 where 0/0."""
    if method == "pooled-z":
        pbar = (x1 + x0) / (n1 + n0)
        num = x1 / n1 - x0 / n0
        se = np.sqrt(pbar * (1.0 - pbar) * (1.0 / n1 + 1.0 / n0))
    else:
        ratio = n1 / n0
        num = x1 - x0 * ratio
        se = np.sqrt((x1 + x0) * ratio)
    degenerate = se == 0  # then p1 == p0 (no events, or only events, in both weeks)
    z = np.divide(num, se, out=np.zeros_like(num), where=~degenerate)
    p = 2.0 * special.ndtr(-np.abs(z))
    return np.where(degenerate, 1.0, p)
