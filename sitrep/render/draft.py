"""The communications draft: Markdown (from a template staff can edit) and DOCX.

Both carry the same sentences as the report's key messages and sections.
The Markdown goes through the same escaping environment as the HTML, so a
name holding markup cannot become live HTML when the draft is previewed;
``&`` therefore reads ``&amp;`` in the raw file and ``&`` when rendered.
"""

from __future__ import annotations

import datetime as dt
import io
from pathlib import Path

from sitrep.render.context import ReportContext
from sitrep.render.html import render_text

__all__ = ["render_docx", "render_email_body", "render_markdown"]


def render_markdown(context: ReportContext, template_dir: Path | None = None) -> str:
    """The draft as Markdown (template ``draft.md.j2``).

    Rendered with escaping on; quotes and ampersands are then restored, since
    they are harmless in Markdown, while ``<`` and ``>`` stay as entities so a
    name holding markup shows literally in any Markdown viewer.
    """
    text = render_text("draft.md.j2", template_dir, c=context)
    return text.replace("&#39;", "'").replace("&#34;", '"').replace("&amp;", "&")


def render_email_body(context: ReportContext, template_dir: Path | None = None) -> str:
    """Plain-text e-mail body (template ``email.txt.j2``); plain text, so HTML entities are undone."""
    import html

    return html.unescape(render_text("email.txt.j2", template_dir, c=context))


def render_docx(context: ReportContext) -> bytes:
    """The draft as a Word document (python-docx), with fixed core properties for reproducibility."""
    import docx

    document = docx.Document()
    props = document.core_properties
    fixed = dt.datetime(context.week_year, 1, 1, tzinfo=dt.UTC)
    props.created = fixed
    props.modified = fixed
    props.last_modified_by = "sitrep"
    props.author = "sitrep"
    props.title = f"{context.jurisdiction}: ILI week {context.week_number}, {context.week_year}"
    props.revision = 1
    document.add_heading(
        f"{context.jurisdiction}: influenza-like illness, week {context.week_number} ({context.week_dates})",
        level=1,
    )
    document.add_paragraph(
        "DRAFT for communications staff. Numbers come from the report of the same week; "
        "keep them unchanged when editing."
    )
    document.add_heading("Key messages", level=2)
    for message in context.key_messages:
        document.add_paragraph(message, style="List Bullet")
    for heading, text in context.plain_sections:
        document.add_heading(heading, level=2)
        document.add_paragraph(text)
    document.add_heading("Cautions", level=2)
    for caution in context.cautions:
        document.add_paragraph(caution, style="List Bullet")
    document.add_heading("Contact", level=2)
    document.add_paragraph(context.contact)
    buffer = io.BytesIO()
    document.save(buffer)
    return _normalise_zip(buffer.getvalue())


def _normalise_zip(data: bytes) -> bytes:
    """Rewrite a DOCX (zip) with fixed member times and order, so equal content gives equal bytes."""
    import zipfile

    src = zipfile.ZipFile(io.BytesIO(data))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", compression=zipfile.ZIP_DEFLATED) as dst:
        for name in sorted(src.namelist()):
            info = zipfile.ZipInfo(name, date_time=(1980, 1, 1, 0, 0, 0))
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o644 << 16
            dst.writestr(info, src.read(name))
    return out.getvalue()
