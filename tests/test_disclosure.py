"""Disclosure control (docs/methods.md §6.2): the rules on constructed tables, and an attacker.

The unit tests build small groups by hand and check the primary and the
complementary rule [HAND: each expected set follows from the rules in
docs/methods.md §6.2 by hand].

The attacker reads every published output of a bundle (results.csv and
results.json, the HTML district table, the text of the PDF, the drafts, the
e-mail body, the SVG figures, validation.json) and tries to work out each
withheld ILI count exactly:

- a count or percentage printed for it (percentage x visits, with the visits
  known to the attacker: the worst case);
- the jurisdiction total minus the districts shown (this week and last week);
- last week's value from this week's value and the change;
- the Wilson interval: a printed interval and n give back x. The inversion is
  checked against statsmodels ``proportion_confint(method="wilson")``
  (Wilson 1927, JASA 22:209-212);
- two versions of the same week (a reissue), and last week's report.

It fails if any reconstruction equals the true count. The same attacker
recovers district 042 of the demo from main's outputs before disclosure
control (``test_attacker_finds_the_old_leak``, on a copy of that behaviour).
"""

from __future__ import annotations

import csv
import html.parser
import io
import json
import math
import re
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

import pytest
from hardening_helpers import make_week, pdf_text, write_csv
from statsmodels.stats.proportion import proportion_confint

from sitrep.analysis.disclosure import (
    Cell,
    DisclosureRules,
    Earlier,
    Rule,
    decide,
    group_is_protected,
    primary_rule,
    protect_group,
)

RULES = DisclosureRules(min_visits=50, min_count=5)
Z95 = 1.959963984540054  # Φ⁻¹(0.975) [LIB scipy.stats.norm.ppf(0.975)]


# --------------------------------------------------------------------------- the rules


def test_primary_rule_thresholds() -> None:
    # docs/methods.md §6.2: visits below min_visits; ILI 1..min_count-1; zero only when asked [HAND]
    assert primary_rule(1, 27, RULES) is Rule.FEW_VISITS
    assert primary_rule(40, 49, RULES) is Rule.FEW_VISITS
    assert primary_rule(4, 50, RULES) is Rule.SMALL_COUNT
    assert primary_rule(1, 5000, RULES) is Rule.SMALL_COUNT
    assert primary_rule(5, 50, RULES) is None
    assert primary_rule(0, 900, RULES) is None
    assert primary_rule(0, 900, DisclosureRules(50, 5, suppress_zero=True)) is Rule.ZERO_COUNT
    assert primary_rule(0, 0, RULES) is None  # nothing counted, nothing to protect
    assert primary_rule(2, 900, DisclosureRules(50, 0)) is None  # small-count rule off


def test_one_primary_cell_gets_a_complement_with_the_fewest_visits() -> None:
    cells = [Cell("A", 1, 27), Cell("B", 20, 900), Cell("C", 9, 300), Cell("D", 30, 1200)]
    g = protect_group(cells, RULES, label="W47")
    # A alone could be had as total - shown; C has the fewest visits of the others [HAND]
    assert [(c.district_id, c.rule) for c in g.withheld] == [
        ("A", Rule.FEW_VISITS),
        ("C", Rule.COMPLEMENTARY),
    ]
    assert not g.total_withheld
    assert group_is_protected(cells, g.ids, RULES)
    assert not group_is_protected(cells, {"A"}, RULES)


def test_complements_are_added_until_the_withheld_sums_meet_the_thresholds() -> None:
    # A and B are primary, but together 3 ILI visits (< 5) and 45 visits (< 50): the sum
    # total - shown would itself be a small count; C (fewest visits) holds 6 more ILI
    # visits (9 in all) and brings the visits to 105 [HAND].
    cells = [Cell("A", 1, 20), Cell("B", 2, 25), Cell("C", 6, 60), Cell("D", 40, 800)]
    g = protect_group(cells, RULES, label="W47")
    assert g.ids == {"A", "B", "C"}
    assert g.rule_of("C") is Rule.COMPLEMENTARY
    assert (g.n_primary, g.n_complementary) == (2, 1)


def test_a_zero_complement_does_not_protect_a_small_count() -> None:
    # with zeros shown, C (0 of 55) adds visits but no ILI visits: 3 + 0 < 5, so D follows [HAND]
    cells = [Cell("A", 3, 60), Cell("C", 0, 55), Cell("D", 7, 400), Cell("E", 50, 2000)]
    g = protect_group(cells, RULES, label="W47")
    assert g.ids == {"A", "C", "D"}


def test_no_protection_possible_withholds_the_total() -> None:
    g = protect_group([Cell("A", 2, 30), Cell("B", 1, 10)], RULES, label="W47")
    assert g.total_withheld and "fewer than 50 visits" in g.reason
    g = protect_group([Cell("A", 2, 300)], RULES, label="W47")
    assert g.total_withheld and "fewer than two districts" in g.reason
    g = protect_group([Cell("A", 2, 300), Cell("B", 1, 300)], RULES, label="W47")
    assert g.total_withheld and "fewer than 5 ILI visits" in g.reason
    assert not protect_group([Cell("A", 20, 300), Cell("B", 9, 300)], RULES, label="W").withheld


def test_earlier_withheld_cells_stay_withheld_and_known_cells_do_not_protect() -> None:
    cells = [Cell("A", 1, 27), Cell("B", 20, 900), Cell("C", 9, 300), Cell("D", 30, 1200)]
    # an earlier version withheld A and C; now A is revised to 8 of 120 (not primary)
    revised = [Cell("A", 8, 120), *cells[1:]]
    g = protect_group(revised, RULES, label="W47", carried=["A", "C"])
    assert g.ids == {"A", "C"} and g.rule_of("A") is Rule.EARLIER
    # an earlier version showed C with these very counts: C is no complement, B is taken
    g = protect_group(cells, RULES, label="W47", known={"C": (9, 300)})
    assert g.ids == {"A", "B"}
    # withheld earlier but known unchanged from another publication: C protects nothing
    g = protect_group(cells, RULES, label="W47", carried=["C"], known={"C": (9, 300)})
    assert g.ids == {"A", "C", "B"} and g.already_known == ("C",)


def test_decide_prefers_complements_withheld_in_the_other_week() -> None:
    now = [Cell("A", 1, 27), Cell("B", 20, 900), Cell("C", 9, 300), Cell("D", 30, 1200)]
    before = [Cell("A", 9, 200), Cell("B", 2, 800), Cell("C", 9, 300), Cell("D", 30, 1100)]
    d = decide(now, before, RULES, labels=("W47", "W46"))
    # this week: A primary, B preferred (primary last week) over C (fewer visits) [HAND]
    assert d.this_week.ids == {"A", "B"}
    # last week: B primary, A preferred (withheld this week) [HAND]
    assert d.prior_week.ids == {"A", "B"}
    assert d.any_withheld


def test_earlier_publications_merge() -> None:
    a = Earlier(frozenset({"A"}), (("B", 3, 90),))
    b = Earlier(frozenset({"C"}), (("B", 4, 95), ("D", 1, 9)))
    m = a.merged(b)
    assert m.withheld == {"A", "C"} and m.known == {"B": (4, 95), "D": (1, 9)}


def test_cells_refuse_impossible_counts() -> None:
    with pytest.raises(ValueError, match="0 <= ILI <= visits"):
        Cell("A", 5, 4)
    with pytest.raises(ValueError, match="twice"):
        protect_group([Cell("A", 5, 90), Cell("A", 5, 90)], RULES, label="W47")


# --------------------------------------------------------------------------- Wilson inversion


def wilson_invert(low_pct: float, high_pct: float, n: int, z: float = Z95) -> float:
    """x from a Wilson score interval and n (the centre is (p + z²/2n) / (1 + z²/n))."""
    centre = (low_pct + high_pct) / 200.0
    p = centre * (1 + z * z / n) - z * z / (2 * n)
    return p * n


@pytest.mark.parametrize(("x", "n"), [(1, 27), (0, 40), (7, 313), (19, 782), (250, 251)])
def test_wilson_inversion_matches_statsmodels(x: int, n: int) -> None:
    low, high = proportion_confint(x, n, alpha=0.05, method="wilson")  # statsmodels [LIB]
    assert wilson_invert(100 * low, 100 * high, n) == pytest.approx(x, abs=1e-6)


def wilson_candidates(text_low: str, text_high: str, n: int, digits: int = 1) -> list[int]:
    """Counts x whose statsmodels Wilson interval prints as the given rounded bounds."""
    out = []
    for x in range(n + 1):
        low, high = proportion_confint(x, n, alpha=0.05, method="wilson")
        if f"{100 * low:.{digits}f}" == text_low and f"{100 * high:.{digits}f}" == text_high:
            out.append(x)
    return out


# --------------------------------------------------------------------------- the attacker


class _Rows(html.parser.HTMLParser):
    """Every table row of an HTML document as a list of cell texts (html.parser)."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.rows: list[list[str]] = []
        self._row: list[str] | None = None
        self._cell: list[str] | None = None
        self._skip = 0

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag in ("script", "style"):
            self._skip += 1
        if tag == "tr":
            self._row = []
        if tag in ("td", "th") and self._row is not None:
            self._cell = []

    def handle_endtag(self, tag: str) -> None:
        if tag in ("script", "style") and self._skip:
            self._skip -= 1
        if tag in ("td", "th") and self._cell is not None and self._row is not None:
            self._row.append(" ".join("".join(self._cell).split()))
            self._cell = None
        if tag == "tr" and self._row is not None:
            self.rows.append(self._row)
            self._row = None

    def handle_data(self, data: str) -> None:
        if self._cell is not None and not self._skip:
            self._cell.append(data)


def html_rows(text: str) -> list[list[str]]:
    parser = _Rows()
    parser.feed(text)
    parser.close()
    return parser.rows


def _svg_text(data: bytes) -> str:
    return " ".join(re.sub(r"<[^>]+>", " ", data.decode("utf-8", "replace")).split())


def published_texts(folder: Path) -> dict[str, str]:
    """Every published output of a bundle as text (PDF, HTML, drafts, mail body, figures, JSON)."""
    import docx

    out: dict[str, str] = {}
    for path in sorted(folder.rglob("*")):
        if not path.is_file() or "inputs" in path.relative_to(folder).parts:
            continue
        name = str(path.relative_to(folder))
        if name.startswith("internal-") or "/internal-" in name:
            continue
        data = path.read_bytes()
        if path.suffix == ".pdf":
            out[name] = pdf_text(data)
        elif path.suffix == ".docx":
            document = docx.Document(io.BytesIO(data))
            parts = [p.text for p in document.paragraphs]
            parts += [c.text for t in document.tables for r in t.rows for c in r.cells]
            out[name] = "\n".join(parts)
        elif path.suffix == ".svg":
            out[name] = _svg_text(data)
        elif path.suffix in (".html", ".md", ".txt", ".json", ".csv"):
            out[name] = data.decode("utf-8-sig")
    return out


def _num(value: Any) -> float | None:
    if value is None or value == "":
        return None
    try:
        x = float(str(value).replace(",", ""))
    except ValueError:
        return None
    return x if math.isfinite(x) else None


def _flag(value: Any) -> bool:
    return value is True or str(value).strip().lower() == "true"


def published_rows(folder: Path) -> list[dict[str, Any]]:
    """District rows of results.json and results.csv (both are published)."""
    rows = list(json.loads((folder / "results.json").read_text(encoding="utf-8"))["districts"])
    with (folder / "results.csv").open(encoding="utf-8-sig", newline="") as handle:
        rows += list(csv.DictReader(handle))
    return rows


Truth = Mapping[str, Mapping[str, tuple[int, int]]]
"""week label -> district -> (ILI visits, all visits)."""


def read_truth(table: Path, prior: Path | None = None) -> dict[str, dict[str, tuple[int, int]]]:
    """The counts as the input tables hold them (this week's table first, then last week's)."""
    out: dict[str, dict[str, tuple[int, int]]] = {}
    for path in [p for p in (prior, table) if p is not None]:
        with path.open(encoding="utf-8-sig", newline="") as handle:
            for row in csv.DictReader(handle):
                out.setdefault(row["epi_week"], {})[row["district_id"]] = (
                    int(row["ili_visits"]),
                    int(row["total_visits"]),
                )
    return out


def reconstruct(folders: Iterable[Path], truth: Truth) -> list[tuple[str, str, int, str]]:
    """Every (week, district, count, how) the attacker works out from the publications.

    ``truth`` supplies only the visits of each district (the worst case: the
    attacker knows every denominator); :func:`leaks` then says which claims hit
    a withheld count.
    """
    claims: list[tuple[str, str, int, str]] = []
    # per publication and week: (total, counts shown there, districts withheld there)
    pubs: list[tuple[str, str, int | None, dict[str, int], set[str]]] = []

    def visits(week: str, district: str) -> int | None:
        cell = truth.get(week, {}).get(district)
        return cell[1] if cell else None

    for folder in folders:
        name = str(folder)
        doc = json.loads((folder / "results.json").read_text(encoding="utf-8"))
        week, prior_week = str(doc["week"]), str(doc["prior_week"])
        j = doc["jurisdiction"]
        total_now = int(j["ili_visits"]) if j.get("ili_visits") is not None else None
        n0_total = sum(n for _, n in truth.get(prior_week, {}).values())
        total_before = (
            round(j["prior_ili_percent"] * n0_total / 100)
            if j.get("prior_ili_percent") is not None and n0_total
            else None
        )
        here: dict[str, dict[str, int]] = {week: {}, prior_week: {}}
        held: dict[str, set[str]] = {week: set(), prior_week: set()}
        for row in published_rows(folder):
            d = str(row["district_id"])
            if _flag(row.get("suppressed")):
                held[week].add(d)
            if _flag(row.get("prior_suppressed")):
                held[prior_week].add(d)
            n1, n0 = visits(week, d), visits(prior_week, d)
            x = _num(row.get("ili_visits"))
            p1 = _num(row.get("ili_percent"))
            p0 = _num(row.get("prior_ili_percent"))
            guesses: list[tuple[str, float, str]] = []
            if x is not None:
                guesses.append((week, x, "printed count"))
            if p1 is not None and n1:
                guesses.append((week, p1 * n1 / 100, "percentage x visits"))
            lo, hi = _num(row.get("ci_low")), _num(row.get("ci_high"))
            if lo is not None and hi is not None and n1:
                guesses.append((week, wilson_invert(lo, hi, n1), "Wilson interval"))
            if p0 is not None and n0:
                guesses.append((prior_week, p0 * n0 / 100, "last week's percentage"))
            published = _num(row.get("prior_ili_percent_published"))
            if published is not None and n0:
                guesses.append((prior_week, published * n0 / 100, "last week's published %"))
            change = _num(row.get("change_pp"))
            if change is not None and p1 is not None and n0:
                guesses.append((prior_week, (p1 - change) * n0 / 100, "change"))
            for w, value, how in guesses:
                if abs(value - round(value)) < 1e-6:
                    here[w][d] = round(value)
                    claims.append((w, d, round(value), f"{name}: {how}"))
        # the HTML district table: counts and rounded intervals per row
        rows = html_rows((folder / "report.html").read_text(encoding="utf-8"))
        header = next((r for r in rows if "Id" in r and any("CI" in c for c in r)), None)
        if header is not None:
            at = {h: k for k, h in enumerate(header)}
            ci_col = next(k for k, c in enumerate(header) if "CI" in c)
            for r in rows:
                if len(r) != len(header) or r is header:
                    continue
                d = r[at["Id"]]
                count = _num(r[at["ILI visits"]]) if "ILI visits" in at else None
                if count is not None:
                    here[week][d] = int(count)
                    claims.append((week, d, int(count), f"{name}: HTML table count"))
                bounds = re.findall(r"\d+\.\d+", r[ci_col])
                n1 = visits(week, d)
                if len(bounds) == 2 and n1:
                    found = wilson_candidates(bounds[0], bounds[1], n1)
                    if len(found) == 1:
                        claims.append((week, d, found[0], f"{name}: HTML interval"))
        pubs.append((name, week, total_now, here[week], held[week]))
        pubs.append((name, prior_week, total_before, here[prior_week], held[prior_week]))
    # totals minus the districts shown: in the same publication, then with counts that
    # other publications showed (assumed unchanged) for the other withheld districts
    for name, w, total, here_w, held_w in pubs:
        if total is None:
            continue
        elsewhere: dict[str, int] = {}
        for other, ww, _, shown, _ in pubs:
            if other != name and ww == w:
                for d, v in shown.items():
                    elsewhere.setdefault(d, v)
        districts = set(truth.get(w, {}))
        missing = districts - set(here_w) - held_w
        if missing - set(elsewhere):
            continue  # a district neither shown nor flagged withheld: no equation
        base = total - sum(here_w[d] for d in districts & set(here_w))
        base -= sum(elsewhere[d] for d in missing)
        for target in sorted(held_w):
            others = held_w - {target}
            if others <= set(elsewhere):
                value = base - sum(elsewhere[d] for d in others)
                how = "total minus shown" + (" and counts of another publication" if others else "")
                claims.append((w, target, value, f"{name}: {how}"))
        if held_w and base == 0:
            claims += [(w, d, 0, f"{name}: withheld sum is zero") for d in held_w]
    return claims


def leaks(
    claims: Iterable[tuple[str, str, int, str]], truth: Truth, withheld: Mapping[str, set[str]]
) -> list[str]:
    """The claims that hit a withheld count exactly."""
    out = []
    for week, d, value, how in claims:
        cell = truth.get(week, {}).get(d)
        if d in withheld.get(week, set()) and cell is not None and cell[0] == value:
            out.append(f"{week} {d} = {value} ({how})")
    return sorted(set(out))


def withheld_cells(folders: Iterable[Path]) -> dict[str, set[str]]:
    out: dict[str, set[str]] = {}
    for folder in folders:
        doc = json.loads((folder / "results.json").read_text(encoding="utf-8"))
        for row in doc["districts"]:
            if row["suppressed"]:
                out.setdefault(str(doc["week"]), set()).add(str(row["district_id"]))
            if row.get("prior_suppressed"):
                out.setdefault(str(doc["prior_week"]), set()).add(str(row["district_id"]))
    return out


def text_leaks(
    folder: Path, truth: Truth, held: Mapping[str, set[str]], names: Mapping[str, str]
) -> list[str]:
    """Withheld districts' percentages or intervals printed beside their name in any output."""
    out = []
    texts = published_texts(folder)
    for week, ids in held.items():
        for d in ids:
            x, n = truth[week][d]
            if n == 0:
                continue
            low, high = proportion_confint(x, n, alpha=0.05, method="wilson")
            needles = {f"{100 * x / n:.{k}f}%" for k in (1, 2, 3)}
            needles |= {f"{100 * low:.1f}–{100 * high:.1f}"}
            for name, text in texts.items():
                for line in text.splitlines():
                    if names[d] in line or re.search(rf"\b{re.escape(d)}\b", line):
                        hit = [s for s in needles if s in line]
                        if hit and not name.endswith((".csv", ".json")):
                            out.append(f"{name}: {d} {week} {hit[0]!r} in {line[:120]!r}")
    return out


# --------------------------------------------------------------------------- demo week


def test_demo_withholds_042_and_a_complement(demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    d = result.analysis.disclosure
    assert d.this_week.rule_of("042") is Rule.FEW_VISITS
    assert d.this_week.n_primary == 1 and d.this_week.n_complementary >= 1
    assert group_is_protected(
        [
            Cell(str(r.district_id), int(r.ili_visits), int(r.total_visits))
            for r in result.analysis.unprotected_table.itertuples()
        ],
        d.this_week.ids,
        d.rules,
    )
    assert "withheld to protect small counts" in result.context.disclosure_note


def test_attacker_cannot_recover_any_withheld_count_in_the_demo(demo_build) -> None:  # type: ignore[no-untyped-def]
    from conftest import DEMO

    _, result, _ = demo_build
    bundle = result.bundle.path
    truth = read_truth(DEMO / "extract_2026-W47.csv", DEMO / "extract_2026-W46.csv")
    held = withheld_cells([bundle])
    assert "042" in held["2026-W47"] and "042" in held["2026-W46"]
    claims = reconstruct([bundle], truth)
    hows = {how.split(": ")[-1] for *_, how in claims}
    # the attacker did read the files: counts from the CSV/JSON and from the HTML table,
    # Wilson intervals of both (the attack is not skipped because a file changed shape)
    assert {"printed count", "Wilson interval", "HTML table count", "HTML interval"} <= hows, hows
    assert leaks(claims, truth, held) == []
    names = dict(
        zip(
            result.analysis.table["district_id"],
            result.analysis.table["district_name"],
            strict=True,
        )
    )
    assert text_leaks(bundle, truth, held, names) == []


def test_attacker_finds_the_old_leak(demo_build, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    """The attacker is able to fail: on outputs shaped like those before disclosure control
    (042 blanked alone, its visits and last week's ILI% printed), it recovers 042's count."""
    from conftest import DEMO

    _, result, _ = demo_build
    bundle = result.bundle.path
    truth = read_truth(DEMO / "extract_2026-W47.csv", DEMO / "extract_2026-W46.csv")
    old = tmp_path / "old"
    old.mkdir()
    table = result.analysis.unprotected_table
    doc = json.loads((bundle / "results.json").read_text(encoding="utf-8"))
    rows = []
    for rec in table.to_dict("records"):
        alone = rec["district_id"] == "042"
        rows.append(
            {
                "district_id": rec["district_id"],
                "suppressed": alone,
                "prior_suppressed": False,
                "ili_visits": None if alone else int(rec["ili_visits"]),
                "total_visits": int(rec["total_visits"]),
                "ili_percent": None if alone else rec["ili_percent"],
                "prior_ili_percent": rec["prior_ili_percent"],
            }
        )
    doc["districts"] = rows
    (old / "results.json").write_text(json.dumps(doc), encoding="utf-8")
    (old / "results.csv").write_text("district_id\n", encoding="utf-8")
    (old / "report.html").write_text("<html></html>", encoding="utf-8")
    found = leaks(reconstruct([old], truth), truth, {"2026-W47": {"042"}, "2026-W46": {"042"}})
    assert any("2026-W47 042 = " in f and "total minus shown" in f for f in found), found
    assert any("2026-W46 042 = " in f and "last week's percentage" in f for f in found), found


def test_internal_mode_keeps_true_values_only_in_the_internal_file(tmp_path: Path) -> None:
    import dataclasses

    from conftest import TODAY, demo_config

    from sitrep import pipeline

    config = demo_config(tmp_path)
    config = dataclasses.replace(
        config, output=dataclasses.replace(config.output, keep_suppressed_values=True, pdf=False)
    )
    result = pipeline.build(config, today=TODAY)
    names = {p.name for p in result.outputs}
    assert "internal-results-UNSUPPRESSED.csv" in names
    internal = (result.bundle.path / "internal-results-UNSUPPRESSED.csv").read_text(
        encoding="utf-8-sig"
    )
    row = next(r for r in csv.DictReader(io.StringIO(internal)) if r["district_id"] == "042")
    assert (row["ili_visits"], row["withheld_rule"]) == ("1", "few-visits")  # demo_inputs/README.md
    public = (result.bundle.path / "results.csv").read_text(encoding="utf-8-sig")
    row = next(r for r in csv.DictReader(io.StringIO(public)) if r["district_id"] == "042")
    assert row["ili_visits"] == "" and row["total_visits"] == ""


# --------------------------------------------------------------------------- a bigger generated case

SMALL_NOW = {"D03": (2, 400), "D10": (11, 30), "D17": (1, 40), "D22": (3, 650), "D25": (0, 700)}
"""This week's small cells of the generated case (W47): two small counts, two few-visits, a zero."""
SMALL_BEFORE = {"D05": (3, 500), "D17": (2, 45), "D28": (4, 900)}
"""Last week's (W46) small cells."""


def _edit(changes: Mapping[str, tuple[int, int]], week: str):  # type: ignore[no-untyped-def]
    def edit(rows: list[list[str]]) -> list[list[str]]:
        out = []
        for r in rows:
            if r[2] == week and r[0] in changes:
                x, n = changes[r[0]]
                r = [r[0], r[1], r[2], r[3], str(x), str(n)]
            out.append(r)
        return out

    return edit


@pytest.fixture(scope="module")
def generated(tmp_path_factory: pytest.TempPathFactory):  # type: ignore[no-untyped-def]
    """A 6 x 5 grid plus an island (31 districts) with several small cells in two weeks:
    last week's report (W46), this week's (W47 v1), then a reissue (W47 v2) in which
    D03's count is revised out of the small range."""
    from conftest import TODAY

    from sitrep import pipeline

    folder = tmp_path_factory.mktemp("generated")

    def both(rows: list[list[str]]) -> list[list[str]]:
        return _edit(SMALL_NOW, "2026-W47")(_edit(SMALL_BEFORE, "2026-W46")(rows))

    week = make_week(
        folder,
        cols=6,
        rows=5,
        island=True,
        edit_table=both,
        edit_prior=_edit(SMALL_BEFORE, "2026-W46"),
        pdf=True,
    )
    # last week's report, from last week's extract (W40 to W46)
    del week.raw["input"]["prior_table"]
    week.write_config(input={"table": week.prior.name})
    w46 = pipeline.build(week.config(), today=TODAY)
    week.write_config(input={"table": week.table.name, "prior_table": week.prior.name})
    v1 = pipeline.build(week.config(), today=TODAY)
    truth_v1 = read_truth(week.table, week.prior)
    # the reissue: D03 revised from 2 to 9 ILI visits
    with week.table.open(encoding="utf-8", newline="") as handle:
        body = list(csv.reader(handle))[1:]
    write_csv(week.table, _edit({"D03": (9, 400)}, "2026-W47")(body))
    v2 = pipeline.build(week.config(), today=TODAY, reissue_reason="late reports for D03")
    truth_v2 = read_truth(week.table, week.prior)
    return week, w46, v1, v2, truth_v1, truth_v2


def test_generated_case_withholds_every_small_cell(generated) -> None:  # type: ignore[no-untyped-def]
    _, w46, v1, v2, _, _ = generated
    now = v1.analysis.disclosure.this_week
    assert {"D03", "D10", "D17", "D22"} <= now.ids
    assert now.rule_of("D25") in (None, Rule.COMPLEMENTARY)  # a zero is shown by default
    assert now.n_primary == 4 and not now.total_withheld
    before = v1.analysis.disclosure.prior_week
    assert {"D05", "D17", "D28"} <= before.ids
    # last week's report withheld these for W46; this week keeps them withheld
    assert w46.analysis.disclosure.this_week.ids <= before.ids
    # the reissue keeps withheld what version 1 withheld (D03 now by the earlier-version rule)
    assert now.ids <= v2.analysis.disclosure.this_week.ids
    assert v2.analysis.disclosure.this_week.rule_of("D03") is Rule.EARLIER


def test_attacker_cannot_recover_any_withheld_count_in_the_generated_case(generated) -> None:  # type: ignore[no-untyped-def]
    week, w46, v1, v2, truth_v1, truth_v2 = generated
    names = dict(zip(week.ids, week.names, strict=True))
    for truth, bundles in (
        (truth_v1, [w46.bundle.path, v1.bundle.path]),
        (truth_v2, [w46.bundle.path, v1.bundle.path, v2.bundle.path]),
        (truth_v2, [v2.bundle.path, v1.bundle.path]),
    ):
        held = withheld_cells(bundles)
        claims = reconstruct(bundles, truth)
        assert claims
        assert leaks(claims, truth, held) == []
    for truth, result in ((truth_v1, v1), (truth_v2, v2)):
        held = withheld_cells([result.bundle.path])
        assert text_leaks(result.bundle.path, truth, held, names) == []


def _publication(
    folder: Path, week: str, prior_week: str, total: int, rows: Mapping[str, tuple[int, int] | None]
) -> Path:
    """A minimal publication: results.json / results.csv with counts shown or withheld (None)."""
    folder.mkdir(parents=True)
    districts = [
        {
            "district_id": d,
            "suppressed": cell is None,
            "prior_suppressed": False,
            "ili_visits": None if cell is None else cell[0],
            "total_visits": None if cell is None else cell[1],
        }
        for d, cell in rows.items()
    ]
    doc = {
        "week": week,
        "prior_week": prior_week,
        "jurisdiction": {"ili_visits": total},
        "districts": districts,
    }
    (folder / "results.json").write_text(json.dumps(doc), encoding="utf-8")
    (folder / "results.csv").write_text("district_id\n", encoding="utf-8")
    (folder / "report.html").write_text("<html></html>", encoding="utf-8")
    return folder


def test_attacker_uses_a_second_version(tmp_path: Path) -> None:
    """The two-version attack can fail: v1 withholds A (1 of 27) and its complement C; a v2
    that no longer keeps them withheld shows C unchanged, and v1's total minus v1's shown
    counts minus C gives A. The rule that keeps earlier withheld cells prevents it."""
    truth_v1 = {"W47": {"A": (1, 27), "B": (20, 900), "C": (9, 300), "D": (30, 1200)}}
    v1 = _publication(
        tmp_path / "v1", "W47", "W46", 60, {"A": None, "B": (20, 900), "C": None, "D": (30, 1200)}
    )
    leaky = _publication(
        tmp_path / "v2",
        "W47",
        "W46",
        67,
        {"A": (8, 120), "B": (20, 900), "C": (9, 300), "D": (30, 1200)},
    )
    found = leaks(reconstruct([v1, leaky], truth_v1), truth_v1, {"W47": {"A", "C"}})
    assert found == [
        "W47 A = 1 (" + str(v1) + ": total minus shown and counts of another publication)",
        "W47 C = 9 (" + str(leaky) + ": printed count)",
    ]
    kept = protect_group(
        [Cell("A", 8, 120), Cell("B", 20, 900), Cell("C", 9, 300), Cell("D", 30, 1200)],
        RULES,
        label="W47",
        carried=["A", "C"],
    )
    safe = _publication(
        tmp_path / "v2-kept",
        "W47",
        "W46",
        67,
        {d: (None if d in kept.ids else truth_v1["W47"][d]) for d in ("A", "B", "C", "D")},
    )
    assert leaks(reconstruct([v1, safe], truth_v1), truth_v1, {"W47": {"A", "C"}}) == []


def test_reissue_would_show_a_cell_version_1_withheld(generated) -> None:  # type: ignore[no-untyped-def]
    """Deciding version 2 afresh would show some of version 1's withheld cells (so the
    carry-over is what keeps them withheld in the bundle)."""
    _, _, v1, v2, _, truth_v2 = generated
    afresh = protect_group(
        [Cell(d, x, n) for d, (x, n) in truth_v2["2026-W47"].items()],
        v2.analysis.disclosure.rules,
        label="2026-W47",
    )
    assert not v1.analysis.disclosure.this_week.ids <= afresh.ids
    assert v1.analysis.disclosure.this_week.ids <= v2.analysis.disclosure.this_week.ids


@pytest.mark.parametrize(
    "name",
    [
        "internal-results-UNSUPPRESSED.csv",
        "internal-quality-annex.pdf",
        "report-unsuppressed.csv",
        "figures/internal-map.png",
    ],
)
def test_mail_refuses_internal_files(name: str) -> None:
    import datetime as dt

    from sitrep.deliver.mail import build_message
    from sitrep.errors import DeliveryError

    def message(attachment: str):  # type: ignore[no-untyped-def]
        return build_message(
            subject="s",
            body="b",
            sender="a@example.org",
            recipients=["b@example.org"],
            reply_to=None,
            attachments=[(attachment, b"x", "text/csv")],
            message_id_seed="seed",
            date=dt.datetime(2026, 11, 30, tzinfo=dt.UTC),
        )

    with pytest.raises(DeliveryError, match="internal use only"):
        message(name)
    assert message("results.csv")["To"] == "b@example.org"


def test_total_is_withheld_when_nothing_else_protects(tmp_path: Path) -> None:
    """Two districts with 2 and 1 ILI visits: withholding both still leaves the total (3, a
    small count) printable, so the jurisdiction's counts and percentages are withheld too."""
    from conftest import TODAY

    from sitrep import pipeline

    small = {"D01": (2, 400), "D02": (1, 300)}

    def edit(rows: list[list[str]]) -> list[list[str]]:
        return _edit(small, "2026-W47")(_edit(small, "2026-W46")(rows))

    week = make_week(
        tmp_path, cols=2, rows=1, island=False, edit_table=edit, edit_prior=edit, pdf=True
    )
    result = pipeline.build(week.config(), today=TODAY)
    d = result.analysis.disclosure
    assert d.this_week.total_withheld and d.prior_week.total_withheld
    assert "fewer than 5 ILI visits" in d.this_week.reason
    doc = json.loads((result.bundle.path / "results.json").read_text(encoding="utf-8"))
    j = doc["jurisdiction"]
    assert j["withheld"] and j["ili_visits"] is None and j["ili_percent"] is None
    assert j["prior_ili_percent"] is None and j["change_pp"] is None
    assert "jurisdiction total is withheld as well" in result.context.disclosure_note
    texts = published_texts(result.bundle.path)
    for name, text in texts.items():
        for pct in ("0.43%", "0.429%"):  # 3 of 700 [HAND]
            assert pct not in text, (name, pct)


def test_findings_about_withheld_districts_are_redacted() -> None:
    from sitrep.model import Finding, Severity, ValidationReport
    from sitrep.render.results import redact_findings

    report = ValidationReport(
        (
            Finding(
                Severity.WARNING,
                "revision-large",
                "district 042, 2026-W46 was revised: ILI visits 3 -> 1",
                "extract.csv",
                291,
                "ili_visits",
                "042",
                "3 -> 1",
            ),
            Finding(
                Severity.WARNING,
                "revision-summary",
                "largest change (district 042, 2026-W45: 3.7% -> 2.0%)",
                "extract.csv",
            ),
            Finding(
                Severity.WARNING,
                "value-spike",
                "district 0421 rose",
                "extract.csv",
                12,
                "ili_visits",
                "0421",
                "9",
            ),
        )
    )
    out = redact_findings(report, {"042"})
    assert [f.value for f in out.findings] == [None, None, "9"]
    for f in out.findings[:2]:
        assert "withheld" in f.message and not re.search(r"\d+(\.\d+)?%|-> ", f.message)
        assert f.line in (291, None) and f.file == "extract.csv"
    assert out.findings[2] == report.findings[2]  # 0421 is another district
    assert redact_findings(report, set()) is report


def test_old_key_analysis_keep_suppressed_values_names_its_new_place() -> None:
    from sitrep.config import config_from_dict
    from sitrep.errors import ConfigError

    with pytest.raises(ConfigError, match=r"moved: set keep_suppressed_values in \[output\]"):
        config_from_dict({"analysis": {"keep_suppressed_values": True}})
    config = config_from_dict(
        {
            "analysis": {"min_count": 3, "suppress_zero": True},
            "output": {"keep_suppressed_values": True},
        }
    )
    assert (config.analysis.min_count, config.analysis.suppress_zero) == (3, True)
    assert config.output.keep_suppressed_values
    with pytest.raises(ConfigError, match="min_count must not be negative"):
        config_from_dict({"analysis": {"min_count": -1}})
