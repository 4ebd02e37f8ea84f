"""How numbers, lists and names are printed (pure functions, no settings read here).

Rules kept by ``tests/test_wording.py``:

- a missing number reads 'not available', never 'nan', 'inf' or 'None';
- negative numbers carry a true minus sign (U+2212), ranges an en dash;
- changes are in 'percentage points';
- class cut points and the values they class are printed with the same,
  sufficient number of decimals (:func:`class_digits`), so a value printed
  like the cut point is never in a class the cut point's words exclude.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Iterable, Sequence
from typing import TypeGuard

__all__ = [
    "MINUS",
    "NOT_AVAILABLE",
    "class_digits",
    "confidence_label",
    "fmt_count",
    "fmt_interval",
    "fmt_num",
    "fmt_pct",
    "fmt_pp",
    "fmt_signed",
    "fmt_week_dates",
    "join_names",
    "plural",
]

NOT_AVAILABLE = "not available"
MINUS = "\u2212"


def finite(x: object) -> TypeGuard[float]:
    """True for a real, finite number (bool excluded)."""
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def _fixed(x: float, digits: int) -> str:
    """``x`` to ``digits`` decimals with a true minus sign and no '-0.0'."""
    text = f"{x:.{digits}f}"
    if text.startswith("-"):
        text = text[1:] if float(text) == 0 else MINUS + text[1:]
    return text


def fmt_pct(x: float | None, digits: int = 1) -> str:
    """``2.345 -> '2.3%'``; a missing value -> 'not available'.

    >>> fmt_pct(2.345), fmt_pct(float("nan")), fmt_pct(2.767, 2)
    ('2.3%', 'not available', '2.77%')
    """
    return f"{_fixed(x, digits)}%" if finite(x) else NOT_AVAILABLE


def fmt_num(x: float | None, digits: int = 1) -> str:
    """A bare number to ``digits`` decimals (true minus sign), or 'not available'.

    >>> fmt_num(-0.42)
    '−0.4'
    """
    return _fixed(x, digits) if finite(x) else NOT_AVAILABLE


def fmt_signed(x: float | None, digits: int = 1) -> str:
    """``0.42 -> '+0.4'``, ``-0.42 -> '−0.4'``, ``0.01 -> '±0.0'``."""
    if not finite(x):
        return NOT_AVAILABLE
    assert x is not None
    value = round(x, digits)
    sign = "+" if value > 0 else MINUS if value < 0 else "±"
    return sign + f"{abs(value):.{digits}f}"


def fmt_pp(x: float | None, digits: int = 1, *, signed: bool = True) -> str:
    """``0.42 -> '+0.4 percentage points'``; the minus sign is a true minus.

    >>> fmt_pp(-0.42)
    '−0.4 percentage points'
    """
    if not finite(x):
        return NOT_AVAILABLE
    text = fmt_signed(x, digits) if signed else _fixed(abs(x), digits)
    return f"{text} percentage points"


def fmt_count(n: float | None) -> str:
    """Whole number with thousands separators, or 'not available'.

    >>> fmt_count(12345)
    '12,345'
    """
    return f"{int(n):,}" if finite(n) else NOT_AVAILABLE


def fmt_interval(low: float | None, high: float | None, unit: str = "%", digits: int = 1) -> str:
    """``(1.2, 3.4) -> '1.2–3.4%'``; a bound below zero -> '−0.1 to 0.6'; or 'not available'.

    >>> fmt_interval(-0.12, 0.61, " pp")
    '−0.1 to 0.6 pp'
    """
    if not (finite(low) and finite(high)):
        return NOT_AVAILABLE
    a, b = _fixed(low, digits), _fixed(high, digits)
    sep = " to " if a.startswith(MINUS) or b.startswith(MINUS) else "–"
    return f"{a}{sep}{b}{unit}"


def confidence_label(confidence: float) -> str:
    """``0.95 -> '95%'``, ``0.9 -> '90%'``, ``0.995 -> '99.5%'`` (the interval's coverage)."""
    return f"{100 * confidence:.10g}%"


def join_names(names: Sequence[str], *, limit: int = 8, ordered: bool = False) -> str:
    """Comma-separated list with 'and'; long lists end in 'and N more'.

    Names are sorted alphabetically unless ``ordered`` is True, when the
    caller's order (e.g. highest value first) is kept, so a shortened list
    leaves out the last ones of that order.

    >>> join_names(["Ostrelle", "Brannoch Vale", "Ashby"])
    'Ashby, Brannoch Vale and Ostrelle'
    >>> join_names(list("JIHGFEDCBA"), limit=3, ordered=True)
    'J, I, H and 7 more'
    """
    items = list(names) if ordered else sorted(names, key=str.casefold)
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


def class_digits(
    values: Iterable[float],
    cuts: Sequence[float],
    *,
    others: Sequence[float] = (),
    max_digits: int = 3,
) -> int:
    """Fewest decimals (1 to ``max_digits``) that keep printed classes consistent.

    Classes are closed on the right: a value ``v`` is above cut ``c`` when
    ``v > c``. With ``d`` decimals the printed value must then be above the
    printed cut, and a value at or below the cut must not print above it; the
    printed cuts must also differ from each other and from ``others`` (e.g. an
    epidemic threshold shown beside them). When no ``d`` up to ``max_digits``
    does it, ``max_digits`` is returned.

    >>> class_digits([2.70, 2.80, 2.84], [2.767])
    2
    >>> class_digits([1.0, 3.0], [2.0])
    1
    """
    vals = [float(v) for v in values if finite(v)]
    cut_list = [float(c) for c in cuts if finite(c)]
    extra = [float(o) for o in others if finite(o)]
    for d in range(1, max_digits + 1):
        printed_cuts = [round(c, d) for c in cut_list]
        ok = len(set(printed_cuts)) == len(printed_cuts) and not (
            set(printed_cuts) & {round(o, d) for o in extra}
        )
        for c, pc in zip(cut_list, printed_cuts, strict=True):
            if not ok:
                break
            for v in vals:
                pv = round(v, d)
                if (v > c) != (pv > pc):
                    ok = False
                    break
        if ok:
            return d
    return max_digits


def fmt_week_dates(start: dt.date, end: dt.date) -> str:
    """The days of a week: ``'22–28 November 2026'``, ``'29 November to 5 December 2026'``.

    >>> fmt_week_dates(dt.date(2026, 12, 27), dt.date(2027, 1, 2))
    '27 December 2026 to 2 January 2027'
    """
    if start.year != end.year:
        return f"{start.day} {start:%B %Y} to {end.day} {end:%B %Y}"
    if start.month != end.month:
        return f"{start.day} {start:%B} to {end.day} {end:%B %Y}"
    return f"{start.day}–{end.day} {end:%B %Y}"
