"""MEM epidemic period of one season: the MAP curve and the slope criterion (docs/methods.md 7.2 step 3)."""

from __future__ import annotations

import enum
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from sitrep.analysis.seasonal.series import FloatArray, _as_season, interpolate_missing

__all__ = ["DEFAULT_DELTA", "EpidemicPeriod", "MapSlope", "epidemic_period", "map_curve"]

DEFAULT_DELTA = 2.8
"""MEM slope criterion: percentage points of MAP added by one more week (Vega et al. 2013)."""


_TIE_RTOL = 1e-9


class MapSlope(enum.Enum):
    """Which MAP curve the slope criterion is applied to (docs/methods.md 7.2 step 3).

    ``RAW`` (default) differences the MAP curve itself, as the paper describes.
    ``SMOOTHED`` first smooths the MAP curve, as the reference implementation
    does: local-linear regression with a normal kernel of standard deviation 1
    week (R ``sm::sm.regression(h = 1)``), negative values set to 0.
    """

    RAW = "raw MAP curve"
    SMOOTHED = "kernel-smoothed MAP curve"


@dataclass(frozen=True)
class EpidemicPeriod:
    """The MEM epidemic period of one past season.

    Attributes
    ----------
    season : str
        Season label.
    start_week, end_week : int
        First and last week of the period, 1-based season weeks, inclusive.
    length : int
        Optimal epidemic length L = end_week - start_week + 1.
    map_percent : float
        MAP(L): percentage of the season total inside the period.
    n_weeks : int
        Number of weeks in the season array (for example 53 for a 53-week season).
    interpolated_weeks : tuple of int
        1-based season weeks that were missing and were filled by linear
        interpolation before the MAP curve was computed.
    """

    season: str
    start_week: int
    end_week: int
    length: int
    map_percent: float
    n_weeks: int
    interpolated_weeks: tuple[int, ...] = ()


def _window_sums(values: FloatArray) -> tuple[FloatArray, npt.NDArray[np.int64]]:
    """Maximum s-week sum and its earliest start index, for s = 1..w."""
    w = values.size
    csum = np.concatenate([[0.0], np.cumsum(values)])
    best = np.empty(w, dtype=np.float64)
    start = np.empty(w, dtype=np.int64)
    for s in range(1, w + 1):
        sums = csum[s:] - csum[:-s]
        top = sums.max()
        best[s - 1] = top
        start[s - 1] = int(np.flatnonzero(sums >= top - _TIE_RTOL * max(abs(top), 1.0))[0])
    return best, start


def map_curve(season: npt.ArrayLike) -> FloatArray:
    """Maximum accumulated percentage (MAP) curve of one season (Vega et al. 2013).

    MAP(s) = 100 * (largest sum of any s consecutive weeks) / (season total),
    for s = 0..w, with MAP(0) = 0. Missing weeks are interpolated first
    (:func:`interpolate_missing`).

    Parameters
    ----------
    season : array_like of float, shape (w,)
        Weekly ILI% of one season, values >= 0; NaN = missing.

    Returns
    -------
    numpy.ndarray of float, shape (w + 1,)
        MAP(0), MAP(1), ..., MAP(w); non-decreasing, MAP(w) = 100.

    Raises
    ------
    ValueError
        If the season is not 1-D, has a negative value, no reported week, or a
        total of 0 (the curve is then undefined).

    Examples
    --------
    >>> map_curve([1.0, 3.0, 1.0])
    array([  0.,  60.,  80., 100.])
    """
    values = interpolate_missing(_as_season(season, "season"))
    total = float(values.sum())
    if total <= 0:
        raise ValueError(f"season total must be > 0 for a MAP curve, got {total!r}")
    best, _ = _window_sums(values)
    curve = np.concatenate([[0.0], 100.0 * best / total])
    curve[-1] = 100.0
    return curve


def _smooth_local_linear(y: FloatArray, bandwidth: float = 1.0) -> FloatArray:
    """Local-linear normal-kernel regression of y on 0..m-1, evaluated at the same points."""
    x = np.arange(y.size, dtype=np.float64)
    d = x[None, :] - x[:, None]  # row: evaluation point, column: data point
    w = np.exp(-0.5 * (d / bandwidth) ** 2)
    s0 = w.sum(axis=1)
    s1 = (w * d).sum(axis=1)
    s2 = (w * d * d).sum(axis=1)
    t0 = (w * y[None, :]).sum(axis=1)
    t1 = (w * d * y[None, :]).sum(axis=1)
    est = (s2 * t0 - s1 * t1) / (s0 * s2 - s1 * s1)
    out: FloatArray = np.maximum(est, 0.0)
    return out


def epidemic_period(
    season: npt.ArrayLike,
    *,
    delta: float = DEFAULT_DELTA,
    slope: MapSlope = MapSlope.RAW,
    label: str = "",
) -> EpidemicPeriod:
    """Optimal epidemic length and period of one season by the MEM slope criterion.

    With increments D(s) = MAP(s) - MAP(s - 1), the length is
    L = (smallest s with D(s) < delta) - 1, at least 1; if no increment falls
    below ``delta`` the whole season is the epidemic (L = w). The period is the
    earliest L-week window attaining MAP(L) (docs/methods.md 7.2 step 3).

    Parameters
    ----------
    season : array_like of float, shape (w,)
        Weekly ILI% of one season (NaN = missing, interpolated linearly).
    delta : float, default 2.8
        Slope criterion in percentage points, > 0.
    slope : MapSlope, default RAW
        ``RAW`` differences the MAP curve; ``SMOOTHED`` differences the
        kernel-smoothed MAP curve (reference implementation; can differ by a week).
    label : str, default ""
        Season label stored in the result.

    Returns
    -------
    EpidemicPeriod
        Start and end as 1-based season weeks, L and MAP(L) (of the raw curve).

    Raises
    ------
    ValueError
        As :func:`map_curve`, or if ``delta`` is not positive.

    Notes
    -----
    One epidemic wave per season is assumed. With two waves, the period sits
    on whichever window accumulates most; the other wave stays in the pre- or
    post-epidemic weeks and raises that threshold. A flat season of more than
    100 / delta (about 36) weeks gets L = 1 at its first week; a flat season of
    fewer weeks is all epidemic.

    Examples
    --------
    >>> p = epidemic_period([0.5, 0.5, 0.5, 4.0, 8.0, 5.0, 0.5, 0.5] + [0.5] * 30)
    >>> p.start_week, p.end_week, p.length, round(p.map_percent, 3)
    (4, 6, 3, 49.275)
    """
    if not delta > 0:
        raise ValueError(f"delta must be > 0, got {delta!r}")
    slope = MapSlope(slope)
    raw = _as_season(season, label or "season")
    values = interpolate_missing(raw)
    total = float(values.sum())
    if total <= 0:
        raise ValueError(
            f"season {label!r} total must be > 0 for an epidemic period, got {total!r}"
        )
    best, start = _window_sums(values)
    curve = np.concatenate([[0.0], 100.0 * best / total])
    curve[-1] = 100.0
    used = curve if slope is MapSlope.RAW else _smooth_local_linear(curve, 1.0)
    increments = np.diff(used)  # increments[s - 1] = D(s)
    below = np.flatnonzero(increments < delta)
    w = values.size
    length = max(1, int(below[0] + 1) - 1) if below.size else w
    first = int(start[length - 1])
    return EpidemicPeriod(
        season=label,
        start_week=first + 1,
        end_week=first + length,
        length=length,
        map_percent=float(curve[length]),
        n_weeks=w,
        interpolated_weeks=tuple(int(i) + 1 for i in np.flatnonzero(np.isnan(raw))),
    )
