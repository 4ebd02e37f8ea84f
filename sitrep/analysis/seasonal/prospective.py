"""Prospective use of the seasonal context: onset, intensity level, the same week in past seasons."""

from __future__ import annotations

import enum
import math
from collections.abc import Mapping

import numpy as np
import numpy.typing as npt

from sitrep.analysis.seasonal.mem import MemThresholds
from sitrep.analysis.seasonal.series import round_half_up

__all__ = ["IntensityLevel", "intensity_level", "same_week_past_seasons", "season_onset"]


class IntensityLevel(enum.Enum):
    """Intensity of this week's ILI% against the MEM thresholds; ``.value`` is report text."""

    NOT_AVAILABLE = "not available"
    BELOW_EPIDEMIC_THRESHOLD = "below epidemic threshold"
    LOW = "low"
    MEDIUM = "medium"
    HIGH = "high"
    VERY_HIGH = "very high"


def season_onset(
    current: npt.ArrayLike,
    threshold: float | None,
    *,
    k: int = 3,
    decimals: int | None = None,
) -> int | None:
    """First week of the first run of ``k`` consecutive weeks at or above a threshold.

    Onset (Biggerstaff et al. 2016): the first week with ILI% at or above the
    baseline that stays there for at least ``k - 1`` further weeks. The
    comparison is ``>=`` (at or above), as sitrep compares published 1-decimal
    values with the published 1-decimal baseline (docs/methods.md 7.1).

    Parameters
    ----------
    current : array_like of float, shape (w,)
        This season's weekly ILI% so far, by season week. NaN (missing) is
        never at or above the threshold, so it breaks a run.
    threshold : float or None
        Baseline or MEM epidemic threshold; None (not available) gives None.
    k : int, default 3
        Weeks in a row required, >= 1 (1 = the MEM alert rule).
    decimals : int or None, default None
        If given, both the values and the threshold are rounded half-up to this
        many decimals before comparing; None compares them as given.

    Returns
    -------
    int or None
        1-based season week of the onset, or None if no such run exists yet.

    Raises
    ------
    ValueError
        If ``current`` is not 1-D, ``k`` < 1, or ``threshold`` is not finite.

    Examples
    --------
    >>> season_onset([1.0, 1.1, 1.2, 1.1, 1.3, 1.5, 1.9, 2.4, 3.1], 1.2)
    5
    >>> season_onset([1.0, 1.1, 1.2, 1.1, 1.3, 1.5, 1.9, 2.4, 3.1], 1.4)
    6
    >>> season_onset([1.0, 1.3, 1.3], 1.2) is None
    True
    """
    arr = np.asarray(current, dtype=np.float64)
    if arr.ndim != 1:
        raise ValueError(f"current must be 1-D, got shape {arr.shape}")
    if k < 1:
        raise ValueError(f"k must be >= 1, got {k!r}")
    if threshold is None:
        return None
    if not math.isfinite(threshold):
        raise ValueError(f"threshold must be finite or None, got {threshold!r}")
    if decimals is not None:
        threshold = round_half_up(threshold, decimals)
        arr = np.asarray(
            [np.nan if np.isnan(v) else round_half_up(float(v), decimals) for v in arr]
        )
    above = np.zeros(arr.shape, dtype=np.bool_)
    ok = ~np.isnan(arr)
    above[ok] = arr[ok] >= threshold
    run = 0
    for i, flag in enumerate(above.tolist()):
        run = run + 1 if flag else 0
        if run == k:
            return i - k + 2
    return None


def intensity_level(value: float | None, thresholds: MemThresholds) -> IntensityLevel:
    """Classify one week's ILI% against MEM epidemic and intensity thresholds.

    Below the epidemic threshold -> ``BELOW_EPIDEMIC_THRESHOLD``; otherwise
    ``LOW`` below the medium threshold, ``MEDIUM`` below high, ``HIGH`` below
    very high, else ``VERY_HIGH``. Each threshold belongs to the level above it
    (a value equal to the high threshold is "high").

    Parameters
    ----------
    value : float or None
        This week's ILI%; None or NaN gives ``NOT_AVAILABLE``.
    thresholds : MemThresholds
        From :func:`mem_thresholds`; unavailable thresholds give ``NOT_AVAILABLE``.

    Returns
    -------
    IntensityLevel
        The level; ``.value`` is the text for the report.

    Raises
    ------
    ValueError
        If ``value`` is infinite or negative.

    Notes
    -----
    The medium threshold is the 40% point of the log-normal fitted to the
    highest epidemic values, so it can lie below the epidemic threshold; a week
    at or above the epidemic threshold is then at least "medium".

    Examples
    --------
    >>> m = mem_thresholds({"a": [0.5] * 8 + [2.0, 5.0, 2.0] + [0.5] * 20,
    ...                     "b": [0.6] * 9 + [3.0, 6.0, 3.0] + [0.6] * 18}, n_per_season=2)
    >>> intensity_level(0.4, m).value, intensity_level(4.0, m).value
    ('below epidemic threshold', 'medium')
    >>> intensity_level(float("nan"), m).value
    'not available'
    """
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return IntensityLevel.NOT_AVAILABLE
    if not math.isfinite(value) or value < 0:
        raise ValueError(f"value must be a finite ILI% >= 0, got {value!r}")
    t = thresholds
    if (
        not t.available
        or t.epidemic_threshold is None
        or t.medium_threshold is None
        or t.high_threshold is None
        or t.very_high_threshold is None
    ):
        return IntensityLevel.NOT_AVAILABLE
    if value < t.epidemic_threshold:
        return IntensityLevel.BELOW_EPIDEMIC_THRESHOLD
    if value >= t.very_high_threshold:
        return IntensityLevel.VERY_HIGH
    if value >= t.high_threshold:
        return IntensityLevel.HIGH
    if value >= t.medium_threshold:
        return IntensityLevel.MEDIUM
    return IntensityLevel.LOW


def same_week_past_seasons(
    past_seasons_by_label: Mapping[str, npt.ArrayLike], season_week: int
) -> tuple[tuple[str, float | None], ...]:
    """Look up one season week's ILI% in each past season, sorted by season label.

    Parameters
    ----------
    past_seasons_by_label : mapping of str to array_like of float
        Weekly ILI% per past season, by season week (index 0 = week 1).
    season_week : int
        1-based season week (1 = first week of the season window). Week 53
        exists only in seasons whose array has 53 weeks.

    Returns
    -------
    tuple of (str, float or None)
        ``(label, value)`` for every season, sorted by label; value is None when
        that season has no such week or the week is missing (NaN).

    Raises
    ------
    ValueError
        If ``season_week`` < 1 or a season is not 1-D.

    Examples
    --------
    >>> same_week_past_seasons({"2023-24": [1.0, 2.0], "2022-23": [1.5, np.nan]}, 2)
    (('2022-23', None), ('2023-24', 2.0))
    """
    if isinstance(season_week, bool) or not isinstance(season_week, (int, np.integer)):
        raise ValueError(f"season_week must be an int, got {season_week!r}")
    if season_week < 1:
        raise ValueError(f"season_week must be >= 1 (1-based), got {season_week!r}")
    out: list[tuple[str, float | None]] = []
    for label in sorted(past_seasons_by_label):
        arr = np.asarray(past_seasons_by_label[label], dtype=np.float64)
        if arr.ndim != 1:
            raise ValueError(f"season {label!r} must be 1-D, got shape {arr.shape}")
        value: float | None = None
        if season_week <= arr.size and not np.isnan(arr[season_week - 1]):
            value = float(arr[season_week - 1])
        out.append((str(label), value))
    return tuple(out)
