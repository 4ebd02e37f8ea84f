"""Hardening, the numbers: islands, NaN and zero-variance weeks, data-quality breaks, week
sequencing, revisions of last week, and dependency drift.

docs/faults.md items F1, F4, F5, F6, F7 and F25 (and the display half of F17). The
"naive behaviour" each test guards against is shown where it can be: esda 2.9.0 called
directly gives an island p = 1/(R+1) and one NaN turns every local I into NaN
(docs/faults.md L4). References: esda's own published test values on libpysal's bundled
``desmith`` data (esda/tests/test_moran.py, TestMoranLocal); the local Moran formula of
Anselin (1995) in esda's (n - 1) scaling; statsmodels' Benjamini-Hochberg
(``multipletests(method="fdr_bh")``); ``datetime.date.isocalendar()`` for ISO 8601 weeks.
"""

from __future__ import annotations

import csv
import dataclasses
import datetime as dt
import io
import json
import re
import tomllib
import types
import warnings
from importlib.metadata import version
from pathlib import Path

import numpy as np
import pytest
from hardening_helpers import (
    FORBIDDEN,
    HEADER,
    WEEKS,
    build,
    make_week,
    pdf_text,
    read_outputs,
    scan_html,
    squash,
    tree_hashes,
)

from sitrep import pipeline
from sitrep.analysis.clusters import local_clusters
from sitrep.analysis.weights import graph_from_neighbours
from sitrep.errors import ValidationFailed
from sitrep.model import ClusterLabel

ROOT = Path(__file__).resolve().parents[1]


def lattice(n: int = 5) -> dict[str, list[str]]:
    """Rook neighbours of an n x n lattice, ids 'r<i>c<j>'."""
    out: dict[str, list[str]] = {}
    for i in range(n):
        for j in range(n):
            nbs = [(i + di, j + dj) for di, dj in ((-1, 0), (1, 0), (0, -1), (0, 1))]
            out[f"r{i}c{j}"] = [f"r{a}c{b}" for a, b in nbs if 0 <= a < n and 0 <= b < n]
    return out


def esda_local(y: np.ndarray, neighbours: dict[str, list[str]], permutations: int = 99) -> object:
    """esda 2.9.0 Moran_Local called directly, as a naive user would (libpysal W)."""
    import esda
    from libpysal.weights import W

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        w = W(neighbours, id_order=list(neighbours), silence_warnings=True)
        return esda.Moran_Local(y, w, transformation="r", permutations=permutations, seed=12345)


@pytest.fixture(scope="module")
def plain(tmp_path_factory: pytest.TempPathFactory) -> types.SimpleNamespace:
    """The invented week with nothing wrong (no PDF), archived."""
    week = make_week(tmp_path_factory.mktemp("plain") / "week", pdf=False)
    result = build(week)
    return types.SimpleNamespace(week=week, result=result, out=read_outputs(result))


# --------------------------------------------------------------------------- F1


def test_h01_island_and_orphaned_district_are_never_clusters(plain: types.SimpleNamespace) -> None:
    from statsmodels.stats.multitest import multipletests

    nb = lattice()
    nb["island"] = []
    nb["tip"] = ["r0c0"]  # only neighbour: r0c0, which has no data this week
    nb["r0c0"] = nb["r0c0"] + ["tip"]
    ids = list(nb)
    y = np.array([float(i[1]) * 2 + float(i[3]) if i.startswith("r") else 0.0 for i in ids])
    y[ids.index("island")] = 40.0  # an extreme value with nobody to compare with
    y[ids.index("tip")] = 35.0
    naive = esda_local(y, nb)
    assert naive.p_sim[ids.index("island")] == pytest.approx(1 / 100)  # docs/faults.md F1, L4

    y[ids.index("r0c0")] = np.nan
    result = local_clusters(y, graph_from_neighbours(nb, ids=ids), permutations=99, seed=12345)
    for district in ("island", "tip"):
        k = ids.index(district)
        assert result.labels[k] is ClusterLabel.NO_NEIGHBOURS
        assert np.isnan(result.p_values[k]) and np.isnan(result.q_values[k])
        assert not result.tested[k] and not result.significant[k]
    assert result.labels[ids.index("r0c0")] is ClusterLabel.NO_DATA
    assert result.n_tested == 24  # the BH family: the lattice minus the district without data
    tested = np.flatnonzero(result.tested)
    _, q_ref, _, _ = multipletests(result.p_values[tested], method="fdr_bh")
    np.testing.assert_allclose(result.q_values[tested], q_ref, rtol=1e-12)

    # end to end: the island of the invented week is labelled, with no p-value, in every output
    week, out = plain.week, plain.out
    rows = {
        r["district_id"]: r
        for r in csv.DictReader(io.StringIO(out["results.csv"].decode("utf-8-sig")))
    }
    island = rows[week.ids[-1]]
    assert (island["cluster_label"], island["p_value"], island["q_value"]) == (
        "no neighbours",
        "",
        "",
    )
    districts = json.loads(out["results.json"])["districts"]
    assert next(d for d in districts if d["district_id"] == week.ids[-1])["p_value"] is None


# --------------------------------------------------------------------------- F4


def _flat_latest(rows: list[list[str]]) -> list[list[str]]:
    """Every district 50 ILI of 1000 visits in the report week: zero variance."""
    return [r[:4] + ["50", "1000"] if r[2] == WEEKS[-1] else r for r in rows]


def test_h04_nan_is_left_out_and_zero_variance_is_not_assessable() -> None:
    nb = lattice()
    ids = list(nb)
    y = np.array([float(i[1]) + 2 * float(i[3]) for i in ids])
    y[7] = np.nan
    naive = esda_local(np.where(np.arange(len(y)) == 7, np.nan, y), nb)
    assert np.isnan(naive.Is).all()  # esda: one NaN makes every local I NaN (docs/faults.md F4)
    result = local_clusters(y, graph_from_neighbours(nb, ids=ids), permutations=99, seed=1)
    assert result.assessable and result.labels[7] is ClusterLabel.NO_DATA
    assert np.isfinite(np.delete(result.local_i, 7)).all()
    assert any("without data" in note for note in result.notes)
    flat = local_clusters(np.full(len(ids), 2.5), graph_from_neighbours(nb, ids=ids))
    assert not flat.assessable and not flat.significant.any()
    assert set(flat.labels) == {ClusterLabel.NOT_ASSESSABLE}
    assert np.isnan(flat.p_values).all()


def test_h04_zero_variance_week_with_an_island_does_not_say_no_clusters(tmp_path: Path) -> None:
    week = make_week(tmp_path / "week", pdf=False, edit_table=_flat_latest)
    result = build(week)
    assert not result.analysis.clusters.assessable
    out = read_outputs(result)
    texts = [out["draft.md"].decode(), out["email.txt"].decode(), out["report.html"].decode()]
    for text in texts:
        assert "No district formed" not in text
        assert "no longer significant" not in text  # last week's clusters did not 'vanish'
    assert "could not be assessed" in result.context.key_messages[3]


def test_h04_district_without_data_is_dropped_with_a_warning(tmp_path: Path) -> None:
    week = make_week(
        tmp_path / "week",
        pdf=False,
        edit_table=lambda rows: [r for r in rows if not (r[2] == WEEKS[-1] and r[0] == "D06")],
    )
    result = build(week)
    clusters = result.analysis.clusters
    k = clusters.ids.index("D06")
    assert clusters.labels[k] is ClusterLabel.NO_DATA and clusters.assessable
    assert np.isfinite(clusters.local_i[clusters.tested]).all() and clusters.n_tested == 11
    assert any(
        f.rule == "district-missing-latest" and f.district_id == "D06"
        for f in result.validation.warnings
    )
    assert "could not be assessed" not in result.context.key_messages[3]


# --------------------------------------------------------------------------- F5 (and F17 display)


def _h5_table(rows: list[list[str]]) -> list[list[str]]:
    out = []
    for r in rows:
        r = list(r)
        if r[2] == WEEKS[-1]:  # reporting collapses: 45 % of the visits, 30 % of the ILI visits
            r[5] = str(int(int(r[5]) * 0.45))
            r[4] = str(int(int(r[4]) * 0.30))
            if r[0] == "D07":  # a district with no visits at all this week
                r[4], r[5] = "0", "0"
        if r[0] == "D03" and r[2] == WEEKS[-2]:
            r[4] = "0"  # no ILI last week: the change is 'from 0 to X'
        rate = 100 * int(r[4]) / int(r[5]) if int(r[5]) else 0.0
        if r[0] == "D05" and r[2] == WEEKS[-1]:
            rate *= 10  # the supplied rate disagrees with the counts
        out.append(r + [f"{rate:.4f}"])
    return out


def _h5_prior(rows: list[list[str]]) -> list[list[str]]:
    return [r[:4] + ["0", r[5]] if r[0] == "D03" and r[2] == WEEKS[-2] else r for r in rows]


@pytest.fixture(scope="module")
def quality(tmp_path_factory: pytest.TempPathFactory) -> types.SimpleNamespace:
    folder = tmp_path_factory.mktemp("quality")
    week = make_week(
        folder / "week",
        header=(*HEADER, "ili_pct"),
        edit_table=_h5_table,
        edit_prior=lambda rows: [
            r + [f"{100 * int(r[4]) / int(r[5]):.4f}"] for r in _h5_prior(rows)
        ],
        config={"input": {"columns": {"rate": "ili_pct"}}},
    )
    result = build(week)
    out = read_outputs(result)
    rows = list(csv.reader(io.StringIO(week.table.read_text(encoding="utf-8"))))[1:]
    return types.SimpleNamespace(
        week=week, result=result, out=out, pdf=pdf_text(out["report.pdf"]), rows=rows
    )


def test_h05_data_quality_breaks_are_flagged_and_never_told_as_a_fall_in_cases(
    quality: types.SimpleNamespace,
) -> None:
    result, out = quality.result, quality.out
    drop = [f for f in result.validation.warnings if f.rule == "completeness-drop"]
    now = sum(int(r[5]) for r in quality.rows if r[2] == WEEKS[-1])
    before = sum(int(r[5]) for r in quality.rows if r[2] == WEEKS[-2])
    assert len(drop) == 1 and f"({1 - now / before:.0%}, above the 30% limit)" in drop[0].message
    html_text = out["report.html"].decode("utf-8")
    draft = out["draft.md"].decode("utf-8")
    # the banner: the data-quality section names the fall in reporting in HTML, PDF and draft
    assert drop[0].message in scan_html(html_text).cells
    assert squash("total visits fell from") in squash(quality.pdf)
    assert "a fall in reporting completeness" in draft
    for message in result.context.key_messages:
        assert not re.search(
            r"\b(cases|visits|patients|illness)\s+(fell|dropped|declined)", message
        )
        if re.search(r"\b(fell|fall|decrease)", message) and "completeness" not in message:
            assert "missing reports rather than less illness" in message, message
    # prior rate 0: 'from 0 to X', and no inf/nan anywhere a reader looks
    row = next(r for r in result.context.districts if r.district_id == "D03")
    assert row.change.startswith("from 0 to ") and row.change.endswith("%")
    visible = " ".join(scan_html(html_text).text)
    for name, text in (
        ("html", visible),
        ("pdf", quality.pdf),
        ("draft", draft),
        ("email", out["email.txt"].decode()),
    ):
        assert not FORBIDDEN.search(text), (name, FORBIDDEN.search(text))
    assert not re.search(r"\b(inf|nan)\b", out["results.csv"].decode(), flags=re.I)
    json.loads(out["results.json"], parse_constant=lambda c: pytest.fail(f"JSON holds {c}"))
    # a supplied rate 10x the counts: a warning on its line; the counts decide what is shown
    line = next(i + 2 for i, r in enumerate(quality.rows) if r[0] == "D05" and r[2] == WEEKS[-1])
    mismatch = [f for f in result.validation.warnings if f.rule == "rate-mismatch"]
    assert [(f.line, f.column, f.district_id) for f in mismatch] == [(line, "ili_pct", "D05")]
    ili, total = (int(x) for x in quality.rows[line - 2][4:6])
    shown = next(r for r in result.context.districts if r.district_id == "D05")
    # printed with the week's class-consistent decimals (docs/methods.md section 4)
    assert shown.ili_pct in {f"{100 * ili / total:.{d}f}%" for d in (1, 2, 3)}
    table = result.analysis.table.set_index("district_id")
    assert table.loc["D05", "ili_percent"] == pytest.approx(100 * ili / total, rel=1e-12)


def test_h17_zero_denominator_district_is_shown_without_a_rate(
    quality: types.SimpleNamespace,
) -> None:
    row = next(r for r in quality.result.context.districts if r.district_id == "D07")
    assert row.total_visits == "0" and not re.search(r"\d", row.ili_pct)
    assert row.ci == "—" and row.change == "—"
    csv_row = next(
        r
        for r in csv.DictReader(io.StringIO(quality.out["results.csv"].decode("utf-8-sig")))
        if r["district_id"] == "D07"
    )
    assert csv_row["ili_percent"] == "" and csv_row["change_relative"] == ""
    assert (
        quality.result.analysis.clusters.labels[quality.result.analysis.clusters.ids.index("D07")]
        is ClusterLabel.NO_DATA
    )


# --------------------------------------------------------------------------- F6


def test_h06_weeks_out_of_order_block_and_leave_the_archive_untouched(
    plain: types.SimpleNamespace, tmp_path: Path
) -> None:
    week = plain.week
    before = (tree_hashes(week.archive), tree_hashes(week.out))
    config = week.config()
    swapped = dataclasses.replace(
        config, input=dataclasses.replace(config.input, table=week.prior, prior_table=week.table)
    )
    with pytest.raises(ValidationFailed) as info:
        pipeline.build(swapped, today=dt.date(2026, 11, 30))
    errors = info.value.report.errors
    assert [f.rule for f in errors] == ["week-backwards"] and errors[0].line is not None
    assert (tree_hashes(week.archive), tree_hashes(week.out)) == before

    # the prior table skipped a week: the change is against W46 as given this week, and says so
    skipped = make_week(
        tmp_path / "skip", pdf=False, edit_prior=lambda rows: [r for r in rows if r[2] != WEEKS[-2]]
    )
    result = build(skipped)
    warning = next(f for f in result.validation.warnings if f.rule == "week-skipped")
    assert "over 2 weeks" in warning.message and "against 2026-W46 as given" in warning.message
    assert str(result.analysis.prior_week) == "2026-W46"
    assert "in week 46" in result.context.key_messages[0]

    # neither table holds W46: the change is withheld, never taken against W45
    gap = make_week(
        tmp_path / "gap",
        pdf=False,
        edit_prior=lambda rows: [r for r in rows if r[2] != WEEKS[-2]],
        edit_table=lambda rows: [r for r in rows if r[2] != WEEKS[-2]],
    )
    result = build(gap)
    assert "change is not assessed" in next(
        f.message for f in result.validation.warnings if f.rule == "week-skipped"
    )
    assert result.analysis.jurisdiction.change_class.value == "not assessable"
    assert "cannot be assessed" in result.context.key_messages[0]
    assert "week 45" not in result.context.key_messages[0]


def test_h06_iso_53_week_year_and_year_boundary_use_the_right_prior_week(tmp_path: Path) -> None:
    # ISO 8601 references: 2026 has 53 weeks, 2025 has 52
    assert dt.date(2026, 12, 28).isocalendar()[:2] == (2026, 53)
    assert dt.date(2027, 1, 4).isocalendar()[:2] == (2027, 1)
    assert dt.date(2025, 12, 28).isocalendar()[:2] == (2025, 52)
    assert dt.date(2025, 12, 29).isocalendar()[:2] == (2026, 1)
    for weeks, today, prior in (
        (
            ["2026-W50", "2026-W51", "2026-W52", "2026-W53", "2027-W01"],
            dt.date(2027, 1, 11),
            "2026-W53",
        ),
        (
            ["2025-W49", "2025-W50", "2025-W51", "2025-W52", "2026-W01"],
            dt.date(2026, 1, 5),
            "2025-W52",
        ),
    ):
        week = make_week(tmp_path / weeks[-1], pdf=False, weeks=weeks, system="iso")
        result = build(week, today=today)
        assert (str(result.week), str(result.analysis.prior_week)) == (weeks[-1], prior)
        rows = list(csv.reader(io.StringIO(week.table.read_text())))[1:]
        expected = sum(int(r[4]) for r in rows if r[2] == prior)
        assert result.analysis.jurisdiction.prior_ili_visits == expected
        assert not [f for f in result.validation.warnings if f.rule in ("week-skipped", "week-gap")]


def test_h06_mixed_weeks_in_a_file_declared_weekly_are_errors(tmp_path: Path) -> None:
    """The pipeline reads season-to-date extracts; the weekly-file rule itself is checked here."""
    from sitrep.ingest.read import read_count_table
    from sitrep.ingest.validate import validate_table
    from sitrep.weeks import WeekSystem

    week = make_week(tmp_path / "week", pdf=False)
    config = week.config()
    table, _ = read_count_table(week.table, config.input, WeekSystem.MMWR)
    report = validate_table(table, None, config.validation, weekly_file=True)
    mixed = [f for f in report.errors if f.rule == "week-mixed"]
    assert len(mixed) == len(WEEKS) - 1
    assert all(f.line is not None and f.column == "epi_week" for f in mixed)


# --------------------------------------------------------------------------- F7


def test_h07_revised_last_week_is_reported_and_archive_keeps_history(tmp_path: Path) -> None:
    def inflate(rows: list[list[str]]) -> list[list[str]]:
        return [
            r[:4] + [str(int(r[4]) * 4), r[5]] if r[0] == "D05" and r[2] == WEEKS[-2] else r
            for r in rows
        ]

    week = make_week(tmp_path / "week", pdf=False, edit_table=inflate)
    config = week.config()
    last_week = dataclasses.replace(
        config, input=dataclasses.replace(config.input, table=week.prior, prior_table=None)
    )
    first = pipeline.build(last_week, today=dt.date(2026, 11, 23))  # the W46 report, archived
    archived = tree_hashes(first.bundle.path)
    old = next(
        r
        for r in csv.reader(io.StringIO(week.prior.read_text()))
        if r[0] == "D05" and r[2] == WEEKS[-2]
    )
    new = next(
        r
        for r in csv.reader(io.StringIO(week.table.read_text()))
        if r[0] == "D05" and r[2] == WEEKS[-2]
    )
    result = build(week)
    big = [f for f in result.validation.warnings if f.rule == "revision-large"]
    assert [f.district_id for f in big] == ["D05"]
    assert f"ILI visits {old[4]} -> {new[4]}" in big[0].message
    assert tree_hashes(first.bundle.path) == archived  # the W46 bundle is byte-identical
    d05 = next(
        d
        for d in json.loads(read_outputs(result)["results.json"])["districts"]
        if d["district_id"] == "D05"
    )
    assert d05["prior_ili_percent"] == pytest.approx(100 * int(new[4]) / int(new[5]))
    assert d05["prior_ili_percent_published"] == pytest.approx(100 * int(old[4]) / int(old[5]))
    assert "revised from" in result.context.key_messages[0]  # which W46 value the change uses


# --------------------------------------------------------------------------- F25


def test_h25_pinned_versions_and_golden_local_moran_values() -> None:
    import esda
    import libpysal
    from packaging.requirements import Requirement

    project = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]
    pins = {Requirement(r).name: Requirement(r).specifier for r in project["dependencies"]}
    for package in ("esda", "libpysal", "weasyprint", "pandas", "geopandas"):
        assert pins[package].contains(version(package)), (package, version(package), pins[package])
    assert esda.__version__.startswith("2.9.")  # p-values below are esda 2.9.x's
    assert version("weasyprint").split(".")[0] == "70"
    import weasyprint.urls

    assert hasattr(weasyprint.urls, "URLFetcher") and not hasattr(
        weasyprint.urls, "default_url_fetcher"
    )

    # libpysal's bundled desmith data (de Smith, Goodchild & Longley, Geospatial Analysis)
    gal = libpysal.io.open(libpysal.examples.get_path("desmith.gal"))
    table = libpysal.io.open(libpysal.examples.get_path("desmith.txt"))
    try:
        w = gal.read()
        y = np.array(table.by_col["z"], dtype=float)
    finally:
        gal.close()
        table.close()
    ids = [str(i) for i in w.id_order]
    nb = {str(k): [str(j) for j in v] for k, v in w.neighbors.items()}
    dg = graph_from_neighbours(nb, ids=ids)
    assert {k: sorted(v) for k, v in dg.neighbours.items()} == {k: sorted(v) for k, v in nb.items()}
    result = local_clusters(y, dg, permutations=99, seed=12345)
    # Anselin (1995) local I in esda's scaling: I_i = (n-1) z_i (W z)_i / sum z^2, W row-standardised
    z = y - y.mean()
    lag = np.array([z[[ids.index(j) for j in nb[i]]].mean() for i in ids])
    expected = (len(y) - 1) * z * lag / (z @ z)
    np.testing.assert_allclose(result.local_i, expected, atol=1e-6)  # tolerance: docs/faults.md F25
    # esda's published values for this data, R = 99, seed 12345 (esda/tests/test_moran.py)
    lm = esda_local(y, nb)
    np.testing.assert_allclose(lm.z_sim[0], -0.6990291160835514)
    np.testing.assert_allclose(lm.p_z_sim[0], 0.24226691753791396)
    np.testing.assert_array_equal(result.p_values, lm.p_sim)  # sitrep passes esda's p through
    assert result.esda_version == esda.__version__
