"""Nowcast of the latest weeks: the reporting triangle and a chain-ladder estimate (pure).

A week's counts keep growing for a few weeks after it is first published, as late reports
arrive. Every weekly extract, as it was received, shows each recent week at one delay; put
side by side they form the *reporting triangle* (district x epi week x delay). The chain
ladder turns it into multiplicative development factors and so into the expected final
counts of the latest weeks, with a prediction interval from Mack's model of the
development (docs/methods.md section 12). Observed values are never replaced: the nowcast
is a separate estimate next to them.

No file is read here: the caller gathers the extracts (:class:`Extract`, plain tables with
their report week) and passes them in.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence

import numpy as np
import pandas as pd

from sitrep.config import NowcastSettings
from sitrep.weeks import EpiWeek

__all__ = [
    "ChainLadder",
    "Extract",
    "Nowcast",
    "NowcastWeek",
    "ReportingTriangle",
    "chain_ladder",
    "mack_projection",
    "nowcast",
    "reporting_triangle",
]

FloatArray = np.ndarray
COUNTS = ("ili_visits", "total_visits")


@dataclasses.dataclass(frozen=True, eq=False)
class Extract:
    """One weekly extract as it was received.

    ``rows`` has columns ``district_id`` (str), ``week`` (:class:`EpiWeek`), ``ili_visits``
    and ``total_visits`` (integers); ``report_week`` is the week it reported (its latest
    week); ``source`` names where it came from, for messages.
    """

    report_week: EpiWeek
    rows: pd.DataFrame
    source: str


@dataclasses.dataclass(frozen=True, eq=False)
class ReportingTriangle:
    """Cumulative counts by district, epi week and delay (NaN: no extract showed that cell).

    ``ili[i, j, d]`` is district ``districts[i]``'s ILI visits in week ``weeks[j]`` as
    published ``d`` weeks after that week (``d = 0``: first published); ``total`` likewise
    for all visits. ``weeks`` run without gaps, oldest first.
    """

    districts: tuple[str, ...]
    weeks: tuple[EpiWeek, ...]
    max_delay: int
    ili: FloatArray
    total: FloatArray

    def frame(self) -> pd.DataFrame:
        """The observed cells in long form: district_id, week, delay, ili_visits, total_visits."""
        i, j, d = np.nonzero(~np.isnan(self.total) | ~np.isnan(self.ili))
        return pd.DataFrame(
            {
                "district_id": [self.districts[k] for k in i.tolist()],
                "week": [self.weeks[k] for k in j.tolist()],
                "delay": d.astype(np.int64),
                "ili_visits": self.ili[i, j, d],
                "total_visits": self.total[i, j, d],
            }
        )


def reporting_triangle(extracts: Sequence[Extract], max_delay: int) -> ReportingTriangle:
    """Build the reporting triangle of delays 0..``max_delay`` from weekly extracts.

    An extract with report week r gives each of its weeks w (r - max_delay <= w <= r) the
    value at delay r - w; older weeks in it are ignored.

    Raises
    ------
    ValueError
        If two extracts report the same week, or an extract holds a week after its report week.
    """
    if not extracts:
        return ReportingTriangle(
            (), (), max_delay, np.empty((0, 0, max_delay + 1)), np.empty((0, 0, max_delay + 1))
        )
    seen: dict[EpiWeek, str] = {}
    for e in extracts:
        if e.report_week in seen:
            raise ValueError(
                f"{seen[e.report_week]} and {e.source} both report {e.report_week}; keep one"
            )
        seen[e.report_week] = e.source
    first = min(seen) - max_delay
    weeks = tuple(first + k for k in range(max(seen).weeks_since(first) + 1))
    districts = tuple(sorted({str(d) for e in extracts for d in e.rows["district_id"]}))
    row_of = {d: i for i, d in enumerate(districts)}
    shape = (len(districts), len(weeks), max_delay + 1)
    ili, total = np.full(shape, np.nan), np.full(shape, np.nan)
    for e in extracts:
        delay = np.array([e.report_week.weeks_since(w) for w in e.rows["week"]], dtype=np.int64)
        if (delay < 0).any():
            late = e.rows["week"].iloc[int(np.argmin(delay))]
            raise ValueError(f"{e.source} holds {late}, after its report week {e.report_week}")
        keep = delay <= max_delay
        i = np.array([row_of[str(d)] for d in e.rows["district_id"][keep]], dtype=np.int64)
        j = np.array([w.weeks_since(first) for w in e.rows["week"][keep]], dtype=np.int64)
        ili[i, j, delay[keep]] = e.rows["ili_visits"][keep].to_numpy(dtype=float)
        total[i, j, delay[keep]] = e.rows["total_visits"][keep].to_numpy(dtype=float)
    return ReportingTriangle(districts, weeks, max_delay, ili, total)


@dataclasses.dataclass(frozen=True, eq=False)
class ChainLadder:
    """Development factors of a cumulative triangle and Mack's variance parameters.

    ``factors[k]`` = f_k, the ratio of the sums of counts at delay k + 1 and at delay k over
    the rows seen at both; ``sigma2[k]`` = Mack's sigma_k^2; ``sums[k]`` = S_k, the sum at
    delay k over those rows; ``pairs[k]`` = how many rows entered (docs/methods.md 12.2).
    """

    factors: FloatArray
    sigma2: FloatArray
    sums: FloatArray
    pairs: tuple[int, ...]


def chain_ladder(cumulative: FloatArray) -> ChainLadder:
    """Volume-weighted chain-ladder factors of ``cumulative`` (rows x delays, NaN unseen).

    f_k = sum C_{j,k+1} / sum C_{j,k} over rows j seen at delays k and k + 1;
    sigma_k^2 = sum C_{j,k} (C_{j,k+1} / C_{j,k} - f_k)^2 / (n_k - 1) over those with
    C_{j,k} > 0 (Mack 1993). With one such row, sigma_k^2 follows Mack's extrapolation
    min(sigma_{k-1}^4 / sigma_{k-2}^2, sigma_{k-2}^2, sigma_{k-1}^2). A factor with no row,
    or whose sum at delay k is 0, is NaN.
    """
    c = np.asarray(cumulative, dtype=float)
    n_delays = c.shape[1] - 1
    factors, sigma2, sums = (np.full(n_delays, np.nan) for _ in range(3))
    pairs = []
    for k in range(n_delays):
        both = ~np.isnan(c[:, k]) & ~np.isnan(c[:, k + 1])
        a, b = c[both, k], c[both, k + 1]
        sums[k] = a.sum()
        if sums[k] > 0:
            factors[k] = b.sum() / sums[k]
        pos = a > 0
        pairs.append(int(pos.sum()))
        if pairs[-1] >= 2:
            ratio = b[pos] / a[pos]
            sigma2[k] = float((a[pos] * (ratio - factors[k]) ** 2).sum() / (pairs[-1] - 1))
        elif pairs[-1] == 1 and k >= 2 and sigma2[k - 2] > 0:
            s1, s2 = sigma2[k - 1], sigma2[k - 2]
            sigma2[k] = min(s1**2 / s2, s2, s1)
    return ChainLadder(factors, sigma2, sums, tuple(pairs))


def mack_projection(
    cl: ChainLadder, latest: FloatArray, delay: FloatArray
) -> tuple[FloatArray, FloatArray]:
    """Expected final values and Mack's mean squared error of prediction.

    For a row last seen at delay d with value C_d: final = C_d prod_{k>=d} f_k and
    mse = final^2 sum_{k>=d} (sigma_k^2 / f_k^2) (1 / C_k + 1 / S_k), with C_k the row's
    value projected to delay k (C_d itself for k = d); Mack 1993, ASTIN Bulletin 23:213-225,
    theorem 3. Returns (final, mse) per row.
    """
    latest = np.asarray(latest, dtype=float)
    delay = np.asarray(delay, dtype=np.int64)
    final, mse_sum = latest.copy(), np.zeros_like(latest)
    for k in range(len(cl.factors)):
        step = delay <= k
        with np.errstate(divide="ignore", invalid="ignore"):
            term = cl.sigma2[k] / cl.factors[k] ** 2 * (1 / final + 1 / cl.sums[k])
        mse_sum = np.where(step, mse_sum + np.where(final > 0, term, 0.0), mse_sum)
        final = np.where(step, final * cl.factors[k], final)
    return final, final**2 * mse_sum


@dataclasses.dataclass(frozen=True)
class NowcastWeek:
    """The jurisdiction's nowcast of one week (counts over the districts it reported)."""

    week: EpiWeek
    delay: int
    observed_ili: int
    observed_total: int
    ili: float
    ili_low: float
    ili_high: float
    total: float
    total_low: float
    total_high: float
    percent: float
    percent_low: float
    percent_high: float

    @property
    def observed_percent(self) -> float:
        """ILI% as published this week."""
        return (
            100.0 * self.observed_ili / self.observed_total if self.observed_total else float("nan")
        )


@dataclasses.dataclass(frozen=True, eq=False)
class Nowcast:
    """The nowcast of the latest weeks, or why there is none (``skipped``).

    ``districts`` holds one row per district and nowcast week (district_id, week, delay,
    observed and expected final ILI and total visits with the interval bounds); it is for
    checks and back-tests, not for publication.
    """

    weeks: tuple[NowcastWeek, ...]
    skipped: str | None
    level: float
    extracts: int
    needed: int
    own_factor_districts: int
    factors_ili: tuple[float, ...]
    factors_other: tuple[float, ...]
    districts: pd.DataFrame


def _skip(reason: str, settings: NowcastSettings, extracts: int) -> Nowcast:
    return Nowcast(
        (), reason, settings.level, extracts, settings.min_extracts, 0, (), (), pd.DataFrame()
    )


def nowcast(
    extracts: Sequence[Extract], report_week: EpiWeek, settings: NowcastSettings, seed: int
) -> Nowcast:
    """Nowcast the final ILI visits, all visits and ILI% of the latest ``settings.weeks`` weeks.

    Uses the extracts reported in the ``settings.window_weeks`` weeks up to ``report_week``
    (that week's own extract is required); skips, with the reason, when fewer than
    ``settings.min_extracts`` are there or a delay was never seen twice. ILI visits and the
    other visits (all minus ILI) are developed separately by chain ladder, pooled over
    districts, or a district's own factors when it has ``settings.district_min_weeks`` weeks
    at every delay; the interval comes from simulating Mack's model (docs/methods.md 12.3).
    """
    window = [
        e
        for e in extracts
        if e.report_week <= report_week
        and report_week.weeks_since(e.report_week) < settings.window_weeks
    ]
    n = len(window)
    if not any(e.report_week == report_week for e in window):
        return _skip(f"the extract of {report_week} itself is not among the extracts", settings, n)
    if n < settings.min_extracts:
        return _skip(
            f"only {n} weekly extract{'s' * (n != 1)} of the {settings.window_weeks} weeks to "
            f"{report_week} {'are' if n != 1 else 'is'} on file (the archive and the folder of "
            f"past extracts); the nowcast needs at least {settings.min_extracts}",
            settings,
            n,
        )
    tri = reporting_triangle(window, settings.max_delay)
    series = {"ili": tri.ili, "other": tri.total - tri.ili}
    pooled = {k: chain_ladder(v.reshape(-1, tri.max_delay + 1)) for k, v in series.items()}
    for cl in pooled.values():
        if not (np.isfinite(cl.factors).all() and np.isfinite(cl.sigma2).all()):
            k = int(np.argmin(np.isfinite(cl.factors) & np.isfinite(cl.sigma2)))
            return _skip(
                f"no two weeks were seen at both delay {k} and delay {k + 1} with counts above "
                "zero, so the factor between them cannot be estimated",
                settings,
                n,
            )
    sets, group = _factor_sets(series, pooled, settings.district_min_weeks)
    cells = _cells(tri, report_week, settings.weeks)
    rng = np.random.default_rng(seed)
    draws = {
        k: _draw_finals(
            sets[k],
            group[cells["row"]],
            cells[k].to_numpy(),
            cells["delay"].to_numpy(),
            rng,
            settings.draws,
        )
        for k in series
    }
    expected = {
        k: _expected(sets[k], group[cells["row"]], cells[k].to_numpy(), cells["delay"].to_numpy())
        for k in series
    }
    frame = _district_frame(tri, cells, expected, draws, settings.level)
    weeks = tuple(
        _week_result(week, cells, expected, draws, settings.level)
        for week in sorted(set(cells["week"]))
    )
    own = int((group > 0).sum())
    return Nowcast(
        weeks,
        None,
        settings.level,
        n,
        settings.min_extracts,
        own,
        tuple(pooled["ili"].factors.tolist()),
        tuple(pooled["other"].factors.tolist()),
        frame,
    )


def _factor_sets(
    series: dict[str, FloatArray], pooled: dict[str, ChainLadder], min_weeks: int
) -> tuple[dict[str, list[ChainLadder]], np.ndarray]:
    """Factor sets per series (0: pooled, then one per district with enough history) and
    each district's set index (0 when it uses the pooled factors)."""
    sets = {k: [pooled[k]] for k in series}
    n_districts = next(iter(series.values())).shape[0]
    group = np.zeros(n_districts, dtype=np.int64)
    for i in range(n_districts):
        own = {k: chain_ladder(v[i]) for k, v in series.items()}
        if all(
            min(cl.pairs) >= min_weeks
            and np.isfinite(cl.factors).all()
            and np.isfinite(cl.sigma2).all()
            for cl in own.values()
        ):
            for k in series:
                sets[k].append(own[k])
            group[i] = len(sets["ili"]) - 1
    return sets, group


def _cells(tri: ReportingTriangle, report_week: EpiWeek, weeks: int) -> pd.DataFrame:
    """The district-weeks to nowcast: the latest ``weeks`` weeks, as seen in this week's extract."""
    rows = []
    for back in range(weeks):
        j = tri.weeks.index(report_week - back)
        for i, district in enumerate(tri.districts):
            ili, total = tri.ili[i, j, back], tri.total[i, j, back]
            if np.isnan(ili) or np.isnan(total):
                continue  # the district did not report that week
            rows.append((i, district, tri.weeks[j], back, ili, total - ili, ili, total))
    return pd.DataFrame(
        rows,
        columns=["row", "district_id", "week", "delay", "ili", "other", "obs_ili", "obs_total"],
    )


def _expected(
    sets: list[ChainLadder], group: np.ndarray, latest: FloatArray, delay: FloatArray
) -> FloatArray:
    """Chain-ladder expectation of each cell's final value with its district's factor set."""
    out = np.empty_like(latest, dtype=float)
    for g, cl in enumerate(sets):
        mine = group == g
        out[mine] = mack_projection(cl, latest[mine], delay[mine])[0]
    return out


def _draw_finals(
    sets: list[ChainLadder],
    group: np.ndarray,
    latest: FloatArray,
    delay: FloatArray,
    rng: np.random.Generator,
    draws: int,
) -> FloatArray:
    """Simulated final values (draws x cells) under Mack's model (docs/methods.md 12.3).

    Each draw takes every factor set's f_k from N(f_k, sigma_k^2 / S_k) (the estimation
    error), then develops each cell step by step: C_{k+1} = C_k G with G gamma-distributed,
    mean f_k and variance sigma_k^2 / C_k (the process error).
    """
    f = np.stack([cl.factors for cl in sets])
    s2 = np.stack([cl.sigma2 for cl in sets])
    sd = np.sqrt(s2 / np.stack([cl.sums for cl in sets]))
    fdraw = np.maximum(f[None] + sd[None] * rng.standard_normal((draws, *f.shape)), 1e-9)
    value = np.broadcast_to(np.asarray(latest, dtype=float), (draws, len(latest))).copy()
    for k in range(f.shape[1]):
        active = np.asarray(delay) <= k
        fk, s2k = fdraw[:, group, k], s2[group, k][None, :]
        noisy = active[None, :] & (s2k > 0) & (value > 0)
        safe_v, safe_s2 = np.where(noisy, value, 1.0), np.where(noisy, s2k, 1.0)
        shape = np.where(noisy, fk**2 * safe_v / safe_s2, 1.0)
        scale = np.where(noisy, safe_s2 / (fk * safe_v), 1.0)
        step = np.where(noisy, rng.gamma(shape, scale), fk)
        value = np.where(active[None, :], value * step, value)
    return value


def _bounds(values: FloatArray, level: float) -> tuple[FloatArray, FloatArray]:
    low, high = np.quantile(values, [(1 - level) / 2, (1 + level) / 2], axis=0)
    return low, high


def _district_frame(
    tri: ReportingTriangle,
    cells: pd.DataFrame,
    expected: dict[str, FloatArray],
    draws: dict[str, FloatArray],
    level: float,
) -> pd.DataFrame:
    """One row per nowcast cell: observed, expected final and interval of ILI and all visits."""
    total_draws = draws["ili"] + draws["other"]
    ili_low, ili_high = _bounds(draws["ili"], level)
    tot_low, tot_high = _bounds(total_draws, level)
    with np.errstate(divide="ignore", invalid="ignore"):
        pct_low, pct_high = _bounds(100 * draws["ili"] / total_draws, level)
        total = expected["ili"] + expected["other"]
        pct = 100 * expected["ili"] / total
    out = cells[["district_id", "week", "delay", "obs_ili", "obs_total"]].copy()
    for name, value in (
        ("ili", expected["ili"]),
        ("ili_low", ili_low),
        ("ili_high", ili_high),
        ("total", total),
        ("total_low", tot_low),
        ("total_high", tot_high),
        ("percent", pct),
        ("percent_low", pct_low),
        ("percent_high", pct_high),
    ):
        out[name] = value
    return out.reset_index(drop=True)


def _week_result(
    week: EpiWeek,
    cells: pd.DataFrame,
    expected: dict[str, FloatArray],
    draws: dict[str, FloatArray],
    level: float,
) -> NowcastWeek:
    """Sum the week's districts: expected finals, and the interval from the summed draws."""
    mine = (cells["week"] == week).to_numpy()
    x_draw = draws["ili"][:, mine].sum(axis=1)
    n_draw = x_draw + draws["other"][:, mine].sum(axis=1)
    x, n = (
        float(expected["ili"][mine].sum()),
        float(expected["ili"][mine].sum() + expected["other"][mine].sum()),
    )
    (x_low, n_low), (x_high, n_high) = _bounds(np.column_stack([x_draw, n_draw]), level)
    p_low, p_high = _bounds(100 * x_draw / np.where(n_draw > 0, n_draw, np.nan), level)
    return NowcastWeek(
        week=week,
        delay=int(cells.loc[mine, "delay"].iloc[0]),
        observed_ili=int(cells.loc[mine, "obs_ili"].sum()),
        observed_total=int(cells.loc[mine, "obs_total"].sum()),
        ili=x,
        ili_low=float(x_low),
        ili_high=float(x_high),
        total=n,
        total_low=float(n_low),
        total_high=float(n_high),
        percent=100 * x / n if n > 0 else float("nan"),
        percent_low=float(p_low),
        percent_high=float(p_high),
    )
