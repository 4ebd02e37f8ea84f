"""Hardening, what readers receive: hostile district names through every output, fetches by
the PDF engine, formula injection, glyph coverage, strict templates, reproducibility, PDF/A.

docs/faults.md items F3, F9, F10, F18, F19, F21 and F24, each asserted on the real
outputs of ``pipeline.build`` (and ``sitrep send --dry-run`` for the e-mail) for an
invented week whose boundary names carry the attack. References: the WHATWG HTML
parsing model as implemented by Python's ``html.parser`` (what a browser would run);
OWASP ASVS 1.2.10 (formula prefix rule); RFC 4180 (CSV); CommonMark 0.31 (backslash
escapes); PDF 32000-1 §9.10 (ToUnicode) and the OpenType rule that glyph 0 is .notdef;
reproducible-builds.org SOURCE_DATE_EPOCH specification.
"""

from __future__ import annotations

import csv
import dataclasses
import email
import email.policy
import io
import os
import re
import shutil
import subprocess
import sys
import types
import urllib.request
import zipfile
from importlib.metadata import version
from pathlib import Path

import pypdf
import pytest
from hardening_helpers import (
    FORBIDDEN,
    TODAY,
    Canary,
    build,
    make_week,
    pdf_glyph_coverage,
    pdf_text,
    png_1x1,
    read_outputs,
    run_cli,
    scan_html,
    squash,
    tree_hashes,
)

pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parents[1]
CANARY_BYTES = b"CANARY-3b9e-LOCAL-SECRET"
TRIGGERS = ("=", "+", "-", "@", "\t", "\r", "\n")  # OWASP ASVS 1.2.10 + CR/LF (docs/faults.md F9)


def hostile_names(canary: Canary, secret: Path) -> list[str]:
    """17 boundary names (4 x 4 grid + island): markup, script, fetches, formulas, entities."""
    return [
        "<script>alert(1)</script>",
        '"><a href="javascript:alert(2)">x</a>',
        "North <East>",
        "Alder & Birch",
        f'<link rel="attachment" href="{(secret / "canary.txt").as_uri()}">',
        f'<img src="{(secret / "canary.png").as_uri()}">',
        f'<img src="{canary.url}img.png">',
        f'<style>@import url("{canary.url}style.css");</style>',
        f'=HYPERLINK("{canary.url}formula","click")',
        "+SUM(1,2)",
        "-2+3",
        "@cmd",
        'x" onmouseover="alert(3)',
        "' onfocus='alert(4)' autofocus x='",
        f"[click](javascript:alert(5)) ![t]({canary.url}md.png)",
        "Fish &amp; Chips &lt;b&gt;",
        "Isle of Brannoch",
    ]


@pytest.fixture(scope="module")
def hostile(tmp_path_factory: pytest.TempPathFactory) -> types.SimpleNamespace:
    """One real build whose district names attack every output; the canary counts fetches."""
    folder = tmp_path_factory.mktemp("hostile")
    secret = folder / "secret"
    secret.mkdir()
    (secret / "canary.txt").write_bytes(CANARY_BYTES)
    (secret / "canary.png").write_bytes(png_1x1((0, 255, 0)))
    with Canary() as canary:
        names = hostile_names(canary, secret)
        week = make_week(folder / "week", names=names, rows=4)
        result = build(week)
        requests = list(canary.requests)
        # positive control: the canary does count, so "no request" above means something
        with urllib.request.urlopen(canary.url + "probe", timeout=5) as response:  # noqa: S310
            response.read()
        control = list(canary.requests)
    out = read_outputs(result)
    return types.SimpleNamespace(
        week=week,
        names=names,
        result=result,
        out=out,
        pdf_text=pdf_text(out["report.pdf"]),
        requests=requests,
        control=control,
    )


# --------------------------------------------------------------------------- F3


def test_h03_pdf_embeds_no_local_file_and_fetches_nothing(hostile: types.SimpleNamespace) -> None:
    """District names carrying <link rel=attachment>, <img src=file:/http:>, CSS @import."""
    assert hostile.requests == [], "the PDF engine (or anything else) requested the loopback canary"
    assert hostile.control == ["/probe"]
    pdf = hostile.out["report.pdf"]
    reader = pypdf.PdfReader(io.BytesIO(pdf))
    assert dict(reader.attachments) == {}
    for page in reader.pages:
        for image in page.images:  # the tool's own figures are vector; no 1x1 canary image
            assert image.image.size != (1, 1), image.name
    for name, data in hostile.out.items():
        assert CANARY_BYTES not in data, name
    bundle = hostile.result.bundle.path
    for path in bundle.rglob("*"):
        if path.is_file():
            assert CANARY_BYTES not in path.read_bytes(), path


def test_h03_url_fetcher_allows_only_data_and_own_assets(tmp_path: Path) -> None:
    from weasyprint.urls import FatalURLFetchingError

    from sitrep.deliver.pdf import make_url_fetcher
    from sitrep.render.html import asset_dir

    with Canary() as canary:
        fetcher = make_url_fetcher(asset_dir())
        for url in ("file:///etc/hostname", canary.url, "http://127.0.0.1/", "ftp://127.0.0.1/x"):
            with pytest.raises(FatalURLFetchingError, match="does not fetch"):
                fetcher.fetch(url)
        assert canary.requests == []
    # RFC 2397 data: URI; base64 "c2l0cmVw" is "sitrep" (RFC 4648 alphabet)
    response = fetcher.fetch("data:text/plain;base64,c2l0cmVw")
    assert response.read() == b"sitrep"
    response.close()
    font = fetcher.fetch((asset_dir() / "DejaVuSans.ttf").as_uri())
    assert font.read() == (asset_dir() / "DejaVuSans.ttf").read_bytes()
    font.close()


# --------------------------------------------------------------------------- F9


def test_h09_formula_cells_are_neutralised_in_every_csv(hostile: types.SimpleNamespace) -> None:
    rows = list(
        csv.DictReader(io.StringIO(hostile.out["results.csv"].decode("utf-8-sig"), newline=""))
    )
    assert len(rows) == len(hostile.names)  # RFC 4180 quoting kept every row whole
    shown = dict(zip(hostile.week.ids, hostile.names, strict=True))
    for row in rows:
        name = shown[row["district_id"]]
        expected = "'" + name if name.startswith(TRIGGERS) else name
        assert row["district_name"] == expected
        for column, cell in row.items():  # no text cell of any column may start a formula
            assert not cell.startswith(TRIGGERS) or _is_number(cell), (column, cell)
    # the report itself shows the literal name, with no apostrophe added
    html_text = hostile.out["report.html"].decode("utf-8")
    cells = scan_html(html_text).cells
    for name in hostile.names:
        if name.startswith(TRIGGERS):
            assert name in cells and "'" + name not in cells
    assert squash('=HYPERLINK("') in squash(hostile.pdf_text)
    # sitrep writes no spreadsheet format that this test does not check
    kinds = {Path(n).suffix for n in hostile.out} | {
        p.suffix for p in hostile.result.bundle.path.rglob("*") if p.is_file()
    }
    assert kinds <= {
        ".html",
        ".pdf",
        ".md",
        ".docx",
        ".txt",
        ".csv",
        ".json",
        ".png",
        ".svg",
        ".gpkg",
    }


def _is_number(cell: str) -> bool:
    try:
        float(cell)
    except ValueError:
        return False
    return True


def test_h09_tab_cr_lf_prefixes_are_neutralised(hostile: types.SimpleNamespace) -> None:
    """Ingest strips names, so TAB/CR/LF can only reach the writer from inside: test it there."""
    from sitrep.render.results import results_csv

    analysis = hostile.result.analysis
    table = analysis.table.copy()
    odd = ["\t=1+1", "\r=1", "\n=2", "=3", "@x", "+1", "-1", "plain"]
    table.loc[table.index[: len(odd)], "district_name"] = odd
    data = results_csv(
        dataclasses.replace(analysis, table=table), hostile.week.config().analysis, jurisdiction="J"
    )
    rows = list(csv.DictReader(io.StringIO(data.decode("utf-8-sig"), newline="")))
    assert [r["district_name"] for r in rows[: len(odd)]] == ["'" + v for v in odd[:-1]] + ["plain"]


# --------------------------------------------------------------------------- F10


def test_h10_names_cannot_become_markup_in_html_pdf_docx_or_mail(
    hostile: types.SimpleNamespace, tmp_path: Path
) -> None:
    html_text = hostile.out["report.html"].decode("utf-8")
    scan = scan_html(html_text)
    own_script = (ROOT / "templates" / "sort_table.js").read_text(encoding="utf-8")
    assert len(scan.scripts) == 1 and scan.scripts[0].strip() == own_script.strip()
    assert scan.handlers == []
    assert all(url.startswith(("data:", "#")) for _, _, url in scan.urls), scan.urls
    embedding = {"link", "iframe", "object", "embed", "base", "form", "input", "frame", "svg"}
    assert not [tag for tag, _ in scan.tags if tag in embedding]
    assert not [attrs for tag, attrs in scan.tags if tag == "meta" and "http-equiv" in attrs]
    assert "javascript:" not in " ".join(str(v) for _, attrs in scan.tags for v in attrs.values())
    for name in hostile.names:  # visible text equals the original names
        assert name in scan.cells, name
    pdf = squash(hostile.pdf_text)
    for name in hostile.names:
        assert squash(name) in pdf, name

    # DOCX: the same sentences, as plain runs (no hyperlink, no field code)
    import docx

    document = docx.Document(io.BytesIO(hostile.out["draft.docx"]))
    paragraphs = [p.text for p in document.paragraphs]
    for _, text in hostile.result.context.plain_sections:
        assert text in paragraphs
    xml = zipfile.ZipFile(io.BytesIO(hostile.out["draft.docx"])).read("word/document.xml")
    assert b"<w:hyperlink" not in xml and b"instrText" not in xml and b"fldSimple" not in xml

    # Markdown draft: tag, entity and link syntax backslash-escaped (CommonMark backslash escapes),
    # no HTML entities (Markdown is not HTML)
    draft = hostile.out["draft.md"].decode("utf-8")
    assert not re.search(r"(?<!\\)<[A-Za-z/!?]", draft), "a live HTML tag in the Markdown draft"
    assert "&lt;" not in draft and "&gt;" not in draft and "&amp;" not in draft
    assert not re.search(r"(?<!\\)\[[^\]]*(?<!\\)\]\(", draft), "a live Markdown link or image"

    # e-mail (.eml of `sitrep send --dry-run`): plain text only, names literal, one PDF
    code, out, err = run_cli(
        [
            "send",
            str(hostile.result.bundle.path),
            "--config",
            str(hostile.week.config_path),
            "--dry-run",
        ]
    )
    assert code == 0, (out, err)
    eml = hostile.result.bundle.path.with_name(hostile.result.bundle.path.name + ".eml")
    message = email.message_from_bytes(eml.read_bytes(), policy=email.policy.default)
    types_seen = [p.get_content_type() for p in message.walk() if not p.is_multipart()]
    assert types_seen == ["text/plain", "application/pdf"]
    body = message.get_body(preferencelist=("plain",)).get_content()
    for key_message in hostile.result.context.key_messages:
        assert " ".join(key_message.split()) in " ".join(body.split())
    for header in ("From", "To", "Subject", "Message-ID"):
        assert len(message.get_all(header)) == 1


def test_h10_every_environment_escapes_and_no_template_marks_data_safe() -> None:
    from sitrep.render.html import environment

    env = environment()
    assert env.autoescape is True  # not select_autoescape(): docs/faults.md L2, .j2 files
    for path in sorted((ROOT / "templates").glob("*")):
        if path.suffix in (".j2", ".js", ".css"):
            text = path.read_text(encoding="utf-8")
            assert not re.search(r"\|\s*safe\b|autoescape\s+false|Markup\(", text), path.name
    for path in sorted((ROOT / "sitrep").rglob("*.py")):
        text = path.read_text(encoding="utf-8")
        assert not re.search(r"autoescape\s*=\s*False|Markup\(|select_autoescape", text), path


# --------------------------------------------------------------------------- F18


def test_h18_every_template_fails_loudly_on_a_missing_field(hostile: types.SimpleNamespace) -> None:
    from sitrep.errors import RenderError
    from sitrep.render.draft import render_email_body, render_markdown
    from sitrep.render.html import render_html

    context = hostile.result.context

    class Without:
        def __init__(self, hidden: str) -> None:
            self.hidden = hidden

        def __getattr__(self, name: str) -> object:
            if name == self.hidden:
                raise AttributeError(name)
            return getattr(context, name)

    renderers = {
        "report.html.j2": (
            lambda c: render_html(c),  # type: ignore[arg-type]
            lambda c: render_html(c, for_pdf=True),  # type: ignore[arg-type]
        ),
        "draft.md.j2": (lambda c: render_markdown(c),),  # type: ignore[arg-type]
        "email.txt.j2": (lambda c: render_email_body(c),),  # type: ignore[arg-type]
    }
    for template, modes in renderers.items():
        for mode in modes:
            mode(context)  # the full context renders
        fields = sorted(set(re.findall(r"\bc\.(\w+)", (ROOT / "templates" / template).read_text())))
        assert fields, template
        for field in fields:
            failures = 0
            for mode in modes:
                try:
                    mode(Without(field))
                except RenderError:
                    failures += 1
            assert failures, f"{template} renders without c.{field} (a silent blank)"


# --------------------------------------------------------------------------- F21 and F19

GLYPH_NAMES = [
    "Ελληνικό Κέντρο",
    "Северный округ",
    "Thừa Thiên–Huế",
    "Łódź Wschód",
    "Port\u00a0Ardent",
    "Upper Longmarsh and the Seven Hamlets of the Wendle Water Valley Joint District Area",
]


@pytest.fixture(scope="module")
def glyphs(tmp_path_factory: pytest.TempPathFactory) -> types.SimpleNamespace:
    """A week whose highest-ILI districts carry names in several scripts (built with the
    inherited SOURCE_DATE_EPOCH unset, for the reproducibility check)."""
    folder = tmp_path_factory.mktemp("glyphs")
    names = [
        "Arden",
        "Brannoch",
        "Coldwater",
        "Dunmere",
        "Eastfold",
        "Fennick",
        "Garrow",
        "Holloway",
        "Ivel",
        "Juniper",
        "Kestrel",
        "Larkmoor",
        "Merrow",
    ]
    for k, name in zip((0, 4, 8, 12, 1, 5), GLYPH_NAMES, strict=True):
        names[k] = name  # west columns and the island: the highest third this week
    week = make_week(folder / "week", names=names)
    saved = os.environ.pop("SOURCE_DATE_EPOCH", None)
    try:
        result = build(week)
    finally:
        if saved is not None:
            os.environ["SOURCE_DATE_EPOCH"] = saved
    out = read_outputs(result)
    return types.SimpleNamespace(
        week=week, result=result, out=out, pdf_text=pdf_text(out["report.pdf"])
    )


def test_h21_greek_cyrillic_and_diacritics_round_trip_with_a_covering_font(
    glyphs: types.SimpleNamespace,
) -> None:
    pdf = glyphs.out["report.pdf"]
    text = squash(glyphs.pdf_text)
    drawn, notdef = pdf_glyph_coverage(pdf)
    for name in GLYPH_NAMES:
        assert squash(name) in text, name
        for ch in name:
            if not ch.isspace():
                assert ch in drawn and ch not in notdef, (name, ch)
    assert not [f for f in glyphs.result.validation.findings if f.rule == "name-glyphs-missing"]
    cells = scan_html(glyphs.out["report.html"].decode("utf-8")).cells
    assert all(name in cells for name in GLYPH_NAMES)  # the no-break space is kept in the HTML


def test_h21_cjk_name_is_drawn_or_named_in_a_warning(tmp_path: Path) -> None:
    """DejaVu Sans (shipped) has no CJK glyphs; without a CJK system font they print as
    .notdef boxes, so the report must warn and name each character."""
    cjk = "北区 東京"
    names = [
        "Arden",
        "Brannoch",
        "Coldwater",
        "Dunmere",
        "Eastfold",
        "Fennick",
        "Garrow",
        "Holloway",
        "Ivel",
        "Juniper",
        "Kestrel",
        "Larkmoor",
        cjk,
    ]
    week = make_week(tmp_path / "week", names=names)
    result = build(week)  # filterwarnings=error: matplotlib draws no name, so no glyph warning
    out = read_outputs(result)
    drawn, notdef = pdf_glyph_coverage(out["report.pdf"])
    warnings = [f for f in result.validation.warnings if f.rule == "name-glyphs-missing"]
    html_text = out["report.html"].decode("utf-8")
    for ch in "北区東京":
        if ch in drawn and ch not in notdef:
            continue
        assert any(f"U+{ord(ch):04X}" in f.message for f in warnings), ch
        assert f"U+{ord(ch):04X}" in html_text  # shown in the data-quality section
    assert '"rule": "name-glyphs-missing"' in out["validation.json"].decode("utf-8")


def _second_config(week: object, suffix: str) -> Path:
    """A copy of the week's configuration writing to out-<suffix> and archive-<suffix>."""
    second = week.folder / f"sitrep-{suffix}.toml"  # type: ignore[attr-defined]
    text = week.config_path.read_text(encoding="utf-8")  # type: ignore[attr-defined]
    second.write_text(
        text.replace('folder = "out"', f'folder = "out-{suffix}"').replace(
            'archive = "archive"', f'archive = "archive-{suffix}"'
        ),
        encoding="utf-8",
    )
    return second


def test_h19_outputs_are_byte_identical_across_processes(glyphs: types.SimpleNamespace) -> None:
    """A second run in a child process with another PYTHONHASHSEED gives the same bytes."""
    week = glyphs.week
    second = _second_config(week, "b")
    script = (
        "import sys, datetime as dt; from sitrep.config import load_config; "
        "from sitrep import pipeline; "
        f"pipeline.build(load_config(sys.argv[1]), today=dt.date({TODAY.year}, {TODAY.month}, "
        f"{TODAY.day}))"
    )
    env = {**os.environ, "PYTHONHASHSEED": "4242"}
    env.pop("SOURCE_DATE_EPOCH", None)
    run = subprocess.run(
        [sys.executable, "-c", script, str(second)],
        cwd=ROOT,
        env=env,
        timeout=120,
        capture_output=True,
        text=True,
    )
    assert run.returncode == 0, run.stderr[-2000:]
    first = tree_hashes(week.archive)
    assert first and first == tree_hashes(week.folder / "archive-b")
    assert any(k.endswith("report.pdf") for k in first)
    assert any(k.endswith(".svg") for k in first) and any(k.endswith(".png") for k in first)
    assert tree_hashes(week.out) == tree_hashes(week.folder / "out-b")
    # the top-third list ranked by value (highest first), recorded seed and library versions
    high = glyphs.result.context.key_messages[2].split("highest first: ", 1)[1].rstrip(".")
    values = [float(v) for v in re.findall(r"\((\d+\.\d+)%\)", high)]
    assert len(values) >= 3 and values == sorted(values, reverse=True)
    html_text = glyphs.out["report.html"].decode("utf-8")
    assert f"esda {version('esda')}" in html_text
    assert f"weasyprint {version('weasyprint')}" in html_text
    assert '"seed": 12345' in glyphs.out["manifest.json"].decode("utf-8")


def test_h19_empty_source_date_epoch_is_replaced_or_rejected_by_the_cli(
    glyphs: types.SimpleNamespace,
) -> None:
    """SOURCE_DATE_EPOCH="" (docs/faults.md L3): same bundle as an unset variable, or a clear refusal."""
    week = glyphs.week
    third = _second_config(week, "c")
    env = {**os.environ, "SOURCE_DATE_EPOCH": ""}
    run = subprocess.run(
        [sys.executable, "-m", "sitrep.cli", "build", "--config", str(third)],
        cwd=ROOT,
        env=env,
        timeout=120,
        capture_output=True,
        text=True,
    )
    if run.returncode == 2:
        assert "SOURCE_DATE_EPOCH" in run.stderr and "internal error" not in run.stderr
        assert not (week.folder / "archive-c").exists()
    else:
        assert run.returncode == 0, run.stderr[-2000:]
        assert tree_hashes(week.folder / "archive-c") == tree_hashes(week.archive)


def test_h19_empty_source_date_epoch_is_rejected_clearly(monkeypatch: pytest.MonkeyPatch) -> None:
    from sitrep.deliver.pdf import html_to_pdf
    from sitrep.errors import DeliveryError

    monkeypatch.setenv("SOURCE_DATE_EPOCH", "")
    with pytest.raises(DeliveryError, match="SOURCE_DATE_EPOCH is set to ''"):
        html_to_pdf("<p>x</p>", timeout_s=None)


# --------------------------------------------------------------------------- F24


def test_h24_no_output_claims_pdf_a_without_a_validator(
    hostile: types.SimpleNamespace, glyphs: types.SimpleNamespace
) -> None:
    """No veraPDF here: with the default configuration nothing may say PDF/A (docs/faults.md F24, L5).

    The default variant is WeasyPrint's tagged PDF/UA-1, whose metadata names only that part.
    """
    assert shutil.which("verapdf") is None  # if a validator appears, this test must be revisited
    for run in (hostile, glyphs):
        assert run.week.config().output.pdf_variant == "pdf/ua-1"
        for name, data in run.out.items():
            assert b"PDF/A" not in data and b"pdfaid" not in data, name
        assert "PDF/A" not in run.pdf_text and "PDF/UA" not in run.pdf_text
        xmp = pypdf.PdfReader(io.BytesIO(run.out["report.pdf"])).xmp_metadata
        assert xmp is not None
        # XMP PDF/UA identification schema (ISO 14289-1 §5): part 1, and no PDF/A part
        data = xmp.stream.get_data()
        assert b'pdfuaid:part="1"' in data and b"pdfaid" not in data
    # the glyph week carries no hostile text: its reader-facing outputs hold no placeholder
    for name in ("draft.md", "email.txt"):
        assert not FORBIDDEN.search(glyphs.out[name].decode("utf-8")), name
