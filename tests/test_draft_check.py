"""``sitrep check-draft``: an edited draft is compared with the bundle it came from.

Each test makes one edit a press officer could make to the demo's own draft and
asserts that the check names it (rule and paragraph), and that the unedited
draft (Markdown and DOCX) and a harmless re-wording pass. The rules are the
project's own (sitrep/deliver/draft_check.py); the rounding rule is the usual
one (a value printed with d decimals is within half a unit of the d-th
decimal), common practice, no source.
"""

from __future__ import annotations

import itertools
import json
import re
from pathlib import Path

import pytest

from sitrep import cli
from sitrep.deliver.draft_check import check_draft, read_edited_draft

pytestmark = pytest.mark.slow

PAIR = re.compile(r"([A-Z][\w'\- ]+?) \((\d+\.\d+)%\)")


@pytest.fixture(scope="module")
def bundle(demo_build) -> Path:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    assert result.bundle is not None
    return Path(result.bundle.path)


@pytest.fixture(scope="module")
def draft(bundle: Path) -> str:
    return (bundle / "draft.md").read_text(encoding="utf-8")


def _check(bundle: Path, text: str, tmp_path: Path) -> list[tuple[str, int]]:
    edited = tmp_path / "edited.md"
    edited.write_text(text, encoding="utf-8")
    return [(f.rule, f.paragraph) for f in check_draft(bundle, read_edited_draft(edited))]


def _paragraph_of(text: str, needle: str) -> int:
    from sitrep.deliver.draft_check import _markdown_paragraphs

    return next(i for i, p in enumerate(_markdown_paragraphs(text), start=1) if needle in p)


def _replace_once(text: str, old: str, new: str) -> str:
    assert old in text, f"the demo draft no longer contains {old!r}"
    return text.replace(old, new, 1)


def test_the_unedited_draft_passes_as_markdown_and_as_docx(bundle: Path) -> None:
    for name in ("draft.md", "draft.docx"):
        assert check_draft(bundle, read_edited_draft(bundle / name)) == [], name


def test_a_reworded_sentence_with_the_same_facts_passes(
    bundle: Path, draft: str, tmp_path: Path
) -> None:
    this_week = next(p for p in draft.split("\n\n") if p.startswith("In week"))
    edited = _replace_once(draft, this_week, this_week.replace("In week", "During week", 1))
    edited = edited.replace(
        "- Figures are provisional:", "- Please note that figures are provisional:", 1
    )
    assert edited != draft
    assert _check(bundle, edited, tmp_path) == []


def test_a_changed_figure_is_found(bundle: Path, draft: str, tmp_path: Path) -> None:
    this_week = next(p for p in draft.split("\n\n") if p.startswith("In week"))
    figure = re.search(r"(\d+\.\d)%", this_week)
    assert figure is not None
    wrong = f"{float(figure.group(1)) + 0.3:.1f}%"
    edited = _replace_once(draft, this_week, this_week.replace(figure.group(0), wrong, 1))
    assert ("figure-changed", _paragraph_of(edited, wrong)) in _check(bundle, edited, tmp_path)


def test_a_changed_count_is_found(bundle: Path, draft: str, tmp_path: Path) -> None:
    m = re.search(r"(\d{1,3}),(\d{3}) visits", draft)
    assert m is not None
    edited = _replace_once(draft, m.group(0), f"{m.group(1)},{int(m.group(2)) + 100:03d} visits")
    assert ("figure-changed", _paragraph_of(edited, "visits are")) in _check(
        bundle, edited, tmp_path
    )


def test_swapped_districts_are_found(bundle: Path, draft: str, tmp_path: Path) -> None:
    highest = next(p for p in draft.split("\n\n") if len(PAIR.findall(p)) >= 2)
    (a, va), (b, vb) = PAIR.findall(highest)[:2]
    swapped = highest.replace(f"{a} ({va}%)", "\0", 1).replace(f"{b} ({vb}%)", f"{a} ({vb}%)", 1)
    swapped = swapped.replace("\0", f"{b} ({va}%)", 1)
    edited = _replace_once(draft, highest, swapped)
    rules = _check(bundle, edited, tmp_path)
    assert rules.count(("district-figure", _paragraph_of(edited, swapped[:20]))) == 2


def test_a_rounding_that_reverses_the_order_is_found(
    bundle: Path, draft: str, tmp_path: Path
) -> None:
    results = json.loads((bundle / "results.json").read_text())
    value = {r["district_name"]: r["ili_percent"] for r in results["districts"]}
    names = "|".join(re.escape(n) for n in sorted(value, key=len, reverse=True))
    pair = re.compile(rf"({names}) \((\d+\.\d+)%\)")
    highest = next(p for p in draft.split("\n\n") if len(pair.findall(p)) >= 3)
    pairs = pair.findall(highest)
    # two neighbours in the ranked list, each printed as a correct rounding of its own value,
    # with precisions that put the lower value above the higher one (e.g. 3.95% then 4%)
    a, b, d1, d2 = next(
        (x, y, d1, d2)
        for (x, _), (y, _) in itertools.pairwise(pairs)
        for d1 in (2, 1, 0)
        for d2 in (2, 1, 0)
        if round(value[x], d1) < round(value[y], d2)
    )
    shown = {a: f"{value[a]:.{d1}f}", b: f"{value[b]:.{d2}f}"}
    edited = draft
    for name, old in pairs:
        if name in shown:
            edited = _replace_once(edited, f"{name} ({old}%)", f"{name} ({shown[name]}%)")
    rules = _check(bundle, edited, tmp_path)
    paragraph = _paragraph_of(edited, f"{a} ({shown[a]}%)")
    assert ("rounding-reverses", paragraph) in rules
    assert ("district-figure", paragraph) not in rules  # each figure alone is a fair rounding


def test_a_wrong_week_and_a_wrong_date_are_found(bundle: Path, draft: str, tmp_path: Path) -> None:
    m = re.search(r"In week (\d+) \((\d+)", draft)
    assert m is not None
    week, day = int(m.group(1)), int(m.group(2))
    edited = _replace_once(draft, m.group(0), f"In week {week + 1} ({day + 7}")
    rules = [r for r, _ in _check(bundle, edited, tmp_path)]
    assert rules.count("week-or-date") >= 2


def test_a_reversed_trend_word_is_found(bundle: Path, draft: str, tmp_path: Path) -> None:
    this_week = next(p for p in draft.split("\n\n") if p.startswith("In week"))
    m = re.search(r"\b(rise|increase|fall|decrease)\b", this_week)
    assert m is not None, "the demo week should have a direction word"
    opposite = {"rise": "fall", "increase": "decrease", "fall": "rise", "decrease": "increase"}[
        m.group(1)
    ]
    edited = _replace_once(draft, this_week, this_week.replace(m.group(0), opposite, 1))
    assert ("trend-reversed", _paragraph_of(edited, "In week")) in _check(bundle, edited, tmp_path)


def test_a_withheld_district_with_a_figure_is_found(
    bundle: Path, draft: str, tmp_path: Path
) -> None:
    results = json.loads((bundle / "results.json").read_text())
    withheld = next(r["district_name"] for r in results["districts"] if r["suppressed"])
    highest = next(p for p in draft.split("\n\n") if PAIR.search(p))
    first = PAIR.search(highest)
    assert first is not None
    edited = _replace_once(draft, first.group(0), f"{first.group(0)}, {withheld} (3.1%)")
    rules = _check(bundle, edited, tmp_path)
    paragraph = _paragraph_of(edited, withheld)
    assert ("withheld-figure", paragraph) in rules
    assert ("district-not-named", paragraph) in rules


def test_a_district_the_report_does_not_name_is_found(
    bundle: Path, draft: str, tmp_path: Path
) -> None:
    results = json.loads((bundle / "results.json").read_text())
    rows = [
        r for r in results["districts"] if not r["suppressed"] and r["district_name"] not in draft
    ]
    low = min(rows, key=lambda r: r["ili_percent"])
    sentence = f"{low['district_name']} ({low['ili_percent']:.2f}%) was among the highest."
    edited = draft.replace("\n\n## Compared", f" {sentence}\n\n## Compared", 1)
    assert edited != draft
    rules = _check(bundle, edited, tmp_path)
    assert ("district-not-named", _paragraph_of(edited, low["district_name"])) in rules


def test_a_deleted_caution_is_found(bundle: Path, draft: str, tmp_path: Path) -> None:
    line = next(x for x in draft.splitlines() if x.startswith("- ") and "clinical decisions" in x)
    edited = _replace_once(draft, line + "\n", "")
    rules = _check(bundle, edited, tmp_path)
    assert [r for r, _ in rules] == ["caution-removed"]


def test_cli_lists_each_place_and_exits_1(
    bundle: Path, draft: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    edited = tmp_path / "edited.md"
    edited.write_text(draft, encoding="utf-8")
    assert cli.main(["check-draft", str(bundle), str(edited)]) == cli.EXIT_OK
    assert capsys.readouterr().out.startswith("OK: ")
    this_week = next(p for p in draft.split("\n\n") if p.startswith("In week"))
    figure = re.search(r"(\d+\.\d)%", this_week)
    assert figure is not None
    edited.write_text(draft.replace(figure.group(0), "9.9%", 1), encoding="utf-8")
    assert cli.main(["check-draft", str(bundle), str(edited)]) == cli.EXIT_BLOCKED
    out = capsys.readouterr().out
    assert "figure-changed" in out and "9.9" in out and "would mislead" in out
    assert cli.main(["check-draft", str(bundle), str(tmp_path / "missing.docx")]) == cli.EXIT_USAGE


def test_an_edited_docx_is_read_paragraph_by_paragraph(bundle: Path, tmp_path: Path) -> None:
    import docx

    document = docx.Document(str(bundle / "draft.docx"))
    target = next(p for p in document.paragraphs if p.text.startswith("In week"))
    figure = re.search(r"(\d+\.\d)%", target.text)
    assert figure is not None
    for run in target.runs:
        run.text = run.text.replace(figure.group(0), "7.7%")
    assert "7.7%" in target.text
    document.save(str(tmp_path / "edited.docx"))
    findings = check_draft(bundle, read_edited_draft(tmp_path / "edited.docx"))
    assert [f.rule for f in findings] == ["figure-changed"] and "7.7" in findings[0].text
