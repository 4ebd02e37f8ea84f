"""Nowcast: reporting triangle, chain ladder, Mack's prediction error, skips (docs/methods.md §12)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from sitrep.analysis.nowcast import (
    Extract,
    chain_ladder,
    mack_projection,
    nowcast,
    reporting_triangle,
)
from sitrep.config import NowcastSettings, config_from_dict
from sitrep.errors import ConfigError
from sitrep.weeks import EpiWeek

W = EpiWeek(2026, 30)

# Taylor & Ashe (1983) incremental claims triangle, the worked example of Mack 1993 (ASTIN
# Bulletin 23:213-225) [PUB; the numbers below are recalled, MEMORY].
TAYLOR_ASHE = [
    [357848, 766940, 610542, 482940, 527326, 574398, 146342, 139950, 227229, 67948],
    [352118, 884021, 933894, 1183289, 445745, 320996, 527804, 266172, 425046],
    [290507, 1001799, 926219, 1016654, 750816, 146923, 495992, 280405],
    [310608, 1108250, 776189, 1562400, 272482, 352053, 206286],
    [443160, 693190, 991983, 769488, 504851, 470639],
    [396132, 937085, 847498, 805037, 705960],
    [440832, 847631, 1131398, 1063269],
    [359480, 1061648, 1443370],
    [376686, 986608],
    [344014],
]


def _taylor_ashe() -> np.ndarray:
    c = np.full((10, 10), np.nan)
    for i, row in enumerate(TAYLOR_ASHE):
        c[i, : len(row)] = np.cumsum(row)
    return c


def test_chain_ladder_factors_and_sigma_match_mack_1993() -> None:
    cl = chain_ladder(_taylor_ashe())
    # Mack 1993, table of f_k and sigma_k for the Taylor-Ashe data [PUB, MEMORY]
    f = [3.4906, 1.7473, 1.4574, 1.1739, 1.1038, 1.0863, 1.0539, 1.0766, 1.0177]
    sigma = [400.35, 194.26, 204.85, 123.22, 117.18, 90.48, 21.13, 33.87, 21.13]
    np.testing.assert_allclose(cl.factors, f, atol=5e-5)
    np.testing.assert_allclose(np.sqrt(cl.sigma2), sigma, atol=5e-3)
    assert cl.pairs == (9, 8, 7, 6, 5, 4, 3, 2, 1)


def test_mack_reserves_and_standard_errors_match_mack_1993() -> None:
    c = _taylor_ashe()
    cl = chain_ladder(c)
    delay = np.array([9 - i for i in range(10)])
    latest = c[np.arange(10), delay]
    final, mse = mack_projection(cl, latest, delay)
    # reserves (final minus latest) and Mack's standard errors per accident year, Mack 1993
    # [PUB, MEMORY]; the total reserve 18,680,856 is the usual quoted figure
    reserves = [0, 94634, 469511, 709638, 984889, 1419459, 2177641, 3920301, 4278972, 4625811]
    se = [0, 75535, 121699, 133549, 261406, 411010, 558317, 875328, 971258, 1363155]
    np.testing.assert_allclose(final - latest, reserves, atol=1.0)
    np.testing.assert_allclose(np.sqrt(mse), se, atol=1.0)
    assert round(float((final - latest).sum())) == 18680856


def _extract(report: EpiWeek, rows: list[tuple[str, EpiWeek, int, int]], name: str) -> Extract:
    frame = pd.DataFrame(rows, columns=["district_id", "week", "ili_visits", "total_visits"])
    return Extract(report, frame, name)


def test_reporting_triangle_places_each_extract_at_its_delay() -> None:
    # constructed case [HAND]: week W seen in three extracts, W+1 in two, W+2 in one
    e0 = _extract(W, [("a", W, 5, 100), ("b", W, 1, 10)], "e0")
    e1 = _extract(W + 1, [("a", W, 7, 120), ("a", W + 1, 6, 90), ("b", W, 2, 12)], "e1")
    e2 = _extract(
        W + 2,
        [("a", W - 5, 1, 1), ("a", W, 8, 125), ("a", W + 1, 9, 110), ("a", W + 2, 3, 50)],
        "e2",
    )
    tri = reporting_triangle([e2, e0, e1], max_delay=2)
    assert tri.districts == ("a", "b")
    assert tri.weeks == (W - 2, W - 1, W, W + 1, W + 2)
    j = tri.weeks.index(W)
    np.testing.assert_array_equal(tri.ili[0, j], [5, 7, 8])
    np.testing.assert_array_equal(tri.total[0, j], [100, 120, 125])
    np.testing.assert_array_equal(tri.total[0, j + 1], [90, 110, np.nan])
    np.testing.assert_array_equal(tri.total[1, j], [10, 12, np.nan])  # b missing from e2
    assert np.isnan(tri.total[:, :j]).all()  # W-5 is older than the longest delay: left out
    long = tri.frame()
    assert len(long) == 3 + 2 + 1 + 2
    assert long.loc[(long["district_id"] == "a") & (long["delay"] == 2), "week"].tolist() == [W]


def test_reporting_triangle_refuses_two_extracts_of_one_week() -> None:
    e = _extract(W, [("a", W, 1, 2)], "first.csv")
    with pytest.raises(ValueError, match="first.csv and second.csv both report 2026-W30"):
        reporting_triangle([e, _extract(W, [("a", W, 1, 2)], "second.csv")], max_delay=2)
    with pytest.raises(ValueError, match="after its report week"):
        reporting_triangle([_extract(W, [("a", W + 1, 1, 2)], "x")], max_delay=2)


# Known delay distribution [HAND]: 50%, 30%, 20% of a week's ILI visits arrive at delays
# 0, 1, 2 (cumulative 0.5, 0.8, 1.0), and 80%, 15%, 5% of the other visits (0.8, 0.95, 1.0).
ILI_CUM, OTHER_CUM = (0.5, 0.8, 1.0), (0.8, 0.95, 1.0)


def _exact_extracts(n_weeks: int, finals: dict[str, tuple[int, int]]) -> list[Extract]:
    """Extracts for report weeks W..W+n_weeks-1 where every week develops exactly as above."""
    out = []
    for r in range(n_weeks):
        rows = []
        for district, (ili, other) in finals.items():
            for d in range(min(r, 3) + 1):
                c = min(d, 2)
                x, m = ili * ILI_CUM[c], other * OTHER_CUM[c]
                rows.append((district, W + r - d, round(x), round(x + m)))
        out.append(_extract(W + r, rows, f"extract {r}"))
    return out


SETTINGS = NowcastSettings(weeks=2, max_delay=2, window_weeks=12, min_extracts=6)


def test_exact_development_gives_the_factors_and_finals_by_hand() -> None:
    finals = {"a": (100, 1000), "b": (40, 2000)}
    result = nowcast(_exact_extracts(8, finals), W + 7, SETTINGS, seed=1)
    assert result.skipped is None
    # f_0 = 0.8 / 0.5 = 1.6, f_1 = 1.0 / 0.8 = 1.25; other visits 0.95 / 0.8, 1.0 / 0.95 [HAND]
    np.testing.assert_allclose(result.factors_ili, [1.6, 1.25])
    np.testing.assert_allclose(result.factors_other, [0.95 / 0.8, 1 / 0.95])
    latest, before = result.weeks[-1], result.weeks[0]
    assert (latest.week, latest.delay, before.delay) == (W + 7, 0, 1)
    # this week: observed ILI 50 + 20, all visits 850 + 1620; expected final 140 and 3140
    assert (latest.observed_ili, latest.observed_total) == (70, 2470)
    assert latest.ili == pytest.approx(140.0)
    assert latest.total == pytest.approx(3140.0)
    assert latest.percent == pytest.approx(100 * 140 / 3140)
    assert before.ili == pytest.approx(140.0) and before.observed_ili == 80 + 32
    # the development is exact, so sigma^2 = 0 and the interval is the point itself
    assert latest.percent_low == pytest.approx(latest.percent)
    assert latest.percent_high == pytest.approx(latest.percent)
    assert latest.observed_percent == pytest.approx(100 * 70 / 2470)


def test_one_step_simulated_spread_matches_mack_error() -> None:
    # rows (10 -> 15), (20 -> 26), (30 -> 45): f = 86/60, sigma^2 = (10/225 + 80/225 + 30/225)/2
    # = 4/15 [HAND, Mack 1993 estimators]; a row at 40 is then predicted 40 f with
    # mse = (40 f)^2 sigma^2/f^2 (1/40 + 1/60) = sigma^2 (40 + 40^2/60)
    c = np.array([[10, 15], [20, 26], [30, 45], [40, np.nan]], dtype=float)
    cl = chain_ladder(c)
    assert cl.factors[0] == pytest.approx(86 / 60)
    assert cl.sigma2[0] == pytest.approx(4 / 15)
    final, mse = mack_projection(cl, np.array([40.0]), np.array([0]))
    assert final[0] == pytest.approx(40 * 86 / 60)
    assert mse[0] == pytest.approx(4 / 15 * (40 + 1600 / 60))
    from sitrep.analysis.nowcast import _draw_finals

    rng = np.random.default_rng(7)
    sims = _draw_finals([cl], np.array([0]), np.array([40.0]), np.array([0]), rng, 40_000)
    assert sims.mean() == pytest.approx(final[0], rel=0.005)
    assert sims.std() == pytest.approx(np.sqrt(mse[0]), rel=0.03)


def test_noisy_development_interval_covers_the_final_values() -> None:
    # multinomial late reports with the known distribution: the 90% interval of each
    # district-week should hold the true final in roughly 90% of cells [HAND invariant]
    rng = np.random.default_rng(2026)
    n_weeks, districts = 20, [f"{i:02d}" for i in range(30)]
    finals = {
        (d, w): (int(rng.integers(20, 80)), int(rng.integers(400, 2000)))
        for d in districts
        for w in range(n_weeks)
    }
    parts = {}
    for key, (x, m) in finals.items():
        parts[key] = (
            rng.multinomial(x, [0.5, 0.3, 0.2]).cumsum(),
            rng.multinomial(m, [0.8, 0.15, 0.05]).cumsum(),
        )
    extracts = []
    for r in range(n_weeks):
        rows = []
        for d in districts:
            for w in range(max(0, r - 2), r + 1):
                x, m = parts[(d, w)]
                rows.append((d, W + w, int(x[r - w]), int(x[r - w] + m[r - w])))
        extracts.append(_extract(W + r, rows, f"e{r}"))
    settings = NowcastSettings(
        weeks=2, max_delay=2, window_weeks=20, min_extracts=10, district_min_weeks=50
    )
    result = nowcast(extracts, W + n_weeks - 1, settings, seed=3)
    frame = result.districts
    truth_x = np.array(
        [
            finals[(d, w.weeks_since(W))][0]
            for d, w in zip(frame["district_id"], frame["week"], strict=True)
        ]
    )
    covered = (frame["ili_low"] <= truth_x) & (truth_x <= frame["ili_high"])
    assert 0.8 <= covered.mean() <= 0.97
    assert result.own_factor_districts == 0  # 50 weeks asked for, 20 on file: pooled


def test_too_few_extracts_skip_with_the_reason() -> None:
    extracts = _exact_extracts(5, {"a": (100, 1000)})
    result = nowcast(extracts, W + 4, SETTINGS, seed=1)
    assert result.weeks == ()
    assert result.skipped == (
        "only 5 weekly extracts of the 12 weeks to 2026-W34 are on file (the archive and the "
        "folder of past extracts); the nowcast needs at least 6"
    )
    gone = nowcast(extracts[:-1], W + 4, SETTINGS, seed=1)
    assert gone.skipped == "the extract of 2026-W34 itself is not among the extracts"


def test_a_delay_never_seen_twice_skips() -> None:
    # every other extract missing: no week is seen at delays 0 and 1 [HAND]
    extracts = [e for k, e in enumerate(_exact_extracts(14, {"a": (100, 1000)})) if k % 2 == 1]
    result = nowcast(extracts, W + 13, SETTINGS, seed=1)
    assert result.skipped is not None and "delay 0 and delay 1" in result.skipped


@pytest.mark.parametrize(
    ("raw", "match"),
    [
        ({"nowcast": {"weeks": 5, "max_delay": 4}}, "nowcast.weeks must be 1..nowcast.max_delay"),
        ({"nowcast": {"max_delay": 0}}, "nowcast.max_delay must be 1..26"),
        ({"nowcast": {"window_weeks": 5}}, "nowcast.window_weeks must be at least"),
        ({"nowcast": {"min_extracts": 3}}, "nowcast.min_extracts must be from"),
        ({"nowcast": {"level": 0.3}}, "nowcast.level must be at least 0.5"),
        ({"nowcast": {"level": 1.0}}, "nowcast.level must be at least 0.5 and below 1"),
        ({"nowcast": {"draws": 10}}, "nowcast.draws must be at least 200"),
        ({"nowcast": {"week": 4}}, "unknown key 'week' in \\[nowcast\\]"),
        ({"input": {"past_extracts": 3}}, "input.past_extracts must be a non-empty path"),
    ],
)
def test_bad_nowcast_settings_are_named(raw: dict, match: str) -> None:
    with pytest.raises(ConfigError, match=match):
        config_from_dict(raw)
