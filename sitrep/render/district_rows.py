"""The district rows of the report: every district of the week's table as display strings.

One :class:`DistrictRow` per district, in the analysis table's order, and the
PDF's shorter list (highest ILI% first, plus every district page 1 names).
Withheld districts show "withheld" and nothing that would give their counts
away (docs/methods.md §6.2).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Collection, Mapping, Sequence
from typing import Any

from sitrep.analysis.seasonal_context import SeasonalContext
from sitrep.analysis.week import WeekAnalysis
from sitrep.render.wording import formats as fm
from sitrep.render.wording import sentences as nv
from sitrep.render.wording.sentences import PRIOR_WITHHELD_NOTE, WITHHELD_NOTE

__all__ = ["DistrictRow", "as_float", "district_rows", "pdf_rows"]


@dataclasses.dataclass(frozen=True)
class DistrictRow:
    """One district in the district table (all display strings)."""

    district_id: str
    name: str
    sites: str
    ili_visits: str
    total_visits: str
    ili_pct: str
    ci: str
    change: str
    change_class: str
    tercile: str
    cluster: str
    transition: str
    flags: str
    notes: str
    sort_pct: float
    suppressed: bool


_TERCILE = {0: "no data", 1: "low", 2: "middle", 3: "high"}


def as_float(x: Any) -> float:
    """A table cell as a float; NaN when it is not a number (None, "", text)."""
    try:
        value = float(x)
    except (TypeError, ValueError):
        return math.nan
    return value


def district_rows(
    analysis: WeekAnalysis, seasonal: SeasonalContext, change_alpha: float, digits: int
) -> tuple[DistrictRow, ...]:
    """One row per district of ``analysis.table``, in its order; ``digits`` prints ILI%."""
    return tuple(
        _row(rec, seasonal.district_flags, change_alpha, digits)
        for rec in analysis.table.to_dict("records")
    )


def _notes(rec: Mapping[str, Any], suppressed: bool, total: float) -> list[str]:
    """The notes column: withheld this week, not reported, or withheld last week."""
    notes = []
    if suppressed:
        notes.append(WITHHELD_NOTE)
    elif not math.isfinite(total):
        notes = ["not reported this week"]
    elif bool(rec.get("prior_suppressed")):
        notes.append(PRIOR_WITHHELD_NOTE)
    return notes


def _change_text(
    rec: Mapping[str, Any], pct: float, change_pp: float, show: bool, digits: int
) -> str:
    """The change column: from zero, the change in pp, or a dash."""
    if rec.get("change_from_zero") and show:
        return f"from 0 to {fm.fmt_pct(pct, digits)}"
    if show and math.isfinite(change_pp):
        return fm.fmt_pp(change_pp).replace(" percentage points", " pp")
    return "—"


def _row(
    rec: Mapping[str, Any], flags_of: Mapping[str, str], change_alpha: float, digits: int
) -> DistrictRow:
    """The display row of one record of the analysis table."""
    suppressed = bool(rec["suppressed"])
    total = as_float(rec["total_visits"])
    notes = _notes(rec, suppressed, total)
    pct = as_float(rec["ili_percent"])
    show = not suppressed and math.isfinite(pct)
    change_pp = as_float(rec["change_pp"])
    change_text = _change_text(rec, pct, change_pp, show, digits)
    verdict = nv.change_verdict(
        change_class=str(rec["change_class"]),
        p_value=as_float(rec["change_p"]),
        alpha=change_alpha,
        diff_pp=change_pp,
        low_pp=as_float(rec["change_low_pp"]),
        high_pp=as_float(rec["change_high_pp"]),
    )
    flags = flags_of.get(rec["district_id"], "")
    return DistrictRow(
        district_id=str(rec["district_id"]),
        name=str(rec["district_name"]),
        sites=fm.fmt_count(rec["reporting_sites"])
        if math.isfinite(as_float(rec["reporting_sites"]))
        else "—",
        ili_visits=fm.fmt_count(rec["ili_visits"]) if show else ("withheld" if suppressed else "—"),
        total_visits="withheld"
        if suppressed
        else (fm.fmt_count(total) if math.isfinite(total) else "—"),
        ili_pct=fm.fmt_pct(pct, digits) if show else ("withheld" if suppressed else "no data"),
        ci=fm.fmt_interval(as_float(rec["ci_low"]), as_float(rec["ci_high"])) if show else "—",
        change=change_text,
        change_class=verdict if show and math.isfinite(change_pp) else "not assessable",
        tercile=_TERCILE[int(rec["tercile"])],
        cluster=str(rec["cluster_label"]),
        transition=str(rec["transition"] or ""),
        flags="" if suppressed else flags,
        notes="; ".join(notes),
        sort_pct=pct if show else math.nan,
        suppressed=suppressed or not math.isfinite(pct),
    )


def pdf_rows(
    rows: Sequence[DistrictRow], top_n: int, named_ids: Collection[str]
) -> list[DistrictRow]:
    """The PDF's districts: the ``top_n`` highest ILI% and every named one, highest first.

    Named districts without a shown value follow, in table order.
    """
    ranked = sorted(
        (r for r in rows if not r.suppressed and not math.isnan(r.sort_pct)),
        key=lambda r: (-r.sort_pct, r.name.casefold()),
    )
    top_ids = {r.district_id for r in ranked[:top_n]}
    top = [r for r in ranked if r.district_id in top_ids or r.district_id in named_ids]
    top += [r for r in rows if r.district_id in named_ids and r not in top]
    return top
