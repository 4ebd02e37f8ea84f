"""Write docs/templates.md: where the packaged templates are and what each one receives.

Run ``python tools/make_templates_doc.py`` after changing a template or
ReportContext and commit the result; ``tests/test_templates.py`` fails while
the page and the code differ.
"""

from __future__ import annotations

import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from sitrep.render.templates import templates_markdown  # noqa: E402

PAGE = ROOT / "docs" / "templates.md"

INTRO = """# Report templates

The report, the communications draft and the e-mail body are filled from Jinja2 templates that
ship inside the package, in the folder of the `sitrep.templates` package (`templates/` in a
checkout; `sitrep templates` prints the installed folder and lists the files). To change one:

```sh
sitrep templates --copy my-templates     # writes the packaged templates into ./my-templates
```

then set `report.template_dir = "my-templates"` in the configuration (relative to the
configuration file) and edit the copy. Keep only the files you change: a file missing from
the folder falls back to the packaged one, so later versions of sitrep still bring their fixes
to the others. `--copy` refuses to replace files already in the folder unless `--force` is given.

Every value is a ready-made string or a tuple of them: the templates hold no logic beyond loops
and conditions, and every word comes from the package `sitrep/render/wording/`. Templates are
rendered with HTML escaping on (`report.html.j2`) and strict undefined variables: a misspelt
field stops the build with the template's name instead of printing nothing. Never use `|safe`
on data. The lists below are generated from the templates and from `ReportContext` in
`sitrep/render/context.py` by `python tools/make_templates_doc.py`.

"""


def page() -> str:
    """The whole page, as committed."""
    return INTRO + templates_markdown()


def main() -> None:
    PAGE.write_text(page(), encoding="utf-8")
    print(f"wrote {PAGE}")


if __name__ == "__main__":
    main()
