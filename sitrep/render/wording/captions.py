"""Figure titles, captions and alternative texts (pure functions of plain values)."""

from __future__ import annotations

from collections import Counter
from collections.abc import Mapping, Sequence

from sitrep.render.wording.formats import fmt_pct, join_names, plural

__all__ = [
    "legend_counts",
    "shared_title",
    "source_line",
    "change_caption",
    "cluster_caption",
    "comparison_caption",
    "count_phrase",
    "tercile_caption",
    "trend_caption",
]


def count_phrase(values: Sequence[str], order: Sequence[str]) -> str:
    """``'3 districts high, 1 district no data'`` in the given class order (empty classes left out)."""
    counts = Counter(values)
    return ", ".join(plural(counts[v], "district") + f" {v}" for v in order if counts[v])


def legend_counts(values: Sequence[str], words: Mapping[str, str]) -> str:
    """The districts per legend class, in legend order, empty classes left out (the legends hide them).

    >>> legend_counts(["a", "b", "a"], {"a": "Clear increase", "b": "Not assessable", "c": "Clear decrease"})
    'clear increase 2, not assessable 1 (3 districts)'
    """
    counts = Counter(values)
    listed = ", ".join(
        f"{word[:1].lower() + word[1:]} {counts[key]}" for key, word in words.items() if counts[key]
    )
    return f"{listed} ({plural(len(values), 'district')})" if listed else "no districts"


def shared_title(*, title: str, week_number: int, week_year: int, dates: str) -> str:
    """Title of a figure shared on its own: ``'Change since week 46 — week 47, 2026 (22–28 November 2026)'``."""
    return f"{title} — week {week_number}, {week_year} ({dates})"


def source_line(*, jurisdiction: str) -> str:
    """The source and caution printed under a figure shared on its own."""
    return (
        f"Source: {jurisdiction}, influenza-like illness (ILI) sentinel surveillance. Provisional data: recent "
        "weeks may rise as late reports arrive. ILI is a syndrome, not confirmed influenza."
    )


def tercile_caption(
    *, first_week: int, week: int, cuts: tuple[float, float] | None, digits: int, counts: str
) -> tuple[str, str, str]:
    """(title, caption, alt) of the tercile small multiples; cut points printed with ``digits``."""
    hatched = (
        "Hatched districts had no data, too few visits, or are withheld to protect small counts."
    )
    if not cuts:
        return (
            f"ILI% terciles, weeks {first_week} to {week}",
            f"Too few districts have data this week to cut ILI% into thirds, so no district is "
            f"classed. {hatched} Week {week}: {counts}.",
            f"Maps of weeks {first_week} to {week} without tercile classes (too few districts "
            f"with data); in week {week}: {counts}.",
        )
    cut_text = f"cut points {fmt_pct(cuts[0], digits)} and {fmt_pct(cuts[1], digits)}"
    return (
        f"ILI% terciles, weeks {first_week} to {week}",
        f"Each district's ILI% in thirds, on this week's {cut_text} for every panel "
        f"(a value equal to a cut point is in the lower third). {hatched} Week {week}: {counts}.",
        f"Small-multiple maps of ILI% terciles for weeks {first_week} to {week} on {cut_text}; "
        f"in week {week}: {counts}.",
    )


def change_caption(*, prior_week: int, counts: str) -> tuple[str, str, str]:
    """(title, caption, alt) of the change map."""
    return (
        f"Change since week {prior_week}",
        "Week-over-week change of each district's ILI% against last week's revised value: a clear "
        "increase or decrease is detectable by the change test and at least the minimum meaningful change. "
        f"Districts: {counts}.",
        f"Map of week-over-week change classes: {counts}.",
    )


def cluster_caption(
    *, variable: str, groups: Sequence[tuple[str, Sequence[str]]], others: str, counts: str = ""
) -> tuple[str, str, str]:
    """(title, caption, alt) of the cluster map; ``groups`` holds (label, names) of significant districts."""
    listed = "; ".join(f"{label}: {join_names(names, limit=6)}" for label, names in groups)
    return (
        "Local Moran's I clusters",
        f"Districts whose {variable} resembles (high-high, low-low) or contrasts with (high-low, low-high) "
        "their neighbours' more than chance would suggest, after multiple-testing control. "
        "Districts with no neighbour are never tested."
        + (f" Districts: {counts}." if counts else ""),
        "Map of Local Moran's I cluster labels. "
        + (listed + ". " if listed else "No significant districts. ")
        + (f"Other districts: {others}." if others else ""),
    )


def comparison_caption(*, last_range: str, now_range: str) -> tuple[str, str, str]:
    """(title, caption, alt) of the two-week comparison maps."""
    return (
        "Last week and this week",
        "ILI% by district last week (revised) and this week on one shared scale.",
        f"Two maps of district ILI% on one scale: last week from {last_range}, this week from {now_range}.",
    )


def value_range(low: float | None, high: float | None) -> str:
    """``'1.2% to 3.4%'`` or 'no data'."""
    if low is None or high is None:
        return "no data"
    return f"{fmt_pct(low)} to {fmt_pct(high)}"


def trend_caption(
    *,
    season_label: str,
    season_week: int,
    now: float,
    past_peaks: Sequence[float],
    threshold: float | None,
    baseline: float | None,
    digits: int = 1,
) -> tuple[str, str, str]:
    """(title, caption, alt) of the trend chart; the threshold and baseline printed with ``digits``."""
    alt = (
        f"Line chart of pooled ILI% by season week. This season ({season_label}) is at "
        f"{fmt_pct(now)} in season week {season_week}"
        + (
            f"; the {len(past_peaks)} past seasons peaked between {fmt_pct(min(past_peaks))} and "
            f"{fmt_pct(max(past_peaks))}"
            if past_peaks
            else ""
        )
        + (f"; epidemic threshold {fmt_pct(threshold, digits)}" if threshold is not None else "")
        + (f"; baseline {fmt_pct(baseline, digits)}" if baseline is not None else "")
        + "."
    )
    return (
        "ILI% this season against past seasons",
        "Pooled ILI% for the jurisdiction by week of the season; this season in bold, past seasons in grey, "
        "with the seasonal baseline and the epidemic and intensity thresholds.",
        alt,
    )


__all__ += ["value_range"]
