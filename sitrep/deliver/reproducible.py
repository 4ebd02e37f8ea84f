"""The reproducibility clock: ``SOURCE_DATE_EPOCH`` from the report week, set for a build.

:func:`source_date_epoch` derives the value from the report week and
:func:`reproducible_env` sets it for the duration of a build, so tools that
embed a timestamp write the same bytes for the same week.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import os
from collections.abc import Iterator, Mapping

from sitrep.errors import DeliveryError

__all__ = ["read_source_date_epoch", "reproducible_env", "source_date_epoch"]


def source_date_epoch(week_end: dt.date) -> int:
    """``SOURCE_DATE_EPOCH`` for a report week: 12:00 UTC on the week's last day.

    Tools that embed a timestamp (WeasyPrint's font subsetting, matplotlib's
    PDF/SVG writers) use this value instead of "now", so two builds of the same
    week give identical bytes (reproducible-builds.org SOURCE_DATE_EPOCH
    specification). Noon UTC keeps the stamp on the same calendar day in every
    time zone from UTC-12 to UTC+11.

    Parameters
    ----------
    week_end : datetime.date
        Last day of the report week (``EpiWeek.end``).

    Returns
    -------
    int
        Seconds since 1970-01-01T00:00:00Z.

    Examples
    --------
    >>> source_date_epoch(dt.date(1970, 1, 1))
    43200
    """
    if isinstance(week_end, dt.datetime) or not isinstance(week_end, dt.date):
        raise DeliveryError(f"week_end must be a datetime.date, got {week_end!r}")
    noon = dt.datetime(week_end.year, week_end.month, week_end.day, 12, tzinfo=dt.UTC)
    return int(noon.timestamp())


def read_source_date_epoch(env: Mapping[str, str] = os.environ) -> int | None:
    """Read ``SOURCE_DATE_EPOCH`` from ``env``: its value, or None when unset.

    Raises
    ------
    DeliveryError
        If the variable is set but empty or not a non-negative whole number
        (fontTools would otherwise crash deep inside the PDF writer).
    """
    raw = env.get("SOURCE_DATE_EPOCH")
    if raw is None:
        return None
    value = _parse_epoch(raw)
    if value is None:
        raise DeliveryError(
            f"SOURCE_DATE_EPOCH is set to {raw!r}; expected whole seconds since 1970 such as "
            "1795780800. Unset it, or let sitrep build set it from the report week"
        )
    return value


def _parse_epoch(raw: str) -> int | None:
    raw = raw.strip()
    if not raw.isascii() or not raw.isdigit():
        return None
    return int(raw)


@contextlib.contextmanager
def reproducible_env(epoch: int) -> Iterator[int]:
    """Set ``SOURCE_DATE_EPOCH`` to ``epoch`` for the duration of a ``with`` block.

    The report week's value always wins over an inherited one, because a
    bundle must be reproducible from its inputs alone; an inherited value
    that is empty or not a number is therefore replaced rather than passed on
    to tools that would crash on it. The previous state (unset, empty, or any
    value) is restored on exit, also after an exception.

    Parameters
    ----------
    epoch : int
        Usually ``source_date_epoch(week.end)``.

    Yields
    ------
    int
        ``epoch``.

    Raises
    ------
    DeliveryError
        If ``epoch`` is not a non-negative whole number.
    """
    if isinstance(epoch, bool) or not isinstance(epoch, int) or epoch < 0:
        raise DeliveryError(f"SOURCE_DATE_EPOCH must be a whole number >= 0, got {epoch!r}")
    previous = os.environ.get("SOURCE_DATE_EPOCH")
    os.environ["SOURCE_DATE_EPOCH"] = str(epoch)
    try:
        yield epoch
    finally:
        if previous is None:
            os.environ.pop("SOURCE_DATE_EPOCH", None)
        else:
            os.environ["SOURCE_DATE_EPOCH"] = previous
