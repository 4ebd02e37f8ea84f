"""Tercile ranks of weekly district rates (pure: no I/O, no plotting)."""

from __future__ import annotations

import dataclasses

import numpy as np

from sitrep.analysis.proportions import BoolArray, FloatArray, IntArray
from sitrep.errors import AnalysisError

__all__ = ["NO_DATA", "MIN_VALUES", "TercileResult", "tercile_ranks"]

NO_DATA = 0
"""Rank given to a district whose rate is missing or excluded this week."""

MIN_VALUES = 3
"""Fewest districts with data for which terciles are formed."""

_CLASS_NAMES = ("lowest", "middle", "highest")


@dataclasses.dataclass(frozen=True, eq=False)
class TercileResult:
    """Tercile classes of one week's rates.

    Attributes
    ----------
    ranks : numpy.ndarray of int
        ``NO_DATA`` (0) or 1 (low), 2 (middle), 3 (high), aligned with the
        input; read-only.
    cuts : tuple of (float, float) or None
        The cut points ``(q1, q2)`` on the unrounded rates; None when fewer
        than :data:`MIN_VALUES` districts had data.
    counts : tuple of (int, int, int)
        Districts in the low, middle and high class.
    note : str
        Plain-language explanation for the report when the classes are not
        three non-empty thirds (empty class, equal cut points, too few
        values); ``""`` otherwise.
    """

    ranks: IntArray
    cuts: tuple[float, float] | None
    counts: tuple[int, int, int]
    note: str

    def __post_init__(self) -> None:
        self.ranks.setflags(write=False)


def tercile_ranks(rates: FloatArray, *, valid: BoolArray | None = None) -> TercileResult:
    """Rank each district's rate as low (1), middle (2) or high (3).

    The cut points ``q1, q2`` are the 1/3 and 2/3 sample quantiles of the
    rates that take part, Hyndman & Fan (1996) type 7 (NumPy's default
    linear interpolation): ``Q(p) = x_(h0) + (h - h0)(x_(h0+1) - x_(h0))`` with
    ``h = (m - 1) p + 1`` on the sorted values, ``h0 = floor(h)``. Classes are
    right-closed: low if ``v <= q1``, middle if ``q1 < v <= q2``, high if
    ``v > q2``; a rate equal to a cut point takes the lower class.

    Parameters
    ----------
    rates : numpy.ndarray of float, shape (n,)
        This week's rate per district (e.g. ILI%). NaN (or a non-finite
        value) marks a district without data.
    valid : numpy.ndarray of bool, shape (n,), optional
        False for districts to leave out (e.g. suppressed because of too few
        visits); they get ``NO_DATA`` and do not affect the cut points.

    Returns
    -------
    TercileResult
        Ranks, cut points, class counts and a note.

    Raises
    ------
    AnalysisError
        If ``rates`` is not one-dimensional or ``valid`` has another shape.

    Notes
    -----
    Ties are never broken: equal rates share a class, so a class can hold
    more or fewer than a third of the districts, or none (``0,0,0,0,0,0,1,2,3``
    gives counts 6/0/3); the note says so and the report must not say "one of
    the top n/3". With fewer than three districts with data no classes are
    formed: every rank is ``NO_DATA``, ``cuts`` is None and the note
    explains. Missing values are removed *before* the quantiles are taken
    (a classifier fed NaN can silently put the maximum in the lowest class).
    On NaN-free input with distinct cut points the classes equal
    ``pandas.qcut(rates, 3)`` and ``mapclassify.Quantiles(rates, k=3)``.

    Examples
    --------
    >>> tercile_ranks(np.array([1.0, 2.0, 3.0, 4.0, 5.0, 6.0])).ranks
    array([1, 1, 2, 2, 3, 3])
    >>> tercile_ranks(np.array([5.0, np.nan, 1.0, 3.0])).ranks
    array([3, 0, 1, 2])
    >>> r = tercile_ranks(np.array([2.0, 2.0, 2.0, 2.0, 5.0, 9.0]))
    >>> r.ranks, np.round(r.cuts, 6), r.counts, r.note
    (array([1, 1, 1, 1, 3, 3]), array([2., 3.]), (4, 0, 2), 'the middle third is empty because of tied values')
    """
    values = np.asarray(np.ma.filled(np.ma.asarray(rates, dtype=np.float64), np.nan))
    if values.ndim != 1:
        raise AnalysisError(
            f"rates must be one-dimensional (one value per district), got shape {values.shape}"
        )
    present = np.isfinite(values)
    if valid is not None:
        keep = np.asarray(valid, dtype=bool)
        if keep.shape != values.shape:
            raise AnalysisError(
                f"valid must have the shape of rates {values.shape}, got {keep.shape}"
            )
        present &= keep
    ranks = np.full(values.shape, NO_DATA, dtype=np.int64)
    m = int(present.sum())
    if m < MIN_VALUES:
        return TercileResult(
            ranks=ranks,
            cuts=None,
            counts=(0, 0, 0),
            note=(
                f"terciles need at least {MIN_VALUES} districts with data; "
                f"{m} had data this week, so no district is ranked"
            ),
        )
    q = np.quantile(values[present], [1.0 / 3.0, 2.0 / 3.0], method="linear")
    cuts = (float(q[0]), float(q[1]))
    ranks[present] = np.searchsorted(q, values[present], side="left") + 1
    counts = (int((ranks == 1).sum()), int((ranks == 2).sum()), int((ranks == 3).sum()))
    note = _note(values[present], cuts, counts)
    return TercileResult(ranks=ranks, cuts=cuts, counts=counts, note=note)


def _note(values: FloatArray, cuts: tuple[float, float], counts: tuple[int, int, int]) -> str:
    """Explain classes that are not three non-empty groups ('' when all are)."""
    if values.min() == values.max():
        return "all districts with data have the same value, so they share the lowest third"
    empty = [name for name, c in zip(_CLASS_NAMES, counts, strict=True) if c == 0]
    if not empty:
        return ""
    which = " and ".join(empty)
    verb = "is" if len(empty) == 1 else "are"
    reason = "tied values make both cut points equal" if cuts[0] == cuts[1] else "of tied values"
    return f"the {which} third {verb} empty because {reason}"
