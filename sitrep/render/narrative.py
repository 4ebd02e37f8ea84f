"""Sentences written from the numbers: small pure functions, one per idea.

Wording rules (kept by the tests):

- direction words ('rose', 'fell') only when the change test classed the change
  as an increase or decrease, and never when the rounded values are equal;
  'similar' otherwise;
- a missing number reads 'not available', never 'nan', 'inf' or 'None';
- lists of districts are sorted by name and say how many there are;
- percentages are shown to one decimal, changes in 'percentage points'.

Every sentence is built from values passed in, so the same numbers appear in
the report, the draft and the e-mail.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import TypeGuard

__all__ = [
    "NOT_AVAILABLE",
    "RULE_PHRASES",
    "change_sentence",
    "cluster_sentence",
    "data_quality_sentence",
    "fmt_count",
    "fmt_interval",
    "fmt_num",
    "fmt_pct",
    "fmt_pp",
    "join_names",
    "level_sentence",
    "plural",
    "quality_highlight",
    "threshold_sentence",
    "tercile_sentence",
]

NOT_AVAILABLE = "not available"


def _finite(x: float | None) -> TypeGuard[float]:
    return x is not None and isinstance(x, (int, float)) and math.isfinite(x)


def fmt_pct(x: float | None, digits: int = 1) -> str:
    """``2.345 -> '2.3%'``; a missing value -> 'not available'.

    >>> fmt_pct(2.345), fmt_pct(float("nan"))
    ('2.3%', 'not available')
    """
    return f"{x:.{digits}f}%" if _finite(x) else NOT_AVAILABLE


def fmt_num(x: float | None, digits: int = 1) -> str:
    """A bare number to ``digits`` decimals, or 'not available'."""
    return f"{x:.{digits}f}" if _finite(x) else NOT_AVAILABLE


def fmt_pp(x: float | None, digits: int = 1, *, signed: bool = True) -> str:
    """``0.42 -> '+0.4 percentage points'``; the minus sign is a true minus.

    >>> fmt_pp(-0.42)
    '−0.4 percentage points'
    """
    if not _finite(x):
        return NOT_AVAILABLE
    assert x is not None
    value = round(x, digits)
    if value == 0:
        value = 0.0
    text = f"{abs(value):.{digits}f}"
    if signed:
        text = ("+" if value > 0 else "−" if value < 0 else "±") + text
    return f"{text} percentage points"


def fmt_count(n: float | None) -> str:
    """Whole number with thousands separators, or 'not available'.

    >>> fmt_count(12345)
    '12,345'
    """
    return f"{int(n):,}" if _finite(n) else NOT_AVAILABLE


def fmt_interval(low: float | None, high: float | None, unit: str = "%") -> str:
    """``(1.2, 3.4) -> '1.2–3.4%'`` or 'not available'."""
    if not (_finite(low) and _finite(high)):
        return NOT_AVAILABLE
    return f"{low:.1f}–{high:.1f}{unit}"


def join_names(names: Sequence[str], *, limit: int = 8) -> str:
    """Sorted, comma-separated list with 'and'; long lists end in 'and N more'.

    >>> join_names(["Ostrelle", "Brannoch Vale", "Ashby"])
    'Ashby, Brannoch Vale and Ostrelle'
    >>> join_names(list("ABCDEFGHIJ"), limit=3)
    'A, B, C and 7 more'
    """
    items = sorted(names, key=str.casefold)
    if not items:
        return "none"
    if len(items) > limit:
        return ", ".join(items[:limit]) + f" and {len(items) - limit} more"
    if len(items) == 1:
        return items[0]
    return ", ".join(items[:-1]) + " and " + items[-1]


def plural(n: int, one: str, many: str | None = None) -> str:
    """``plural(1, 'district') -> '1 district'``; ``plural(3, 'district') -> '3 districts'``."""
    return f"{n} {one if n == 1 else (many or one + 's')}"


def level_sentence(
    *,
    week_number: int,
    dates: str,
    jurisdiction: str,
    pct: float,
    low: float,
    high: float,
    n_reporting: int,
    n_total: int,
) -> str:
    """The headline level: pooled ILI% with its interval and coverage."""
    return (
        f"In week {week_number} ({dates}), influenza-like illness made up {fmt_pct(pct)} of "
        f"outpatient visits in {jurisdiction} (95% CI {fmt_interval(low, high)}), pooled over "
        f"the {n_reporting} of {n_total} districts that reported."
    )


def change_sentence(
    *,
    change_class: str,
    pct_now: float,
    pct_before: float,
    diff_pp: float,
    low_pp: float,
    high_pp: float,
    prior_week_number: int,
    revised_from: float | None = None,
    completeness_drop: bool = False,
    p_value: float | None = None,
    alpha: float = 0.05,
    min_change_pp: float = 0.5,
) -> str:
    """Direction of the pooled change versus last week's revised value.

    ``change_class`` is the change test's class value ('increase', 'decrease',
    'similar', 'not assessable'). When reporting fell sharply, a decrease is
    not presented as a fall in activity.
    """
    before = f"{fmt_pct(pct_before)} in week {prior_week_number}"
    revised = ""
    if _finite(revised_from) and _finite(pct_before) and round(revised_from, 1) != round(pct_before, 1):
        revised = f" (revised from {fmt_pct(revised_from)} as late reports arrived)"
    elif _finite(pct_before):
        revised = " (as revised this week)"
    interval = (
        f"; 95% CI of the change {fmt_num(low_pp)} to {fmt_num(high_pp)} percentage points"
        if _finite(low_pp) and _finite(high_pp)
        else ""
    )
    same_rounded = _finite(pct_now) and _finite(pct_before) and round(pct_now, 1) == round(pct_before, 1)
    if change_class == "not assessable" or not (_finite(pct_now) and _finite(pct_before)):
        return f"The change from last week cannot be assessed: {before}{revised}."
    if change_class in ("increase", "decrease") and not same_rounded:
        verb = "rose" if change_class == "increase" else "fell"
        text = f"The share {verb} from {before}{revised}, a change of {fmt_pp(diff_pp)}{interval}."
        if change_class == "decrease" and completeness_drop:
            text += (
                " Reporting was markedly less complete this week, so part of this fall may"
                " reflect missing reports rather than less illness."
            )
        return text
    if _finite(p_value) and p_value < alpha and _finite(diff_pp) and abs(diff_pp) < min_change_pp:
        return (
            f"This is similar to {before}{revised}: the change of {fmt_pp(diff_pp)} is smaller "
            f"than the {min_change_pp:g} percentage points this report treats as a meaningful "
            f"change{interval}."
        )
    return (
        f"This is similar to {before}{revised}: the change of {fmt_pp(diff_pp)} is within "
        f"what week-to-week variation would produce{interval}."
    )


def threshold_sentence(
    *,
    pct: float,
    epidemic_threshold: float | None,
    intensity: str | None,
    baseline: float | None,
    unavailable_reason: str = "",
) -> str:
    """Level against the seasonal baseline and the epidemic / intensity thresholds."""
    parts = []
    if _finite(epidemic_threshold):
        side = "at or above" if pct >= epidemic_threshold else "below"
        text = f"This is {side} the epidemic threshold of {fmt_pct(epidemic_threshold)}"
        if intensity and side != "below":
            text += f" (intensity: {intensity})"
        parts.append(text)
    if _finite(baseline):
        side = "above" if pct >= baseline else "below"
        parts.append(f"{side} the seasonal baseline of {fmt_pct(baseline)}")
    if not parts:
        return unavailable_reason or "Seasonal thresholds are not available."
    sentence = " and ".join(parts) + "."
    if not sentence.startswith("This"):
        sentence = "This is " + sentence
    return sentence


def tercile_sentence(*, n_high: int, n_classed: int, upper_cut: float | None, names: Sequence[str]) -> str:
    """Where activity is highest: the top tercile."""
    if upper_cut is None or n_classed < 3:
        return "Too few districts had enough visits to rank them into thirds this week."
    if n_high == 0:
        return (
            f"No district was above the upper tercile cut of {fmt_pct(upper_cut)}: many districts"
            " share the same value."
        )
    return (
        f"{n_high} of {n_classed} ranked districts were in the highest third (ILI above "
        f"{fmt_pct(upper_cut)}): {join_names(names)}."
    )


def cluster_sentence(
    *,
    assessable: bool,
    reason: str,
    groups: Sequence[tuple[str, Sequence[str], str]],
    correction: str,
) -> str:
    """Clusters and how they moved.

    ``groups`` holds (label, district names, movement) for each connected
    group of significant districts, movement being e.g. 'new this week',
    'grew from 3 districts', 'unchanged'. Never says 'no clusters' when the
    statistic could not be computed.
    """
    if not assessable:
        return f"Spatial clusters could not be assessed this week: {reason}"
    high = [g for g in groups if g[0] == "high-high"]
    low = [g for g in groups if g[0] == "low-low"]
    if not high and not low:
        return (
            "No district formed a statistically supported high-high or low-low cluster "
            f"this week ({correction})."
        )
    parts = []
    for label, kind in ((high, "high-value"), (low, "low-value")):
        for _, names, movement in label:
            parts.append(
                f"a {kind} cluster of {plural(len(names), 'district')} ({join_names(names)})"
                + (f", {movement}" if movement else "")
            )
    return "Local Moran's I found " + "; ".join(parts) + f" ({correction})."


RULE_PHRASES = {
    "revision-summary": "past weeks revised as late reports arrived",
    "revision-large": "large revisions to past weeks",
    "revision-row-removed": "past rows removed",
    "value-spike": "district values far from their recent weeks",
    "completeness-drop": "a fall in reporting completeness",
    "district-missing-latest": "districts missing this week",
    "district-new": "new districts",
    "district-dropped": "districts that stopped reporting",
    "week-skipped": "a skipped week",
    "week-gap": "missing weeks in the extract",
    "rate-mismatch": "supplied rates that disagree with the counts",
    "stale-resend": "rows identical to the previous week",
    "geometry-repaired": "repaired boundary shapes",
    "column-optional-missing": "optional columns missing",
    "name-glyphs-missing": "district names the report font cannot draw",
    "geometry-gap": "gaps between district boundaries",
}
"""Plain words for validation rule ids in the key messages (ids not listed appear as they are)."""


def quality_highlight(rule: str, count: int) -> str:
    """``('value-spike', 3) -> 'district values far from their recent weeks (3)'``."""
    return f"{RULE_PHRASES.get(rule, rule.replace('-', ' '))} ({count})"


def data_quality_sentence(*, n_warnings: int, highlights: Sequence[str]) -> str:
    """One sentence summarising the data-quality warnings."""
    if n_warnings == 0:
        return "Validation against last week's table found no data-quality problems."
    text = f"Validation raised {plural(n_warnings, 'data-quality warning')}"
    if highlights:
        text += ": " + "; ".join(highlights)
    return text + " (see the data-quality section)."
