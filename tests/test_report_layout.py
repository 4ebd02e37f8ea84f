"""The demo PDF as a practitioner receives it: few pages, no half-empty page, tagged, reproducible.

Page space is measured on page images made by poppler's ``pdftoppm`` (the
``poppler-utils`` package; CI installs it), the structure tree is read with
pypdf, and the district table's layout rules are checked on constructed rows.
"""

from __future__ import annotations

import collections
import dataclasses
import io
import math
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pypdf
import pytest

from sitrep.render.district_table import district_table, natural_key
from sitrep.render.wording import tables as table_words
from sitrep.render.wording.tiles import MAX_NOTE_CHARS

A4_PT = (595.28, 841.89)
"""A4 in PDF points (ISO 216: 210 x 297 mm; 1 pt = 1/72 in)."""
MARGIN_MM = (18.0, 16.0)
"""Top and bottom page margins of templates/report.css (the running header and footer sit in them)."""
DPI = 30
MIN_GAP_MM = 10.0
"""A band with no ink at least this tall counts as empty space (common practice, no source: gaps
between paragraphs, table rows and figures are a few millimetres)."""


def _pdf(demo_build) -> bytes:  # type: ignore[no-untyped-def]
    """The demo week's first PDF, from its archived bundle (the output folder may hold a reissue)."""
    _, result, _ = demo_build
    return (result.bundle.path / "report.pdf").read_bytes()


def _read_pgm(path: Path) -> np.ndarray:
    """A binary greyscale PGM (P5, 8-bit) as a 2-D array (Netpbm format specification)."""
    data = path.read_bytes()
    fields = re.match(rb"P5\s+(?:#[^\n]*\s+)*(\d+)\s+(\d+)\s+(\d+)\s", data)
    assert fields is not None, f"{path.name} is not a binary PGM"
    width, height, maxval = (int(x) for x in fields.groups())
    assert maxval == 255
    pixels = np.frombuffer(data[fields.end() : fields.end() + width * height], dtype=np.uint8)
    return pixels.reshape(height, width)


def empty_share(image: np.ndarray, dpi: int = DPI) -> float:
    """Share of the page body (between the margins) taken by ink-free bands of at least MIN_GAP_MM.

    A row is ink-free when no pixel is darker than 230 of 255.
    """
    per_mm = dpi / 25.4
    top, bottom = (round(m * per_mm) for m in MARGIN_MM)
    body = image[top : image.shape[0] - bottom]
    inked = (body < 230).any(axis=1)
    min_rows = math.ceil(MIN_GAP_MM * per_mm)
    empty = run = 0
    for row_has_ink in [*inked.tolist(), True]:
        if row_has_ink:
            if run >= min_rows:
                empty += run
            run = 0
        else:
            run += 1
    return empty / body.shape[0]


def test_empty_share_measures_bands_not_line_gaps() -> None:
    # A constructed page: ink in the top half only, with 2 mm gaps between "lines".
    per_mm = DPI / 25.4
    height, width = round(297 * per_mm), round(210 * per_mm)
    page = np.full((height, width), 255, dtype=np.uint8)
    body_top, body_bottom = round(18 * per_mm), height - round(16 * per_mm)
    middle = (body_top + body_bottom) // 2
    for y in range(body_top, middle, 3):
        page[y, 20:100] = 0
    share = empty_share(page)
    assert 0.45 < share < 0.55  # the lower half of the body is empty, the line gaps are not
    page[body_top:body_bottom:3, 20:100] = 0
    assert empty_share(page) == 0.0


@pytest.fixture(scope="module")
def page_images(demo_build, tmp_path_factory: pytest.TempPathFactory) -> list[np.ndarray]:  # type: ignore[no-untyped-def]
    if shutil.which("pdftoppm") is None:
        pytest.fail("pdftoppm not found: install poppler-utils (apt-get install poppler-utils)")
    folder = tmp_path_factory.mktemp("pages")
    pdf = folder / "report.pdf"
    pdf.write_bytes(_pdf(demo_build))
    subprocess.run(["pdftoppm", "-r", str(DPI), "-gray", str(pdf), str(folder / "p")], check=True)
    files = sorted(folder.glob("p-*.pgm"), key=lambda p: int(p.stem.split("-")[1]))
    return [_read_pgm(f) for f in files]


pytestmark = pytest.mark.slow


def test_demo_pdf_has_at_most_six_a4_pages(demo_build, page_images) -> None:  # type: ignore[no-untyped-def]
    reader = pypdf.PdfReader(io.BytesIO(_pdf(demo_build)))
    assert 2 <= len(reader.pages) <= 6
    assert len(page_images) == len(reader.pages)
    for page in reader.pages:
        width, height = (float(v) for v in page.mediabox[2:])
        assert (round(width, 1), round(height, 1)) == (round(A4_PT[0], 1), round(A4_PT[1], 1))


def test_no_page_but_the_last_is_more_than_one_third_empty(page_images) -> None:  # type: ignore[no-untyped-def]
    shares = [empty_share(image) for image in page_images]
    for number, share in enumerate(shares[:-1], start=1):
        assert share <= 1 / 3, (
            f"page {number} is {share:.0%} empty ({[round(s, 2) for s in shares]})"
        )


def test_page_one_holds_key_messages_tiles_and_trend_and_maps_start_on_page_two(demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    reader = pypdf.PdfReader(io.BytesIO(_pdf(demo_build)))
    first = " ".join(reader.pages[0].extract_text().split())
    assert "Key messages" in first
    for tile in result.context.tiles:
        assert tile.label in first and tile.value in first, tile
    assert result.context.trend_figures[0].title in first
    assert "Maps" not in first and "Maps" in reader.pages[1].extract_text()
    last = reader.pages[-1].extract_text()
    assert "Provenance" in last
    assert "Cautions" in last or "Methods" in last  # provenance is not alone on its page


def test_tiles_are_short(demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    assert len(result.context.tiles) >= 5
    for tile in result.context.tiles:
        assert len(tile.label) <= MAX_NOTE_CHARS and len(tile.note) <= MAX_NOTE_CHARS, tile
        assert len(tile.value) <= 20, tile


def _struct_elements(node, found: list[pypdf.generic.DictionaryObject]) -> None:  # type: ignore[no-untyped-def]
    node = node.get_object()
    if isinstance(node, pypdf.generic.ArrayObject):
        for kid in node:
            _struct_elements(kid, found)
    elif isinstance(node, pypdf.generic.DictionaryObject):
        if "/S" in node:
            found.append(node)
        if "/K" in node:
            _struct_elements(node["/K"], found)


def test_pdf_is_tagged_with_headings_tables_and_figure_alternatives(demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    reader = pypdf.PdfReader(io.BytesIO(_pdf(demo_build)))
    root = reader.trailer["/Root"]
    # ISO 32000-1 §14.7 (structure tree) and §14.8 (tagged PDF: /MarkInfo /Marked true).
    assert root["/MarkInfo"]["/Marked"].value is True
    assert root["/Lang"] == "en"
    elements: list[pypdf.generic.DictionaryObject] = []
    _struct_elements(root["/StructTreeRoot"], elements)
    kinds = collections.Counter(str(e["/S"]) for e in elements)
    assert kinds["/H1"] == 1 and kinds["/H2"] >= 6
    assert kinds["/Table"] >= 3 and kinds["/TH"] > 0 and kinds["/TD"] > 0
    assert kinds["/L"] >= 3
    alts = [str(e["/Alt"]) for e in elements if str(e["/S"]) == "/Figure"]
    assert sorted(alts) == sorted(f.alt for f in result.context.figures)
    xmp = reader.xmp_metadata
    assert xmp is not None and b'pdfuaid:part="1"' in xmp.stream.get_data()


def test_pdf_rebuilds_byte_identically_in_a_render_process(demo_build) -> None:  # type: ignore[no-untyped-def]
    from sitrep.deliver.archive import reproducible_env, source_date_epoch
    from sitrep.deliver.pdf import html_to_pdf
    from sitrep.render.html import asset_dir, render_html

    config, result, _ = demo_build
    html = render_html(result.context, config.report.template_dir, for_pdf=True)
    with reproducible_env(source_date_epoch(result.week.end)):
        again = html_to_pdf(html, asset_dir=asset_dir(), pdf_variant=config.output.pdf_variant)
    assert again == _pdf(demo_build)


# --------------------------------------------------------------------------- the district table


@dataclasses.dataclass(frozen=True)
class Row:
    district_id: str
    name: str
    sites: str = "2"
    ili_visits: str = "10"
    total_visits: str = "500"
    ili_pct: str = "2.0%"
    ci: str = "1.0–3.6%"
    change: str = "+0.1 pp"
    change_class: str = "no clear change"
    tercile: str = "middle"
    cluster: str = "not significant"
    transition: str = ""
    flags: str = ""
    notes: str = ""
    sort_pct: float = 2.0
    suppressed: bool = False


def test_district_ids_sort_naturally() -> None:
    ids = ["D10", "D2", "D1", "D100", "d3"]
    assert sorted(ids, key=natural_key) == ["D1", "D2", "d3", "D10", "D100"]
    table = district_table([Row(i, f"Place {i}") for i in ids], confidence_label="95%")
    assert [r.cells[0].text for r in table.rows] == ["D1", "D2", "d3", "D10", "D100"]


def test_empty_columns_are_dropped_and_flags_get_a_key() -> None:
    rows = [Row("A1", "Alder"), Row("A2", "Birch", sites="—")]
    table = district_table(rows, confidence_label="90%")
    keys = [c.key for c in table.columns]
    assert "flags" not in keys and "notes" not in keys and "transition" not in keys
    assert "sites" in keys  # one district has a value
    assert next(c.heading for c in table.columns if c.key == "ci") == "90% CI"
    assert not any(k.startswith("Flags") for k in table.key)
    flagged = district_table([*rows, Row("A3", "Cedar", flags="C1, C3")], confidence_label="95%")
    assert "flags" in [c.key for c in flagged.columns]
    assert any(k.startswith("Flags:") and "C1" in k and "C3" in k for k in flagged.key)
    shown = {c.key for c in flagged.columns}
    assert len(flagged.key) == len(table_words.table_key(shown))


def test_class_columns_sort_in_their_natural_order() -> None:
    terciles = ["high", "low", "no data", "middle"]
    rows = [Row(f"X{k}", f"N{k}", tercile=t) for k, t in enumerate(terciles)]
    table = district_table(rows, confidence_label="95%", order="given")
    column = [c.key for c in table.columns].index("tercile") - 1  # the name is the row heading
    by_order = sorted(table.rows, key=lambda r: r.cells[column].order)
    assert [r.cells[column].text for r in by_order] == ["low", "middle", "high", "no data"]
    # numbers sort by value, with a true minus sign, not as text
    changes = ["+1.5 pp", "\u22120.3 pp", "+0.2 pp", "—"]
    rows = [Row(f"X{k}", f"N{k}", change=c) for k, c in enumerate(changes)]
    table = district_table(rows, confidence_label="95%", order="given")
    column = [c.key for c in table.columns].index("change") - 1
    by_order = sorted(table.rows, key=lambda r: r.cells[column].order)
    assert [r.cells[column].text for r in by_order] == ["\u22120.3 pp", "+0.2 pp", "+1.5 pp", "—"]


def test_html_table_carries_the_sort_order(demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    html = (result.bundle.path / "report.html").read_text(encoding="utf-8")
    table = html[
        html.index('id="district-table"') : html.index(
            "</table>", html.index('id="district-table"')
        )
    ]
    assert table.count("data-order=") >= len(result.context.districts) * 5
    ids = [r.cells[0].text for r in result.context.district_table.rows]
    assert ids == sorted(ids, key=natural_key)
    assert len(ids) == len(result.context.districts)
