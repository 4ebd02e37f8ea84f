"""District id cells of a count table: numbers stored for ids, stripped spaces, zero padding.

An id cell stored as a whole number (an XLSX number, a Parquet numeric
column) is read as its digits and its line kept, so the boundary check can
tell a lost leading zero from a match; any other number is an error.
"""

from __future__ import annotations

import re

import numpy as np

from sitrep.config import InputSettings
from sitrep.ingest.findings import FindingCollector, line_list
from sitrep.ingest.raw_table import Raw, nfc
from sitrep.model import Severity

__all__ = ["ids_as_read", "numeric_id_lines", "pad_id"]

_DIGITS = re.compile(r"^-?\d+$")


def pad_id(ident: str, width: int | None) -> str:
    """``ident`` left-padded with zeros to ``width`` digits when it is all digits and shorter."""
    if width and ident.isascii() and ident.isdigit() and len(ident) < width:
        return ident.zfill(width)
    return ident


def numeric_id_lines(raw: Raw, pos_id: int) -> tuple[int, ...]:
    """Lines whose id cell was stored as a number (XLSX cell or Parquet numeric column)."""
    if pos_id in raw.numeric_columns:
        mask = raw.columns[pos_id].uniques[raw.columns[pos_id].codes] != ""
    else:
        mask = raw.numeric_id_cells.get(pos_id, np.zeros(len(raw.lines), dtype=bool))
    return tuple(int(x) for x in raw.lines[mask])


def ids_as_read(
    raw: Raw,
    pos_id: int,
    id_codes: np.ndarray,
    id_u: np.ndarray,
    column: str,
    settings: InputSettings,
    out: FindingCollector,
) -> np.ndarray:
    """Check numeric id cells, report stripped whitespace, pad ids; return the id uniques.

    A number that is a whole number is read as its digits (the boundary check
    then says whether it matched); any other number (4101.5, 1e+20) is an error.
    """
    col = raw.columns[pos_id]
    numeric = set(numeric_id_lines(raw, pos_id))
    if numeric:
        for i in np.flatnonzero(np.isin(raw.lines, list(numeric))).tolist():
            text = col.text(i).strip()
            if text and not _DIGITS.match(text):
                out.error(
                    "id-numeric",
                    f"expected a district id, got the number {text}, which is not a whole "
                    "number; an id read from it could be wrong. Format the id column as Text "
                    "in the spreadsheet and enter the ids as they are in the boundary file",
                    line=int(raw.lines[i]),
                    column=column,
                    district_id=text,
                    value=text,
                )
    if settings.strip_id_whitespace:
        changed_u = np.array(
            [
                nfc(str(u)) != str(p) and str(p) != ""
                for u, p in zip(col.uniques, id_u, strict=True)
            ],
            dtype=bool,
        )
        rows = np.flatnonzero(changed_u[id_codes]) if len(changed_u) else np.zeros(0, np.int64)
        if len(rows):
            lines = sorted(int(raw.lines[i]) for i in rows)
            out.add(
                Severity.INFO,
                "id-whitespace-stripped",
                f"{len(lines)} district id{'s' if len(lines) != 1 else ''} had spaces around "
                f"them, removed before matching (input.strip_id_whitespace), on line"
                f"{'s' if len(lines) != 1 else ''} {line_list(lines)}",
                line=lines[0],
                column=column,
                value=str(len(lines)),
            )
    width = settings.id_zero_pad
    if width:
        padded = np.array([pad_id(str(u), width) for u in id_u], dtype=object)
        changed = np.flatnonzero(padded != id_u)
        if len(changed):
            rows = np.flatnonzero(np.isin(id_codes, changed))
            example = f"{id_u[changed[0]]} -> {padded[changed[0]]}"
            out.add(
                Severity.INFO,
                "id-zero-padded",
                f"{len(changed)} district id{'s' if len(changed) != 1 else ''} on {len(rows)} "
                f"line{'s' if len(rows) != 1 else ''} were padded with leading zeros to "
                f"{width} digits (input.id_zero_pad = {width}; e.g. {example})",
                line=int(raw.lines[rows].min()),
                column=column,
                value=str(len(changed)),
            )
            return padded
    return id_u
