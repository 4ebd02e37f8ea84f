"""Sentences of the report written from the numbers: small pure functions, one per idea.

Wording rules (kept by ``tests/test_wording.py``):

- a change is a *clear* increase or decrease only when the test is met (p
  below the level **and** the printed interval excludes 0) **and** the change
  reaches the minimum meaningful change; a *small but detectable* change
  when the test is met but the change is below that minimum; *no clear
  change* otherwise (:func:`change_verdict`);
- a missing number reads 'not available', never 'nan', 'inf' or 'None';
- lists of districts ranked by a value keep that order; other lists are
  sorted by name; both say how many there are;
- the interval's coverage is printed from the setting, never a fixed '95%'.

Every sentence is built from values passed in (never from the configuration
object), so the same numbers appear in the report, the draft and the e-mail.
"""

from __future__ import annotations

from collections.abc import Sequence

from sitrep.render.wording.formats import (
    NOT_AVAILABLE,
    confidence_label,
    finite,
    fmt_count,
    fmt_interval,
    fmt_num,
    fmt_pct,
    fmt_pp,
    join_names,
    plural,
)

__all__ = [
    "RULE_PHRASES",
    "VERDICTS",
    "change_sentence",
    "change_verdict",
    "cluster_sentence",
    "correction_phrase",
    "data_as_of",
    "data_quality_sentence",
    "is_borderline",
    "partner_quality_statement",
    "level_sentence",
    "movement_phrase",
    "quality_highlight",
    "reissue_note",
    "revision_note",
    "rising_weeks",
    "threshold_sentence",
    "tercile_sentence",
    "vanished_sentence",
    "withheld_sentence",
    "redacted_finding",
    "PRIOR_WITHHELD_NOTE",
    "WITHHELD_NOTE",
    "WITHHELD_TOTAL",
]

VERDICTS = (
    "clear increase",
    "small increase",
    "no clear change",
    "small decrease",
    "clear decrease",
    "not assessable",
)
"""The words a change can get, from :func:`change_verdict`."""


def change_verdict(
    *,
    change_class: str,
    p_value: float | None,
    alpha: float,
    diff_pp: float | None,
    low_pp: float | None,
    high_pp: float | None,
) -> str:
    """The words for one change, consistent with the interval printed beside it.

    ``change_class`` is the change test's class ('increase', 'decrease',
    'similar', 'not assessable'), which already requires the test, an
    interval excluding 0 and the minimum meaningful change. A 'similar' class
    whose test is met (p < ``alpha`` and the interval excludes 0) is a small
    but detectable change.

    >>> change_verdict(change_class="similar", p_value=1e-7, alpha=0.05, diff_pp=0.42, low_pp=0.27, high_pp=0.58)
    'small increase'
    >>> change_verdict(change_class="similar", p_value=0.2, alpha=0.05, diff_pp=1.5, low_pp=-0.4, high_pp=3.4)
    'no clear change'
    """
    if change_class == "not assessable" or not finite(diff_pp):
        return "not assessable"
    assert diff_pp is not None
    if change_class == "increase":
        return "clear increase"
    if change_class == "decrease":
        return "clear decrease"
    excludes_zero = finite(low_pp) and finite(high_pp) and (low_pp > 0 or high_pp < 0)
    if finite(p_value) and p_value < alpha and excludes_zero:
        return "small increase" if diff_pp > 0 else "small decrease"
    return "no clear change"


def rising_weeks(values: Sequence[float]) -> int:
    """How many weeks in a row the series has risen up to its last value (0 if it did not rise).

    >>> rising_weeks([1.0, 1.2, 1.1, 1.3, 1.5, 1.8])
    3
    >>> rising_weeks([1.0, 0.9])
    0
    """
    n = 0
    for before, now in zip(values[-2::-1], values[:0:-1], strict=False):
        if finite(before) and finite(now) and now > before:
            n += 1
        else:
            break
    return n


def level_sentence(
    *,
    week_number: int,
    dates: str,
    jurisdiction: str,
    pct: float,
    low: float,
    high: float,
    confidence: float,
    n_reporting: int,
    n_total: int,
) -> str:
    """The headline level: pooled ILI% with its interval and coverage."""
    return (
        f"In week {week_number} ({dates}), influenza-like illness made up {fmt_pct(pct)} of "
        f"outpatient visits in {jurisdiction} ({confidence_label(confidence)} confidence interval "
        f"{fmt_interval(low, high)}), pooled over the {n_reporting} of {n_total} districts that reported."
    )


def change_sentence(
    *,
    verdict: str,
    pct_now: float,
    pct_before: float,
    diff_pp: float,
    low_pp: float,
    high_pp: float,
    confidence: float,
    prior_week_number: int,
    min_change_pp: float,
    revised_from: float | None = None,
    completeness_drop: bool = False,
    rising_for: int = 0,
) -> str:
    """The pooled change against last week's revised value, in the words of :func:`change_verdict`.

    When reporting fell sharply, a decrease is not presented as a fall in
    activity. ``rising_for`` (weeks in a row the pooled value has risen) is
    said when it is 2 or more and the change is an increase.
    """
    before = f"{fmt_pct(pct_before)} in week {prior_week_number}"
    revised = ""
    if (
        finite(revised_from)
        and finite(pct_before)
        and round(revised_from, 1) != round(pct_before, 1)
    ):
        revised = f" (revised from {fmt_pct(revised_from)} as late reports arrived)"
    elif finite(pct_before):
        revised = " (as revised this week)"
    interval = (
        f" ({confidence_label(confidence)} confidence interval {fmt_interval(low_pp, high_pp, ' percentage points')})"
        if finite(low_pp) and finite(high_pp)
        else ""
    )
    if verdict == "not assessable" or not (finite(pct_now) and finite(pct_before)):
        return f"The change from last week cannot be assessed: {before}{revised}."
    change = f"{fmt_pp(diff_pp)}{interval}"
    rising = f" The share has now risen for {rising_for} weeks in a row." if rising_for >= 2 else ""
    if verdict in ("clear increase", "clear decrease"):
        verb = "rose" if verdict == "clear increase" else "fell"
        text = f"This is a clear {verdict.split()[1]}: the share {verb} from {before}{revised}, by {change}."
        if verdict == "clear decrease" and completeness_drop:
            text += (
                " Reporting was markedly less complete this week, so part of this fall may"
                " reflect missing reports rather than less illness."
            )
        return text + (rising if verdict == "clear increase" else "")
    if verdict in ("small increase", "small decrease"):
        word = "rise" if verdict == "small increase" else "fall"
        text = (
            f"This is a small but detectable {word} from {before}{revised}: {change}, below the "
            f"{min_change_pp:g} percentage points this report treats as a meaningful change."
        )
        if verdict == "small decrease" and completeness_drop:
            text += (
                " Reporting was markedly less complete this week, so part of this fall may"
                " reflect missing reports rather than less illness."
            )
        return text + (rising if verdict == "small increase" else "")
    return (
        f"There is no clear change from {before}{revised}: the difference of {change} is within "
        "what week-to-week variation would produce."
    )


def threshold_sentence(
    *,
    pct: float,
    epidemic_threshold: float | None,
    intensity: str | None,
    baseline: float | None,
    digits: int = 1,
    band: tuple[float, float] | None = None,
    band_reason: str = "",
    unavailable_reason: str = "",
) -> str:
    """Level against the seasonal baseline and the epidemic / intensity thresholds.

    ``band`` is the range of epidemic thresholds the method gives under the
    other season windows considered (see the methods); when this week's value
    lies inside it, the sentence says that the side of the threshold depends
    on that choice. ``digits`` prints the thresholds.
    """
    parts = []
    if finite(epidemic_threshold):
        side = "at or above" if pct >= epidemic_threshold else "below"
        text = f"This is {side} the epidemic threshold of {fmt_pct(epidemic_threshold, digits)}"
        if intensity and side != "below":
            text += f" (intensity: {intensity})"
        parts.append(text)
    if finite(baseline):
        side = "above" if pct >= baseline else "below"
        parts.append(f"{side} the seasonal baseline of {fmt_pct(baseline, digits)}")
    if not parts:
        return unavailable_reason or "Seasonal thresholds are not available."
    sentence = " and ".join(parts) + "."
    if not sentence.startswith("This"):
        sentence = "This is " + sentence
    if band is not None and finite(pct) and band[0] <= pct <= band[1] and band[1] > band[0]:
        sentence += (
            f" The threshold depends on the season window used: it ranges from "
            f"{fmt_pct(band[0], digits)} to {fmt_pct(band[1], digits)}{band_reason}, and this week's "
            f"{fmt_pct(pct, digits)} lies within that range, so whether the season has crossed the "
            "threshold is not settled."
        )
    return sentence


def tercile_sentence(
    *,
    n_classed: int,
    upper_cut: float | None,
    ranked: Sequence[tuple[str, float]],
    digits: int = 1,
    limit: int = 8,
) -> str:
    """Where activity is highest: the top tercile, highest value first.

    ``ranked`` holds (name, ILI%) of the districts in the highest third.
    ``digits`` must keep the printed cut and values consistent
    (:func:`~sitrep.render.wording.formats.class_digits`).
    """
    if upper_cut is None or n_classed < 3:
        return "Too few districts had enough visits to rank them into thirds this week."
    if not ranked:
        return (
            f"No district was above the upper tercile cut of {fmt_pct(upper_cut, digits)}: many districts"
            " share the same value."
        )
    order = sorted(ranked, key=lambda item: (-item[1], item[0].casefold()))
    shown = [f"{name} ({fmt_pct(value, digits)})" for name, value in order]
    return (
        f"{len(order)} of {n_classed} ranked districts were in the highest third (ILI above "
        f"{fmt_pct(upper_cut, digits)}), highest first: {join_names(shown, limit=limit, ordered=True)}."
    )


def correction_phrase(*, correction: str, fdr_q: float, alpha: float, plain: bool = False) -> str:
    """How multiple testing was handled, for the key messages (``plain`` for the draft)."""
    if plain:
        return "after allowing for the many districts tested" if correction == "fdr_bh" else ""
    if correction == "fdr_bh":
        return f"Benjamini–Hochberg false discovery rate {fdr_q:g}"
    return f"unadjusted p ≤ {alpha:g}"


def is_borderline(value: float | None, threshold: float, *, factor: float = 1.5) -> bool:
    """True when an adjusted p-value lies within a factor of the threshold (threshold/1.5 to 1.5×).

    >>> is_borderline(0.046, 0.05), is_borderline(0.063, 0.05), is_borderline(0.001, 0.05)
    (True, True, False)
    """
    return finite(value) and threshold / factor <= value <= threshold * factor


def movement_phrase(
    *,
    kind: str,
    n_before: int,
    added: Sequence[str] = (),
    removed: Sequence[str] = (),
    borderline: bool = False,
) -> str:
    """How a group of districts changed since last week ('new this week', 'gained A and lost B', ...).

    ``borderline`` says that every district behind the change lies near the
    significance threshold, so the change is worded with care.
    """
    care = " (near the significance threshold, so this shift may not be real)" if borderline else ""
    if kind == "appeared":
        return "new this week" + care
    if kind == "grew":
        return f"grown from {plural(n_before, 'district')} last week" + care
    if kind == "shrank":
        return f"down from {plural(n_before, 'district')} last week" + care
    if kind == "moved":
        parts = []
        if added:
            parts.append(f"gained {join_names(added, limit=4)}")
        if removed:
            parts.append(f"lost {join_names(removed, limit=4)}")
        if not parts:
            return "shifted since last week" + care
        return "which since last week has " + " and ".join(parts) + care
    if kind == "persisted":
        return "unchanged from last week"
    return ""


def cluster_sentence(
    *,
    assessable: bool,
    reason: str,
    groups: Sequence[tuple[str, Sequence[str], str]],
    correction: str,
    variable: str = "ILI%",
) -> str:
    """Clusters and how they moved.

    ``groups`` holds (label, district names, movement) for each connected
    group of significant districts. Never says 'no clusters' when the
    statistic could not be computed.
    """
    if not assessable:
        return f"Spatial clusters could not be assessed this week: {reason}"
    high = [g for g in groups if g[0] == "high-high"]
    low = [g for g in groups if g[0] == "low-low"]
    if not high and not low:
        return (
            f"No district formed a statistically supported high-high or low-low cluster of {variable} "
            f"this week ({correction})."
        )
    parts = []
    for label, kind in ((high, "high-value"), (low, "low-value")):
        for _, names, movement in label:
            parts.append(
                f"a {kind} cluster of {plural(len(names), 'district')} ({join_names(names)})"
                + (f", {movement}" if movement else "")
            )
    return f"Local Moran's I of {variable} found " + "; ".join(parts) + f" ({correction})."


def vanished_sentence(label: str, names: Sequence[str], *, borderline: bool = False) -> str:
    """A cluster of last week that is no longer significant."""
    care = " (its districts lie near the significance threshold)" if borderline else ""
    return f"The {label} cluster of last week ({join_names(names)}) is no longer significant{care}."


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


def data_quality_sentence(
    *, n_warnings: int, highlights: Sequence[str], in_section: bool = False
) -> str:
    """One sentence summarising the data-quality warnings (no pointer to the section inside it)."""
    if n_warnings == 0:
        return "Validation against last week's table found no data-quality problems."
    text = f"Validation raised {plural(n_warnings, 'data-quality warning')}"
    if highlights:
        text += ": " + "; ".join(highlights)
    return text + ("." if in_section else " (listed in the data-quality section).")


def partner_quality_statement(*, n_warnings: int, named_affected: Sequence[str]) -> str:
    """The PDF's plain statement of data quality, after the summary sentence.

    Names the districts of page 1 that a warning concerns, and says where the
    detail is, without rule ids, files or line numbers.

    >>> partner_quality_statement(n_warnings=5, named_affected=["Rookhallow", "Ivvenhold"])
    'The warnings concern Ivvenhold and Rookhallow among the districts named above: read their figures with that in mind. The surveillance team keeps the detail of each finding and can be asked about it (contact below).'
    >>> partner_quality_statement(n_warnings=0, named_affected=[])
    ''
    """
    if n_warnings == 0:
        return ""
    detail = "The surveillance team keeps the detail of each finding and can be asked about it (contact below)."
    if not named_affected:
        return "None of the warnings concerns a district named above. " + detail
    return (
        f"The warnings concern {join_names(named_affected, limit=12)} among the districts named above: "
        "read their figures with that in mind. " + detail
    )


def revision_note(*, published: float | None, revised: float | None) -> str:
    """How last week's pooled value moved since it was published, compared unrounded.

    >>> revision_note(published=1.7581, revised=1.7632)
    'revised by +0.005 percentage points since published (1.758% then)'
    >>> revision_note(published=1.75, revised=1.75)
    'unchanged since published'
    """
    if not (finite(published) and finite(revised)):
        return ""
    assert published is not None and revised is not None
    diff = revised - published
    if abs(diff) < 1e-12:
        return "unchanged since published"
    for digits in (1, 2, 3, 4):
        if round(abs(diff), digits) > 0:
            return f"revised by {fmt_pp(diff, digits)} since published ({fmt_pct(published, max(digits, 1))} then)"
    return "revised by less than 0.0001 percentage points since published"


def data_as_of(*, latest_day: str, file_name: str) -> str:
    """``'28 November 2026, last day with counts in extract_2026-W47.csv'``."""
    return f"{latest_day}, last day with counts in {file_name}" if file_name else latest_day


def reissue_note(*, version: int, week_number: int, reason: str) -> str:
    """The note on a reissued report."""
    return (
        f"This is version {version} of the week {week_number} report; it supersedes version "
        f"{version - 1}. Reason: {reason}"
    )


def reporting_note(sites: float | None) -> str:
    """``'178 reporting sites'`` or ''."""
    return f"{fmt_count(sites)} reporting sites" if finite(sites) else ""


def global_moran_text(
    *, available: bool, i: float, expectation: float, p_sim: float, n: int, notes: Sequence[str]
) -> str:
    """The global Moran's I line of the methods."""
    if not available or not finite(i):
        return "Not computed this week: " + " ".join(notes)
    p_text = "p < 0.001" if finite(p_sim) and p_sim < 0.0005 else f"p = {fmt_num(p_sim, 3)}"
    return (
        f"I = {fmt_num(i, 3)} (expected {fmt_num(expectation, 3)} under no spatial autocorrelation), "
        f"permutation {p_text}, over the {n} districts tested."
    )


__all__ += ["NOT_AVAILABLE", "global_moran_text", "reporting_note"]


WITHHELD_NOTE = "withheld to protect small counts"
"""District table note of a district whose counts are withheld this week."""
WITHHELD_TOTAL = "the jurisdiction's counts are withheld this week to protect small counts"
"""Indicator note when this week's jurisdiction total itself is withheld."""
PRIOR_WITHHELD_NOTE = "last week withheld to protect small counts"
"""District table note of a district shown this week whose last week is withheld."""


def withheld_sentence(
    *, n_now: int, n_before: int, total_now_reason: str = "", total_before_reason: str = ""
) -> str:
    """The report's short disclosure note: how many districts are withheld (never which rule).

    Empty when nothing is withheld.

    >>> withheld_sentence(n_now=2, n_before=1)
    '2 districts withheld to protect small counts this week (1 district last week); their counts, percentages and every figure derived from them are not shown.'
    >>> withheld_sentence(n_now=0, n_before=0)
    ''
    """
    if not (n_now or n_before or total_now_reason or total_before_reason):
        return ""

    def districts(n: int) -> str:
        return f"{n} district" + ("" if n == 1 else "s")

    if n_now:
        text = f"{districts(n_now)} withheld to protect small counts this week"
        if n_before:
            text += f" ({districts(n_before)} last week)"
    elif n_before:
        text = f"{districts(n_before)} withheld to protect small counts last week"
    else:
        text = ""
    if text:
        text += "; their counts, percentages and every figure derived from them are not shown."
    for which, reason in (("This week's", total_now_reason), ("Last week's", total_before_reason)):
        if reason:
            text += (
                " " if text else ""
            ) + f"{which} jurisdiction total is withheld as well: {reason}."
    return text


def redacted_finding(rule: str) -> str:
    """Message of a data-quality finding about a district whose counts are withheld.

    >>> redacted_finding("revision-large")
    'revision-large on a district whose counts are withheld to protect small counts; its values are not shown'
    """
    return f"{rule} on a district whose counts are withheld to protect small counts; its values are not shown"
