"""Seasonal context of this week's ILI%: baselines, MEM thresholds, onset, intensity (pure).

Every function here takes plain numpy arrays of weekly ILI percent, one array per
season, aligned by *season week* (index 0 is the first week of the season window,
e.g. week 40). NaN marks a week with no data. Week numbers that these functions
*return or accept* (epidemic periods, onset, ``season_week``) are **1-based season
weeks**: 1 = first week of the season window, as in docs/methods.md sections 7.1 and 7.2.

Past seasons are given either as a mapping ``{label: array}`` (labels are sorted,
so use labels that sort chronologically, such as ``"2021-22"``) or as a sequence
of arrays ordered oldest first (labelled ``"1"``, ``"2"``, ... in that order).

Modules
-------
- :mod:`.baseline` (docs/methods.md 7.1): :func:`baseline_from_nonepidemic` (the declared rule),
  :func:`baseline_from_weeks` (any week selection), and the two laboratory rules
  :func:`non_influenza_weeks_by_share` and :func:`non_influenza_weeks_by_positivity`.
- the Moving Epidemic Method (docs/methods.md 7.2): :mod:`.period` (:func:`map_curve`,
  :func:`epidemic_period`) and :mod:`.mem` (:func:`mem_thresholds`).
- :mod:`.series`, what they share: :func:`interpolate_missing`, :func:`round_half_up`.
- :mod:`.prospective`: :func:`season_onset`, :func:`intensity_level`,
  :func:`same_week_past_seasons`.

No file I/O, no plotting, no printing.
"""

from sitrep.analysis.seasonal.baseline import (
    MIN_BASELINE_SEASONS,
    Baseline,
    NonInfluenzaRule,
    baseline_from_nonepidemic,
    baseline_from_weeks,
    non_influenza_weeks_by_positivity,
    non_influenza_weeks_by_share,
)
from sitrep.analysis.seasonal.mem import (
    DEFAULT_INTENSITY_LEVELS,
    DEFAULT_THRESHOLD_LEVEL,
    MAX_MEM_SEASONS,
    MIN_MEM_SEASONS,
    TARGET_POOLED_VALUES,
    IntervalForm,
    MemThresholds,
    default_n_per_season,
    mem_thresholds,
)
from sitrep.analysis.seasonal.period import (
    DEFAULT_DELTA,
    EpidemicPeriod,
    MapSlope,
    epidemic_period,
    map_curve,
)
from sitrep.analysis.seasonal.prospective import (
    IntensityLevel,
    intensity_level,
    same_week_past_seasons,
    season_onset,
)
from sitrep.analysis.seasonal.series import interpolate_missing, round_half_up

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
