"""Tests of sitrep.deliver.pdf: confined fetching, determinism, time bound.

Fault references: docs/faults.md F3, L1 (WeasyPrint fetched file:// and
http:// resources, attached local files), F19/L3 (SOURCE_DATE_EPOCH) and F20
(bounded render time).
"""

from __future__ import annotations

import base64
import io
import multiprocessing
from collections.abc import Iterator
from pathlib import Path

import pypdf
import pytest
from http_fixtures import Canary, png_1x1

from sitrep.deliver.archive import reproducible_env
from sitrep.deliver.pdf import RefusedResource, html_to_pdf, make_url_fetcher, pdf_variants
from sitrep.errors import ConfigError, DeliveryError

ASSETS = Path(__file__).resolve().parents[1] / "sitrep" / "assets"
EPOCH = 1795867200  # 2026-11-28T12:00Z, end of MMWR week 2026-W47 (see test_archive.py)
CANARY_TEXT = b"CANARY-7f3a9c-SECRET"


@pytest.fixture
def canary() -> Iterator[Canary]:
    with Canary() as server:
        yield server


@pytest.fixture
def secrets(tmp_path: Path) -> dict[str, Path]:
    """Files outside the asset folder that must never reach a PDF."""
    outside = tmp_path / "outside"
    outside.mkdir()
    text = outside / "canary.txt"
    text.write_bytes(CANARY_TEXT)
    image = outside / "canary.png"
    image.write_bytes(png_1x1((0, 255, 0)))
    return {"text": text, "image": image}


def test_canary_server_answers_a_direct_request(canary: Canary) -> None:
    """Positive control: the canary does count requests, so 'zero requests' below means something."""
    import urllib.request

    with urllib.request.urlopen(canary.url + "probe", timeout=5) as response:  # noqa: S310 - loopback
        assert response.read()[:4] == b"\x89PNG"
    assert canary.requests == ["/probe"]


# --------------------------------------------------------------------------- the fetcher itself


def test_fetcher_answers_data_uri() -> None:
    fetcher = make_url_fetcher(ASSETS)
    # RFC 2397 data: URI; "aGVsbG8=" is base64 of "hello" (RFC 4648 alphabet).
    response = fetcher.fetch("data:text/plain;base64,aGVsbG8=")
    assert response.read() == b"hello"
    response.close()


def test_fetcher_reads_files_inside_asset_dir(tmp_path: Path) -> None:
    assets = tmp_path / "assets"
    assets.mkdir()
    (assets / "report.css").write_text("body { color: black }")
    fetcher = make_url_fetcher(assets)
    response = fetcher.fetch((assets / "report.css").as_uri())
    assert response.read() == b"body { color: black }"
    assert response.content_type == "text/css"
    response.close()
    packaged = make_url_fetcher(ASSETS).fetch((ASSETS / "DejaVuSans.ttf").as_uri())
    assert packaged.read() == (ASSETS / "DejaVuSans.ttf").read_bytes()
    packaged.close()


@pytest.mark.parametrize("mode", ["raise", "skip"])
def test_fetcher_refuses_files_outside(tmp_path: Path, secrets: dict[str, Path], mode: str) -> None:
    from weasyprint.urls import FatalURLFetchingError

    expected = FatalURLFetchingError if mode == "raise" else RefusedResource
    assets = tmp_path / "assets"
    assets.mkdir()
    (assets / "link.txt").symlink_to(secrets["text"])
    fetcher = make_url_fetcher(assets, on_refused=mode)  # type: ignore[arg-type]
    urls = [
        "file:///etc/hostname",
        secrets["text"].as_uri(),
        f"file://{assets}/../outside/canary.txt",
        f"file://{assets}/..%2Foutside%2Fcanary.txt",
        (assets / "link.txt").as_uri(),  # symlink inside the asset folder pointing out
        assets.as_uri(),  # a folder, not a file
        f"file://otherhost{secrets['text']}",
        "file:///dev/zero",
    ]
    for url in urls:
        with pytest.raises(expected, match="does not fetch"):
            fetcher.fetch(url)
    assert fetcher.refused == urls
    no_assets = make_url_fetcher(None, on_refused=mode)  # type: ignore[arg-type]
    with pytest.raises(expected, match="no asset folder"):
        no_assets.fetch((ASSETS / "DejaVuSans.ttf").as_uri())


@pytest.mark.parametrize("mode", ["raise", "skip"])
def test_fetcher_refuses_network_without_a_request(canary: Canary, mode: str) -> None:
    from weasyprint.urls import FatalURLFetchingError

    expected = FatalURLFetchingError if mode == "raise" else RefusedResource
    fetcher = make_url_fetcher(ASSETS, on_refused=mode)  # type: ignore[arg-type]
    for url in (
        canary.url,
        canary.url + "x.png",
        canary.url.replace("http", "https"),
        "ftp://127.0.0.1/x",
        "gopher://127.0.0.1/",
        "//127.0.0.1/x",
    ):
        with pytest.raises(expected, match="does not fetch"):
            fetcher.fetch(url)
    assert canary.requests == []


# --------------------------------------------------------------------------- whole renders


def hostile_html(canary: Canary, secrets: dict[str, Path]) -> str:
    """Markup an unescaped district name could smuggle in (docs/faults.md F3)."""
    return f"""<!doctype html><html><head>
<link rel="attachment" href="{secrets["text"].as_uri()}">
<link rel="attachment" href="file:///etc/hostname">
<link rel="stylesheet" href="{canary.url}style.css">
<style>@import url("{canary.url}import.css");
body {{ background: url("{secrets["image"].as_uri()}") }}</style>
</head><body>
<p>District <img src="{secrets["image"].as_uri()}"> <img src="{canary.url}pixel.png"></p>
<a rel="attachment" href="{secrets["text"].as_uri()}">data</a>
</body></html>"""


def pdf_facts(data: bytes) -> tuple[dict[str, list[bytes]], int]:
    reader = pypdf.PdfReader(io.BytesIO(data))
    images = sum(len(page.images) for page in reader.pages)
    return dict(reader.attachments), images


def test_skip_mode_renders_without_any_outside_resource(
    canary: Canary, secrets: dict[str, Path]
) -> None:
    data = html_to_pdf(
        hostile_html(canary, secrets),
        base_url=ASSETS.as_uri() + "/",
        asset_dir=ASSETS,
        timeout_s=None,
        on_refused="skip",
    )
    attachments, images = pdf_facts(data)
    assert attachments == {}
    assert images == 0
    assert CANARY_TEXT not in data
    assert canary.requests == []


def test_positive_control_data_image_and_given_attachment_do_appear() -> None:
    """The checks above can fail: a data: image and an explicit attachment are found by pypdf."""
    uri = "data:image/png;base64," + base64.b64encode(png_1x1((0, 0, 255))).decode()
    data = html_to_pdf(
        f'<p>Map <img src="{uri}"></p>',
        asset_dir=ASSETS,
        timeout_s=None,
        attachments=[("results.csv", b"district_id,ili_percent\n01,2.5\n")],
    )
    attachments, images = pdf_facts(data)
    assert images == 1
    assert attachments == {"results.csv": [b"district_id,ili_percent\n01,2.5\n"]}


def test_raise_mode_fails_closed(canary: Canary, secrets: dict[str, Path]) -> None:
    with pytest.raises(DeliveryError, match="outside the allowed assets"):
        html_to_pdf(hostile_html(canary, secrets), asset_dir=ASSETS, timeout_s=None)
    with pytest.raises(DeliveryError, match="outside the allowed assets"):
        html_to_pdf(f'<img src="{canary.url}a.png">', asset_dir=ASSETS, timeout_s=None)
    assert canary.requests == []


def test_font_from_asset_dir_is_embedded() -> None:
    html = (
        "<style>@font-face { font-family: Packaged; src: url(DejaVuSans-Bold.ttf) }"
        " body { font-family: Packaged }</style><p>Ωμέγα Кириллица</p>"
    )

    def base_font(asset_dir: Path | None) -> str:
        data = html_to_pdf(
            html,
            base_url=ASSETS.as_uri() + "/",
            asset_dir=asset_dir,
            timeout_s=None,
            on_refused="skip",
        )
        page = pypdf.PdfReader(io.BytesIO(data)).pages[0]
        assert "Ωμέγα Кириллица" in page.extract_text()
        fonts = page["/Resources"]["/Font"]
        return str(next(iter(fonts.values())).get_object()["/BaseFont"])

    # A subset font is named "<6 letters>+<name>" (ISO 32000-1 §9.6.4); WeasyPrint uses the
    # @font-face family name for a font it loaded from the file.
    assert base_font(ASSETS).endswith("+Packaged-Bold")
    assert "Packaged" not in base_font(None)  # fetch refused -> system fallback font


def test_two_renders_in_child_processes_are_identical() -> None:
    html = "<h1>Weekly ILI</h1><p>North district 2.5 %</p>"
    with reproducible_env(EPOCH):
        first = html_to_pdf(html, asset_dir=ASSETS, attachments=[("results.csv", b"a\n")])
        second = html_to_pdf(html, asset_dir=ASSETS, attachments=[("results.csv", b"a\n")])
        in_process = html_to_pdf(
            html,
            asset_dir=ASSETS,
            attachments=[("results.csv", b"a\n")],
            timeout_s=None,
        )
    assert first[:5] == b"%PDF-"
    assert first == second == in_process
    with reproducible_env(EPOCH + 7 * 86400):
        other_week = html_to_pdf(
            html,
            asset_dir=ASSETS,
            attachments=[("results.csv", b"a\n")],
            timeout_s=None,
        )
    assert other_week != first  # the epoch really reaches the PDF (font and attachment dates)


def test_pdf_a3b_variant_with_attachment_is_reproducible() -> None:
    assert "pdf/a-3b" in pdf_variants()
    csv = b"district_id,ili_percent\n01,2.5\n"
    with reproducible_env(EPOCH):
        runs = [
            html_to_pdf(
                "<p>Archived</p>",
                asset_dir=ASSETS,
                pdf_variant="pdf/a-3b",
                attachments=[("results.csv", csv)],
                timeout_s=None,
            )
            for _ in range(2)
        ]
    assert runs[0] == runs[1]
    reader = pypdf.PdfReader(io.BytesIO(runs[0]))
    assert reader.attachments["results.csv"] == [csv]
    xmp = reader.trailer["/Root"]["/Metadata"].get_object().get_data()
    # XMP identification schema for PDF/A, part 3, conformance B (ISO 19005-3 §6.6.4).
    assert b'pdfaid:part="3"' in xmp and b'pdfaid:conformance="B"' in xmp
    # WeasyPrint writes the claim; it is not a validation (no veraPDF here), see html_to_pdf docs.


def test_unknown_variant_is_a_config_error() -> None:
    with pytest.raises(ConfigError, match="pdf/a-3b"):
        html_to_pdf("<p>x</p>", pdf_variant="pdf/a-9z", timeout_s=None)


@pytest.mark.parametrize("raw", ["", "soon"])
def test_bad_source_date_epoch_is_reported_clearly(
    monkeypatch: pytest.MonkeyPatch, raw: str
) -> None:
    # docs/faults.md L3: an empty SOURCE_DATE_EPOCH crashed write_pdf inside fontTools with a bare ValueError.
    monkeypatch.setenv("SOURCE_DATE_EPOCH", raw)
    with pytest.raises(DeliveryError, match="SOURCE_DATE_EPOCH is set to"):
        html_to_pdf("<p>x</p>", timeout_s=None)
    with reproducible_env(EPOCH):
        assert html_to_pdf("<p>x</p>", timeout_s=None)[:5] == b"%PDF-"


def test_time_limit_stops_the_render() -> None:
    with pytest.raises(DeliveryError, match="not finished within"):
        html_to_pdf("<p>x</p>" * 2000, timeout_s=0.05)
    assert multiprocessing.active_children() == []


def test_weasyprint_errors_become_delivery_errors(monkeypatch: pytest.MonkeyPatch) -> None:
    import weasyprint

    def broken(self: object, *args: object, **kwargs: object) -> bytes:
        raise ValueError("layout exploded")

    monkeypatch.setattr(weasyprint.HTML, "write_pdf", broken)
    with pytest.raises(DeliveryError, match="layout exploded") as info:
        html_to_pdf("<p>x</p>", timeout_s=None)
    assert isinstance(info.value.__cause__, ValueError)


def test_bad_arguments_refused() -> None:
    with pytest.raises(DeliveryError, match="must be a str"):
        html_to_pdf(b"<p>x</p>", timeout_s=None)  # type: ignore[arg-type]
    with pytest.raises(DeliveryError, match=r"\(name, bytes\)"):
        html_to_pdf("<p>x</p>", attachments=[("a.csv", "text")], timeout_s=None)  # type: ignore[list-item]
    with pytest.raises(DeliveryError, match="positive"):
        html_to_pdf("<p>x</p>", timeout_s=0)
