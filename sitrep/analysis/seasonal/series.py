"""Season arrays shared by the seasonal modules: checking, labelling, gaps, published rounding.

A season is a 1-D numpy array of weekly ILI%, index 0 = first week of the season window;
NaN marks a week with no data (see the package docstring).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from decimal import ROUND_HALF_UP, Decimal

import numpy as np
import numpy.typing as npt

__all__ = ["BoolArray", "FloatArray", "SeasonsInput", "interpolate_missing", "round_half_up"]

FloatArray = npt.NDArray[np.float64]
BoolArray = npt.NDArray[np.bool_]
SeasonsInput = Mapping[str, npt.ArrayLike] | Sequence[npt.ArrayLike]


def _as_season(values: npt.ArrayLike, label: str) -> FloatArray:
    arr = np.asarray(values, dtype=np.float64)
    if arr.ndim != 1:
        raise ValueError(f"season {label!r} must be a 1-D array, got shape {arr.shape}")
    if arr.size == 0:
        raise ValueError(f"season {label!r} has no weeks (empty array)")
    if np.any(np.isinf(arr)):
        raise ValueError(f"season {label!r} contains an infinite value")
    if np.any(arr[~np.isnan(arr)] < 0):
        raise ValueError(f"season {label!r} contains a negative value, got min {np.nanmin(arr)!r}")
    return arr


def _labelled(past_seasons: SeasonsInput) -> list[tuple[str, FloatArray]]:
    if isinstance(past_seasons, Mapping):
        return [(str(k), _as_season(past_seasons[k], str(k))) for k in sorted(past_seasons)]
    if isinstance(past_seasons, np.ndarray) and past_seasons.ndim != 2:
        raise ValueError(
            "past_seasons must be a mapping, a sequence of 1-D arrays or a 2-D array "
            f"(seasons x weeks), got an array of shape {past_seasons.shape}"
        )
    return [(str(i + 1), _as_season(v, str(i + 1))) for i, v in enumerate(past_seasons)]


def _seasons_phrase(n: int) -> str:
    return f"{n} past season" + ("" if n == 1 else "s")


def round_half_up(value: float, decimals: int = 1) -> float:
    """Round a number half-up at ``decimals`` places, as published figures are rounded.

    Parameters
    ----------
    value : float
        Number to round; its shortest decimal representation is rounded, so
        1.25 becomes 1.3 (Python's ``round`` gives 1.2).
    decimals : int, default 1
        Number of decimal places, at least 0.

    Returns
    -------
    float
        The rounded number.

    Raises
    ------
    ValueError
        If ``decimals`` is negative or ``value`` is not finite.

    Examples
    --------
    >>> round_half_up(1.193333)
    1.2
    >>> round_half_up(1.25)
    1.3
    """
    if decimals < 0:
        raise ValueError(f"decimals must be >= 0, got {decimals}")
    if not math.isfinite(value):
        raise ValueError(f"value must be finite, got {value!r}")
    quantum = Decimal(1).scaleb(-decimals)
    return float(Decimal(repr(float(value))).quantize(quantum, rounding=ROUND_HALF_UP))


def interpolate_missing(season: npt.ArrayLike) -> FloatArray:
    """Fill missing weeks of one season by linear interpolation (never by zeros).

    Interior NaN weeks are interpolated linearly between the nearest reported
    weeks; leading or trailing NaN weeks take the nearest reported value
    (constant extrapolation, ``numpy.interp``).

    Parameters
    ----------
    season : array_like of float, shape (w,)
        Weekly values; NaN = missing.

    Returns
    -------
    numpy.ndarray of float, shape (w,)
        A new array without NaN.

    Raises
    ------
    ValueError
        If ``season`` is not 1-D, is empty, or has no reported week.

    Examples
    --------
    >>> interpolate_missing([1.0, np.nan, 3.0, np.nan])
    array([1., 2., 3., 3.])
    """
    arr = np.asarray(season, dtype=np.float64)
    if arr.ndim != 1 or arr.size == 0:
        raise ValueError(f"season must be a non-empty 1-D array, got shape {arr.shape}")
    ok = ~np.isnan(arr)
    if not ok.any():
        raise ValueError(f"season has no reported week (all {arr.size} weeks are NaN)")
    if ok.all():
        return arr.copy()
    x = np.arange(arr.size, dtype=np.float64)
    return np.asarray(np.interp(x, x[ok], arr[ok]), dtype=np.float64)
