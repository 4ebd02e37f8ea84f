"""The draft for communications staff: plain language a press officer can edit.

No statistical jargon (no test names, no 'q', no 'confidence interval of the
change', no 'Local Moran's I'); districts are not called clusters, and are not
named as a group unless the jurisdiction allows it (``name_groups``).
"""

from __future__ import annotations

from collections.abc import Sequence

from sitrep.render.wording.formats import fmt_pct, join_names

__all__ = [
    "DRAFT_INTRO",
    "plain_change",
    "plain_groups",
    "plain_highest",
    "plain_level",
    "plain_quality",
    "plain_season",
]

DRAFT_INTRO = (
    "DRAFT for communications staff. Numbers come from the report of the same week; "
    "keep them unchanged when editing."
)

_CHANGE = {
    "clear increase": "a clear rise",
    "small increase": "a small rise",
    "no clear change": "about the same",
    "small decrease": "a small fall",
    "clear decrease": "a clear fall",
}


def plain_level(*, week_number: int, dates: str, jurisdiction: str, pct: float) -> str:
    """``'In week 47 (22–28 November 2026), 2.2% of visits ... were for flu-like illness.'``"""
    return (
        f"In week {week_number} ({dates}), {fmt_pct(pct)} of visits to the doctors and clinics that report "
        f"to us in {jurisdiction} were for flu-like illness."
    )


def plain_change(*, verdict: str, pct_before: float, rising_for: int = 0) -> str:
    """The change in everyday words."""
    if verdict not in _CHANGE:
        return "We cannot yet compare this with the week before."
    if verdict == "no clear change":
        return f"That is about the same as the week before ({fmt_pct(pct_before)})."
    text = f"That is {_CHANGE[verdict]} from {fmt_pct(pct_before)} the week before."
    if rising_for >= 2 and verdict.endswith("increase"):
        text += f" Levels have now gone up {rising_for} weeks in a row."
    return text


def plain_season(
    *, pct: float, threshold: float | None, digits: int = 1, unsettled: bool = False
) -> str:
    """The week against the level that marks the season's epidemic period."""
    if threshold is None:
        return "There is not yet enough history to say how this compares with a usual season."
    if unsettled:
        return (
            f"This is close to the level that usually marks the start of the flu season "
            f"(about {fmt_pct(threshold, digits)}); it is too early to say whether the season has started."
        )
    if pct >= threshold:
        return f"This is above the level that usually marks the start of the flu season ({fmt_pct(threshold, digits)})."
    return f"This is below the level that usually marks the start of the flu season ({fmt_pct(threshold, digits)})."


def plain_highest(*, ranked: Sequence[tuple[str, float]], digits: int = 1, limit: int = 5) -> str:
    """The districts with the highest levels, highest first."""
    if not ranked:
        return "No district stood out this week."
    order = sorted(ranked, key=lambda item: (-item[1], item[0].casefold()))
    shown = [f"{name} ({fmt_pct(value, digits)})" for name, value in order]
    return f"Levels were highest in {join_names(shown, limit=limit, ordered=True)}."


def plain_groups(*, high_groups: Sequence[Sequence[str]], name_groups: bool) -> str:
    """Neighbouring districts with similarly high levels, named only when allowed."""
    if not high_groups:
        return "No group of neighbouring districts stood out with similarly high levels."
    n = len(high_groups)
    where = "one part" if n == 1 else f"{n} parts"
    text = f"Neighbouring districts in {where} of the area had similarly high levels."
    if name_groups:
        text += " " + " ".join(f"They include {join_names(g)}." for g in high_groups)
    return text


def plain_quality(*, revised: bool, n_warnings: int, completeness_drop: bool = False) -> str:
    """Whether figures moved, were incomplete or were queried."""
    if not n_warnings:
        return "Our checks found no problems with this week's figures."
    text = (
        "Some figures for earlier weeks were updated as late reports arrived. " if revised else ""
    )
    if completeness_drop:
        text += (
            "Fewer visits were reported than usual this week (a fall in reporting completeness), so some "
            "figures may be lower than the true level. "
        )
    flagged = "1 figure" if n_warnings == 1 else f"{n_warnings} figures"
    return text + f"Our automatic checks flagged {flagged} for review; the full report lists them."
