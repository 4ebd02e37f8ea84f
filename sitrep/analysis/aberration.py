"""C1, C2 and C3 aberration flags on weekly series, vectorised over districts (pure).

The three adaptive algorithms of Hutwagner et al. (2003, J Urban Health 80(2 Suppl
1):i89-i96) were designed for daily counts with a 7-day baseline. sitrep applies
them to **weekly** series by reading "day" as "week" (docs/methods.md 8.1):

- C1: baseline weeks t-7..t-1; ``C1_t = (y_t - mean) / s``; alarm if ``C1_t > 3``.
- C2: baseline weeks t-9..t-3 (a 2-week guard band); ``C2_t = (y_t - mean) / s``;
  alarm if ``C2_t > 3``.
- C3: ``C3_t = sum over i = t-2..t of max(0, C2_i - 1)``; alarm if ``C3_t > 2``.

``s`` is the sample SD (n - 1) of the baseline weeks, raised to a floor
(``sd_floor``) so that a flat baseline does not give an infinite statistic.

Inputs are 2-D arrays (districts x weeks, oldest week first) or 1-D arrays (one
series); NaN marks a missing week. No file I/O, no plotting, no printing.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt
from numpy.lib.stride_tricks import sliding_window_view

__all__ = [
    "BASELINE_WEEKS",
    "C1_ALARM",
    "C1_LAGS",
    "C2_ALARM",
    "C2_LAGS",
    "C3_ALARM",
    "DEFAULT_MIN_BASELINE_WEEKS",
    "DEFAULT_SD_FLOOR",
    "AberrationSeries",
    "AberrationStatistic",
    "AberrationWeek",
    "aberration_series",
    "aberration_this_week",
]

FloatArray = npt.NDArray[np.float64]
BoolArray = npt.NDArray[np.bool_]

BASELINE_WEEKS = 7
"""Length of the C1/C2 baseline window, in weeks (7 days in the daily original)."""

C1_LAGS = (1, 7)
"""C1 baseline: weeks t-7 .. t-1 (nearest and farthest lag)."""

C2_LAGS = (3, 9)
"""C2 baseline: weeks t-9 .. t-3 (2-week guard band)."""

C1_ALARM = 3.0
"""C1 alarm when the statistic is strictly greater than this."""

C2_ALARM = 3.0
"""C2 alarm when the statistic is strictly greater than this."""

C3_ALARM = 2.0
"""C3 alarm when the statistic is strictly greater than this."""

DEFAULT_SD_FLOOR = 0.2
"""Default floor on the baseline SD: 0.2 percentage points, for ILI% series.

Use 1.0 for series of counts (one count). The floor keeps a flat or almost
flat baseline from turning a small absolute change into a huge statistic.
"""

DEFAULT_MIN_BASELINE_WEEKS = 5
"""Fewest reported (non-NaN) weeks out of the 7 baseline weeks for C1/C2 to be computed."""


@dataclass(frozen=True, eq=False)
class AberrationSeries:
    """C1, C2, C3 statistics and alarms for every week of every series.

    Attributes
    ----------
    c1, c2, c3 : numpy.ndarray of float, shape (d, w) or (w,)
        Statistics, same shape as the input; NaN where not computable.
    c1_alarm, c2_alarm, c3_alarm : numpy.ndarray of bool, same shape
        Alarm flags; False wherever the statistic is NaN.
    sd_floor : float
        Floor applied to the baseline SD.
    min_baseline_weeks : int
        Fewest reported baseline weeks required.
    """

    c1: FloatArray
    c2: FloatArray
    c3: FloatArray
    c1_alarm: BoolArray
    c2_alarm: BoolArray
    c3_alarm: BoolArray
    sd_floor: float
    min_baseline_weeks: int

    def __post_init__(self) -> None:
        """Make the arrays read-only."""
        for arr in (self.c1, self.c2, self.c3, self.c1_alarm, self.c2_alarm, self.c3_alarm):
            arr.setflags(write=False)


@dataclass(frozen=True, eq=False)
class AberrationStatistic:
    """One statistic (C1, C2 or C3) for one week, per district.

    Attributes
    ----------
    name : str
        "C1", "C2" or "C3".
    values : numpy.ndarray of float, shape (d,)
        Statistic per district; NaN where not computable.
    alarms : numpy.ndarray of bool, shape (d,)
        ``values > alarm_threshold``; False where NaN.
    alarm_threshold : float
        3 for C1 and C2, 2 for C3.
    reasons : tuple of str, length d
        "" where computed; otherwise why not (for the district table).
    """

    name: str
    values: FloatArray
    alarms: BoolArray
    alarm_threshold: float
    reasons: tuple[str, ...]

    def __post_init__(self) -> None:
        """Make the arrays read-only."""
        self.values.setflags(write=False)
        self.alarms.setflags(write=False)


@dataclass(frozen=True, eq=False)
class AberrationWeek:
    """C1, C2 and C3 for one week (normally the latest), per district.

    Attributes
    ----------
    week_index : int
        Column of the input that was evaluated (non-negative).
    c1, c2, c3 : AberrationStatistic
        The three statistics.
    sd_floor : float
        Floor applied to the baseline SD (for the methods box).
    min_baseline_weeks : int
        Fewest reported baseline weeks required.
    """

    week_index: int
    c1: AberrationStatistic
    c2: AberrationStatistic
    c3: AberrationStatistic
    sd_floor: float
    min_baseline_weeks: int


def _as_2d(values: npt.ArrayLike) -> FloatArray:
    arr = np.asarray(values, dtype=np.float64)
    if arr.ndim == 1:
        arr = arr[None, :]
    if arr.ndim != 2:
        raise ValueError(
            f"values must be 1-D (weeks) or 2-D (districts x weeks), got shape {arr.shape}"
        )
    if np.any(np.isinf(arr)):
        raise ValueError("values contain an infinite number")
    return arr


def _check_settings(sd_floor: float, min_baseline_weeks: int) -> None:
    if not (sd_floor >= 0 and np.isfinite(sd_floor)):
        raise ValueError(f"sd_floor must be a finite number >= 0, got {sd_floor!r}")
    if not 2 <= min_baseline_weeks <= BASELINE_WEEKS:
        raise ValueError(
            f"min_baseline_weeks must be between 2 and {BASELINE_WEEKS}, got {min_baseline_weeks!r}"
        )


def _c_stat(
    y: FloatArray, lags: tuple[int, int], sd_floor: float, min_n: int
) -> tuple[FloatArray, npt.NDArray[np.int64], FloatArray]:
    """Statistic, number of reported baseline weeks and floored SD, all shape (d, w)."""
    near, far = lags
    width = far - near + 1
    d, w = y.shape
    stat = np.full((d, w), np.nan)
    count = np.zeros((d, w), dtype=np.int64)
    sd_out = np.full((d, w), np.nan)
    if w <= far:
        return stat, count, sd_out
    win = sliding_window_view(y, width, axis=1)[:, : w - far]  # window j -> week t = j + far
    ok = ~np.isnan(win)
    n = ok.sum(axis=-1)
    safe_n = np.maximum(n, 1)
    mean = np.where(ok, win, 0.0).sum(axis=-1) / safe_n
    ss = np.where(ok, (win - mean[..., None]) ** 2, 0.0).sum(axis=-1)
    sd = np.sqrt(ss / np.maximum(n - 1, 1))
    sd = np.maximum(sd, sd_floor)
    yt = y[:, far:]
    valid = (n >= min_n) & ~np.isnan(yt) & (sd > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = (yt - mean) / sd
    stat[:, far:] = np.where(valid, z, np.nan)
    count[:, far:] = n
    sd_out[:, far:] = sd
    return stat, count, sd_out


def _c3(c2: FloatArray) -> FloatArray:
    d, w = c2.shape
    out = np.full((d, w), np.nan)
    if w >= 3:
        win = sliding_window_view(c2, 3, axis=1)  # window j -> week t = j + 2
        terms = np.maximum(0.0, win - 1.0)  # NaN stays NaN
        out[:, 2:] = terms.sum(axis=-1)
    return out


def _alarm(stat: FloatArray, threshold: float) -> BoolArray:
    return np.where(np.isnan(stat), False, stat > threshold)


def aberration_series(
    values: npt.ArrayLike,
    *,
    sd_floor: float = DEFAULT_SD_FLOOR,
    min_baseline_weeks: int = DEFAULT_MIN_BASELINE_WEEKS,
) -> AberrationSeries:
    """C1, C2 and C3 for every week of one or many weekly series.

    For week t, the C1 (C2) baseline is weeks t-7..t-1 (t-9..t-3); the
    statistic is ``(y_t - mean) / max(SD, sd_floor)`` with the sample SD of the
    reported baseline weeks. C3 sums ``max(0, C2_i - 1)`` over i = t-2..t.

    Parameters
    ----------
    values : array_like of float, shape (d, w) or (w,)
        Weekly ILI% (or counts) per district, oldest week first; NaN = missing.
    sd_floor : float, default 0.2
        Floor on the baseline SD, in the units of ``values`` (0.2 percentage
        points for ILI%; use 1.0 for counts). 0 disables it; a flat baseline
        then gives NaN.
    min_baseline_weeks : int, default 5
        Fewest reported weeks among the 7 baseline weeks, 2..7.

    Returns
    -------
    AberrationSeries
        Arrays of the input's shape. C1 is NaN for weeks 0-6 (no full
        baseline window yet), C2 for weeks 0-8, C3 for weeks 0-10; also NaN
        where this week is missing or the baseline has too few reported weeks.

    Raises
    ------
    ValueError
        If ``values`` is not 1-D or 2-D or has an infinite value, or a
        setting is out of range.

    Notes
    -----
    The window must lie wholly inside the series: a week near the start is not
    evaluated on a truncated baseline. Within the window, up to
    ``7 - min_baseline_weeks`` missing weeks are tolerated (sitrep decision:
    the original assumes complete data; demanding all 7 would blank a district's
    flags for 7-9 weeks after a single missing report). C3 needs C2 in all three
    of weeks t-2..t.

    Examples
    --------
    >>> y = [20, 22, 19, 21, 23, 20, 22, 24, 21, 35, 40, 38, 30]
    >>> r = aberration_series(y, sd_floor=1.0)
    >>> np.round(r.c1[9:], 4)
    array([7.8984, 3.1594, 1.4821, 0.1639])
    >>> np.round(r.c3[11:], 4)
    array([27.2691, 18.589 ])
    >>> r.c3_alarm[11:].tolist()
    [True, True]
    """
    _check_settings(sd_floor, min_baseline_weeks)
    was_1d = np.ndim(values) == 1
    y = _as_2d(values)
    c1, _, _ = _c_stat(y, C1_LAGS, sd_floor, min_baseline_weeks)
    c2, _, _ = _c_stat(y, C2_LAGS, sd_floor, min_baseline_weeks)
    c3 = _c3(c2)
    a1, a2, a3 = _alarm(c1, C1_ALARM), _alarm(c2, C2_ALARM), _alarm(c3, C3_ALARM)
    if was_1d:
        c1, c2, c3, a1, a2, a3 = c1[0], c2[0], c3[0], a1[0], a2[0], a3[0]
    return AberrationSeries(
        c1=c1,
        c2=c2,
        c3=c3,
        c1_alarm=a1,
        c2_alarm=a2,
        c3_alarm=a3,
        sd_floor=float(sd_floor),
        min_baseline_weeks=min_baseline_weeks,
    )


def _reason(
    name: str,
    t: int,
    lags: tuple[int, int],
    y: FloatArray,
    count: npt.NDArray[np.int64],
    sd: FloatArray,
    min_n: int,
    district: int,
) -> str:
    near, far = lags
    if t < far:
        return (
            f"{name} not computed: {t} week(s) of history before this week, "
            f"{far} needed (baseline weeks t-{far} to t-{near})."
        )
    if np.isnan(y[district, t]):
        return f"{name} not computed: no value this week."
    n = int(count[district, t])
    if n < min_n:
        return (
            f"{name} not computed: {n} of the {far - near + 1} baseline weeks reported, "
            f"at least {min_n} needed."
        )
    if not sd[district, t] > 0:
        return f"{name} not computed: the baseline weeks are all equal and no SD floor is set."
    return f"{name} not computed."


def aberration_this_week(
    values: npt.ArrayLike,
    *,
    week_index: int = -1,
    sd_floor: float = DEFAULT_SD_FLOOR,
    min_baseline_weeks: int = DEFAULT_MIN_BASELINE_WEEKS,
) -> AberrationWeek:
    """C1, C2 and C3 for one week of every district, with alarm flags and reasons.

    Same statistics as :func:`aberration_series`, evaluated at column
    ``week_index`` (default: the latest week) of a districts x weeks array.

    Parameters
    ----------
    values : array_like of float, shape (d, w)
        Weekly ILI% per district (rows) and week (columns, oldest first);
        NaN = missing. A 1-D array is read as one district.
    week_index : int, default -1
        Column to evaluate; negative counts from the end.
    sd_floor : float, default 0.2
        Floor on the baseline SD (0.2 percentage points for ILI%; 1.0 for counts).
    min_baseline_weeks : int, default 5
        Fewest reported weeks among the 7 baseline weeks, 2..7.

    Returns
    -------
    AberrationWeek
        ``c1``, ``c2``, ``c3`` each with values, alarms and one reason per
        district ("" where computed). A statistic that cannot be computed is
        NaN with alarm False.

    Raises
    ------
    ValueError
        If ``values`` has the wrong shape, ``week_index`` is out of range, or a
        setting is out of range.

    Examples
    --------
    >>> y = np.array([[20, 22, 19, 21, 23, 20, 22, 24, 21, 35],
    ...               [1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.5]])
    >>> wk = aberration_this_week(y, sd_floor=1.0)
    >>> np.round(wk.c1.values, 4).tolist(), wk.c1.alarms.tolist()
    ([7.8984, 0.5], [True, False])
    >>> wk.c3.reasons[0]
    'C3 not computed: 9 week(s) of history before this week, 11 needed (C2 for weeks t-2 to t).'
    """
    _check_settings(sd_floor, min_baseline_weeks)
    y = _as_2d(values)
    d, w = y.shape
    if not -w <= week_index < w:
        raise ValueError(f"week_index must be in [{-w}, {w - 1}] for {w} weeks, got {week_index}")
    t = week_index % w
    c1, n1, sd1 = _c_stat(y, C1_LAGS, sd_floor, min_baseline_weeks)
    c2, n2, sd2 = _c_stat(y, C2_LAGS, sd_floor, min_baseline_weeks)
    c3 = _c3(c2)

    def stat(
        name: str, arr: FloatArray, threshold: float, reasons: list[str]
    ) -> AberrationStatistic:
        col = arr[:, t].copy()
        return AberrationStatistic(name, col, _alarm(col, threshold), threshold, tuple(reasons))

    r1 = [
        ""
        if not np.isnan(c1[i, t])
        else _reason("C1", t, C1_LAGS, y, n1, sd1, min_baseline_weeks, i)
        for i in range(d)
    ]
    r2 = [
        ""
        if not np.isnan(c2[i, t])
        else _reason("C2", t, C2_LAGS, y, n2, sd2, min_baseline_weeks, i)
        for i in range(d)
    ]
    r3: list[str] = []
    for i in range(d):
        if not np.isnan(c3[i, t]):
            r3.append("")
        elif t < C2_LAGS[1] + 2:
            r3.append(
                f"C3 not computed: {t} week(s) of history before this week, "
                f"{C2_LAGS[1] + 2} needed (C2 for weeks t-2 to t)."
            )
        else:
            missing = [
                f"t-{t - j}" if j < t else "t" for j in range(t - 2, t + 1) if np.isnan(c2[i, j])
            ]
            r3.append(f"C3 not computed: C2 not available for week(s) {', '.join(missing)}.")
    return AberrationWeek(
        week_index=t,
        c1=stat("C1", c1, C1_ALARM, r1),
        c2=stat("C2", c2, C2_ALARM, r2),
        c3=stat("C3", c3, C3_ALARM, r3),
        sd_floor=float(sd_floor),
        min_baseline_weeks=min_baseline_weeks,
    )
