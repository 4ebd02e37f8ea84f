"""The communications draft: Markdown (from a template staff can edit) and DOCX.

Both carry the same sentences as the report's key messages and sections.
The Markdown goes through the same escaping environment as the HTML, so a
name holding markup cannot become live HTML when the draft is previewed;
``<`` and ``>`` stay entities there. Markdown's own link syntax is escaped
too (see :func:`markdown_text`), so a name such as
``[click](javascript:...)`` or ``![x](http://...)`` shows literally instead of
becoming a live link or a remote image in a Markdown viewer.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import io
import re
from pathlib import Path
from typing import Any

from sitrep.render.context import ReportContext
from sitrep.render.html import render_text

__all__ = ["markdown_text", "render_docx", "render_email_body", "render_markdown"]

_MD_ESCAPE = re.compile(r"([\\\[\]<&])")
_CONTROL = re.compile(r"[\x00-\x1f\x7f\u2028\u2029]")


def markdown_text(text: str) -> str:
    r"""Make one data string inert in Markdown (CommonMark backslash escapes).

    Every control character (C0 controls such as TAB, CR, LF, and DEL, plus
    the Unicode line and paragraph separators) becomes a space, so a value
    cannot start a new Markdown block (a heading, a list item or a link
    reference definition); then ``\``, ``[``, ``]``, ``<`` and ``&`` are
    backslash-escaped, so no link, image, raw HTML tag or entity can be formed
    (CommonMark 0.31, "Backslash escapes"); other characters, such as ``>`` in
    ``->``, stay as they are.

    >>> markdown_text("[x](javascript:alert(1))")
    '\\[x\\](javascript:alert(1))'
    >>> markdown_text("<b>A & B</b> -> C")
    '\\<b>A \\& B\\</b> -> C'
    >>> markdown_text("North\nEast")
    'North East'
    """
    return _MD_ESCAPE.sub(r"\\\1", _CONTROL.sub(" ", text))


def _markdown_safe(value: Any) -> Any:
    """``value`` with :func:`markdown_text` applied to every string inside it."""
    if isinstance(value, str):
        return markdown_text(value)
    if isinstance(value, tuple):
        return tuple(_markdown_safe(v) for v in value)
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return dataclasses.replace(
            value,
            **{
                f.name: _markdown_safe(getattr(value, f.name))
                for f in dataclasses.fields(value)
                if f.init
            },
        )
    return value


def render_markdown(context: ReportContext, template_dir: Path | None = None) -> str:
    """The draft as Markdown (template ``draft.md.j2``).

    Every string of the context first goes through :func:`markdown_text`
    (Markdown's own escaping: link, tag and entity syntax escaped, control
    characters made spaces); the template is rendered without HTML escaping,
    so ``->`` stays ``->`` and a name holding markup shows literally.
    """
    return render_text("draft.md.j2", template_dir, escape_html=False, c=_markdown_safe(context))


def render_email_body(context: ReportContext, template_dir: Path | None = None) -> str:
    """Plain-text e-mail body (template ``email.txt.j2``): plain text needs no escaping."""
    return render_text("email.txt.j2", template_dir, escape_html=False, c=context)


def render_docx(context: ReportContext) -> bytes:
    """The draft as a Word document built on the project's reference document.

    The styles (fonts, heading colours) come from the packaged
    ``draft-reference.docx`` (made by ``tools/make_draft_reference.py``); the
    file properties carry the title, the jurisdiction (subject), the report
    week and version (keywords) and the build time (``context.build_time``,
    from ``SOURCE_DATE_EPOCH``), so a rebuild gives the same bytes.
    """
    import docx

    from sitrep.render.html import asset_dir

    document = docx.Document(str(asset_dir() / "draft-reference.docx"))
    props = document.core_properties
    if context.build_time:
        stamp = dt.datetime.fromisoformat(context.build_time.replace("Z", "+00:00"))
    else:
        stamp = dt.datetime(context.week_year, 1, 1, tzinfo=dt.UTC)
    props.created = stamp
    props.modified = stamp
    props.last_modified_by = "sitrep"
    props.author = "sitrep"
    props.title = f"{context.jurisdiction}: influenza-like illness, week {context.week_number}, {context.week_year}"
    props.subject = context.jurisdiction
    props.keywords = f"ILI; week {context.week_label}; version {context.report_version}"
    props.comments = context.draft_intro
    props.revision = 1
    document.add_heading(
        f"{context.jurisdiction}: influenza-like illness, week {context.week_number} ({context.week_dates})",
        level=1,
    )
    document.add_paragraph(context.draft_intro, style="Draft Note")
    document.add_paragraph(
        f"Report version {context.report_version} · {context.week_system} · data as of {context.data_as_of}",
        style="Draft Note",
    )
    if context.reissue_note:
        paragraph = document.add_paragraph()
        paragraph.add_run("Reissued. ").bold = True
        paragraph.add_run(context.reissue_note)
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
