"""Value rules between a count table and the boundaries: ids, missing districts, names.

Each rule is a pure function of :class:`~sitrep.ingest.facts.TableFacts`
yielding :class:`~sitrep.ingest.findings.Hit` records, and yields nothing
when no boundaries are given. Rule ids and severities are in
:data:`sitrep.ingest.rules.REGISTRY`.
"""

from __future__ import annotations

import difflib
import functools
import re
import unicodedata
from collections.abc import Iterator, Sequence

import numpy as np
import pandas as pd

from sitrep.ingest.facts import TableFacts, first_index
from sitrep.ingest.findings import Hit

__all__ = [
    "district_missing_latest",
    "district_name_differs",
    "id_leading_zeros",
    "id_not_in_boundaries",
    "id_numeric_as_text",
]


def _digits(ident: str) -> str | None:
    """``ident`` without leading zeros when it is all ASCII digits and not all zeros."""
    return ident.lstrip("0") if ident.isascii() and ident.isdigit() and ident.lstrip("0") else None


@functools.lru_cache(maxsize=4)
def _by_digits(boundary_ids: tuple[str, ...]) -> dict[str, str]:
    """All-digit boundary ids by their digits without leading zeros (the first of each)."""
    found: dict[str, str] = {}
    for b in boundary_ids:
        stripped = _digits(b)
        if stripped is not None:
            found.setdefault(stripped, b)
    return found


def _padded_match(t: TableFacts, ident: str) -> str | None:
    """The boundary id that ``ident`` matches only with leading zeros added (or, when the
    boundary file stores numbers, removed), else None."""
    assert t.districts is not None
    stripped = _digits(ident)
    padded = _by_digits(tuple(t.boundary_ids)).get(stripped) if stripped is not None else None
    if padded is not None and (
        len(padded) > len(ident) or (t.districts.numeric_ids and len(ident) > len(padded))
    ):
        return padded
    return None


def _unknown_ids(t: TableFacts) -> Iterator[tuple[str, np.ndarray, str, int | None]]:
    """Per table id not in the boundaries: the id, its rows, its line listing, first line."""
    a = t.a
    known = set(t.boundary_ids)
    first_line = first_index(a.id_codes, len(a.id_uniques), a.lines)
    for code, ident in enumerate(a.id_uniques):
        if ident in known:
            continue
        rows = np.flatnonzero(a.id_codes == code)
        listing = ", ".join(str(x) for x in sorted(a.lines[rows])[:10])
        more = f" and {len(rows) - 10} more" if len(rows) > 10 else ""
        yield ident, rows, listing + more, int(a.lines[first_line[code]]) or None


def id_leading_zeros(t: TableFacts) -> Iterator[Hit]:
    """An all-digit id not in the boundaries that matches a boundary id once leading zeros
    are added (or, when the boundary file stores its ids as numbers, removed); the message
    names ``input.id_zero_pad`` with the width that would match."""
    if t.districts is None:
        return
    a = t.a
    numeric_lines = set(a.numeric_id_lines)
    for ident, rows, listing, line in _unknown_ids(t):
        padded = _padded_match(t, ident)
        if padded is None:
            continue
        width = max(len(padded), len(ident))
        if len(ident) > len(padded):
            stored = "the boundary file stores its ids as numbers"
        elif numeric_lines.intersection(a.lines[rows].tolist()):
            stored = "the table stored it as a number"
        else:
            stored = "a spreadsheet probably stored it as a number"
        yield Hit(
            f"district id {ident!r} (lines {listing}) matches the boundary id "
            f"{padded!r} only with leading zeros ({stored} and the zeros were lost). "
            f"Set input.id_zero_pad = {width} to pad all-digit ids to {width} digits in "
            "the table and the boundaries, or store the ids as text with their zeros",
            line=line,
            column=a.columns.district_id,
            district_id=ident,
            value=ident,
        )


def id_not_in_boundaries(t: TableFacts) -> Iterator[Hit]:
    """One finding per table id not in the boundaries (and not a lost-zeros match), at its
    first line, listing all its lines and near matches in the boundaries (same id after
    adding or removing leading zeros, ignoring case and whitespace, or by string
    similarity)."""
    if t.districts is None:
        return
    for ident, _, listing, line in _unknown_ids(t):
        if _padded_match(t, ident) is not None:
            continue
        near = _near_matches(ident, t.boundary_ids)
        hint = (
            f"; near matches in the boundaries: {', '.join(repr(m) for m in near)}"
            if near
            else "; no similar id in the boundaries"
        )
        yield Hit(
            f"expected every district id to be in the boundary file, got {ident!r} "
            f"(lines {listing}){hint}. Correct the id in the table (keep ids as text "
            "with their leading zeros) or add the district to the boundaries",
            line=line,
            column=t.a.columns.district_id,
            district_id=ident,
            value=ident,
        )


def id_numeric_as_text(t: TableFacts) -> Iterator[Hit]:
    """One note per file whose id cells were stored as whole numbers (XLSX, Parquet, a
    Shapefile's numeric field), saying how many of them matched; the boundary file's note
    only when the latest-week rules run (not again for the history file)."""
    if t.districts is None:
        return
    a, districts = t.a, t.districts
    known = set(t.boundary_ids)
    if a.numeric_id_lines:
        rows = np.flatnonzero(np.isin(a.lines, list(set(a.numeric_id_lines))))
        numeric_ids = sorted({str(a.ids[i]) for i in rows})
        matched = sum(1 for i in numeric_ids if i in known)
        outcome = (
            f"all {matched} matched the boundaries"
            if matched == len(numeric_ids)
            else f"{matched} of {len(numeric_ids)} matched the boundaries (the others are "
            "listed as errors)"
        )
        yield Hit(
            f"district ids in column {a.columns.district_id!r} were stored as numbers on "
            f"{len(rows)} line{'s' if len(rows) != 1 else ''}; read as text (e.g. "
            f"{numeric_ids[0]}), {outcome}",
            line=int(a.lines[rows].min()),
            column=a.columns.district_id,
            value=str(len(numeric_ids)),
        )
    if districts.numeric_ids and t.latest_week_rules:
        in_table = set(a.id_uniques)
        matched = sum(1 for i in t.boundary_ids if i in in_table)
        outcome = (
            f"all {matched} match the table"
            if matched == len(t.boundary_ids)
            else f"{matched} of {len(t.boundary_ids)} have rows in the table"
        )
        yield Hit(
            f"district ids in the boundary field {districts.id_column!r} are stored as "
            f"numbers; read as text (e.g. {t.boundary_ids[0]}), {outcome}",
            file=districts.source.path.name,
            column=districts.id_column,
            value=str(len(t.boundary_ids)),
        )


def district_missing_latest(t: TableFacts) -> Iterator[Hit]:
    """A boundary district with no row in the latest week."""
    if t.districts is None:
        return
    a = t.a
    latest = a.weeks[-1]
    names = t.districts.names
    present = set(np.asarray(a.ids[t.in_latest], dtype=object).tolist())
    for ident in t.boundary_ids:
        if ident not in present:
            yield Hit(
                f"district {ident} ({names.get(ident, '')}) is in the boundaries "
                f"but has no row for {latest}; it is shown as not reported. Ask whether its "
                "data are late",
                column=a.columns.district_id,
                district_id=ident,
                value=str(latest),
            )


def district_name_differs(t: TableFacts) -> Iterator[Hit]:
    """The table's name for a district, after NFC normalisation, case folding and collapsing
    whitespace, differs from the boundary name (one note per district)."""
    if t.districts is None:
        return
    a = t.a
    boundary_names = dict(t.districts.names)
    name_codes, name_uniques = pd.factorize(a.names)
    pair = a.id_codes.astype(np.int64) * (len(name_uniques) + 1) + name_codes
    pair_codes, _ = pd.factorize(pair)
    first = first_index(pair_codes, int(pair_codes.max()) + 1, a.lines)
    seen: set[str] = set()
    for i in sorted(first.tolist(), key=lambda r: a.lines[r]):
        ident, name = str(a.ids[i]), str(a.names[i])
        want = boundary_names.get(ident) or ""
        if ident in seen or not name or not want:
            continue
        if _squash_keep(name) != _squash_keep(want):
            seen.add(ident)
            yield Hit(
                f"the table names district {ident} {name!r} but the boundaries call it "
                f"{want!r}; the report uses the boundary name",
                line=a.line(int(i)),
                column=a.columns.district_name,
                district_id=ident,
                value=name,
            )


def _squash(text: str) -> str:
    return re.sub(r"\s+", "", unicodedata.normalize("NFC", text)).casefold()


def _squash_keep(text: str) -> list[str]:
    return unicodedata.normalize("NFC", text).casefold().split()


def _near_matches(ident: str, candidates: Sequence[str]) -> list[str]:
    """Boundary ids that ``ident`` probably meant, most likely first."""
    found: list[str] = []
    squashed = _squash(ident)
    for c in candidates:
        sc = _squash(c)
        if sc == squashed or (
            squashed.lstrip("0") == sc.lstrip("0") and squashed.lstrip("0") != ""
        ):
            found.append(c)
    for c in difflib.get_close_matches(ident, list(candidates), n=3, cutoff=0.75):
        if c not in found:
            found.append(c)
    return found[:3]
