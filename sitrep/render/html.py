"""Fill the Jinja2 templates (the only place a Jinja2 Environment is built).

Every environment escapes every template (``autoescape=True``, not by file
extension) and uses ``StrictUndefined`` so that a misspelt field fails loudly
instead of printing an empty string.
"""

from __future__ import annotations

import importlib.resources
from pathlib import Path

import jinja2

from sitrep.errors import RenderError
from sitrep.render.context import ReportContext

__all__ = ["asset_dir", "environment", "packaged_template_dir", "render_html", "render_text"]


def packaged_template_dir() -> Path:
    """The templates shipped inside the package."""
    return Path(str(importlib.resources.files("sitrep.templates")))


def asset_dir() -> Path:
    """The package's own assets (fonts); the only folder the PDF engine may read."""
    return Path(str(importlib.resources.files("sitrep.assets")))


def environment(
    template_dir: Path | None = None, *, escape_html: bool = True
) -> jinja2.Environment:
    """A strict, escaping environment over ``template_dir`` (packaged templates by default).

    ``escape_html=False`` is for formats that are not HTML (Markdown, plain
    text), whose callers escape values in their own syntax first.

    A custom folder is searched first; templates it lacks fall back to the
    packaged ones, so a team can override just one file.
    """
    folders = [str(packaged_template_dir())]
    if template_dir is not None:
        if not Path(template_dir).is_dir():
            raise RenderError(f"template folder {template_dir} does not exist")
        folders.insert(0, str(template_dir))
    return jinja2.Environment(
        loader=jinja2.FileSystemLoader(folders),
        autoescape=escape_html,  # noqa: S701 - off only for Markdown and plain text, escaped by their callers
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
    )


def _font_face() -> str:
    """CSS @font-face rules pointing at the shipped fonts (the PDF fetcher may read only these)."""
    rules = []
    for weight, name in (("normal", "DejaVuSans.ttf"), ("bold", "DejaVuSans-Bold.ttf")):
        # no quotes: the rule passes through HTML escaping unchanged
        rules.append(
            f"@font-face {{ font-family: ReportSans; font-weight: {weight}; "
            f"src: url({(asset_dir() / name).as_uri()}); }}"
        )
    return "\n".join(rules)


def render_html(
    context: ReportContext, template_dir: Path | None = None, *, for_pdf: bool = False
) -> str:
    """Render the report as one self-contained HTML document.

    ``for_pdf`` selects the print layout (top districts only, PNG-free SVG
    figures, running header) from the same template.
    """
    env = environment(template_dir)
    try:
        return env.get_template("report.html.j2").render(
            c=context, font_face=_font_face() if for_pdf else "", for_pdf=for_pdf
        )
    except jinja2.TemplateError as exc:
        raise RenderError(f"report template failed: {exc}") from exc


def render_text(
    name: str, template_dir: Path | None = None, *, escape_html: bool = True, **values: object
) -> str:
    """Render a text template (e.g. the draft) with the same strict environment.

    ``escape_html=False`` leaves values as they are: the caller has escaped
    them for the output format (Markdown escaping, or none for plain text).
    """
    try:
        return (
            environment(template_dir, escape_html=escape_html).get_template(name).render(**values)
        )
    except jinja2.TemplateError as exc:
        raise RenderError(f"template {name} failed: {exc}") from exc
