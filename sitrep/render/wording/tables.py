"""Words of the district table: column headings, the natural order of class columns, the key.

Pure values and functions; :mod:`sitrep.render.district_table` lays the table
out with them.
"""

from __future__ import annotations

from collections.abc import Collection

from sitrep.render.wording.sentences import VERDICTS

__all__ = [
    "CLASS_ORDERS",
    "HEADINGS",
    "pdf_table_note",
    "table_key",
]

HEADINGS: dict[str, str] = {
    "name": "District",
    "district_id": "Id",
    "sites": "Sites",
    "ili_visits": "ILI visits",
    "total_visits": "All visits",
    "ili_pct": "ILI %",
    "ci": "{confidence} CI",
    "change": "Change",
    "change_class": "Change class",
    "tercile": "Tercile",
    "cluster": "Cluster",
    "transition": "Since last week",
    "flags": "Flags",
    "notes": "Notes",
}
"""Column headings in table order (``ci`` is filled with the interval's coverage, e.g. '95%')."""

CLASS_ORDERS: dict[str, tuple[str, ...]] = {
    "change_class": (
        "clear decrease",
        "small decrease",
        "no clear change",
        "small increase",
        "clear increase",
        "not assessable",
    ),
    "tercile": ("low", "middle", "high", "no data"),
    "cluster": (
        "high-high",
        "low-low",
        "high-low",
        "low-high",
        "not significant",
        "no neighbours",
        "no data",
        "not assessable",
    ),
    "transition": ("new", "persisting", "changed type", "ended", "not comparable"),
}
"""The natural order of each class column, lowest first; unknown words sort after these by name."""

assert set(CLASS_ORDERS["change_class"]) == set(VERDICTS)


def table_key(columns: Collection[str], *, min_visits: int | None = None) -> tuple[str, ...]:
    """The key printed under the district table, one entry per shown column that needs one.

    >>> table_key(["change", "flags"])[0]
    'Change: this week minus last week, in percentage points (pp).'
    """
    key = []
    if "change" in columns:
        key.append("Change: this week minus last week, in percentage points (pp).")
    if "change_class" in columns:
        key.append(
            "Change class: clear when the change test is met and the change reaches the minimum meaningful "
            "change; small when only the test is met (see Methods)."
        )
    if "cluster" in columns:
        key.append(
            "Cluster: high-high and low-low districts resemble their neighbours, high-low and low-high "
            "contrast with them, more than chance would suggest."
        )
    if "transition" in columns:
        key.append(
            "Since last week: the district's cluster label against last week's (new, persisting, changed "
            "type, ended; not comparable when one of the two weeks was not tested)."
        )
    if "flags" in columns:
        key.append(
            "Flags: the early-aberration statistics whose alarm limit the district's ILI% passed this week: "
            "C1 against the 7 weeks before, C2 against the 7 weeks before a 2-week gap, C3 adding up the "
            "last 3 weeks of C2 (see Methods)."
        )
    if min_visits is not None and "ili_pct" in columns:
        key.append(f"Suppressed: fewer than {min_visits} visits; the value is not shown.")
    return tuple(key)


def pdf_table_note(*, n_shown: int, n_all: int) -> str:
    """The sentence under the PDF's district table (the HTML report has every district)."""
    return (
        f"The {n_shown} districts with the highest ILI% this week or named above, highest first; the "
        f"full table of {n_all} districts is in the HTML report and results.csv."
    )
