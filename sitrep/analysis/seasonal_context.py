"""The week read against the season: pooled curves, baseline, thresholds, onset, flags (pure).

Adapts the count tables to the array functions of :mod:`sitrep.analysis.seasonal`
and :mod:`sitrep.analysis.aberration`:

- the jurisdiction's weekly ILI% is the pooled ratio (sum of ILI visits over
  sum of all visits) of the districts that reported that week;
- seasons are keyed by their label (e.g. ``2025-26``) and aligned by season
  week (1 = the configured start week), so a week 53 only lengthens its season;
- past seasons are those before the current one; the current season's weeks
  come from this week's table (revised values), falling back to the history;
- district aberration flags use each district's own ILI% series across the
  history and this week's table.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pandas as pd

from sitrep.analysis import aberration, seasonal
from sitrep.config import SeasonalSettings
from sitrep.model import CountTable
from sitrep.weeks import EpiWeek, season_of

__all__ = ["SeasonalContext", "pooled_by_week", "seasonal_context"]

FloatArray = np.ndarray


@dataclasses.dataclass(frozen=True, eq=False)
class SeasonalContext:
    """This week against its season and past seasons."""

    season_label: str
    season_week: int
    current_curve: tuple[tuple[int, float], ...]
    """(season week, pooled ILI%) of the current season up to the report week."""
    past_curves: tuple[tuple[str, tuple[float, ...]], ...]
    """(season label, pooled ILI% by season week) for each past season, oldest first."""
    baseline: float | None
    baseline_note: str
    epidemic_threshold: float | None
    post_threshold: float | None
    medium: float | None
    high: float | None
    very_high: float | None
    thresholds_available: bool
    thresholds_reason: str
    intensity: str
    onset_week: EpiWeek | None
    same_week_past: tuple[tuple[str, float | None], ...]
    season_peak: tuple[EpiWeek, float] | None
    district_flags: dict[str, str]
    method_note: str
    mem: seasonal.MemThresholds | None = None
    window_end_week: int = 0
    """Last calendar week of the season window the thresholds were computed on (0: the whole season)."""
    threshold_band: tuple[float, float] | None = None
    """(lowest, highest) epidemic threshold over the configured window and the whole season; None
    when only one is available or they agree."""
    baseline_seasons_used: int = 0
    baseline_weeks: int = 0
    previous_visits: tuple[int, ...] = ()
    """All visits (pooled) of up to 8 weeks before the report week, oldest first (for completeness)."""


def pooled_by_week(frame: pd.DataFrame) -> pd.DataFrame:
    """Pooled ILI% per week: columns week, ili_visits, total_visits, pct (weeks sorted)."""
    week = frame["week"]
    if hasattr(week, "cat"):
        # group on the categorical's integer codes: hashing EpiWeek objects row by row is slow
        codes = week.cat.codes
        sums = frame[["ili_visits", "total_visits"]].groupby(codes.to_numpy(), sort=True).sum()
        grouped = sums.reset_index(drop=True)
        grouped.insert(0, "week", [week.cat.categories[c] for c in sums.index])
        grouped = grouped.sort_values("week", kind="stable").reset_index(drop=True)
    else:
        grouped = (
            frame.groupby("week", sort=True)[["ili_visits", "total_visits"]].sum().reset_index()
        )
    total = grouped["total_visits"].astype(float)
    grouped["pct"] = np.where(
        total > 0, 100.0 * grouped["ili_visits"] / total.where(total > 0, 1.0), np.nan
    )
    return grouped


def _combined(history: CountTable | None, current: CountTable) -> pd.DataFrame:
    """History rows for weeks the current table lacks, plus the current table's rows."""
    frames = [current.frame]
    if history is not None:
        have = set(current.frame["week"])
        frames.insert(0, history.frame[~history.frame["week"].isin(have)])
    return pd.concat(frames, ignore_index=True)


def seasonal_context(
    history: CountTable | None,
    current: CountTable,
    week: EpiWeek,
    settings: SeasonalSettings,
    *,
    season_start_week: int = 40,
) -> SeasonalContext:
    """Compute the seasonal context of ``week`` (see the module docstring)."""
    rows = _combined(history, current)
    rows = rows[rows["week"] <= week]
    pooled = pooled_by_week(rows)
    season_label, season_week = season_of(week, season_start_week)
    by_season, past, windowed = _season_arrays(pooled, season_label, season_start_week, settings)
    current_values = by_season.get(season_label, {})
    curve = tuple((i, current_values[i]) for i in sorted(current_values) if i <= season_week)
    this_pct = current_values.get(season_week, math.nan)
    mem, band = _thresholds(past, windowed, settings)
    available = bool(mem and mem.available)
    reason = (
        mem.reason
        if mem is not None
        else ("Epidemic thresholds are not available: the history holds no past season.")
    )
    base = _baseline(past, settings)
    onset = None
    if available and mem is not None and mem.epidemic_threshold is not None:
        series = np.array(
            [current_values.get(i, np.nan) for i in range(1, season_week + 1)], dtype=float
        )
        start = seasonal.season_onset(series, mem.epidemic_threshold, k=settings.onset_weeks)
        if start is not None:
            onset = week - (season_week - start)
    intensity = (
        seasonal.intensity_level(this_pct, mem).value if mem is not None else "not available"
    )
    shown = mem if available else None
    return SeasonalContext(
        season_label=season_label,
        season_week=season_week,
        current_curve=curve,
        past_curves=tuple((k, tuple(float(x) for x in v)) for k, v in past.items()),
        baseline=base.value,
        baseline_note=base.note,
        epidemic_threshold=shown.epidemic_threshold if shown else None,
        post_threshold=shown.post_epidemic_threshold if shown else None,
        medium=shown.medium_threshold if shown else None,
        high=shown.high_threshold if shown else None,
        very_high=shown.very_high_threshold if shown else None,
        thresholds_available=available,
        thresholds_reason=reason,
        intensity=intensity,
        onset_week=onset,
        same_week_past=tuple(seasonal.same_week_past_seasons(past, season_week) if past else ()),
        season_peak=_season_peak(curve, week, season_week),
        district_flags=_district_flags(rows, week, settings),
        method_note=_method_note(settings, mem, base.note),
        mem=mem,
        window_end_week=settings.mem_window_end_week,
        threshold_band=band,
        baseline_seasons_used=base.seasons_used,
        baseline_weeks=base.weeks,
        previous_visits=tuple(
            int(v) for w, v in zip(pooled["week"], pooled["total_visits"], strict=True) if w < week
        )[-8:],
    )


def _season_arrays(
    pooled: pd.DataFrame, season_label: str, season_start_week: int, settings: SeasonalSettings
) -> tuple[dict[str, dict[int, float]], dict[str, FloatArray], dict[str, FloatArray]]:
    """Pooled ILI% by season and season week; the past seasons as arrays, whole and windowed."""
    by_season: dict[str, dict[int, float]] = {}
    calendar: dict[str, dict[int, int]] = {}
    for w, pct in zip(pooled["week"], pooled["pct"], strict=True):
        label, index = season_of(w, season_start_week)
        by_season.setdefault(label, {})[index] = float(pct)
        calendar.setdefault(label, {})[index] = w.week
    past: dict[str, FloatArray] = {}
    for label in sorted(by_season):
        if label >= season_label:
            continue
        values = by_season[label]
        length = max(values)
        past[label] = np.array([values.get(i, np.nan) for i in range(1, length + 1)], dtype=float)
    windowed = {
        k: v[: _window_length(calendar[k], season_start_week, settings.mem_window_end_week, len(v))]
        for k, v in past.items()
    }
    return by_season, past, windowed


def _thresholds(
    past: dict[str, FloatArray], windowed: dict[str, FloatArray], settings: SeasonalSettings
) -> tuple[seasonal.MemThresholds | None, tuple[float, float] | None]:
    """MEM thresholds on the season window, and the band between them and the whole season's."""
    if not past:
        return None, None
    mem = seasonal.mem_thresholds(
        windowed,
        delta=settings.mem_delta,
        form=settings.mem_form,
        max_seasons=settings.mem_max_seasons,
    )
    if not (mem.available and mem.epidemic_threshold is not None and settings.mem_window_end_week):
        return mem, None
    whole = seasonal.mem_thresholds(
        past,
        delta=settings.mem_delta,
        form=settings.mem_form,
        max_seasons=settings.mem_max_seasons,
    )
    if whole.available and whole.epidemic_threshold is not None:
        pair = sorted((float(mem.epidemic_threshold), float(whole.epidemic_threshold)))
        if pair[1] - pair[0] > 1e-9:
            return mem, (pair[0], pair[1])
    return mem, None


@dataclasses.dataclass(frozen=True)
class _BaselineNote:
    value: float | None
    note: str
    seasons_used: int = 0
    weeks: int = 0


def _baseline(past: dict[str, FloatArray], settings: SeasonalSettings) -> _BaselineNote:
    """The seasonal baseline outside the past seasons' epidemic periods, with its methods note."""
    if not past:
        return _BaselineNote(None, "not available: the history holds no past season")
    periods = [
        seasonal.epidemic_period(v, delta=settings.mem_delta, label=k) for k, v in past.items()
    ]
    base = seasonal.baseline_from_nonepidemic(
        past,
        periods,
        sd_multiplier=settings.baseline_sd,
        n_seasons=settings.baseline_seasons,
    )
    if not (base.available and base.value is not None):
        return _BaselineNote(None, base.reason)
    note = (
        f"mean + {settings.baseline_sd:g} SD of ILI% in the weeks outside each of the last "
        f"{len(base.seasons_used)} seasons' epidemic periods ({base.n_weeks} weeks)"
    )
    return _BaselineNote(float(base.value), note, len(base.seasons_used), int(base.n_weeks))


def _season_peak(
    curve: tuple[tuple[int, float], ...], week: EpiWeek, season_week: int
) -> tuple[EpiWeek, float] | None:
    """The week and ILI% of the season's highest week so far (the earliest on a tie)."""
    if not curve:
        return None
    best = max(curve, key=lambda item: (item[1] if math.isfinite(item[1]) else -1.0, -item[0]))
    if not math.isfinite(best[1]):
        return None
    return (week - (season_week - best[0]), best[1])


def _window_length(calendar: dict[int, int], start: int, end: int, length: int) -> int:
    """Season weeks 1..L kept by the window from calendar week ``start`` to ``end`` (0: all).

    The window runs from the season's first week through the first later week
    numbered ``end`` (wrapping past week 52 or 53 when ``end < start``); weeks
    missing from the pooled series are counted by position.
    """
    if not end:
        return length
    for index in range(1, length + 1):
        week = calendar.get(index)
        if week is None:
            continue
        if week == end:
            return index
    # the season's data stops before the window's last week: keep it all
    return length


def _district_flags(
    rows: pd.DataFrame, week: EpiWeek, settings: SeasonalSettings
) -> dict[str, str]:
    """'C1', 'C2', 'C3' alarms per district for ``week`` (empty string when none)."""
    recent_weeks = [week - k for k in range(11, -1, -1)]
    sub = rows[rows["week"].isin(recent_weeks)]
    if sub.empty:
        return {}
    total = sub["total_visits"].astype(float)
    pct = np.where(total > 0, 100.0 * sub["ili_visits"] / total.where(total > 0, 1.0), np.nan)
    wide = (
        pd.DataFrame({"district_id": sub["district_id"], "week": sub["week"], "pct": pct})
        .pivot_table(index="district_id", columns="week", values="pct", aggfunc="first")
        .reindex(columns=recent_weeks)
        .sort_index()
    )
    result = aberration.aberration_this_week(
        wide.to_numpy(dtype=float), sd_floor=settings.aberration_sd_floor_pp
    )
    flags = {}
    for i, district in enumerate(wide.index):
        names = [s.name for s in (result.c1, result.c2, result.c3) if bool(s.alarms[i])]
        flags[str(district)] = ", ".join(names)
    return flags


def _method_note(
    settings: SeasonalSettings, mem: seasonal.MemThresholds | None, baseline_note: str
) -> str:
    form = (
        "mean + z·SD of the pooled values (point form)"
        if settings.mem_form == "point"
        else "upper limit of the confidence interval of the mean"
    )
    text = (
        f"Moving Epidemic Method (Vega et al. 2013; intensity levels Vega et al. 2015) on the pooled weekly ILI% of up to "
        f"{settings.mem_max_seasons} past seasons: epidemic periods by the maximum accumulated rates percentage with slope "
        f"criterion δ = {settings.mem_delta:g}; epidemic threshold from the highest pre-epidemic values, intensity thresholds "
        f"(medium, high, very high at the 40%, 90% and 97.5% levels) from the highest epidemic values on the log scale, "
        f"{form}. Onset: first of {settings.onset_weeks} consecutive weeks at or above the epidemic threshold. "
        f"Baseline: {baseline_note or 'not available'} (without laboratory data, non-influenza weeks are the weeks outside "
        f"each season's epidemic period). District flags: C1, C2 and C3 aberration statistics (Hutwagner et al. 2003) "
        f"applied to weekly ILI%, baseline SD floored at {settings.aberration_sd_floor_pp:g} percentage points."
    )
    if mem is not None and mem.available:
        text += f" Seasons used: {', '.join(mem.seasons_used)}."
    return text
