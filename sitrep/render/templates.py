"""The packaged templates: which there are, what each receives, and copying them to start an override.

A jurisdiction overrides a template by putting a file of the same name in the
folder named by ``report.template_dir`` (see :func:`sitrep.render.html.environment`);
``sitrep templates --copy DIR`` writes the packaged files there to start from.
What each template receives is read from the templates themselves (every
``c.<field>`` they use) and from :class:`~sitrep.render.context.ReportContext`,
so docs/templates.md, which ``python tools/make_templates_doc.py`` writes from
:func:`templates_markdown`, cannot drift from the code.
"""

from __future__ import annotations

import dataclasses
import os
import shutil
from pathlib import Path

import jinja2
import jinja2.nodes

from sitrep.errors import ConfigError
from sitrep.render.context import DistrictRow, IndicatorRow, QualityItem, ReportContext, Tile
from sitrep.render.district_table import Cell, Column, DistrictTable, TableRow
from sitrep.render.html import environment, packaged_template_dir
from sitrep.render.report_figures import FigureItem

__all__ = [
    "TEMPLATES",
    "Template",
    "context_fields",
    "copy_templates",
    "template_problems",
    "templates_markdown",
]


@dataclasses.dataclass(frozen=True)
class Template:
    """One packaged template file.

    Attributes
    ----------
    name : str
        File name in the template folder.
    purpose : str
        What it makes.
    variables : tuple of (str, str, str)
        ``(name, type, meaning)`` of each variable the renderer passes in.
    included_by : str
        The template that includes this file (it then sees that template's
        variables), or "".
    """

    name: str
    purpose: str
    variables: tuple[tuple[str, str, str], ...] = ()
    included_by: str = ""


_C = ("c", "ReportContext", "the report's ready-made strings (fields below)")

TEMPLATES: tuple[Template, ...] = (
    Template(
        "report.html.j2",
        "the report: report.html, and report.pdf from the same template",
        (
            _C,
            (
                "for_pdf",
                "bool",
                "true when rendering for the PDF (top districts only, print layout)",
            ),
            ("font_face", "str", "CSS @font-face rules for the shipped fonts (empty for the HTML)"),
        ),
    ),
    Template(
        "draft.md.j2",
        "draft.md, the communications draft (draft.docx is built from the same fields in code)",
        (("c", "ReportContext", "as for the report, every text already escaped for Markdown"),),
    ),
    Template("email.txt.j2", "email.txt, the body of the e-mail", (_C,)),
    Template("report.css", "the report's style sheet (HTML and PDF)", included_by="report.html.j2"),
    Template(
        "sort_table.js", "the sorting of the HTML district table", included_by="report.html.j2"
    ),
    Template(
        "archive_index.html.j2",
        "ARCHIVE/index.html, the audit index of every issued week (sitrep index)",
        (
            (
                "entries",
                "list of BundleEntry",
                "one row per bundle (sitrep/deliver/index.py), newest first",
            ),
            ("jurisdictions", "list of str", "the jurisdictions in the archive"),
            ("generated", "str", "when the index was checked, UTC"),
            ("problems", "int", "bundles that fail their checksums or break their chain"),
        ),
    ),
    Template(
        "archive_compare.html.j2",
        "ARCHIVE/_compare/<jurisdiction>-<week>-v<j>-v<k>.html, what a reissue changed",
        (
            (
                "comparison",
                "Comparison",
                "figures, sentences and figure files that differ (sitrep/deliver/index.py)",
            ),
            ("generated", "str", "when the comparison was made, UTC"),
        ),
    ),
    Template("archive.css", "the style of the archive pages", included_by="archive_index.html.j2"),
    Template(
        "archive_index.js", "the sorting of the archive table", included_by="archive_index.html.j2"
    ),
)
"""Every file of the packaged template folder, with what it receives."""

_ROWS = {
    "indicators": IndicatorRow,
    "districts": DistrictRow,
    "districts_pdf": DistrictRow,
    "quality": QualityItem,
    "quality_pdf": QualityItem,
    "figures": FigureItem,
    "trend_figures": FigureItem,
    "map_figures": FigureItem,
    "tiles": Tile,
    "district_table": DistrictTable,
    "district_table.columns": Column,
    "district_table.rows": TableRow,
    "district_table.rows[].cells": Cell,
}
"""Context fields holding rows: their item type, whose fields a loop can use."""


def context_fields(name: str, template_dir: Path | None = None) -> tuple[str, ...]:
    """The ``c.<field>`` names a template uses, in order of first use (also via its includes).

    Reads the packaged template, or the override in ``template_dir`` when it has one.

    Raises
    ------
    jinja2.TemplateSyntaxError
        If the template (or one it includes) cannot be parsed.
    """
    env = environment(template_dir)
    loader = env.loader
    assert loader is not None
    seen: list[str] = []
    pending = [name]
    done: set[str] = set()
    while pending:
        current = pending.pop(0)
        if current in done:
            continue
        done.add(current)
        source, filename, _ = loader.get_source(env, current)
        tree = env.parse(source, current, filename)
        for node in tree.find_all(jinja2.nodes.Getattr):
            if (
                isinstance(node.node, jinja2.nodes.Name)
                and node.node.name == "c"
                and node.attr not in seen
            ):
                seen.append(node.attr)
        for inc in tree.find_all(jinja2.nodes.Include):
            if isinstance(inc.template, jinja2.nodes.Const) and str(inc.template.value).endswith(
                ".j2"
            ):
                pending.append(str(inc.template.value))
    return tuple(seen)


def template_problems(folder: Path) -> list[tuple[str, int | None, str]]:
    """``(file, line, message)`` for each template in an override folder that would stop a build.

    Each packaged template name found in ``folder`` is parsed (not rendered):
    a syntax error, a variable the template does not receive, or a ``c.<field>``
    that :class:`~sitrep.render.context.ReportContext` does not have is a
    problem. Fields of loop items (``row.<field>``) are only found by a build.
    """
    import jinja2.meta

    fields = {f.name for f in dataclasses.fields(ReportContext)} | {
        n
        for n, v in vars(ReportContext).items()
        if isinstance(v, property)  # e.g. c.map_figures
    }
    receives = {t.name: {v for v, _, _ in t.variables} for t in TEMPLATES}
    env = environment(folder)
    out: list[tuple[str, int | None, str]] = []
    for t in TEMPLATES:
        path = Path(folder) / t.name
        if not path.is_file():
            continue
        try:
            tree = env.parse(path.read_text(encoding="utf-8"), t.name, str(path))
        except UnicodeDecodeError as exc:
            out.append((t.name, None, f"{path} is not UTF-8 text ({exc.reason})"))
            continue
        except jinja2.TemplateSyntaxError as exc:
            out.append((t.name, exc.lineno, f"{path} cannot be parsed: {exc.message}"))
            continue
        # names the template sets itself, even inside a branch, which Jinja2 counts as undeclared
        stored = {n.name for n in tree.find_all(jinja2.nodes.Name) if n.ctx in ("store", "param")}
        allowed = receives[t.included_by or t.name] | set(env.globals) | stored
        unknown = sorted(jinja2.meta.find_undeclared_variables(tree) - allowed)
        if unknown:
            out.append(
                (
                    t.name,
                    None,
                    f"{path} uses {', '.join(unknown)}, which it does not receive (it receives "
                    f"{', '.join(sorted(receives[t.included_by or t.name]))}; see docs/templates.md)",
                )
            )
        for node in tree.find_all(jinja2.nodes.Getattr):
            if (
                isinstance(node.node, jinja2.nodes.Name)
                and node.node.name == "c"
                and node.attr not in fields
            ):
                out.append(
                    (
                        t.name,
                        node.lineno,
                        f"{path} line {node.lineno}: c.{node.attr} is not a value of the report "
                        "(see docs/templates.md for the fields of c)",
                    )
                )
    return out


def copy_templates(folder: Path, *, force: bool = False) -> tuple[Path, ...]:
    """Write every packaged template into ``folder`` (created when missing).

    Refuses, writing nothing, when one of the files is already there, unless
    ``force``; returns the paths written. Point ``report.template_dir`` at the
    folder and keep only the files you change: missing ones fall back to the
    packaged templates.

    Raises
    ------
    ConfigError
        If ``folder`` exists and is not a folder, or would overwrite files without ``force``.
    """
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise ConfigError(f"{folder} exists and is not a folder; give a folder for the templates")
    source = packaged_template_dir()
    names = [t.name for t in TEMPLATES]
    clash = [n for n in names if os.path.lexists(folder / n)]
    if clash and not force:
        raise ConfigError(
            f"{folder} already holds {', '.join(clash)}; nothing was copied. Use --force to "
            "replace them with the packaged templates, or choose an empty folder"
        )
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    for n in names:
        target = folder / n
        if target.is_symlink():
            target.unlink()  # replace the link itself, never the file it points to
        shutil.copyfile(source / n, target)
        written.append(target)
    return tuple(written)


def _type(annotation: object) -> str:
    return str(annotation).replace("typing.", "")


def _field_type(fields: dict[str, dataclasses.Field[object]], name: str) -> str:
    """The type of a context field, or the return type of a context property (e.g. ``map_figures``)."""
    if name in fields:
        return _type(fields[name].type)
    prop = getattr(ReportContext, name)
    return _type(prop.fget.__annotations__.get("return", "")) + " (property)"


def templates_markdown() -> str:
    """The generated part of docs/templates.md: each template, its variables and the fields it uses."""
    fields = {f.name: f for f in dataclasses.fields(ReportContext)}
    out: list[str] = []
    for t in TEMPLATES:
        out += [f"## `{t.name}`", "", f"Makes {t.purpose}."]
        if t.included_by:
            out += [
                "",
                f"Included by `{t.included_by}`, so it sees the same variables; the "
                "packaged file uses none.",
            ]
            out.append("")
            continue
        out += ["", "Variables:", ""]
        out += [f"- `{n}` ({kind}): {meaning}" for n, kind, meaning in t.variables]
        if not any(n == "c" and kind == "ReportContext" for n, kind, _ in t.variables):
            out.append("")  # the archive pages: their variables are described above
            continue
        used = context_fields(t.name)
        out += [
            "",
            "Fields of `c` the packaged template uses:",
            "",
            "| field | type |",
            "| --- | --- |",
        ]
        out += [f"| `c.{n}` | `{_field_type(fields, n)}` |" for n in used]
        out.append("")
    out += ["## Every field of `c` (ReportContext)", "", "| field | type |", "| --- | --- |"]
    out += [f"| `{f.name}` | `{_type(f.type)}` |" for f in dataclasses.fields(ReportContext)]
    out += [
        f"| `{n}` | `{_field_type({}, n)}` |"
        for n, v in vars(ReportContext).items()
        if isinstance(v, property)
    ]
    out.append("")
    for field, row in _ROWS.items():
        if not dataclasses.is_dataclass(row):  # pragma: no cover - every row type is a dataclass
            continue
        members = ", ".join(f"`{f.name}`" for f in dataclasses.fields(row))
        kind = "" if field == "district_table" else "each item of "
        out.append(f"- {kind}`c.{field}` (`{row.__name__}`) has {members}")
    out.append("")
    return "\n".join(out)
