"""Write sitrep/assets/draft-reference.docx: the styles the communications draft is built on.

Run ``python tools/make_draft_reference.py`` after changing a style below and
commit the result; the draft opens this file and adds only content, so staff
can also restyle it in Word and save it over this file.
"""

from __future__ import annotations

import io
import sys
from pathlib import Path

import docx
from docx.shared import Pt, RGBColor

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from sitrep.render.draft import _normalise_zip  # noqa: E402

INK = RGBColor(0x1F, 0x2A, 0x36)
HEADING = RGBColor(0x2E, 0x5E, 0x4E)  # deep green of the report's headings
SUBHEADING = RGBColor(0x7A, 0x3E, 0x1D)  # rust


def main() -> None:
    document = docx.Document()
    styles = document.styles
    normal = styles["Normal"]
    normal.font.name = "DejaVu Sans"
    normal.font.size = Pt(10.5)
    normal.font.color.rgb = INK
    for name, size, colour in (
        ("Title", 20, HEADING),
        ("Heading 1", 16, HEADING),
        ("Heading 2", 12.5, SUBHEADING),
    ):
        style = styles[name]
        style.font.name = "DejaVu Sans"
        style.font.size = Pt(size)
        style.font.bold = True
        style.font.color.rgb = colour
    note = styles.add_style("Draft Note", 1)  # paragraph style
    note.base_style = normal
    note.font.italic = True
    note.font.size = Pt(9.5)
    props = document.core_properties
    props.author = "sitrep"
    props.title = "sitrep draft reference document"
    # the body stays empty: the draft adds its content to these styles
    for paragraph in list(document.paragraphs):
        paragraph._element.getparent().remove(paragraph._element)
    buffer = io.BytesIO()
    document.save(buffer)
    out = ROOT / "sitrep" / "assets" / "draft-reference.docx"
    out.write_bytes(_normalise_zip(buffer.getvalue()))
    print(f"wrote {out}")


if __name__ == "__main__":
    main()
