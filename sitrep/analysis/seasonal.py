"""Seasonal context of this week's ILI%: baselines, MEM thresholds, onset, intensity (pure).

Every function here takes plain numpy arrays of weekly ILI percent, one array per
season, aligned by *season week* (index 0 is the first week of the season window,
e.g. week 40). NaN marks a week with no data. Week numbers that these functions
*return or accept* (epidemic periods, onset, ``season_week``) are **1-based season
weeks**: 1 = first week of the season window, as in docs/methods.md sections 7.1 and 7.2.

Past seasons are given either as a mapping ``{label: array}`` (labels are sorted,
so use labels that sort chronologically, such as ``"2021-22"``) or as a sequence
of arrays ordered oldest first (labelled ``"1"``, ``"2"``, ... in that order).

Contents
--------
- Baseline (docs/methods.md 7.1): :func:`baseline_from_nonepidemic` (the declared rule),
  :func:`baseline_from_weeks` (any week selection), and the two laboratory rules
  :func:`non_influenza_weeks_by_share` and :func:`non_influenza_weeks_by_positivity`.
- Moving Epidemic Method (docs/methods.md 7.2): :func:`map_curve`, :func:`epidemic_period`,
  :func:`mem_thresholds`, :func:`interpolate_missing`.
- Prospective use: :func:`season_onset`, :func:`intensity_level`,
  :func:`same_week_past_seasons`.

No file I/O, no plotting, no printing.
"""

from __future__ import annotations

import enum
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from decimal import ROUND_HALF_UP, Decimal

import numpy as np
import numpy.typing as npt
from scipy import stats

__all__ = [
    "DEFAULT_DELTA",
    "DEFAULT_INTENSITY_LEVELS",
    "DEFAULT_THRESHOLD_LEVEL",
    "MAX_MEM_SEASONS",
    "MIN_BASELINE_SEASONS",
    "MIN_MEM_SEASONS",
    "TARGET_POOLED_VALUES",
    "Baseline",
    "EpidemicPeriod",
    "IntensityLevel",
    "IntervalForm",
    "MapSlope",
    "MemThresholds",
    "NonInfluenzaRule",
    "baseline_from_nonepidemic",
    "baseline_from_weeks",
    "default_n_per_season",
    "epidemic_period",
    "intensity_level",
    "interpolate_missing",
    "map_curve",
    "mem_thresholds",
    "non_influenza_weeks_by_positivity",
    "non_influenza_weeks_by_share",
    "round_half_up",
    "same_week_past_seasons",
    "season_onset",
]

FloatArray = npt.NDArray[np.float64]
BoolArray = npt.NDArray[np.bool_]
SeasonsInput = Mapping[str, npt.ArrayLike] | Sequence[npt.ArrayLike]

DEFAULT_DELTA = 2.8
"""MEM slope criterion: percentage points of MAP added by one more week (Vega et al. 2013)."""

MAX_MEM_SEASONS = 10
"""MEM uses at most this many of the most recent past seasons (reference-implementation default)."""

MIN_MEM_SEASONS = 2
"""Fewest usable past seasons for which MEM thresholds are reported (sitrep decision)."""

MIN_BASELINE_SEASONS = 3
"""The baseline is defined on the previous three seasons (docs/methods.md 7.1); fewer -> not available."""

TARGET_POOLED_VALUES = 30
"""MEM pools about this many values: n per season = max(1, round(30 / seasons))."""

DEFAULT_THRESHOLD_LEVEL = 0.95
"""One-sided level of the pre- and post-epidemic thresholds."""

DEFAULT_INTENSITY_LEVELS = (0.40, 0.90, 0.975)
"""One-sided levels of the medium, high and very-high intensity thresholds (Vega et al. 2015)."""

_TIE_RTOL = 1e-9


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


class MapSlope(enum.Enum):
    """Which MAP curve the slope criterion is applied to (docs/methods.md 7.2 step 3).

    ``RAW`` (default) differences the MAP curve itself, as the paper describes.
    ``SMOOTHED`` first smooths the MAP curve, as the reference implementation
    does: local-linear regression with a normal kernel of standard deviation 1
    week (R ``sm::sm.regression(h = 1)``), negative values set to 0.
    """

    RAW = "raw MAP curve"
    SMOOTHED = "kernel-smoothed MAP curve"


class NonInfluenzaRule(enum.Enum):
    """Which weeks of past seasons count as "non-influenza weeks" for the baseline."""

    OUTSIDE_MEM_EPIDEMIC = "weeks outside each season's MEM epidemic period"
    SHARE_OF_SEASON_POSITIVES = (
        "runs of at least 2 weeks each with less than 2% of the season's positive specimens"
    )
    POSITIVITY = "weeks with less than 10% of specimens positive for influenza"
    GIVEN = "weeks selected by the caller"


class IntensityLevel(enum.Enum):
    """Intensity of this week's ILI% against the MEM thresholds; ``.value`` is report text."""

    NOT_AVAILABLE = "not available"
    BELOW_EPIDEMIC_THRESHOLD = "below epidemic threshold"
    LOW = "low"
    MEDIUM = "medium"
    HIGH = "high"
    VERY_HIGH = "very high"


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


@dataclass(frozen=True)
class Baseline:
    """A seasonal baseline: mean + k SD of ILI% in non-influenza weeks of past seasons.

    Attributes
    ----------
    available : bool
        True when the baseline was computed.
    reason : str
        Empty when available; otherwise one sentence for the report.
    value : float or None
        Unrounded baseline, mean + ``sd_multiplier`` * SD.
    rounded : float or None
        ``value`` rounded half-up to 1 decimal, as baselines are published.
    mean, sd : float or None
        Mean and standard deviation (with ``ddof``) of the pooled weeks.
    n_weeks : int
        Number of pooled (non-missing) week values.
    seasons_used : tuple of str
        Labels of the seasons pooled, oldest first.
    weeks_by_season : tuple of tuple of int
        1-based season weeks pooled from each season in ``seasons_used``.
    rule : NonInfluenzaRule
        How the non-influenza weeks were chosen.
    sd_multiplier : float
        k in mean + k SD.
    ddof : int
        Delta degrees of freedom of the SD (1: n - 1 denominator).
    """

    available: bool
    reason: str
    value: float | None
    rounded: float | None
    mean: float | None
    sd: float | None
    n_weeks: int
    seasons_used: tuple[str, ...]
    weeks_by_season: tuple[tuple[int, ...], ...]
    rule: NonInfluenzaRule
    sd_multiplier: float
    ddof: int


# --------------------------------------------------------------------------- helpers


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


# --------------------------------------------------------------------------- baseline


def non_influenza_weeks_by_share(
    positives: npt.ArrayLike, *, max_share: float = 0.02, min_run: int = 2
) -> BoolArray:
    """Mark the non-influenza weeks of one season by the "2%-of-season-positives runs" rule.

    A week is non-influenza when it belongs to a run of at least ``min_run``
    consecutive weeks in each of which the week's positive specimens are
    strictly less than ``max_share`` of the season's total positives
    (docs/methods.md 7.1, current methods text of the national baseline).

    Parameters
    ----------
    positives : array_like of float, shape (w,)
        Positive influenza specimens per season week. NaN = not reported; such
        a week is never non-influenza and breaks a run.
    max_share : float, default 0.02
        Share of the season total below which a week qualifies, in (0, 1].
    min_run : int, default 2
        Shortest qualifying run, at least 1.

    Returns
    -------
    numpy.ndarray of bool, shape (w,)
        True for non-influenza weeks.

    Raises
    ------
    ValueError
        If ``positives`` is not 1-D, has a negative value, sums to 0, or
        ``max_share`` / ``min_run`` are out of range.

    Notes
    -----
    "< 2%" is strict, as in the source wording.

    Examples
    --------
    >>> non_influenza_weeks_by_share([2, 3, 6, 15, 60, 140, 180, 120, 50, 20, 6, 3]).astype(int)
    array([1, 1, 1, 0, 0, 0, 0, 0, 0, 0, 1, 1])
    """
    pos = np.asarray(positives, dtype=np.float64)
    if pos.ndim != 1:
        raise ValueError(f"positives must be 1-D, got shape {pos.shape}")
    if not 0 < max_share <= 1:
        raise ValueError(f"max_share must be in (0, 1], got {max_share!r}")
    if min_run < 1:
        raise ValueError(f"min_run must be >= 1, got {min_run!r}")
    if np.any(pos[~np.isnan(pos)] < 0):
        raise ValueError(f"positives must be >= 0, got min {np.nanmin(pos)!r}")
    total = float(np.nansum(pos))
    if total <= 0:
        raise ValueError(f"the season has no positive specimens (total {total!r})")
    low = ~np.isnan(pos) & (pos < max_share * total)
    out = np.zeros(pos.shape, dtype=np.bool_)
    start = None
    for i, flag in enumerate([*low.tolist(), False]):
        if flag and start is None:
            start = i
        elif not flag and start is not None:
            if i - start >= min_run:
                out[start:i] = True
            start = None
    return out


def non_influenza_weeks_by_positivity(
    positives: npt.ArrayLike, tested: npt.ArrayLike, *, max_fraction: float = 0.10
) -> BoolArray:
    """Mark the non-influenza weeks of one season by the "< 10% positive" rule.

    A week is non-influenza when positives / tested is strictly less than
    ``max_fraction`` (docs/methods.md 7.1, older footnotes of the national baseline).

    Parameters
    ----------
    positives, tested : array_like of float, shape (w,)
        Positive and tested specimens per season week. A week with NaN in
        either, or with no specimens tested, is not non-influenza.
    max_fraction : float, default 0.10
        Positivity below which a week qualifies, in (0, 1].

    Returns
    -------
    numpy.ndarray of bool, shape (w,)
        True for non-influenza weeks.

    Raises
    ------
    ValueError
        If the arrays are not 1-D of equal length, positives exceed tested, a
        value is negative, or ``max_fraction`` is out of range.

    Examples
    --------
    >>> non_influenza_weeks_by_positivity([2, 60, 20], [400, 400, 400]).astype(int)
    array([1, 0, 1])
    """
    pos = np.asarray(positives, dtype=np.float64)
    tst = np.asarray(tested, dtype=np.float64)
    if pos.ndim != 1 or pos.shape != tst.shape:
        raise ValueError(
            f"positives and tested must be 1-D of equal length, got shapes {pos.shape} "
            f"and {tst.shape}"
        )
    if not 0 < max_fraction <= 1:
        raise ValueError(f"max_fraction must be in (0, 1], got {max_fraction!r}")
    ok = ~np.isnan(pos) & ~np.isnan(tst)
    if np.any(pos[ok] < 0) or np.any(tst[ok] < 0):
        raise ValueError("positives and tested must be >= 0")
    if np.any(pos[ok] > tst[ok]):
        raise ValueError("positives exceed specimens tested in at least one week")
    ok &= tst > 0
    out = np.zeros(pos.shape, dtype=np.bool_)
    out[ok] = pos[ok] < max_fraction * tst[ok]
    return out


def baseline_from_weeks(
    past_seasons: SeasonsInput,
    non_influenza_weeks: Mapping[str, npt.ArrayLike] | Sequence[npt.ArrayLike],
    *,
    rule: NonInfluenzaRule = NonInfluenzaRule.GIVEN,
    sd_multiplier: float = 2.0,
    ddof: int = 1,
    n_seasons: int = MIN_BASELINE_SEASONS,
) -> Baseline:
    """Baseline = mean + k SD of ILI% pooled over given non-influenza weeks of past seasons.

    The last ``n_seasons`` seasons (most recent) are used. In each, the weeks
    marked True in ``non_influenza_weeks`` and not missing are pooled across
    seasons, and the baseline is ``mean + sd_multiplier * SD`` with the SD's
    denominator ``N - ddof`` (docs/methods.md 7.1).

    Parameters
    ----------
    past_seasons : mapping of str to array_like, or sequence of array_like
        Weekly ILI% per past season (see the module docstring for ordering).
    non_influenza_weeks : mapping or sequence of array_like of bool
        Same keys (or order) and lengths as ``past_seasons``; True marks a
        non-influenza week.
    rule : NonInfluenzaRule, default GIVEN
        Recorded in the result for the methods box.
    sd_multiplier : float, default 2.0
        k in mean + k SD, >= 0.
    ddof : int, default 1
        0 or 1: SD with denominator N or N - 1.
    n_seasons : int, default 3
        Number of most recent seasons pooled; with fewer in the history the
        baseline is not available.

    Returns
    -------
    Baseline
        With ``available`` False, None values and a reason when there are fewer
        than ``n_seasons`` seasons or fewer than ``ddof + 1`` pooled weeks.

    Raises
    ------
    ValueError
        If the week masks do not match the seasons, or a parameter is out of range.

    Examples
    --------
    >>> seasons = {"s1": [1.0, 1.2, 4.0], "s2": [0.8, 1.0, 5.0], "s3": [1.0, 1.0, 3.0]}
    >>> masks = {k: [True, True, False] for k in seasons}
    >>> b = baseline_from_weeks(seasons, masks)
    >>> round(b.value, 6), b.rounded, b.n_weeks
    (1.252982, 1.3, 6)
    """
    seasons = _labelled(past_seasons)
    if isinstance(past_seasons, Mapping):
        if not isinstance(non_influenza_weeks, Mapping):
            raise ValueError("non_influenza_weeks must be a mapping when past_seasons is one")
        missing = sorted(set(past_seasons) - set(non_influenza_weeks))
        if missing:
            raise ValueError(f"non_influenza_weeks lacks the seasons {missing}")
        masks = [np.asarray(non_influenza_weeks[label], dtype=np.bool_) for label, _ in seasons]
    else:
        if isinstance(non_influenza_weeks, Mapping):
            raise ValueError("non_influenza_weeks must be a sequence when past_seasons is one")
        if len(non_influenza_weeks) != len(seasons):
            raise ValueError(
                f"got {len(non_influenza_weeks)} week masks for {len(seasons)} seasons"
            )
        masks = [np.asarray(m, dtype=np.bool_) for m in non_influenza_weeks]
    return _baseline(seasons, masks, rule, sd_multiplier, ddof, n_seasons)


def _baseline(
    seasons: list[tuple[str, FloatArray]],
    masks: list[BoolArray],
    rule: NonInfluenzaRule,
    sd_multiplier: float,
    ddof: int,
    n_seasons: int,
) -> Baseline:
    if sd_multiplier < 0:
        raise ValueError(f"sd_multiplier must be >= 0, got {sd_multiplier!r}")
    if ddof not in (0, 1):
        raise ValueError(f"ddof must be 0 or 1, got {ddof!r}")
    if n_seasons < 1:
        raise ValueError(f"n_seasons must be >= 1, got {n_seasons!r}")
    for (label, values), mask in zip(seasons, masks, strict=True):
        if mask.shape != values.shape:
            raise ValueError(
                f"week mask of season {label!r} has shape {mask.shape}, "
                f"the season has {values.shape}"
            )

    def unavailable(reason: str, used: tuple[str, ...] = ()) -> Baseline:
        return Baseline(
            False, reason, None, None, None, None, 0, used, (), rule, sd_multiplier, ddof
        )

    if len(seasons) < n_seasons:
        return unavailable(
            f"The baseline is not available: {_seasons_phrase(len(seasons))} in the history, "
            f"{n_seasons} are needed."
        )
    chosen = list(zip(seasons, masks, strict=True))[-n_seasons:]
    used = tuple(label for (label, _), _ in chosen)
    pooled: list[float] = []
    weeks: list[tuple[int, ...]] = []
    for (_, values), mask in chosen:
        keep = mask & ~np.isnan(values)
        pooled.extend(values[keep].tolist())
        weeks.append(tuple(int(i) + 1 for i in np.flatnonzero(keep)))
    if len(pooled) < 2:
        return unavailable(
            f"The baseline is not available: only {len(pooled)} non-influenza week(s) with "
            f"data in the last {n_seasons} seasons, at least 2 are needed.",
            used,
        )
    arr = np.asarray(pooled)
    mean = float(arr.mean())
    sd = float(arr.std(ddof=ddof))
    value = mean + sd_multiplier * sd
    return Baseline(
        True,
        "",
        value,
        round_half_up(value, 1),
        mean,
        sd,
        arr.size,
        used,
        tuple(weeks),
        rule,
        sd_multiplier,
        ddof,
    )


def baseline_from_nonepidemic(
    past_seasons: SeasonsInput,
    epidemic_periods: Sequence[EpidemicPeriod],
    *,
    sd_multiplier: float = 2.0,
    ddof: int = 1,
    n_seasons: int = MIN_BASELINE_SEASONS,
) -> Baseline:
    """Baseline = mean + 2 SD of ILI% in the weeks outside each past season's MEM epidemic.

    This is sitrep's declared rule for the national-baseline method (docs/methods.md 7.1)
    when no laboratory data are available: the non-influenza weeks of each of the
    previous ``n_seasons`` seasons are the weeks *before and after* that season's
    MEM epidemic period (:func:`epidemic_period`, usually taken from
    ``mem_thresholds(...).periods``). The values are pooled across seasons.

    Parameters
    ----------
    past_seasons : mapping of str to array_like, or sequence of array_like
        Weekly ILI% per past season (see the module docstring).
    epidemic_periods : sequence of EpidemicPeriod
        At least one period per season used, matched by ``EpidemicPeriod.season``
        to the season labels; extra periods are ignored.
    sd_multiplier : float, default 2.0
        k in mean + k SD.
    ddof : int, default 1
        SD denominator N - ddof (1 = sample SD, sitrep's default; 0 = population SD).
    n_seasons : int, default 3
        Number of most recent seasons pooled; fewer -> not available.

    Returns
    -------
    Baseline
        ``rule`` is ``NonInfluenzaRule.OUTSIDE_MEM_EPIDEMIC``.

    Raises
    ------
    ValueError
        If a season used has no epidemic period, a period does not fit its
        season, or a parameter is out of range.

    Notes
    -----
    Why this rule: both published definitions of a non-influenza week (< 10%
    specimens positive; runs of >= 2 weeks each with < 2% of the season's
    positives) need laboratory counts that an ILI-only extract lacks. The MEM
    epidemic period is the shortest window that holds the bulk of each season's
    ILI (the slope criterion stops adding weeks once a week adds < 2.8% of the
    season total), so the weeks outside it are the syndromic counterpart of
    "weeks with little influenza". It is derived from the same ILI series and is
    reproducible without extra data. It is not identical to a laboratory rule:
    weeks just outside the period may still carry some influenza, which makes
    this baseline somewhat higher than a laboratory-based one. When positives
    are available, use :func:`baseline_from_weeks` with
    :func:`non_influenza_weeks_by_share` (docs/methods.md 7.1 worked example).

    Examples
    --------
    >>> seasons = {"a": [1.0, 1.2, 5.0, 6.0, 1.0], "b": [0.8, 4.0, 7.0, 1.1, 0.9],
    ...            "c": [1.0, 1.0, 3.0, 5.0, 1.2]}
    >>> periods = [EpidemicPeriod("a", 3, 4, 2, 0.0, 5), EpidemicPeriod("b", 2, 3, 2, 0.0, 5),
    ...            EpidemicPeriod("c", 3, 4, 2, 0.0, 5)]
    >>> b = baseline_from_nonepidemic(seasons, periods)
    >>> b.weeks_by_season, b.rounded
    (((1, 2, 5), (1, 4, 5), (1, 2, 5)), 1.3)
    """
    seasons = _labelled(past_seasons)
    by_label = {p.season: p for p in epidemic_periods}
    chosen = {label for label, _ in seasons[-n_seasons:]} if n_seasons >= 1 else set()
    masks: list[BoolArray] = []
    for label, values in seasons:
        mask = np.zeros(values.shape, dtype=np.bool_)
        if label in chosen:
            period = by_label.get(label)
            if period is None:
                raise ValueError(
                    f"no epidemic period for season {label!r}; periods given for {sorted(by_label)}"
                )
            if not 1 <= period.start_week <= period.end_week <= values.size:
                raise ValueError(
                    f"epidemic period weeks {period.start_week}-{period.end_week} do not fit "
                    f"season {label!r} of {values.size} weeks"
                )
            mask[:] = True
            mask[period.start_week - 1 : period.end_week] = False
        masks.append(mask)
    return _baseline(
        seasons, masks, NonInfluenzaRule.OUTSIDE_MEM_EPIDEMIC, sd_multiplier, ddof, n_seasons
    )


# --------------------------------------------------------------------------- MEM


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
    lv3 = (levels[0], levels[1], levels[2])

    seasons = _labelled(past_seasons)
    notes: list[str] = []
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

    def result(
        reason: str,
        thresholds: tuple[float | None, ...] = (None,) * 5,
        periods: tuple[EpidemicPeriod, ...] = (),
        n: int | None = None,
        pools: tuple[tuple[float, ...], ...] = ((), (), ()),
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
            seasons_used=tuple(label for label, _ in usable),
            form=form,
            slope=slope,
            delta=delta,
            threshold_level=threshold_level,
            intensity_levels=lv3,
            pre_epidemic_values=pools[0],
            post_epidemic_values=pools[1],
            epidemic_values=pools[2],
            notes=tuple(notes),
        )

    if len(usable) < min_seasons:
        return result(
            f"Epidemic thresholds are not available: {_seasons_phrase(len(usable))} in the "
            f"history, at least {min_seasons} are needed."
        )

    n = n_per_season if n_per_season is not None else default_n_per_season(len(usable))
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
    pools = (tuple(pre), tuple(post), tuple(epi))
    k = len(usable)

    if len(pre) < 2:
        return result(
            f"Epidemic thresholds are not available: {len(pre)} pre-epidemic week value(s) in "
            f"the {k} seasons used, at least 2 are needed.",
            periods=tuple(periods),
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
        return result(
            f"Epidemic thresholds are not available: {positive.size} positive epidemic-period "
            f"value(s) in the {k} seasons used, at least 2 are needed.",
            periods=tuple(periods),
            n=n,
            pools=pools,
        )
    epidemic = _upper_limit(np.asarray(pre), threshold_level, form)
    post_threshold: float | None = None
    if len(post) >= 2:
        post_threshold = _upper_limit(np.asarray(post), threshold_level, form)
    else:
        notes.append(
            f"The post-epidemic threshold is not available: {len(post)} post-epidemic week "
            "value(s), at least 2 are needed."
        )
    logs = np.log(positive)
    medium, high, very_high = (math.exp(_upper_limit(logs, q, form)) for q in lv3)
    return result(
        "",
        (epidemic, post_threshold, medium, high, very_high),
        tuple(periods),
        n,
        pools,
    )


# --------------------------------------------------------------------------- prospective


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
