"""The last few weeks classed on this week's tercile cut points (pure: no I/O).

One legend then serves every small-multiple panel: a district in the top
class in an earlier panel was above this week's upper cut point that week.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from sitrep.analysis.disclosure import DisclosureRules, primary_rule
from sitrep.analysis.proportions import BoolArray, FloatArray, IntArray, ili_percent
from sitrep.analysis.ranks import NO_DATA, TercileResult
from sitrep.analysis.week_counts import aligned, combine, week_rows
from sitrep.model import CountTable
from sitrep.weeks import EpiWeek

__all__ = ["fixed_ranks", "recent_terciles"]


def fixed_ranks(values: FloatArray, cuts: tuple[float, float], valid: BoolArray) -> IntArray:
    """Class ``values`` on given tercile cut points, as :func:`tercile_ranks` does.

    Right-closed classes: 1 if ``v <= q1``, 2 if ``q1 < v <= q2``, 3 if
    ``v > q2``; ``NO_DATA`` (0) where the value is not finite or ``valid``
    is False.
    """
    out = np.full(values.shape, NO_DATA, dtype=np.int64)
    ok = np.isfinite(values) & valid
    out[ok] = np.searchsorted(np.asarray(cuts), values[ok], side="left") + 1
    return out


def recent_terciles(
    current: CountTable,
    prior: CountTable | None,
    ids: tuple[str, ...],
    week: EpiWeek,
    recent_weeks: int,
    terciles: TercileResult,
    rules: DisclosureRules,
    withheld: Mapping[EpiWeek, BoolArray],
    notes: list[str],
) -> tuple[tuple[EpiWeek, IntArray], ...]:
    """Last weeks classed on this week's cut points (current table first, then prior).

    This week and last week leave out their withheld districts; earlier weeks
    leave out the districts the primary rule would withhold.
    """
    if terciles.cuts is None:
        notes.append("recent weeks are not classed: this week has no tercile cut points")
        return ()
    out: list[tuple[EpiWeek, IntArray]] = []
    skipped: list[str] = []
    for back in range(recent_weeks - 1, -1, -1):
        w = week - back
        counts = aligned(week_rows(current.frame, w), ids)
        if prior is not None:
            counts, _ = combine(counts, aligned(week_rows(prior.frame, w), ids))
        if not counts.has_data.any():
            skipped.append(str(w))
            continue
        if w in withheld:
            hidden = withheld[w]
        else:
            hidden = np.array(
                [
                    not (np.isnan(x) or np.isnan(n))
                    and primary_rule(int(x), int(n), rules) is not None
                    for x, n in zip(counts.ili, counts.visits, strict=True)
                ],
                dtype=bool,
            )
        valid = counts.has_data & ~hidden & (counts.visits > 0)
        ranks = fixed_ranks(ili_percent(counts.ili, counts.visits), terciles.cuts, valid)
        ranks.setflags(write=False)
        out.append((w, ranks))
    if skipped:
        notes.append(f"no counts for {', '.join(skipped)}: those map panels are left out")
    return tuple(out)
