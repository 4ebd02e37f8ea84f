"""Moving Epidemic Method thresholds from past seasons' epidemic periods (docs/methods.md 7.2)."""

from __future__ import annotations

import enum
import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from sitrep.analysis.seasonal.period import (
    DEFAULT_DELTA,
    EpidemicPeriod,
    MapSlope,
    epidemic_period,
)
from sitrep.analysis.seasonal.series import (
    FloatArray,
    SeasonsInput,
    _labelled,
    _seasons_phrase,
    interpolate_missing,
)

__all__ = [
    "DEFAULT_INTENSITY_LEVELS",
    "DEFAULT_THRESHOLD_LEVEL",
    "MAX_MEM_SEASONS",
    "MIN_MEM_SEASONS",
    "TARGET_POOLED_VALUES",
    "IntervalForm",
    "MemThresholds",
    "default_n_per_season",
    "mem_thresholds",
]

MAX_MEM_SEASONS = 10
"""MEM uses at most this many of the most recent past seasons (reference-implementation default)."""

MIN_MEM_SEASONS = 2
"""Fewest usable past seasons for which MEM thresholds are reported (sitrep decision)."""


TARGET_POOLED_VALUES = 30
"""MEM pools about this many values: n per season = max(1, round(30 / seasons))."""

DEFAULT_THRESHOLD_LEVEL = 0.95
"""One-sided level of the pre- and post-epidemic thresholds."""

DEFAULT_INTENSITY_LEVELS = (0.40, 0.90, 0.975)
"""One-sided levels of the medium, high and very-high intensity thresholds (Vega et al. 2015)."""


class IntervalForm(enum.Enum):
    """How MEM turns a pool of values into a threshold (docs/methods.md 7.2 step 5, section 10 item 2).

    ``POINT`` (default, as the reference implementation) is ``mean + z * SD``, a
    normal quantile. ``CI`` is the upper one-sided confidence limit of the mean,
    ``mean + z * SD / sqrt(N)``, as the paper words it. ``CI_T`` is the same with a
    Student t quantile on N - 1 degrees of freedom. The values equal the strings
    of ``SeasonalSettings.mem_form`` so a config string converts with
    ``IntervalForm(value)``.
    """

    POINT = "point"
    CI = "ci"
    CI_T = "ci-t"


@dataclass(frozen=True)
class MemThresholds:
    """MEM thresholds from past seasons, with everything needed to report them.

    Attributes
    ----------
    available : bool
        True when the epidemic threshold and the three intensity thresholds were
        computed. When False all five thresholds are None (never 0).
    reason : str
        Empty when available; otherwise one sentence for the report, e.g.
        "Epidemic thresholds are not available: 1 past season in the history,
        at least 2 are needed."
    epidemic_threshold : float or None
        Pre-epidemic threshold (ILI%); this week at or above it = epidemic.
    post_epidemic_threshold : float or None
        Post-epidemic threshold. May be None while ``available`` is True, when
        no season has post-epidemic weeks (see ``notes``).
    medium_threshold, high_threshold, very_high_threshold : float or None
        Intensity thresholds (ILI%), on the log scale at levels 0.40/0.90/0.975.
    periods : tuple of EpidemicPeriod
        Epidemic period of every season used, oldest first.
    n_per_season : int or None
        Number of highest values taken from each season's pre-, post- and
        epidemic period (all of them when a period has fewer weeks).
    seasons_used : tuple of str
        Labels of the seasons used, oldest first (at most ``max_seasons``).
    form : IntervalForm
        Point (quantile) or confidence-interval-of-the-mean form.
    slope : MapSlope
        Raw or kernel-smoothed MAP curve for the slope criterion.
    delta : float
        Slope criterion in percentage points.
    threshold_level : float
        One-sided level of the epidemic and post-epidemic thresholds.
    intensity_levels : tuple of float
        One-sided levels of the medium, high and very-high thresholds.
    pre_epidemic_values, post_epidemic_values, epidemic_values : tuple of float
        The pooled values behind each threshold (for audit and the methods box).
    notes : tuple of str
        Sentences about seasons skipped or thresholds left out.
    """

    available: bool
    reason: str
    epidemic_threshold: float | None
    post_epidemic_threshold: float | None
    medium_threshold: float | None
    high_threshold: float | None
    very_high_threshold: float | None
    periods: tuple[EpidemicPeriod, ...]
    n_per_season: int | None
    seasons_used: tuple[str, ...]
    form: IntervalForm
    slope: MapSlope
    delta: float
    threshold_level: float
    intensity_levels: tuple[float, float, float]
    pre_epidemic_values: tuple[float, ...] = ()
    post_epidemic_values: tuple[float, ...] = ()
    epidemic_values: tuple[float, ...] = ()
    notes: tuple[str, ...] = ()


def default_n_per_season(n_seasons: int, target: int = TARGET_POOLED_VALUES) -> int:
    """Return how many highest values MEM takes per season: max(1, round(target / seasons)).

    Python's ``round`` rounds half to even, like R (4 seasons -> 8, 12 -> 2).

    Parameters
    ----------
    n_seasons : int
        Number of seasons used, >= 1.
    target : int, default 30
        Approximate total number of pooled values, >= 1.

    Returns
    -------
    int
        Values per season.

    Raises
    ------
    ValueError
        If ``n_seasons`` or ``target`` is below 1.

    Examples
    --------
    >>> default_n_per_season(3), default_n_per_season(4), default_n_per_season(12)
    (10, 8, 2)
    """
    if n_seasons < 1:
        raise ValueError(f"n_seasons must be >= 1, got {n_seasons!r}")
    if target < 1:
        raise ValueError(f"target must be >= 1, got {target!r}")
    return max(1, round(target / n_seasons))


def _top(values: FloatArray, n: int) -> list[float]:
    return sorted(values.tolist(), reverse=True)[:n]


def _upper_limit(pool: FloatArray, level: float, form: IntervalForm) -> float:
    mean = float(pool.mean())
    sd = float(pool.std(ddof=1))
    if form is IntervalForm.POINT:
        return mean + float(stats.norm.ppf(level)) * sd
    if form is IntervalForm.CI:
        return mean + float(stats.norm.ppf(level)) * sd / math.sqrt(pool.size)
    return mean + float(stats.t.ppf(level, pool.size - 1)) * sd / math.sqrt(pool.size)


def mem_thresholds(
    past_seasons: SeasonsInput,
    *,
    delta: float = DEFAULT_DELTA,
    slope: MapSlope = MapSlope.RAW,
    form: IntervalForm | str = IntervalForm.POINT,
    n_per_season: int | None = None,
    max_seasons: int = MAX_MEM_SEASONS,
    min_seasons: int = MIN_MEM_SEASONS,
    threshold_level: float = DEFAULT_THRESHOLD_LEVEL,
    intensity_levels: tuple[float, float, float] = DEFAULT_INTENSITY_LEVELS,
) -> MemThresholds:
    """Compute Moving Epidemic Method thresholds from past seasons (Vega et al. 2013, 2015).

    For each of the (at most ``max_seasons``) most recent seasons: interpolate
    missing weeks, find the epidemic period (:func:`epidemic_period`), and take
    the ``n`` highest values of its pre-epidemic, post-epidemic and epidemic
    weeks (all of them when fewer exist). Pooled over seasons:

    - epidemic threshold = upper limit of the pre-epidemic pool at ``threshold_level``;
    - post-epidemic threshold = the same for the post-epidemic pool;
    - medium / high / very high = ``exp`` of the upper limit of ``log`` of the
      epidemic pool at levels 0.40 / 0.90 / 0.975.

    The upper limit is ``mean + z * SD`` (``form="point"``, default),
    ``mean + z * SD / sqrt(N)`` (``"ci"``) or with a t quantile (``"ci-t"``);
    SD with N - 1.

    Parameters
    ----------
    past_seasons : mapping of str to array_like, or sequence of array_like
        Weekly ILI% per past season (never the current season). Seasons may
        differ in length (e.g. one of 53 weeks).
    delta : float, default 2.8
        Slope criterion in percentage points.
    slope : MapSlope, default RAW
        Raw or kernel-smoothed MAP curve (see :class:`MapSlope`).
    form : IntervalForm or str, default "point"
        Interval form (see :class:`IntervalForm`).
    n_per_season : int or None, default None
        Values taken per season; None = ``max(1, round(30 / seasons used))``.
    max_seasons : int, default 10
        Most recent seasons used at most.
    min_seasons : int, default 2
        Fewest usable seasons for thresholds to be reported.
    threshold_level : float, default 0.95
        One-sided level of the epidemic and post-epidemic thresholds.
    intensity_levels : tuple of three floats, default (0.40, 0.90, 0.975)
        Increasing one-sided levels of the medium, high and very-high thresholds.

    Returns
    -------
    MemThresholds
        ``available`` False (thresholds None, reason given) with fewer than
        ``min_seasons`` usable seasons, fewer than 2 pre-epidemic or epidemic
        values, or no positive epidemic value.

    Raises
    ------
    ValueError
        If a season is malformed (not 1-D, negative or infinite values), a
        level is outside (0, 1), or a count parameter is below 1.

    Notes
    -----
    A season with no reported week or a total of 0 cannot have a MAP curve; it
    is skipped, counted as unusable and named in ``notes``. Missing weeks are
    interpolated linearly, never zero-filled. Non-positive epidemic values are
    left out of the log-scale pool. If the medium threshold is below the
    epidemic threshold, :func:`intensity_level` never returns ``LOW``.
    Sitrep reports MEM from 2 past seasons (the method's authors recommend 5 or
    more for stable values), while the baseline needs 3 (its definition).

    Examples
    --------
    >>> rise = [0.5] * 8 + [1.0, 2.0, 4.0, 6.0, 4.0, 2.0, 1.0] + [0.5] * 8
    >>> fall = [0.6] * 6 + [1.5, 3.0, 5.0, 3.0, 1.5] + [0.6] * 12
    >>> m = mem_thresholds({"2022-23": rise, "2023-24": fall}, n_per_season=2)
    >>> m.available, [(p.start_week, p.end_week) for p in m.periods]
    (True, [(9, 15), (7, 11)])
    >>> round(m.epidemic_threshold, 6)
    0.644966
    >>> mem_thresholds({"2023-24": fall}).reason
    'Epidemic thresholds are not available: 1 past season in the history, at least 2 are needed.'
    """
    form = IntervalForm(form)
    slope = MapSlope(slope)
    levels = _check_mem_settings(
        max_seasons, min_seasons, n_per_season, threshold_level, intensity_levels
    )
    notes: list[str] = []
    usable = _usable_seasons(_labelled(past_seasons), max_seasons, notes)
    frame = _MemFrame(
        tuple(label for label, _ in usable), form, slope, delta, threshold_level, levels, notes
    )
    if len(usable) < min_seasons:
        return frame.result(
            f"Epidemic thresholds are not available: {_seasons_phrase(len(usable))} in the "
            f"history, at least {min_seasons} are needed."
        )
    n = n_per_season if n_per_season is not None else default_n_per_season(len(usable))
    periods, pools = _pooled_values(usable, n, delta, slope)
    return _thresholds(frame, periods, n, pools)


def _check_mem_settings(
    max_seasons: int,
    min_seasons: int,
    n_per_season: int | None,
    threshold_level: float,
    intensity_levels: tuple[float, float, float],
) -> tuple[float, float, float]:
    """Raise on a parameter out of range; return the intensity levels as floats."""
    if max_seasons < 1 or min_seasons < 1:
        raise ValueError(
            f"max_seasons and min_seasons must be >= 1, got {max_seasons!r} and {min_seasons!r}"
        )
    if n_per_season is not None and n_per_season < 1:
        raise ValueError(f"n_per_season must be >= 1 or None, got {n_per_season!r}")
    levels = tuple(float(q) for q in intensity_levels)
    increasing = len(levels) == 3 and levels[0] < levels[1] < levels[2]
    if not increasing or not all(0 < q < 1 for q in levels):
        raise ValueError(
            f"intensity_levels must be three increasing levels in (0, 1), got {intensity_levels!r}"
        )
    if not 0 < threshold_level < 1:
        raise ValueError(f"threshold_level must be in (0, 1), got {threshold_level!r}")
    return (levels[0], levels[1], levels[2])


def _usable_seasons(
    seasons: list[tuple[str, FloatArray]], max_seasons: int, notes: list[str]
) -> list[tuple[str, FloatArray]]:
    """The seasons with a MAP curve, the most recent ``max_seasons``; each one left out noted."""
    usable: list[tuple[str, FloatArray]] = []
    for label, values in seasons:
        if np.isnan(values).all():
            notes.append(f"Season {label} was skipped: it has no reported week.")
        elif float(np.nansum(values)) <= 0:
            notes.append(f"Season {label} was skipped: its total is 0.")
        else:
            usable.append((label, values))
    if len(usable) > max_seasons:
        notes.append(
            f"Only the {max_seasons} most recent of {len(usable)} usable past seasons were used."
        )
        usable = usable[-max_seasons:]
    return usable


_Pools = tuple[tuple[float, ...], tuple[float, ...], tuple[float, ...]]


def _pooled_values(
    usable: list[tuple[str, FloatArray]], n: int, delta: float, slope: MapSlope
) -> tuple[tuple[EpidemicPeriod, ...], _Pools]:
    """Each season's epidemic period and the pooled n highest pre-, post- and epidemic values."""
    periods: list[EpidemicPeriod] = []
    pre: list[float] = []
    post: list[float] = []
    epi: list[float] = []
    for label, values in usable:
        period = epidemic_period(values, delta=delta, slope=slope, label=label)
        periods.append(period)
        filled = interpolate_missing(values)
        pre.extend(_top(filled[: period.start_week - 1], n))
        post.extend(_top(filled[period.end_week :], n))
        epi.extend(_top(filled[period.start_week - 1 : period.end_week], n))
    return tuple(periods), (tuple(pre), tuple(post), tuple(epi))


@dataclass(frozen=True)
class _MemFrame:
    """What every MEM result records, whether or not thresholds came out."""

    seasons_used: tuple[str, ...]
    form: IntervalForm
    slope: MapSlope
    delta: float
    threshold_level: float
    levels: tuple[float, float, float]
    notes: list[str]

    def result(
        self,
        reason: str,
        thresholds: tuple[float | None, ...] = (None,) * 5,
        periods: tuple[EpidemicPeriod, ...] = (),
        n: int | None = None,
        pools: _Pools = ((), (), ()),
    ) -> MemThresholds:
        return MemThresholds(
            available=not reason,
            reason=reason,
            epidemic_threshold=thresholds[0],
            post_epidemic_threshold=thresholds[1],
            medium_threshold=thresholds[2],
            high_threshold=thresholds[3],
            very_high_threshold=thresholds[4],
            periods=periods,
            n_per_season=n,
            seasons_used=self.seasons_used,
            form=self.form,
            slope=self.slope,
            delta=self.delta,
            threshold_level=self.threshold_level,
            intensity_levels=self.levels,
            pre_epidemic_values=pools[0],
            post_epidemic_values=pools[1],
            epidemic_values=pools[2],
            notes=tuple(self.notes),
        )


def _thresholds(
    frame: _MemFrame, periods: tuple[EpidemicPeriod, ...], n: int, pools: _Pools
) -> MemThresholds:
    """Epidemic, post-epidemic and intensity thresholds from the pooled values, or why not."""
    pre, post, epi = pools
    k = len(frame.seasons_used)
    notes = frame.notes
    if len(pre) < 2:
        return frame.result(
            f"Epidemic thresholds are not available: {len(pre)} pre-epidemic week value(s) in "
            f"the {k} seasons used, at least 2 are needed.",
            periods=periods,
            n=n,
            pools=pools,
        )
    positive = np.asarray([v for v in epi if v > 0])
    if len(positive) < len(epi):
        notes.append(
            f"{len(epi) - len(positive)} epidemic value(s) of 0 were left out of the "
            "intensity thresholds (log scale)."
        )
    if positive.size < 2:
        return frame.result(
            f"Epidemic thresholds are not available: {positive.size} positive epidemic-period "
            f"value(s) in the {k} seasons used, at least 2 are needed.",
            periods=periods,
            n=n,
            pools=pools,
        )
    epidemic = _upper_limit(np.asarray(pre), frame.threshold_level, frame.form)
    post_threshold: float | None = None
    if len(post) >= 2:
        post_threshold = _upper_limit(np.asarray(post), frame.threshold_level, frame.form)
    else:
        notes.append(
            f"The post-epidemic threshold is not available: {len(post)} post-epidemic week "
            "value(s), at least 2 are needed."
        )
    logs = np.log(positive)
    medium, high, very_high = (math.exp(_upper_limit(logs, q, frame.form)) for q in frame.levels)
    return frame.result("", (epidemic, post_threshold, medium, high, very_high), periods, n, pools)
