"""The value-spike rule: a district's latest ILI% far from its recent weeks and its peers.

A pure function of :class:`~sitrep.ingest.facts.TableFacts`, in named steps:
the district x week grid, each district's reference level, the jurisdiction's
movement without the district, and the two robust scores. Methods follow
docs/methods.md section 9.4 (common practice).
"""

from __future__ import annotations

import dataclasses
import warnings
from collections.abc import Iterator

import numpy as np

from sitrep.ingest.facts import TableArrays, TableFacts
from sitrep.ingest.findings import Hit

__all__ = ["value_spike"]

_SPIKE_LOG_SPREAD_FLOOR = 0.1
"""Smallest spread of the districts' log deviations in the value-spike rule (common practice)."""
_SPIKE_MIN_DISTRICTS = 5
"""Fewest districts for comparing one district's deviation with the others' (common practice)."""


def _grid(a: TableArrays, last: int, ids: dict[str, int]) -> tuple[np.ndarray, ...]:
    """ILI visits, total visits and row index per district x week ``last - 8 .. last``."""
    ili = np.full((len(ids), 9), np.nan)
    tot = np.full((len(ids), 9), np.nan)
    row = np.full((len(ids), 9), -1, dtype=np.int64)
    keep = np.flatnonzero((a.ordinal >= last - 8) & (a.ordinal <= last))
    keep = keep[[str(a.ids[i]) in ids for i in keep]] if len(keep) else keep
    d = np.array([ids[str(a.ids[i])] for i in keep], dtype=np.int64)
    w = a.ordinal[keep] - (last - 8)
    ili[d, w], tot[d, w], row[d, w] = a.ili[keep], a.total[keep], keep
    return ili, tot, row


@dataclasses.dataclass(frozen=True, eq=False)
class _Reference:
    """Each district's ILI% grid and its reference level from the previous weeks."""

    ili: np.ndarray  # district x 9 weeks, the latest last
    tot: np.ndarray
    row: np.ndarray
    pct: np.ndarray
    long: np.ndarray  # enough previous weeks for a median
    last_seen: np.ndarray  # column of the latest previous week with data, -1 when none
    med: np.ndarray
    mad: np.ndarray
    one_week: np.ndarray
    usable: np.ndarray

    @property
    def ref(self) -> np.ndarray:
        return np.where(self.long, self.med, self.one_week)


def _reference(t: TableFacts) -> _Reference:
    """The grid (weeks this table lacks taken from last week's table) and the reference: the
    median of the previous 8 weeks, or (too few of them) the latest previous week."""
    a = t.a
    last = int(a.ordinal.max())
    ids = {ident: k for k, ident in enumerate(a.id_uniques)}
    ili, tot, row = _grid(a, last, ids)
    if t.prior is not None and len(t.prior.ids):
        p_ili, p_tot, _ = _grid(t.prior, last, ids)
        gap = np.isnan(tot)
        gap[:, 8] = False
        ili[gap], tot[gap] = p_ili[gap], p_tot[gap]
    with np.errstate(divide="ignore", invalid="ignore"):
        valid = (tot > 0) & (ili >= 0) & (ili <= tot)  # other rows are errors of other rules
        pct = np.where(valid, 100.0 * ili / tot, np.nan)
    past = pct[:, :8]
    long = np.isfinite(past).sum(axis=1) >= int(t.settings.spike_min_weeks)
    last_seen = np.where(np.isfinite(past), np.arange(8), -1).max(axis=1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN rows stay NaN on purpose
        med = np.where(long, np.nanmedian(past, axis=1), np.nan)
        mad = np.where(long, np.nanmedian(np.abs(past - med[:, None]), axis=1), 0.0)
    one_week = np.take_along_axis(past, np.maximum(last_seen, 0)[:, None], axis=1)[:, 0]
    usable = np.isfinite(pct[:, 8]) & (long | (last_seen >= 0))
    return _Reference(ili, tot, row, pct, long, last_seen, med, mad, one_week, usable)


def _movement(r: _Reference) -> np.ndarray:
    """The jurisdiction's own movement, without the district itself: for each past week, the
    pooled ILI% now over the pooled ILI% then, among districts reporting in both weeks."""
    ili, tot, pct = r.ili, r.tot, r.pct
    both = np.isfinite(pct) & np.isfinite(pct[:, [8]])
    ili0, tot0 = np.where(both, ili, 0.0), np.where(both, tot, 0.0)
    now_ili, now_tot = np.where(both, ili[:, [8]], 0.0), np.where(both, tot[:, [8]], 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        p_now = (now_ili.sum(axis=0) - now_ili) / (now_tot.sum(axis=0) - now_tot)
        p_then = (ili0.sum(axis=0) - ili0) / (tot0.sum(axis=0) - tot0)
        ratio = np.where(both & (p_then > 0), p_now / p_then, np.nan)[:, :8]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN rows stay NaN on purpose
        g_long = np.nanmedian(np.where(np.isfinite(pct[:, :8]), ratio, np.nan), axis=1)
    g_one = np.take_along_axis(ratio, np.maximum(r.last_seen, 0)[:, None], axis=1)[:, 0]
    g = np.where(r.long, g_long, g_one)
    return np.asarray(np.where(np.isfinite(g) & (g > 0), g, 1.0))


def _scores(r: _Reference, g: np.ndarray, floor: float) -> tuple[np.ndarray, np.ndarray]:
    """Robust z of each district against its own expected value and against the others."""
    x = r.pct[:, 8]
    expected = r.ref * g
    n_now = np.maximum(np.nan_to_num(r.tot[:, 8], nan=1.0), 1.0)
    p_exp = np.clip(expected / 100.0, 0.005, 0.995)
    # Binomial noise at this week's visits: a small district's ILI% jumps by whole points
    # from one visit, which is not a data fault.
    binomial_se = 100.0 * np.sqrt(p_exp * (1.0 - p_exp) / n_now)
    spread = np.maximum(np.maximum(r.mad * g, floor), binomial_se)
    with np.errstate(invalid="ignore"):
        own_z = np.abs(x - expected) / spread
    # ... and against the other districts: robust z of the log deviation from the movement
    with np.errstate(divide="ignore", invalid="ignore"):
        dev = np.log((x + floor) / (expected + floor))
    cross_z = np.full(len(x), np.inf)
    usable = r.usable
    if usable.sum() >= _SPIKE_MIN_DISTRICTS:
        centre = float(np.median(dev[usable]))
        scale = max(
            1.4826 * float(np.median(np.abs(dev[usable] - centre))), _SPIKE_LOG_SPREAD_FLOOR
        )
        cross_z = np.abs(dev - centre) / scale
    return own_z, cross_z


def value_spike(t: TableFacts) -> Iterator[Hit]:
    """A district's latest ILI% far from its previous weeks after the jurisdiction's
    movement, and unlike the other districts' changes.

    For each district in the latest week with ``x`` its ILI% (100 * ili / total): its
    reference ``ref`` is the median of its ILI% over the previous 8 weeks when at least
    ``validation.spike_min_weeks`` of them have data (``MAD`` their unscaled median absolute
    deviation), else its latest previous week (``MAD`` = 0), taken from this table or, for
    weeks it does not hold, from last week's table. The jurisdiction's movement ``g`` is,
    without the district itself and among districts with data in both weeks, the pooled
    ILI% now over the pooled ILI% in each previous week (the median over the district's
    weeks, or the one week). With ``f`` = ``validation.spike_mad_floor_pp`` and ``z`` =
    ``validation.spike_robust_z``, the value is flagged when both hold: ``|x - g*ref| /
    max(g*MAD, f, SE) > z`` (SE the binomial standard error at ``g*ref`` and this week's
    visits, so that small districts' one-visit jumps are not flagged), and, when at least 5
    districts are assessed, the robust z of its log deviation ``d = log((x+f)/(g*ref+f))``
    among all assessed districts, ``|d - median| / max(1.4826*MAD, 0.1)``, also exceeds
    ``z``. A week in which every district rises is the jurisdiction's movement, not many
    faults; a ten-fold jump in one district stands out on both counts.

    The MAD floor keeps a district whose previous weeks were all equal (often all zero)
    from being flagged for any change at all. The floor, the minimum of 5 weeks, the
    minimum of 5 districts and the 0.1 floor of the log spread are common practice, not
    published values; 1.4826 makes the MAD a consistent estimate of a normal standard
    deviation.
    """
    a, settings = t.a, t.settings
    r = _reference(t)
    if not r.usable.any():
        return
    z_limit = settings.spike_robust_z
    g = _movement(r)
    own_z, cross_z = _scores(r, g, float(settings.spike_mad_floor_pp))
    x, expected = r.pct[:, 8], r.ref * g
    for d in np.flatnonzero(r.usable & (own_z > z_limit) & (cross_z > z_limit)).tolist():
        i = int(r.row[d, 8])
        if r.long[d]:
            basis = f"its previous 8 weeks (median {r.med[d]:.2f}%, MAD {r.mad[d]:.2f} pp)"
        else:
            week = a.weeks[-1] - (8 - int(r.last_seen[d]))
            basis = f"its previous week ({r.one_week[d]:.2f}% in {week})"
        others = (
            f"; {cross_z[d]:.1f} against the other districts' changes"
            if np.isfinite(cross_z[d])
            else ""
        )
        yield Hit(
            f"district {a.ids[i]} has ILI {x[d]:.2f}% in {a.weeks[a.week_codes[i]]}, far from "
            f"{basis} even after the other districts' movement this week (x{g[d]:.2f}, "
            f"expected {expected[d]:.2f}%): robust z {own_z[d]:.1f} > {z_limit:g}{others}; "
            "check the counts with the district before publishing",
            line=a.line(i),
            column=a.columns.ili_visits,
            district_id=str(a.ids[i]),
            value=f"{x[d]:.2f}",
        )
