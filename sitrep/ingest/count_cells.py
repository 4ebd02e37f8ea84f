"""Count and rate cells of a table: plain decimal numbers in the declared notation.

Each distinct cell text is parsed once. A blank required count, a cell that
is not a plain number and a fractional count are error findings, each with a
hint on how to fix the cell (a ``%`` sign, a censored ``<5``, a thousands
separator or the other decimal mark).
"""

from __future__ import annotations

import dataclasses
import re
from collections.abc import Callable
from typing import Any

import numpy as np

from sitrep.ingest.findings import FindingCollector
from sitrep.ingest.raw_table import Col, Raw

__all__ = ["Cells", "apply_unique", "count_column", "rate_column"]

_INT_TEXT = {".": re.compile(r"^[+-]?\d+(?:\.\d+)?$"), ",": re.compile(r"^[+-]?\d+(?:,\d+)?$")}
_THOUSANDS = re.compile(r"^[+-]?\d{1,3}(?:[ ,.'\u00a0\u202f]\d{3})+$")


def _number_hint(text: str, decimal: str) -> str:
    if "%" in text:
        return "remove the % sign and give the count"
    if text.startswith(("<", ">", "≤", "≥")):
        return "a censored value such as <5 cannot be counted; supply the exact count"
    other = "," if decimal == "." else "."
    decimal_like = re.match(rf"^[+-]?\d+\{other}\d+$", text) is not None
    if _THOUSANDS.match(text):
        if decimal_like:  # '3,779' is 3779 with grouping, or 3.779 with a decimal comma
            return (
                f"it has a thousands separator or uses {other!r} as the decimal mark; export "
                f"numbers without grouping, or set input.decimal = {other!r} if that is the "
                "file's decimal mark"
            )
        return "it looks like a thousands separator; export numbers without grouping"
    if decimal_like:
        return (
            f"it uses {other!r} as the decimal mark but input.decimal is {decimal!r}; "
            f"set input.decimal = {other!r} if that is the file's convention"
        )
    return "give a plain number such as 12"


def _parse_number(text: str, decimal: str) -> float | None:
    """Plain decimal number in the declared notation, else None."""
    t = text.strip()
    if not _INT_TEXT[decimal].match(t):
        return None
    return float(t.replace(",", ".")) if decimal == "," else float(t)


def apply_unique(col: Col, parse: Callable[[str], Any]) -> tuple[np.ndarray, list[Any], np.ndarray]:
    """Parse each distinct text once: (codes, parsed uniques, unique texts)."""
    return col.codes, [parse(str(u)) for u in col.uniques], col.uniques


@dataclasses.dataclass(frozen=True)
class Cells:
    """The rows of a table being typed, for findings about its cells."""

    raw: Raw
    names: list[str]
    """Column names as in the header (NFC, stripped)."""
    id_at: Callable[[int], str | None]
    """The district id of a row (by position in ``raw``), or None when it is blank."""
    out: FindingCollector

    def cell_error(
        self, rule: str, pos: int, rows: np.ndarray, message: Callable[[str], str]
    ) -> None:
        """One error per row in ``rows`` of column ``pos``; ``message`` gets the cell text."""
        for i in rows:
            value = self.raw.columns[pos].text(i)
            self.out.error(
                rule,
                message(value),
                line=int(self.raw.lines[i]),
                column=self.names[pos],
                district_id=self.id_at(i),
                value=value,
            )


def _parsed_numbers(
    cells: Cells, pos: int, decimal: str
) -> tuple[np.ndarray, list[Any], np.ndarray]:
    """Codes, parsed numbers (None when not a number) and blank flags of the distinct texts."""
    codes, parsed, texts = apply_unique(cells.raw.columns[pos], lambda t: _parse_number(t, decimal))
    blank_u = np.array([not str(t).strip() for t in texts], dtype=bool)
    return codes, parsed, blank_u


def _not_number(cells: Cells, pos: int, rows: np.ndarray, what: str, decimal: str) -> None:
    cells.cell_error(
        "cell-not-number",
        pos,
        rows,
        lambda v: (
            f"expected {what} as a plain number, got {v!r}; " + _number_hint(v.strip(), decimal)
        ),
    )


def _values(parsed: list[Any]) -> np.ndarray:
    return np.array([np.nan if p is None else p for p in parsed], dtype=np.float64)


def count_column(cells: Cells, pos: int, required: bool, what: str, decimal: str) -> np.ndarray:
    """The counts of column ``pos`` per row (NaN where blank or bad), every bad cell reported."""
    codes, parsed, blank_u = _parsed_numbers(cells, pos, decimal)
    bad_u = np.array([p is None for p in parsed], dtype=bool) & ~blank_u
    frac_u = np.array([p is not None and not float(p).is_integer() for p in parsed], dtype=bool)
    if required:
        cells.cell_error(
            "cell-missing",
            pos,
            np.flatnonzero(blank_u[codes]),
            lambda v: (
                f"expected the number of {what}, got an empty cell; enter the count "
                "(0 if there were none) or delete the row"
            ),
        )
    _not_number(cells, pos, np.flatnonzero(bad_u[codes]), f"the number of {what}", decimal)
    cells.cell_error(
        "count-not-integer",
        pos,
        np.flatnonzero(frac_u[codes]),
        lambda v: (
            f"expected a whole number of {what}, got {v!r}; counts of visits or "
            "sites cannot be fractional. Check the export (was a rate put in this column?)"
        ),
    )
    return _values(parsed)[codes] if len(parsed) else np.zeros(0)


def rate_column(cells: Cells, pos: int, decimal: str, per_1000: bool) -> np.ndarray:
    """The supplied rate of column ``pos`` per row in percent (NaN where blank or bad)."""
    codes, parsed, blank_u = _parsed_numbers(cells, pos, decimal)
    bad_u = np.array([p is None for p in parsed], dtype=bool) & ~blank_u
    _not_number(cells, pos, np.flatnonzero(bad_u[codes]), "the supplied rate", decimal)
    values = _values(parsed)[codes]
    return values / 10.0 if per_1000 else values
