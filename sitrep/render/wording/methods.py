"""The methods and cautions sections, in words (formulas and sources: docs/methods.md).

Library class names and internal scaling formulas stay out of the report;
library versions are listed in the provenance. Every value comes from a
:class:`MethodSettings` built by the caller from the configuration and the
week's results.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence

from sitrep.render.wording.formats import confidence_label, join_names

__all__ = [
    "MethodSettings",
    "cautions",
    "methods_sections",
    "seasonal_method_text",
    "variable_words",
]

_TESTS = {
    "pooled-z": "a two-sided pooled two-proportion z test",
    "poisson-score": "a two-sided score test comparing two Poisson rates with the visits as exposure",
}
_INTERVALS = {"wilson": "Wilson score", "clopper-pearson": "Clopper–Pearson exact"}
_WEIGHTS = {
    "queen": "Queen contiguity (districts sharing a border or a corner are neighbours)",
    "rook": "Rook contiguity (districts sharing a border are neighbours)",
    "knn": "k-nearest-neighbour",
}


def variable_words(variable: str) -> str:
    """``'ili_percent' -> 'ILI%'``; ``'eb_rate' -> 'the empirical Bayes smoothed ILI%'``."""
    return "the empirical Bayes smoothed ILI%" if variable == "eb_rate" else "ILI%"


@dataclasses.dataclass(frozen=True)
class MethodSettings:
    """Plain values the methods section describes (from the configuration and the week's results)."""

    jurisdiction: str
    confidence: float
    interval: str
    min_visits: int
    change_test: str
    change_alpha: float
    min_change_pp: float
    weights: str
    knn_k: int
    link_islands_k: int
    n_links: int
    islands: Sequence[str]
    cluster_variable: str
    permutations: int
    seed: int
    correction: str
    fdr_q: float
    alpha: float
    global_text: str
    seasonal_text: str
    week_system: str
    season_label: str
    season_start_week: int
    min_count: int = 5
    suppress_zero: bool = False


def disclosure_method_text(*, min_visits: int, min_count: int, suppress_zero: bool) -> str:
    """The methods entry on withheld counts (docs/methods.md §6.2).

    >>> disclosure_method_text(min_visits=50, min_count=5, suppress_zero=False)[:94]
    "A district's counts are withheld in a week when it had fewer than 50 visits or 1 to 4 ILI visits"
    """
    small = f" or 1 to {min_count - 1} ILI visits" if min_count > 1 else ""
    zero = "; a zero count is withheld too" if suppress_zero else "; a zero count is shown"
    return (
        f"A district's counts are withheld in a week when it had fewer than {min_visits} visits{small}"
        f"{zero}. So that a withheld count cannot be worked out by subtracting the districts shown "
        "from the jurisdiction total, further districts (those with the fewest visits first) are "
        f"withheld until at least two are withheld and together they hold at least {min_visits} visits "
        f"and {max(min_count, 1)} ILI visits; the same is done for last week, and a district withheld "
        "in an earlier version of this report or in last week's report stays withheld. A withheld "
        "district's count, visits, percentage, interval, change, tercile, smoothed rate, cluster "
        "statistics and flags are not shown, and it takes no part in the terciles, the smoothing or "
        "the cluster statistics. When no choice of districts can protect the small counts, the "
        "jurisdiction total is withheld as well and the report says so."
    )


def methods_sections(m: MethodSettings) -> tuple[tuple[str, str], ...]:
    """(term, description) pairs of the methods section."""
    conf = confidence_label(m.confidence)
    weights = _WEIGHTS.get(m.weights, m.weights)
    if m.weights == "knn":
        weights = f"{weights} ({m.knn_k} nearest districts)"
    islands = (
        f"districts with no neighbour: {join_names(m.islands, limit=20)} (never tested)"
        if m.islands
        else "every district has at least one neighbour"
    )
    multiple = (
        f"the Benjamini–Hochberg false discovery rate is held at {m.fdr_q:g} over the districts tested; "
        "a district is flagged when its adjusted p-value is at most that level"
        if m.correction == "fdr_bh"
        else f"no adjustment; a district is flagged when its p-value is at most {m.alpha:g}"
    )
    return (
        (
            "ILI percentage",
            (
                f"ILI visits divided by all outpatient visits, per district and pooled over districts for "
                f"{m.jurisdiction} (a pooled ratio, not a population-weighted mean). "
                f"{_INTERVALS.get(m.interval, m.interval)} {conf} confidence intervals from unrounded counts."
            ),
        ),
        (
            "Small counts",
            disclosure_method_text(
                min_visits=m.min_visits, min_count=m.min_count, suppress_zero=m.suppress_zero
            ),
        ),
        (
            "Week-over-week change",
            (
                f"This week against last week's revised value, in percentage points, with a Newcombe hybrid "
                f"score {conf} confidence interval, tested with {_TESTS.get(m.change_test, m.change_test)}. "
                f"The change is detectable when p < {m.change_alpha:g} and the interval excludes zero. "
                f"A clear increase or decrease is detectable and at least {m.min_change_pp:g} percentage "
                "points; a small but detectable change is below that; otherwise there is no clear change."
            ),
        ),
        (
            "Terciles",
            (
                "Cut points are the one-third and two-thirds quantiles (linear interpolation) of this week's "
                "district values not withheld; a value equal to a cut point belongs to the lower class, "
                "and values and cut points are printed with enough decimals to show which side they are on. "
                "The same cut points class the earlier weeks in the small multiples."
            ),
        ),
        (
            "Spatial weights",
            (
                f"{weights}, each district's neighbours weighted equally"
                + (
                    f", islands linked to their {m.link_islands_k} nearest districts"
                    if m.link_islands_k
                    else ""
                )
                + f"; {m.n_links} links; {islands}."
            ),
        ),
        (
            "Local Moran's I",
            (
                f"Local Moran's I (Anselin 1995) of {variable_words(m.cluster_variable)} per district, compared "
                f"with the same statistic after {m.permutations:,} random reshufflings of the other districts' "
                f"values (conditional permutation, seed {m.seed}); the pseudo p-value counts the reshufflings at "
                f"least as extreme as the observed value, on the side it falls. Multiple testing: {multiple}. "
                "Districts without data or withheld to protect small counts are left out; districts with no neighbour are "
                "never tested."
            ),
        ),
        ("Global Moran's I", m.global_text),
        ("Seasonal thresholds", m.seasonal_text),
        (
            "Week numbering",
            (
                f"{m.week_system}; season {m.season_label} starts in week {m.season_start_week}. "
                "Some years have a week 53."
            ),
        ),
    )


def seasonal_method_text(
    *,
    max_seasons: int,
    delta: float,
    form: str,
    onset_weeks: int,
    season_start_week: int,
    window_end_week: int,
    baseline_sd: float,
    baseline_seasons_used: int,
    baseline_weeks: int,
    baseline_reason: str,
    sd_floor_pp: float,
    seasons_used: Sequence[str],
) -> str:
    """The seasonal-thresholds entry of the methods."""
    form_words = (
        "the mean plus a multiple of the standard deviation of those values"
        if form == "point"
        else "the upper confidence limit of the mean of those values"
    )
    window = (
        f"from week {season_start_week} to week {window_end_week} of each past season"
        if window_end_week
        else f"over whole past seasons from week {season_start_week}"
    )
    baseline = (
        f"the mean plus {baseline_sd:g} standard deviations of ILI% in the weeks outside each of the "
        f"last {baseline_seasons_used} seasons' epidemic periods ({baseline_weeks} weeks)"
        if baseline_seasons_used
        else (baseline_reason or "not available")
    )
    text = (
        f"Moving Epidemic Method (Vega et al. 2013; intensity levels Vega et al. 2015) on the pooled weekly "
        f"ILI% of up to {max_seasons} past seasons, {window}: each season's epidemic period is the run of weeks "
        f"holding most of its activity (slope criterion {delta:g}); the epidemic threshold comes from the highest "
        f"values before those periods, and the medium, high and very high intensity thresholds (40%, 90% and "
        f"97.5% levels) from the highest values within them on the log scale, as {form_words}. Onset: first of "
        f"{onset_weeks} consecutive weeks at or above the epidemic threshold. Baseline: {baseline} (without "
        "laboratory data, non-influenza weeks are the weeks outside each season's epidemic period). District "
        "flags: the C1, C2 and C3 aberration statistics (Hutwagner et al. 2003) on weekly ILI%, baseline "
        f"standard deviation at least {sd_floor_pp:g} percentage points."
    )
    if seasons_used:
        text += f" Seasons used: {', '.join(seasons_used)}."
    return text


def cautions(
    *, confidence: float, case_definition: str, coverage: str, completeness: str
) -> tuple[str, ...]:
    """The cautions section; the first is printed in the header too."""
    return (
        "Figures are provisional: recent weeks usually rise as late reports arrive, and past weeks"
        " may be revised.",
        "Influenza-like illness is a syndrome defined by symptoms; it includes illnesses other than"
        f" influenza and is not laboratory-confirmed influenza. {case_definition}",
        coverage,
        completeness,
        "Percentages for districts with few visits are unstable; districts below the minimum number"
        " of visits are not shown.",
        f"The {confidence_label(confidence)} confidence intervals and tests assume each visit is an"
        " independent draw (binomial sampling); visits cluster within practices, so the true"
        " uncertainty is larger (overdispersion) and borderline results deserve caution.",
        "Clusters are statistical: they mark districts whose values resemble their neighbours' more"
        " than chance would suggest, not a common source of infection. With many districts, some"
        " flags occur by chance.",
        "This report describes population-level surveillance and is not for individual clinical"
        " decisions.",
        "Defer to the local health authority for public-health action and follow its rules on"
        " small-number suppression before sharing district figures.",
    )


def case_definition_sentence(definition: str) -> str:
    """The ILI case definition used, or a note that none was configured."""
    if definition:
        return f"Case definition used: {definition.rstrip('.')}."
    return "The case definition is that of the reporting sites; it was not stated in the configuration."


def coverage_sentence(*, n_sites: float | None, n_reporting: int, n_total: int) -> str:
    """Sentinel coverage and representativeness."""
    sites = f"{int(n_sites):,} sentinel sites in " if n_sites is not None else ""
    return (
        f"Counts come from {sites}{n_reporting} of {n_total} districts; sentinel sites are not a random"
        " sample of the population, so the percentages describe the people who visit those sites."
    )


def completeness_sentence(*, visits_now: int | None, visits_usual: float | None, weeks: int) -> str:
    """Completeness of this week's reporting against the usual volume of visits
    (``visits_now`` None: this week's total is withheld)."""
    if visits_now is None:
        return "Completeness is not shown: this week's total is withheld to protect small counts."
    if visits_usual is None or visits_usual <= 0:
        return "Completeness against the usual volume could not be judged: too few recent weeks."
    share = visits_now / visits_usual
    return (
        f"This week's {visits_now:,} visits are {share:.0%} of the median of the previous {weeks} weeks"
        f" ({int(round(visits_usual)):,}); "
        + (
            "reporting looks as complete as usual."
            if share >= 0.9
            else "reporting is less complete than usual."
        )
    )


__all__ += ["case_definition_sentence", "completeness_sentence", "coverage_sentence"]
