"""Tests of sitrep.render.templates and the `templates` verb: copy the packaged templates to
start an override, and the generated list of what each template receives (docs/templates.md).

The fields each template uses are found twice: by the module (Jinja2's parser) and here by a
plain regular expression over the template text, so the two readings check each other
(common practice, no source).
"""

from __future__ import annotations

import importlib.util
import re
from pathlib import Path

import pytest

from sitrep import cli
from sitrep.errors import ConfigError
from sitrep.render.html import environment, packaged_template_dir
from sitrep.render.templates import TEMPLATES, context_fields, copy_templates, template_problems

ROOT = Path(__file__).resolve().parent.parent


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = cli.main(list(argv))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_templates_lists_every_packaged_file() -> None:
    shipped = {
        p.name for p in packaged_template_dir().iterdir() if p.is_file() and p.suffix != ".py"
    }
    assert {t.name for t in TEMPLATES} == shipped


def test_copy_writes_the_packaged_files_then_refuses_to_overwrite(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    target = tmp_path / "mine"
    code, out, err = _run(capsys, "templates", "--copy", str(target))
    assert code == cli.EXIT_OK, err
    for t in TEMPLATES:
        assert (target / t.name).read_bytes() == (packaged_template_dir() / t.name).read_bytes()
        assert f"wrote {target / t.name}" in out
    assert "report.template_dir" in out
    edited = target / "email.txt.j2"
    edited.write_text("{{ c.title }} edited\n", encoding="utf-8")
    (target / "draft.md.j2").unlink()
    # a second copy refuses and changes nothing, not even the file that was missing
    code, _, err = _run(capsys, "templates", "--copy", str(target))
    assert code == cli.EXIT_USAGE
    assert "email.txt.j2" in err and "--force" in err and "nothing was copied" in err
    assert edited.read_text(encoding="utf-8") == "{{ c.title }} edited\n"
    assert not (target / "draft.md.j2").exists()
    # the copy is what an override folder reads first; a missing file falls back
    env = environment(target, escape_html=False)
    assert env.get_template("email.txt.j2").filename == str(edited)
    assert env.get_template("draft.md.j2").filename == str(packaged_template_dir() / "draft.md.j2")
    # --force replaces
    code, _, err = _run(capsys, "templates", "--copy", str(target), "--force")
    assert code == cli.EXIT_OK, err
    assert edited.read_bytes() == (packaged_template_dir() / "email.txt.j2").read_bytes()


def test_copy_into_a_file_or_through_a_link_is_safe(tmp_path: Path) -> None:
    not_a_folder = tmp_path / "file.txt"
    not_a_folder.write_text("x", encoding="utf-8")
    with pytest.raises(ConfigError, match="is not a folder"):
        copy_templates(not_a_folder)
    folder = tmp_path / "t"
    folder.mkdir()
    outside = tmp_path / "outside.txt"
    outside.write_text("keep me", encoding="utf-8")
    (folder / "report.css").symlink_to(outside)
    copy_templates(folder, force=True)
    assert outside.read_text(encoding="utf-8") == "keep me"  # the link was replaced, not followed
    assert not (folder / "report.css").is_symlink()


def test_listing_without_copy_names_the_folder(capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = _run(capsys, "templates")
    assert code == cli.EXIT_OK
    assert f"packaged templates: {packaged_template_dir()}" in out
    assert all(t.name in out for t in TEMPLATES)
    code, out, _ = _run(capsys, "templates", "--help")
    assert code == 0 and out.startswith("usage: sitrep templates") and "exit codes" in out


@pytest.mark.parametrize(
    "name",
    [t.name for t in TEMPLATES if not t.included_by and any(v[0] == "c" for v in t.variables)],
)
def test_fields_each_template_uses_match_the_template_text(name: str) -> None:
    text = (packaged_template_dir() / name).read_text(encoding="utf-8")
    for include in re.findall(r'{%\s*include\s+"([^"]+\.j2)"', text):
        text += (packaged_template_dir() / include).read_text(encoding="utf-8")
    by_regex = set(re.findall(r"\bc\.([A-Za-z_]\w*)", text))
    assert set(context_fields(name)) == by_regex
    assert by_regex  # every rendered template shows something from the context


def test_docs_templates_page_is_generated_from_the_code() -> None:
    spec = importlib.util.spec_from_file_location(
        "make_doc", ROOT / "tools" / "make_templates_doc.py"
    )
    assert spec is not None and spec.loader is not None
    tool = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(tool)
    page = (ROOT / "docs" / "templates.md").read_text(encoding="utf-8")
    assert page == tool.page(), "run python tools/make_templates_doc.py"
    assert "sitrep templates --copy" in page and "report.template_dir" in page
    for t in TEMPLATES:
        assert f"## `{t.name}`" in page
        for field in context_fields(t.name) if not t.included_by else ():
            assert f"`c.{field}`" in page


def test_an_unchanged_copy_has_no_problems_and_a_broken_one_is_located(tmp_path: Path) -> None:
    copy_templates(tmp_path)
    assert template_problems(tmp_path) == []
    (tmp_path / "email.txt.j2").write_text(
        "{{ c.title }}\n\n{% if c.contact %}\n", encoding="utf-8"
    )
    (tmp_path / "draft.md.j2").write_text(
        "{% set x = 1 %}{{ x }} {{ c.no_such_field }}\n", encoding="utf-8"
    )
    problems = {name: (line, message) for name, line, message in template_problems(tmp_path)}
    assert set(problems) == {"email.txt.j2", "draft.md.j2"}
    assert problems["email.txt.j2"][0] == 3 and "cannot be parsed" in problems["email.txt.j2"][1]
    assert problems["draft.md.j2"][0] == 1 and "c.no_such_field" in problems["draft.md.j2"][1]
