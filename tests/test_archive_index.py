"""The audit index of an archive and the comparison page of a reissue.

The archive is the demo week built twice: v1 as shipped, v2 reissued after one
district's ILI count was corrected. The index must list both versions with
their checksum, signature and chain state and link to each report; the
comparison page must name the corrected district's changed figures. The
browser test opens the pages in a real headless Chromium (Debian's chromium
and chromium-driver, driven by selenium; .ci/run installs them): every link
resolves, the table sorts on a click, and the browser console shows no error.
"""

from __future__ import annotations

import csv
import dataclasses
import html.parser
import io
import shutil
from pathlib import Path

import pytest
from conftest import DEMO, TODAY, demo_config

from sitrep import cli, pipeline
from sitrep.deliver.index import (
    COMPARE_FOLDER,
    INDEX_FILE,
    compare_versions,
    scan_archive,
    write_index,
)

pytestmark = pytest.mark.slow
CORRECTED = "003"


@pytest.fixture(scope="module")
def archive(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("indexed")
    config = demo_config(folder)
    pipeline.build(config, today=TODAY)
    inputs = folder / "inputs"
    shutil.copytree(DEMO, inputs)
    table = inputs / config.input.table.name
    rows = list(csv.reader(io.StringIO(table.read_text(encoding="utf-8"))))
    header = rows[0]
    for r in rows[1:]:
        if r[header.index("district_id")] == CORRECTED:
            r[header.index("ili_visits")] = str(int(r[header.index("ili_visits")]) + 30)
    out = io.StringIO()
    csv.writer(out, lineterminator="\n").writerows(rows)
    table.write_text(out.getvalue(), encoding="utf-8")
    reissued = dataclasses.replace(config, input=dataclasses.replace(config.input, table=table))
    pipeline.build(reissued, today=TODAY, reissue_reason="late reports from district 003")
    return folder / "archive"


class _Links(html.parser.HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.links: list[str] = []
        self.external: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        for name, value in attrs:
            if name in ("href", "src") and value:
                (self.external if "://" in value or value.startswith("//") else self.links).append(
                    value
                )


def test_every_build_refreshes_the_index_with_both_versions(archive: Path) -> None:
    assert (archive / INDEX_FILE).is_file()
    entries = scan_archive(archive)
    assert [(e.week, e.version) for e in entries] == [("2026-W47", 2), ("2026-W47", 1)]
    v2, v1 = entries
    assert v2.reissue_reason == "late reports from district 003" and v2.compare_link
    assert not v1.compare_link
    assert {e.checksums for e in entries} == {"ok"}
    assert (v1.chain, v2.chain) == ("link 1: ok", "link 2: ok")
    assert {e.delivery for e in entries} == {"not sent"}
    page = (archive / INDEX_FILE).read_text(encoding="utf-8")
    assert "late reports from district 003" in page and "what changed" in page


def test_the_index_is_self_contained_and_its_links_resolve(archive: Path) -> None:
    for page in [archive / INDEX_FILE, *sorted((archive / COMPARE_FOLDER).glob("*.html"))]:
        parser = _Links()
        parser.feed(page.read_text(encoding="utf-8"))
        assert parser.external == [], page.name
        assert parser.links, page.name
        for link in parser.links:
            assert (page.parent / link).is_file(), f"{page.name}: {link}"


def test_the_comparison_names_the_corrected_district_and_changed_sentences(archive: Path) -> None:
    week = archive / "province-of-quillmarsh" / "2026-W47"
    c = compare_versions(week / "v1", week / "v2")
    assert (c.old, c.new, c.reason) == (1, 2, "late reports from district 003")
    changed = {(where.split()[0], field) for where, field, _, _ in c.figures}
    assert (CORRECTED, "ILI visits") in changed and (CORRECTED, "ILI %") in changed
    assert ("jurisdiction", "ili visits") in changed
    old_visits = next(
        o for w, f, o, n in c.figures if w.startswith(CORRECTED) and f == "ILI visits"
    )
    new_visits = next(
        n for w, f, o, n in c.figures if w.startswith(CORRECTED) and f == "ILI visits"
    )
    assert int(new_visits) == int(old_visits) + 30
    assert any(kind == "removed" for kind, _ in c.sentences)
    assert any(kind == "added" for kind, _ in c.sentences)
    assert any(what == "changed" for _, what in c.files)
    # a version compared with itself changes nothing
    same = compare_versions(week / "v1", week / "v1")
    assert (same.figures, same.sentences, same.files) == ((), (), ())


def test_a_tampered_bundle_is_marked_and_index_exits_1(
    archive: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    copy = tmp_path / "archive"
    shutil.copytree(archive, copy)
    target = copy / "province-of-quillmarsh" / "2026-W47" / "v1" / "results.csv"
    target.chmod(0o644)
    target.write_bytes(target.read_bytes() + b"\n")
    assert cli.main(["index", str(copy)]) == cli.EXIT_BLOCKED
    assert "problem: Province of Quillmarsh 2026-W47 v1" in capsys.readouterr().out
    assert "FAILED" in (copy / INDEX_FILE).read_text(encoding="utf-8")
    assert cli.main(["index", str(tmp_path / "nowhere")]) == cli.EXIT_USAGE


def test_write_index_leaves_the_bundles_untouched(archive: Path, tmp_path: Path) -> None:
    from sitrep.deliver.archive import verify_bundle

    written, _ = write_index(archive)
    assert all(p.parent in (archive, archive / COMPARE_FOLDER) for p in written)
    for version in ("v1", "v2"):
        assert verify_bundle(archive / "province-of-quillmarsh" / "2026-W47" / version).ok


CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
DRIVER = shutil.which("chromedriver")


@pytest.mark.skipif(
    not (CHROMIUM and DRIVER),
    reason="Chromium and ChromeDriver are not installed (.ci/run installs them)",
)
def test_in_a_real_browser_links_work_the_table_sorts_and_the_console_is_clean(
    archive: Path,
) -> None:
    webdriver = pytest.importorskip("selenium.webdriver")
    from selenium.webdriver.common.by import By

    options = webdriver.ChromeOptions()
    options.binary_location = str(CHROMIUM)
    for flag in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage"):
        options.add_argument(flag)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    service = webdriver.ChromeService(executable_path=str(DRIVER))
    driver = webdriver.Chrome(options=options, service=service)
    try:
        driver.get((archive / INDEX_FILE).as_uri())
        table = driver.find_element(By.ID, "archive-table")
        versions = [
            c.text for c in table.find_elements(By.CSS_SELECTOR, "tbody tr td:nth-child(3)")
        ]
        assert versions == ["v2", "v1"]
        heading = table.find_element(By.XPATH, ".//th[normalize-space()='Version']")
        heading.click()
        versions = [
            c.text for c in table.find_elements(By.CSS_SELECTOR, "tbody tr td:nth-child(3)")
        ]
        assert versions == ["v1", "v2"] and heading.get_attribute("aria-sort") == "ascending"
        heading.click()
        assert heading.get_attribute("aria-sort") == "descending"
        hrefs = [a.get_attribute("href") for a in driver.find_elements(By.CSS_SELECTOR, "a[href]")]
        assert len(hrefs) == 5  # HTML and PDF of two versions, one comparison
        errors = [e for e in driver.get_log("browser") if e["level"] == "SEVERE"]
        assert errors == []
        for href in hrefs:
            if href.endswith(".pdf"):
                continue  # a PDF opens in the viewer; its file is checked above
            driver.get(href)
            assert driver.find_element(By.TAG_NAME, "h1").text
            errors = [e for e in driver.get_log("browser") if e["level"] == "SEVERE"]
            assert errors == [], href
        driver.get(next(h for h in hrefs if COMPARE_FOLDER in h))
        body = driver.find_element(By.TAG_NAME, "main").text
        assert "Kelmarrow Downs" in body or CORRECTED in body
        driver.find_element(By.LINK_TEXT, "Report archive").click()
        assert driver.find_element(By.ID, "archive-table")
    finally:
        driver.quit()
