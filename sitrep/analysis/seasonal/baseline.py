"""Seasonal baseline: mean + k SD of ILI% in the non-influenza weeks of past seasons (docs/methods.md 7.1)."""

from __future__ import annotations

import enum
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from sitrep.analysis.seasonal.period import EpidemicPeriod
from sitrep.analysis.seasonal.series import (
    BoolArray,
    FloatArray,
    SeasonsInput,
    _labelled,
    _seasons_phrase,
    round_half_up,
)

__all__ = [
    "MIN_BASELINE_SEASONS",
    "Baseline",
    "NonInfluenzaRule",
    "baseline_from_nonepidemic",
    "baseline_from_weeks",
    "non_influenza_weeks_by_positivity",
    "non_influenza_weeks_by_share",
]

MIN_BASELINE_SEASONS = 3
"""The baseline is defined on the previous three seasons (docs/methods.md 7.1); fewer -> not available."""


class NonInfluenzaRule(enum.Enum):
    """Which weeks of past seasons count as "non-influenza weeks" for the baseline."""

    OUTSIDE_MEM_EPIDEMIC = "weeks outside each season's MEM epidemic period"
    SHARE_OF_SEASON_POSITIVES = (
        "runs of at least 2 weeks each with less than 2% of the season's positive specimens"
    )
    POSITIVITY = "weeks with less than 10% of specimens positive for influenza"
    GIVEN = "weeks selected by the caller"


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
