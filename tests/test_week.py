"""Tests of sitrep.analysis.week.analyse_week (composition of one report week).

The fixture is an invented 4 x 4 lattice of square districts D00..D33 with
hand-chosen counts. Expected values are either worked out by hand from the
definitions [HAND] or taken from reference libraries run here: statsmodels
``proportion_confint(method="wilson")`` (Wilson 1927) and
``proportions_ztest`` (pooled two-proportion z test), and ``epiweeks``
for week arithmetic across a 53-week year.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import epiweeks
import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from shapely.geometry import box
from statsmodels.stats.proportion import proportion_confint, proportions_ztest

from sitrep.analysis.clusters import local_clusters
from sitrep.analysis.transitions import compare_weeks
from sitrep.analysis.week import TABLE_COLUMNS, analyse_week
from sitrep.analysis.weights import build_graph
from sitrep.config import AnalysisSettings
from sitrep.errors import AnalysisError
from sitrep.model import ClusterLabel, CountTable, Districts, InputFile
from sitrep.weeks import EpiWeek, WeekSystem

IDS = [f"D{r}{c}" for r in range(4) for c in range(4)]
W = {k: EpiWeek(2026, k, WeekSystem.MMWR) for k in range(1, 6)}


def _districts(ids: list[str] = IDS) -> Districts:
    geoms = [box(int(i[2]), int(i[1]), int(i[2]) + 1, int(i[1]) + 1) for i in ids]
    frame = gpd.GeoDataFrame(
        {"district_id": ids, "district_name": [f"District {i}" for i in ids]},
        geometry=geoms,
        crs="EPSG:3035",
    )
    return Districts(frame, InputFile("boundaries", Path("districts.gpkg"), "0" * 64, 1))


def _table(
    weeks: dict[EpiWeek, dict[str, tuple[int, int]]], system: WeekSystem = WeekSystem.MMWR
) -> CountTable:
    rows = []
    for week in sorted(weeks):
        for district in sorted(weeks[week]):
            x, n = weeks[week][district]
            rows.append(
                {
                    "district_id": district,
                    "district_name": "",
                    "week": week,
                    "reporting_sites": 2.0,
                    "ili_visits": x,
                    "total_visits": n,
                    "line": len(rows) + 2,
                }
            )
    frame = pd.DataFrame(rows)
    frame["ili_visits"] = frame["ili_visits"].astype("int64")
    frame["total_visits"] = frame["total_visits"].astype("int64")
    return CountTable(frame, system, InputFile("table", Path("table.csv"), "0" * 64, 1))


def _week_counts(shift: int) -> dict[str, tuple[int, int]]:
    """Top-left 2x2 block high (about 15 %), the rest low (about 2-5 %); n = 200."""
    out = {}
    for d in IDS:
        r, c = int(d[1]), int(d[2])
        x = (30 if r < 2 and c < 2 else 4) + r + c + shift
        out[d] = (x, 200)
    return out


W04 = _week_counts(2)
W04["D32"] = (3, 20)  # suppressed: 20 < min_visits = 30
W04["D31"] = (6, 150)  # withheld as its complement: the fewest visits of the others
WITHHELD = ["D31", "D32"]
del W04["D33"]  # no row this week
W03_PUBLISHED = _week_counts(0)
W03_REVISED = dict(W03_PUBLISHED)
W03_REVISED["D00"] = (40, 250)  # late reports arrived for D00
del W03_REVISED["D01"]  # D01 has no revised row: fall back to the published one

CURRENT = _table({W[2]: _week_counts(-1), W[3]: W03_REVISED, W[4]: W04})
PRIOR = _table({W[1]: _week_counts(-2), W[2]: _week_counts(-1), W[3]: W03_PUBLISHED})
DISTRICTS = _districts()
GRAPH = build_graph(DISTRICTS.frame, kind="queen")
SETTINGS = AnalysisSettings(permutations=199, seed=12345, correction="none", alpha=0.05)


@pytest.fixture(scope="module")
def result():  # type: ignore[no-untyped-def]
    return analyse_week(CURRENT, PRIOR, DISTRICTS, GRAPH, SETTINGS)


def _row(result, district: str) -> pd.Series:  # type: ignore[no-untyped-def]
    return result.table.set_index("district_id").loc[district]


def test_one_row_per_boundary_district_in_boundary_order(result) -> None:  # type: ignore[no-untyped-def]
    t = result.table
    assert list(t.columns) == list(TABLE_COLUMNS)
    assert list(t["district_id"]) == IDS
    assert set(t["week"]) == {"2026-W04"}
    assert result.week == W[4] and result.prior_week == W[3]
    assert _row(result, "D12")["district_name"] == "District D12"


def test_ili_percent_and_wilson_interval(result) -> None:  # type: ignore[no-untyped-def]
    t = result.table.set_index("district_id")
    ok = [d for d in IDS if d not in ("D31", "D32", "D33")]
    assert sorted(result.disclosure.this_week.ids) == WITHHELD
    assert t.loc[WITHHELD, "ili_percent"].isna().all() and t.loc[WITHHELD, "ci_low"].isna().all()
    x = np.array([W04[d][0] for d in ok])
    n = np.array([W04[d][1] for d in ok])
    np.testing.assert_allclose(t.loc[ok, "ili_percent"], 100 * x / n, rtol=1e-12)  # [HAND]
    low, high = proportion_confint(x, n, alpha=0.05, method="wilson")  # statsmodels
    np.testing.assert_allclose(t.loc[ok, "ci_low"], 100 * low, rtol=1e-9)
    np.testing.assert_allclose(t.loc[ok, "ci_high"], 100 * high, rtol=1e-9)


def test_missing_district_has_no_data_everywhere(result) -> None:  # type: ignore[no-untyped-def]
    r = _row(result, "D33")
    assert pd.isna(r["total_visits"]) and np.isnan(r["ili_percent"])
    assert r["tercile"] == 0
    assert r["cluster_label"] == ClusterLabel.NO_DATA.value
    assert r["change_class"] == "not assessable"
    assert not r["suppressed"]
    assert any("D33" in n and "no row" in n for n in result.notes)


def test_suppressed_district(result) -> None:  # type: ignore[no-untyped-def]
    for district in WITHHELD:
        r = _row(result, district)
        assert r["suppressed"] and pd.isna(r["total_visits"]) and pd.isna(r["ili_visits"])
        assert np.isnan(r["ili_percent"]) and np.isnan(r["ci_low"]) and np.isnan(r["change_pp"])
        assert np.isnan(r["eb_percent"]) and np.isnan(r["local_i"])
        assert r["tercile"] == 0
        assert r["cluster_label"] == ClusterLabel.NO_DATA.value
    assert result.disclosure.this_week.rule_of("D32").value == "few-visits"
    assert result.disclosure.this_week.rule_of("D31").value == "complementary"
    k = result.unprotected_table.set_index("district_id").loc["D32"]
    assert k["ili_percent"] == pytest.approx(15.0)  # 100 * 3 / 20 [HAND]
    assert k["total_visits"] == 20 and k["ili_visits"] == 3
    assert k["tercile"] == 0 and k["cluster_label"] == ClusterLabel.NO_DATA.value


def test_last_week_is_revised_with_published_kept(result) -> None:  # type: ignore[no-untyped-def]
    d00 = _row(result, "D00")
    assert d00["prior_ili_percent"] == pytest.approx(16.0)  # revised 40/250 [HAND]
    assert d00["prior_ili_percent_published"] == pytest.approx(15.0)  # published 30/200
    assert d00["prior_total_visits"] == 250
    d01 = _row(result, "D01")
    published = 100 * W03_PUBLISHED["D01"][0] / 200
    assert d01["prior_ili_percent"] == pytest.approx(published)  # fallback to published
    assert d01["prior_ili_percent_published"] == pytest.approx(published)
    assert any("published counts were used" in n for n in result.notes)


def test_change_against_revised_last_week(result) -> None:  # type: ignore[no-untyped-def]
    d00 = _row(result, "D00")
    x1, n1 = W04["D00"]
    assert d00["change_pp"] == pytest.approx(100 * x1 / n1 - 16.0, abs=1e-12)  # [HAND]
    # pooled two-proportion z test, two-sided (statsmodels proportions_ztest)
    _, p = proportions_ztest([x1, 40], [n1, 250])
    assert d00["change_p"] == pytest.approx(p, rel=1e-9)
    assert d00["change_relative"] == pytest.approx((x1 / n1) / 0.16 - 1, rel=1e-12)


def test_jurisdiction_pooled_figures(result) -> None:  # type: ignore[no-untyped-def]
    j = result.jurisdiction
    x1 = sum(x for x, _ in W04.values())  # suppressed D32 counts in the pooled totals
    n1 = sum(n for _, n in W04.values())
    before = dict(W03_PUBLISHED) | W03_REVISED
    x0 = sum(x for x, _ in before.values())
    n0 = sum(n for _, n in before.values())
    assert (j.ili_visits, j.total_visits, j.prior_ili_visits, j.prior_total_visits) == (
        x1,
        n1,
        x0,
        n0,
    )
    assert j.ili_percent == pytest.approx(100 * x1 / n1, rel=1e-12)  # [HAND]
    low, high = proportion_confint(x1, n1, alpha=0.05, method="wilson")  # statsmodels
    assert (j.ci_low, j.ci_high) == (pytest.approx(100 * low), pytest.approx(100 * high))
    xp = sum(x for x, _ in W03_PUBLISHED.values())
    assert j.prior_ili_percent_published == pytest.approx(100 * xp / (200 * 16))
    _, p = proportions_ztest([x1, x0], [n1, n0])
    assert j.change_p == pytest.approx(p, rel=1e-9)
    assert j.change_pp == pytest.approx(100 * (x1 / n1 - x0 / n0), rel=1e-12)
    assert (j.n_districts_reporting, j.n_districts_total) == (15, 16)
    assert j.reporting_sites == 30.0  # 15 districts x 2 sites [HAND]


def test_terciles_exclude_suppressed_and_missing(result) -> None:  # type: ignore[no-untyped-def]
    t = result.table.set_index("district_id")
    ok = [d for d in IDS if d not in ("D31", "D32", "D33")]
    pct = t.loc[ok, "ili_percent"].to_numpy()
    # Hyndman & Fan (1996) type 7 = numpy's default linear quantile; right-closed classes.
    q1, q2 = np.quantile(pct, [1 / 3, 2 / 3])
    expected = np.where(pct <= q1, 1, np.where(pct <= q2, 2, 3))
    np.testing.assert_array_equal(t.loc[ok, "tercile"], expected)
    assert result.terciles.cuts == (pytest.approx(q1), pytest.approx(q2))


def test_recent_terciles_use_this_weeks_cut_points(result) -> None:  # type: ignore[no-untyped-def]
    weeks = [w for w, _ in result.recent_terciles]
    assert weeks == [W[1], W[2], W[3], W[4]]  # W01 only in last week's table
    np.testing.assert_array_equal(result.recent_terciles[-1][1], result.terciles.ranks)
    q1, q2 = result.terciles.cuts
    before = dict(W03_PUBLISHED) | W03_REVISED
    pct = np.array([100 * before[d][0] / before[d][1] for d in IDS])
    expected = np.where(pct <= q1, 1, np.where(pct <= q2, 2, 3))  # [HAND], same cuts
    np.testing.assert_array_equal(result.recent_terciles[2][1], expected)
    with pytest.raises(ValueError):
        result.recent_terciles[0][1][0] = 3  # read-only


def test_clusters_are_computed_on_usable_districts(result) -> None:  # type: ignore[no-untyped-def]
    t = result.table.set_index("district_id")
    values = t["ili_percent"].to_numpy().copy()
    values[[IDS.index("D31"), IDS.index("D32"), IDS.index("D33")]] = np.nan
    direct = local_clusters(
        values, GRAPH, permutations=199, seed=12345, correction="none", alpha=0.05
    )
    np.testing.assert_allclose(t["local_i"], direct.local_i, rtol=1e-12)
    np.testing.assert_array_equal(t["p_value"], direct.p_values)
    assert list(t["cluster_label"]) == [x.value for x in direct.labels]
    # The high block sits in the top-left corner; any high-high core must be there [HAND].
    assert result.clusters.ids_with(ClusterLabel.HIGH_HIGH)  # seeded, esda 2.9.0 [LIB]
    assert set(result.clusters.ids_with(ClusterLabel.HIGH_HIGH)) <= {"D00", "D01", "D10", "D11"}
    assert result.clusters.n_tested == 13
    assert result.global_moran.available and result.global_moran.n == 13
    assert result.global_moran.i > 0  # a clustered pattern [HAND: one high block]


def test_prior_clusters_and_transitions(result) -> None:  # type: ignore[no-untyped-def]
    before = dict(W03_PUBLISHED) | W03_REVISED
    values = np.array([100 * before[d][0] / before[d][1] for d in IDS])
    direct = local_clusters(values, GRAPH, permutations=199, seed=12345, correction="none")
    assert result.prior_clusters is not None
    assert result.prior_clusters.labels == direct.labels
    expected = compare_weeks(result.clusters, result.prior_clusters, GRAPH)
    assert list(result.table["transition"]) == [x.value for x in expected.districts]
    assert result.transitions == expected
    assert list(result.table["prior_cluster_label"]) == [x.value for x in direct.labels]


def test_deterministic(result) -> None:  # type: ignore[no-untyped-def]
    again = analyse_week(CURRENT, PRIOR, DISTRICTS, GRAPH, SETTINGS)
    pd.testing.assert_frame_equal(result.table, again.table)
    assert result.notes == again.notes and result.jurisdiction == again.jurisdiction


def test_without_prior_data() -> None:
    current = _table({W[4]: W04})
    a = analyse_week(current, None, DISTRICTS, GRAPH, SETTINGS)
    assert a.prior_clusters is None
    assert set(a.table["change_class"]) == {"not assessable"}
    assert set(a.table["prior_cluster_label"]) == {""} and set(a.table["transition"]) == {""}
    assert not a.transitions.compared
    assert any("no counts for 2026-W03" in n for n in a.notes)
    assert np.isnan(a.jurisdiction.prior_ili_percent)


def test_earlier_report_week_and_eb_variable() -> None:
    a = analyse_week(CURRENT, PRIOR, DISTRICTS, GRAPH, SETTINGS, week=W[3])
    assert a.prior_week == W[2]
    # The report week's own counts come only from the current table, which has no W03 row
    # for D01 (last week's table is used for the week before, never for the report week).
    assert np.isnan(_row(a, "D01")["ili_percent"])
    assert _row(a, "D00")["ili_percent"] == pytest.approx(16.0)  # revised 40/250 [HAND]
    eb = analyse_week(
        CURRENT, PRIOR, DISTRICTS, GRAPH, dataclasses.replace(SETTINGS, cluster_variable="eb_rate")
    )
    values = eb.table["eb_percent"].to_numpy().copy()
    values[[IDS.index("D32"), IDS.index("D33")]] = np.nan
    direct = local_clusters(values, GRAPH, permutations=199, seed=12345, correction="none")
    np.testing.assert_allclose(eb.table["local_i"], direct.local_i, rtol=1e-12)


def test_week_after_a_53_week_year() -> None:
    # MMWR 2025 has 53 weeks: the week before 2026-W01 is 2025-W53 (epiweeks library).
    assert (epiweeks.Week(2026, 1) - 1).week == 53
    w53, w01 = EpiWeek(2025, 53, WeekSystem.MMWR), EpiWeek(2026, 1, WeekSystem.MMWR)
    current = _table({w53: W03_PUBLISHED, w01: _week_counts(1)})
    a = analyse_week(current, None, DISTRICTS, GRAPH, SETTINGS)
    assert a.week == w01 and a.prior_week == w53
    assert _row(a, "D00")["prior_ili_percent"] == pytest.approx(15.0)


def test_errors() -> None:
    with pytest.raises(AnalysisError, match="no rows in the current table"):
        analyse_week(CURRENT, PRIOR, DISTRICTS, GRAPH, SETTINGS, week=W[5])
    other = build_graph(_districts(IDS[:-1]).frame)
    with pytest.raises(AnalysisError, match="neighbour graph"):
        analyse_week(CURRENT, PRIOR, DISTRICTS, other, SETTINGS)
    with pytest.raises(AnalysisError, match="recent_weeks"):
        analyse_week(CURRENT, PRIOR, DISTRICTS, GRAPH, SETTINGS, recent_weeks=0)


def test_unknown_district_in_table_is_ignored_with_a_note() -> None:
    extra = dict(W04)
    extra["X99"] = (5, 100)
    current = _table({W[3]: W03_REVISED, W[4]: extra})
    a = analyse_week(current, PRIOR, DISTRICTS, GRAPH, SETTINGS)
    assert list(a.table["district_id"]) == IDS
    assert any("X99" in n and "not in the boundaries" in n for n in a.notes)
    assert a.jurisdiction.total_visits == sum(n for _, n in W04.values())  # X99 not counted
