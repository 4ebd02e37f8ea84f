"""Templates and rendering: strict, escaping, overridable; thresholds explained when unavailable."""

from __future__ import annotations

import csv
import dataclasses
import io
import re
from pathlib import Path

import jinja2
import pytest
from conftest import DEMO, TODAY, demo_config

from sitrep.errors import RenderError
from sitrep.render import html as render_html_module
from sitrep.render.context import QualityItem
from sitrep.render.draft import render_markdown

TEMPLATES = Path(__file__).resolve().parent.parent / "templates"


def test_every_environment_escapes_and_is_strict() -> None:
    env = render_html_module.environment()
    assert env.autoescape is True
    assert env.undefined is jinja2.StrictUndefined


def test_templates_never_mark_data_safe() -> None:
    for path in sorted(TEMPLATES.iterdir()):
        if path.is_file():
            text = path.read_text(encoding="utf-8")
            assert "|safe" not in text.replace(" ", ""), path
            assert "Markup(" not in text and "autoescape false" not in text.lower(), path
    for path in sorted((Path(__file__).resolve().parent.parent / "sitrep").rglob("*.py")):
        text = path.read_text(encoding="utf-8")
        assert "autoescape=False" not in text and "Markup(" not in text, path


def test_missing_field_fails_loudly(tmp_path: Path, demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    (tmp_path / "draft.md.j2").write_text("Week {{ c.week_nmber }}\n", encoding="utf-8")
    with pytest.raises(RenderError, match="week_nmber"):
        render_markdown(result.context, tmp_path)


def test_custom_template_folder_overrides_one_file(tmp_path: Path, demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    (tmp_path / "draft.md.j2").write_text(
        "Custom draft for {{ c.jurisdiction }}\n", encoding="utf-8"
    )
    assert render_markdown(result.context, tmp_path) == "Custom draft for Province of Quillmarsh\n"
    # the report itself still comes from the packaged template
    assert "<h1>" in render_html_module.render_html(result.context, tmp_path)
    with pytest.raises(RenderError, match="does not exist"):
        render_markdown(result.context, tmp_path / "nope")


def test_letter_page_size(demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    letter = dataclasses.replace(result.context, page_size="Letter")
    assert "size: Letter;" in render_html_module.render_html(letter, for_pdf=True)
    assert "size: A4;" in render_html_module.render_html(result.context, for_pdf=True)


def test_pdf_html_embeds_the_shipped_font(demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    text = render_html_module.render_html(result.context, for_pdf=True)
    fonts = re.findall(r"src: url\((file://[^)]+)\)", text)
    assert [Path(f).name for f in fonts] == ["DejaVuSans.ttf", "DejaVuSans-Bold.ttf"]
    assert all(f.startswith(render_html_module.asset_dir().as_uri()) for f in fonts)
    # the screen HTML carries no font reference at all (self-contained)
    assert "@font-face" not in render_html_module.render_html(result.context)


def test_every_figure_has_alt_text_from_the_numbers(demo_build) -> None:  # type: ignore[no-untyped-def]
    _, result, _ = demo_build
    figures = {f.key: f for f in result.context.figures}
    assert set(figures) == {"trend", "terciles", "change", "clusters", "comparison"}
    table = result.analysis.table
    n_increase = int((table["change_class"] == "increase").sum())
    assert f"clear increase {n_increase}" in figures["change"].alt  # legend words, with the count
    assert f"clear increase {n_increase}" in figures["change"].caption  # the legend has no counts
    cuts = result.analysis.terciles.cuts
    alt = figures["terciles"].alt
    assert any(f"{cuts[0]:.{d}f}%" in alt and f"{cuts[1]:.{d}f}%" in alt for d in (1, 2, 3))
    for figure in figures.values():
        assert figure.svg.startswith(b"<?xml") and figure.png.startswith(b"\x89PNG")
        # the version shared on its own names the figure, the week and the source, with a caution
        shared = figure.shared_svg.decode("utf-8")
        assert f"{figure.title} — week 47, 2026" in shared.replace("&amp;", "&")
        assert "Source: Province of Quillmarsh" in shared and "Provisional data" in shared
        assert figure.shared_png.startswith(b"\x89PNG") and len(figure.shared_png) > len(figure.png)
        written = next(p for p in result.outputs if p.name == f"{figure.key}.svg")
        assert written.read_bytes() == figure.shared_svg


@pytest.mark.slow
def test_one_past_season_says_which_thresholds_are_missing(tmp_path: Path) -> None:
    """With a single past season, thresholds are 'not available' with the reason, never 0."""
    from sitrep import pipeline

    lines = (DEMO / "history.csv").read_text(encoding="utf-8").splitlines()
    keep = [lines[0]] + [
        line for line in lines[1:] if re.search(r",(2025-W(4\d|5[0-3])|2026-W(0\d|[1-3]\d)),", line)
    ]
    history = tmp_path / "history_one_season.csv"
    history.write_text("\n".join(keep) + "\n", encoding="utf-8")
    config = demo_config(tmp_path)
    config = dataclasses.replace(config, input=dataclasses.replace(config.input, history=history))
    result = pipeline.build(config, today=TODAY, archive=False)
    context = result.context
    threshold_row = next(r for r in context.indicators if r.label == "Epidemic threshold")
    assert threshold_row.value == "not available"
    assert "1 past season" in threshold_row.note and "at least 2" in threshold_row.note
    baseline_row = next(r for r in context.indicators if r.label == "Seasonal baseline")
    assert baseline_row.value == "not available"
    assert "0.0%" not in context.key_messages[1]
    assert "not available" in context.key_messages[1].lower()


def test_pdf_states_data_quality_plainly_and_the_html_lists_every_finding(demo_build) -> None:  # type: ignore[no-untyped-def]
    """The partner PDF names no rule id, file or line; the screen report and the annex list each."""
    config, result, folder = demo_build
    items = tuple(
        QualityItem("warning", "value-spike", f"t.csv, line {i}", "X", f"finding {i}")
        for i in range(2, 42)
    )
    context = dataclasses.replace(result.context, quality=items)
    pdf_html = render_html_module.render_html(context, for_pdf=True)
    screen = render_html_module.render_html(context)
    assert "value-spike" not in pdf_html and "t.csv, line" not in pdf_html
    assert screen.count("<td>value-spike</td>") == 40
    # the demo's own statement: the revised districts that page 1 names, by name
    statement = result.context.quality_statement
    named = set(result.context.named_district_ids)
    revised = {f.district_id for f in result.validation.warnings if f.rule == "revision-large"}
    names = dict(
        zip(
            result.analysis.table["district_id"],
            result.analysis.table["district_name"],
            strict=True,
        )
    )
    assert revised & named  # the demo's warnings concern districts page 1 names
    for i in revised:
        assert (names[i] in statement) == (i in named), i
    assert statement in render_html_module.render_html(result.context, for_pdf=True)
    # the internal annex lists every finding with rule, file, line and column
    annex = list(
        csv.DictReader(
            io.StringIO(
                (folder / "out" / "internal-data-quality.csv").read_text(encoding="utf-8-sig")
            )
        )
    )
    assert len(annex) == len(result.validation.findings)
    row = next(r for r in annex if r["rule"] == "revision-large" and r["district_id"] in named)
    assert (
        row["file"]
        and row["line"].isdigit()
        and row["column"]
        and row["named_on_page_one"] == "true"
    )


def test_report_css_text_colours_meet_wcag_aa() -> None:
    """Every text colour in report.css against its background: >= 4.5:1 (WCAG 2.1 SC 1.4.3)."""
    from sitrep.render.palette import contrast_ratio

    css = (TEMPLATES / "report.css").read_text(encoding="utf-8")
    colours = dict(re.findall(r"--([a-z]+): (#[0-9a-f]{6})", css))
    pairs = [
        ("ink", "#ffffff"),
        ("slate", "#ffffff"),
        ("muted", "#ffffff"),
        ("ink", colours["band"]),
        ("muted", "#eef3f6"),
        ("slate", "#eef3f6"),
    ]
    for text, background in pairs:
        assert contrast_ratio(colours[text], background) >= 4.5, (text, background)
    for hex_colour in re.findall(r"color: (#[0-9a-f]{6})", css):
        assert contrast_ratio(hex_colour, "#ffffff") >= 4.5, hex_colour
