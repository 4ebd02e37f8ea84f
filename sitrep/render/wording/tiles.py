"""The headline tiles of page 1: (label, value, note), each short enough for a small box.

A tile's label and note stay under :data:`MAX_NOTE_CHARS` characters so that
a tile a third of the page wide holds them in at most three lines (label,
value, note); the full numbers are in the key messages and the indicator
table.
"""

from __future__ import annotations

from sitrep.render.wording.formats import (
    NOT_AVAILABLE,
    confidence_label,
    finite,
    fmt_count,
    fmt_interval,
    fmt_pct,
    fmt_signed,
    plural,
)

__all__ = [
    "MAX_NOTE_CHARS",
    "Tile",
    "change_tile",
    "cluster_tile",
    "level_tile",
    "over_threshold_tile",
    "reporting_tile",
    "season_tile",
]

Tile = tuple[str, str, str]
"""(label, value, note)."""

MAX_NOTE_CHARS = 44
"""Longest label or note of a tile (one line of a tile a third of an A4 page wide)."""


def level_tile(
    *, pct: float | None, low: float | None, high: float | None, confidence: float, digits: int
) -> Tile:
    """ILI% of the jurisdiction with its interval.

    >>> level_tile(pct=2.183, low=2.07, high=2.30, confidence=0.95, digits=2)
    ('ILI this week', '2.18%', '95% CI 2.1–2.3%')
    """
    return (
        "ILI this week",
        fmt_pct(pct, digits),
        f"{confidence_label(confidence)} CI {fmt_interval(low, high)}",
    )


def change_tile(
    *, prior_week: int, diff_pp: float | None, verdict: str, rising_for: int = 0
) -> Tile:
    """Change since last week in percentage points, with its words.

    >>> change_tile(prior_week=46, diff_pp=0.42, verdict="small increase", rising_for=5)
    ('Change since week 46', '+0.4 pp', 'small increase; rising for 5 weeks')
    """
    value = f"{fmt_signed(diff_pp)} pp" if finite(diff_pp) else NOT_AVAILABLE
    note = verdict + (f"; rising for {rising_for} weeks" if rising_for >= 2 else "")
    return (f"Change since week {prior_week}", value, note)


_INTENSITY_VALUE = {
    "below epidemic threshold": "Below threshold",
    "low": "Low intensity",
    "medium": "Medium intensity",
    "high": "High intensity",
    "very high": "Very high intensity",
}


def season_tile(
    *, intensity: str, threshold: float | None, digits: int, unsettled: bool = False
) -> Tile:
    """This week against the seasonal thresholds.

    >>> season_tile(intensity="low", threshold=2.18, digits=2, unsettled=True)
    ('Season level', 'Low intensity', 'threshold 2.18%; window-dependent')
    """
    value = _INTENSITY_VALUE.get(intensity, "Not available")
    if not finite(threshold):
        return ("Season level", value, "no epidemic threshold this season")
    note = f"threshold {fmt_pct(threshold, digits)}" + ("; window-dependent" if unsettled else "")
    return ("Season level", value, note)


def over_threshold_tile(*, n_over: int, n_with_data: int, threshold: float, digits: int) -> Tile:
    """How many districts are at or above the jurisdiction's epidemic threshold.

    >>> over_threshold_tile(n_over=27, n_with_data=47, threshold=2.18, digits=2)
    ('Districts at threshold or above', '27 of 47', 'district ILI% ≥ 2.18% (with data)')
    """
    return (
        "Districts at threshold or above",
        f"{n_over} of {n_with_data}",
        f"district ILI% ≥ {fmt_pct(threshold, digits)} (with data)",
    )


def reporting_tile(*, n_reporting: int, n_total: int, sites: float | None) -> Tile:
    """Districts that reported, and the sentinel sites behind them.

    >>> reporting_tile(n_reporting=48, n_total=48, sites=178)
    ('Districts reporting', '48 of 48', '178 sentinel sites')
    """
    note = f"{fmt_count(sites)} sentinel sites" if finite(sites) else "sites not given"
    return ("Districts reporting", f"{n_reporting} of {n_total}", note)


def cluster_tile(*, assessable: bool, n_high: int, n_low: int) -> Tile:
    """Districts in high-value and low-value clusters.

    >>> cluster_tile(assessable=True, n_high=8, n_low=10)
    ('In a high-value cluster', '8 districts', 'in a low-value cluster: 10')
    """
    if not assessable:
        return ("In a high-value cluster", NOT_AVAILABLE, "clusters not assessable this week")
    return (
        "In a high-value cluster",
        plural(n_high, "district"),
        f"in a low-value cluster: {n_low}",
    )
