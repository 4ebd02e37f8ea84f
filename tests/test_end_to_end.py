"""The whole weekly job on the invented demo week: outputs, numbers, safety, reproducibility."""

from __future__ import annotations

import hashlib
import html.parser
import io
import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import DEMO, ROOT, TODAY

pytestmark = pytest.mark.slow

OUTPUTS = (
    "report.html",
    "report.pdf",
    "draft.md",
    "draft.docx",
    "results.csv",
    "results.json",
    "results-dictionary.csv",
    "validation.json",
    "manifest.json",
    "email.txt",
    "internal-data-quality.csv",
)
FORBIDDEN = re.compile(r"\b(nan|NaN|inf|Infinity|None)\b|\{\{|\}\}")


def _read(result, name: str) -> bytes:  # type: ignore[no-untyped-def]
    return next(p for p in result.outputs if p.name == name).read_bytes()


def _pdf_text(data: bytes) -> str:
    import pypdf

    return "\n".join(page.extract_text() for page in pypdf.PdfReader(io.BytesIO(data)).pages)


def test_every_output_is_written(demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    names = {p.name for p in result.outputs}
    assert set(OUTPUTS) <= names
    assert result.bundle is not None and (result.bundle.path / "report.pdf").is_file()
    assert str(result.week) == "2026-W47"


def test_pdf_names_the_jurisdiction_week_and_dates(demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    text = _pdf_text(_read(result, "report.pdf"))
    # whitespace normalised; a line broken after a hyphen ("low-" / "value") joined again
    flat = " ".join(text.split()).replace("- ", "-")
    assert "Province of Quillmarsh" in flat
    assert "Week 47, 2026" in flat
    assert "22–28 November 2026" in flat
    # every key message appears in the PDF text (whitespace normalised)
    for message in result.context.key_messages:
        assert " ".join(message.split()).replace("- ", "-") in flat, message[:60]


def test_key_message_numbers_match_the_results(demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    data = json.loads(_read(result, "results.json"))
    j = data["jurisdiction"]
    level = result.context.key_messages[0]
    shown = re.search(r"made up (\d+\.\d)% of outpatient visits", level)
    assert shown is not None
    assert float(shown.group(1)) == round(j["ili_percent"], 1)
    ci = re.search(r"95% confidence interval (\d+\.\d)–(\d+\.\d)%", level)
    assert ci is not None
    assert (float(ci.group(1)), float(ci.group(2))) == (
        round(j["ci_low"], 1),
        round(j["ci_high"], 1),
    )
    counts = re.search(r"the (\d+) of (\d+) districts", level)
    assert counts is not None
    assert (int(counts.group(1)), int(counts.group(2))) == (
        j["districts_reporting"],
        j["districts"],
    )
    prior = re.search(r"(\d+\.\d)% in week 46", level)
    assert prior is not None and float(prior.group(1)) == round(j["prior_ili_percent"], 1)
    change = re.search(r"([+−±])(\d+\.\d) percentage points \(95% confidence interval", level)
    assert change is not None
    sign = {"+": 1, "−": -1, "±": 0}[change.group(1)]
    assert sign * float(change.group(2)) == pytest.approx(round(j["change_pp"], 1))
    # the cluster sentence counts agree with the labels
    clusters = result.context.key_messages[3]
    for kind, label in (("high-value", "high-high"), ("low-value", "low-low")):
        found = re.search(rf"a {kind} cluster of (\d+) district", clusters)
        n_label = sum(1 for d in data["districts"] if d["cluster_label"] == label)
        if found:
            assert int(found.group(1)) <= n_label
    # the tercile sentence agrees with the table
    tercile = result.context.key_messages[2]
    n_high = sum(1 for d in data["districts"] if d["tercile"] == 3)
    assert tercile.startswith(f"{n_high} of ")


def test_no_placeholder_or_missing_number_anywhere(demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    for name in ("draft.md", "email.txt"):
        text = _read(result, name).decode("utf-8")
        assert not FORBIDDEN.search(text), (name, FORBIDDEN.search(text))
    html_text = _read(result, "report.html").decode("utf-8")
    visible = re.sub(
        r"<script.*?</script>|<style.*?</style>|data:[^\"']+", "", html_text, flags=re.S
    )
    assert not FORBIDDEN.search(visible), FORBIDDEN.search(visible)
    pdf = _pdf_text(_read(result, "report.pdf"))
    assert not FORBIDDEN.search(pdf), FORBIDDEN.search(pdf)


class _Refs(html.parser.HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.refs: list[str] = []
        self.scripts = 0
        self.handlers: list[str] = []
        self.imgs_without_alt = 0

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        values = dict(attrs)
        for key in ("src", "href"):
            if values.get(key):
                self.refs.append(str(values[key]))
        self.handlers += [k for k in values if k.startswith("on")]
        if tag == "script":
            self.scripts += 1
        if tag == "img" and not values.get("alt"):
            self.imgs_without_alt += 1


def test_html_is_self_contained_and_accessible(demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    text = _read(result, "report.html").decode("utf-8")
    parser = _Refs()
    parser.feed(text)
    assert parser.refs and all(r.startswith("data:") for r in parser.refs), parser.refs[:3]
    assert parser.scripts == 1 and not parser.handlers
    assert parser.imgs_without_alt == 0
    assert '<html lang="en">' in text
    headings = re.findall(r"<h([1-6])", text)
    assert headings[0] == "1" and all(
        int(b) - int(a) <= 1 for a, b in zip(headings, headings[1:], strict=False)
    )
    # every district is in the HTML table; the ampersand name is escaped, not raw
    assert text.count("<tr class=") == 48
    assert "Skelvane &amp; Orrowby" in text


def test_draft_docx_holds_the_same_sentences(demo_build) -> None:  # type: ignore[no-untyped-def]
    import docx

    _, result, _ = demo_build
    document = docx.Document(io.BytesIO(_read(result, "draft.docx")))
    paragraphs = [p.text for p in document.paragraphs]
    for _, text in result.context.plain_sections:
        assert text in paragraphs
    # built on the project's reference document: its own heading colour and note style
    heading = document.styles["Heading 1"]
    assert heading.font.color.rgb is not None and str(heading.font.color.rgb) == "2E5E4E"
    assert "Draft Note" in [s.name for s in document.styles]
    props = document.core_properties
    assert props.title == "Province of Quillmarsh: influenza-like illness, week 47, 2026"
    assert props.subject == "Province of Quillmarsh" and "2026-W47" in props.keywords
    # SOURCE_DATE_EPOCH of the week: noon UTC on its last day
    assert props.created.isoformat().startswith("2026-11-28T12:00:00")


def test_golden_draft(demo_build, regen_golden: bool) -> None:  # type: ignore[no-untyped-def]
    """The demo week's draft under the fixed seed; refresh with --regen-golden and review the diff."""
    _, result, _ = demo_build
    golden = ROOT / "tests" / "golden" / "draft.md"
    produced = _read(result, "draft.md").decode("utf-8")
    if regen_golden:
        golden.write_text(produced, encoding="utf-8")
    assert produced == golden.read_text(encoding="utf-8")
    assert "&gt;" not in produced and "&amp;" not in produced
    for word in ("Moran", "Benjamini", "confidence interval", "cluster of", " q "):
        assert word not in produced.split("## Cautions")[0], word


def test_golden_key_messages_and_methods(demo_build, regen_golden: bool) -> None:  # type: ignore[no-untyped-def]
    """The demo week's key messages, indicators and methods; refresh with --regen-golden and review the diff."""
    _, result, _ = demo_build
    c = result.context
    lines = ["# Key messages", *c.key_messages, "", "# Indicators"]
    lines += [f"{r.label} | {r.value} | {r.note}" for r in c.indicators]
    lines += ["", "# Methods"] + [f"{term}: {text}" for term, text in c.methods]
    lines += ["", "# Cautions", *c.cautions, ""]
    produced = "\n".join(lines)
    golden = ROOT / "tests" / "golden" / "key_messages_methods.txt"
    if regen_golden:
        golden.write_text(produced, encoding="utf-8")
    assert produced == golden.read_text(encoding="utf-8")
    # the demo week's jurisdiction rise (1.76% to 2.18%, +0.42 pp) is not called similar
    assert "similar" not in c.key_messages[0] and "small but detectable rise" in c.key_messages[0]


def test_pdf_table_holds_every_district_named_on_page_one(demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    c = result.context
    in_table = {r.name for r in c.districts_pdf}
    named = {r.name for r in c.districts if any(r.name in m for m in c.key_messages[2:4])}
    assert named and named <= in_table


def test_bundle_verifies_then_fails_after_one_byte(demo_build, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    import shutil

    from sitrep import cli

    _, result, _ = demo_build
    copy = tmp_path / "v1"
    shutil.copytree(result.bundle.path, copy)
    assert cli.main(["verify", str(copy)]) == 0
    target = copy / "report.html"
    target.chmod(0o644)
    data = bytearray(target.read_bytes())
    data[100] ^= 1
    target.write_bytes(bytes(data))
    assert cli.main(["verify", str(copy)]) == 1


def test_manifest_records_inputs_seed_and_versions(demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    manifest = json.loads(_read(result, "manifest.json"))
    assert manifest["seed"] == 12345 and manifest["permutations"] == 9999
    assert manifest["week_system"] == "mmwr"
    table = next(i for i in manifest["inputs"] if i["role"] == "table")
    assert (
        table["sha256"] == hashlib.sha256((DEMO / "extract_2026-W47.csv").read_bytes()).hexdigest()
    )
    assert manifest["versions"]["esda"].startswith("2.9")
    pdf = hashlib.sha256(_read(result, "report.pdf")).hexdigest()
    assert manifest["outputs"]["report.pdf"]["sha256"] == pdf


def test_second_build_of_the_same_week_refuses_then_reissues(demo_build) -> None:  # type: ignore[no-untyped-def]
    from sitrep import pipeline
    from sitrep.errors import ArchiveExists

    config, result, _ = demo_build
    with pytest.raises(ArchiveExists):
        pipeline.build(config, today=TODAY)
    again = pipeline.build(config, today=TODAY, reissue_reason="late reports from two districts")
    assert again.bundle is not None and again.bundle.version == 2
    manifest = json.loads((again.bundle.path / "manifest.json").read_text())
    assert manifest["reissue"]["supersedes"] == "v1"
    reissued = (again.bundle.path / "report.html").read_text(encoding="utf-8")
    assert "it supersedes version 1. Reason: late reports from two districts" in reissued
    assert (result.bundle.path / "report.pdf").is_file()
    # the version comes from the archive in every output: header, e-mail, drafts and manifest
    assert "Report version 2</p>" in reissued
    assert manifest["report_version"] == "2"
    email = (again.bundle.path / "email.txt").read_text(encoding="utf-8")
    draft = (again.bundle.path / "draft.md").read_text(encoding="utf-8")
    assert "report version 2" in email and "Report version 2" in draft
    assert "**Reissued.** This is version 2" in draft and "&gt;" not in draft
    import docx

    document = docx.Document(str(again.bundle.path / "draft.docx"))
    texts = [p.text for p in document.paragraphs]
    assert any(t.startswith("Reissued. This is version 2") for t in texts)
    assert any("Report version 2" in t for t in texts)
    assert "version 2" in document.core_properties.keywords


def _tree_hashes(folder: Path) -> dict[str, str]:
    return {
        str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


def test_blocked_run_leaves_earlier_outputs_untouched(demo_build, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    import dataclasses

    from sitrep import pipeline
    from sitrep.errors import ValidationFailed

    config, _, folder = demo_build
    before = _tree_hashes(folder)
    bad = tmp_path / "bad.csv"
    lines = (DEMO / "extract_2026-W47.csv").read_text(encoding="utf-8").splitlines()
    lines[-1] = lines[-1].rsplit(",", 2)[0] + ",9999,10"  # more ILI visits than visits
    bad.write_text("\n".join(lines) + "\n", encoding="utf-8")
    broken = dataclasses.replace(config, input=dataclasses.replace(config.input, table=bad))
    with pytest.raises(ValidationFailed) as info:
        pipeline.build(broken, today=TODAY)
    assert info.value.report is not None and info.value.report.blocked
    assert _tree_hashes(folder) == before


def test_two_processes_give_byte_identical_bundles(tmp_path: Path) -> None:
    """Same inputs, seed and config in two processes with different PYTHONHASHSEED (docs/faults.md F19)."""
    script = (
        "import sys, datetime as dt; sys.path.insert(0, 'tests');"
        "from pathlib import Path; from conftest import demo_config; from sitrep import pipeline;"
        "pipeline.build(demo_config(Path(sys.argv[1])), today=dt.date(2026, 11, 30))"
    )
    hashes = []
    for seed, name in (("1", "a"), ("4242", "b")):
        env = {**os.environ, "PYTHONHASHSEED": seed}
        env.pop("SOURCE_DATE_EPOCH", None)
        subprocess.run(
            [sys.executable, "-c", script, str(tmp_path / name)], check=True, cwd=ROOT, env=env
        )
        # the bundles, not the archive's index page beside them: it records when it was checked
        hashes.append(
            {
                k: v
                for k, v in _tree_hashes(tmp_path / name / "archive").items()
                if not k.startswith(("index.html", "_compare/"))
            }
        )
    assert hashes[0] == hashes[1]
    assert any(k.endswith("report.pdf") for k in hashes[0])
