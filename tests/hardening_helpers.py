"""Shared harness of the hardening tests (docs/faults.md F1-F25).

Everything here is invented for the tests: a small grid of square districts in
EPSG:32630 (UTM zone 30N), a season-to-date extract for MMWR weeks 2026-W40 to
2026-W47 and last week's extract (W40 to W46), written to a temporary folder
with a TOML configuration, so each test can change one thing and run the real
pipeline (``pipeline.build``) or the real CLI (``cli.main``). Also: output
scanners (html.parser, pypdf, a grep for placeholders), a loopback canary HTTP
server that counts requests. The loopback SMTP server is in mail_fixtures.py.
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime as dt
import hashlib
import html.parser
import io
import re
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from http_fixtures import Canary, png_1x1  # noqa: F401 - re-exported for the hardening tests
from toml_fixtures import toml_value

TODAY = dt.date(2026, 11, 30)
"""The Monday after MMWR week 2026-W47 (22-28 November 2026)."""
WEEKS = tuple(f"2026-W{w}" for w in range(40, 48))
HEADER = (
    "district_id",
    "district_name",
    "epi_week",
    "reporting_sites",
    "ili_visits",
    "total_visits",
)
CELL = 10_000.0  # metres
ORIGIN = (500_000.0, 5_500_000.0)  # EPSG:32630
FORBIDDEN = re.compile(r"\b(nan|NaN|inf|Infinity|None|undefined)\b|\{\{|\}\}|\{%|%\}")
"""Placeholders and missing numbers that must never reach a reader (docs/faults.md F5, F18)."""


# --------------------------------------------------------------------------- the invented week


def default_names(n: int) -> list[str]:
    base = [
        "Arden",
        "Brannoch",
        "Coldwater",
        "Dunmere",
        "Eastfold",
        "Fennick",
        "Garrow",
        "Holloway",
        "Ivel",
        "Juniper",
        "Kestrel",
        "Larkmoor",
        "Merrow",
        "Nettlebed",
        "Orrin",
        "Pellow",
    ]
    return [base[k] if k < len(base) else f"District {k + 1}" for k in range(n)]


def rate_of(d: int, w: int, cols: int) -> float:
    """Invented ILI share: high in the west columns, rising slowly through the season."""
    col = d % cols
    return 0.012 + 0.012 * (cols - 1 - col) + 0.001 * w + 0.0007 * (d % 3)


def counts(d: int, w: int, cols: int) -> tuple[int, int, int]:
    """(reporting_sites, ili_visits, total_visits) of district index d in week index w."""
    total = 900 + 37 * d + 11 * w
    return 3 + d % 3, int(round(total * rate_of(d, w, cols))), total


@dataclasses.dataclass
class Week:
    """One invented jurisdiction on disk: inputs, configuration, where outputs go."""

    folder: Path
    config_path: Path
    ids: list[str]
    names: list[str]
    table: Path
    prior: Path
    boundaries: Path
    raw: dict[str, Any]

    @property
    def out(self) -> Path:
        return self.folder / "out"

    @property
    def archive(self) -> Path:
        return self.folder / "archive"

    def config(self, **sections: dict[str, Any]) -> Any:
        """The configuration as loaded from disk, with some keys changed."""
        from sitrep.config import load_config

        if sections:
            self.write_config(**sections)
        return load_config(self.config_path)

    def write_config(self, **sections: dict[str, Any]) -> Path:
        """Rewrite the TOML file with some keys changed (section -> {key: value})."""
        for section, values in sections.items():
            target = self.raw.setdefault(section, {})
            for key, value in values.items():
                if isinstance(value, dict):
                    target.setdefault(key, {}).update(value)
                else:
                    target[key] = value
        self.config_path.write_text(to_toml(self.raw), encoding="utf-8")
        return self.config_path


def grid_frame(
    ids: Sequence[str],
    names: Sequence[str],
    cols: int,
    *,
    island: bool = False,
    crs: str = "EPSG:32630",
) -> Any:
    """Square districts on a grid (row-major); the last one far east when ``island``."""
    import geopandas as gpd
    from shapely.geometry import box

    x0, y0 = ORIGIN
    geoms = []
    n_grid = len(ids) - (1 if island else 0)
    for k in range(n_grid):
        col, row = k % cols, k // cols
        geoms.append(
            box(x0 + col * CELL, y0 + row * CELL, x0 + (col + 1) * CELL, y0 + (row + 1) * CELL)
        )
    if island:
        geoms.append(box(x0 + (cols + 3) * CELL, y0, x0 + (cols + 4) * CELL, y0 + CELL))
    frame = gpd.GeoDataFrame(
        {"district_id": list(ids), "district_name": list(names)}, geometry=geoms, crs="EPSG:32630"
    )
    return frame if crs == "EPSG:32630" else frame.to_crs(crs)


def table_rows(
    ids: Sequence[str], names: Sequence[str], weeks: Sequence[str], cols: int
) -> list[list[str]]:
    rows = []
    for w, week in enumerate(weeks):
        for d, ident in enumerate(ids):
            sites, ili, total = counts(d, w, cols)
            rows.append([ident, names[d], week, str(sites), str(ili), str(total)])
    return rows


def write_csv(path: Path, rows: Sequence[Sequence[str]], header: Sequence[str] = HEADER) -> Path:
    """RFC 4180 CSV (csv module quoting), UTF-8, LF line ends."""
    import csv

    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(rows)
    path.write_text(buffer.getvalue(), encoding="utf-8")
    return path


def make_week(
    folder: Path,
    *,
    names: Sequence[str] | None = None,
    cols: int = 4,
    rows: int = 3,
    island: bool = True,
    edit_table: Callable[[list[list[str]]], list[list[str]]] | None = None,
    edit_prior: Callable[[list[list[str]]], list[list[str]]] | None = None,
    table_names: Sequence[str] | None = None,
    ids: Sequence[str] | None = None,
    header: Sequence[str] = HEADER,
    weeks: Sequence[str] = WEEKS,
    system: str = "mmwr",
    pdf: bool = True,
    config: dict[str, dict[str, Any]] | None = None,
) -> Week:
    """Write an invented week into ``folder`` and return where everything is.

    ``names`` are the boundary names (what the report shows); ``table_names``
    (default: the same) are the names in the count tables. ``edit_table`` and
    ``edit_prior`` receive the body rows (header excluded, row i on line i+2)
    and return the rows to write, in the order of ``header``. ``weeks`` are
    the table's weeks (last week's table holds all but the last one).
    """
    folder.mkdir(parents=True, exist_ok=True)
    n = cols * rows + (1 if island else 0)
    ids = list(ids) if ids is not None else [f"D{k + 1:02d}" for k in range(n)]
    names = list(names) if names is not None else default_names(n)
    if len(names) != n:
        raise ValueError(f"need {n} names for a {cols}x{rows} grid{' + island' if island else ''}")
    tnames = list(table_names) if table_names is not None else names
    frame = grid_frame(ids, names, cols, island=island)
    boundaries = folder / "districts.gpkg"
    frame.to_file(boundaries, layer="districts", driver="GPKG")
    body = table_rows(ids, tnames, weeks, cols)
    prior_body = [r for r in body if r[2] != weeks[-1]]
    table = write_csv(
        folder / f"extract_{weeks[-1]}.csv", edit_table(body) if edit_table else body, header
    )
    prior = write_csv(
        folder / f"extract_{weeks[-2]}.csv",
        edit_prior(prior_body) if edit_prior else prior_body,
        header,
    )
    raw: dict[str, Any] = {
        "report": {
            "jurisdiction": "Region of Tessaly Marches",
            "contact": "Surveillance desk, invented health office",
            "top_districts_in_pdf": 50,
        },
        "input": {
            "table": table.name,
            "prior_table": prior.name,
            "boundaries": boundaries.name,
            "boundaries_layer": "districts",
            "inbox": ".",
            "inbox_pattern": "extract_*.csv",
        },
        "weeks": {"system": system, "season_start_week": 40},
        "analysis": {"min_visits": 50, "permutations": 199, "seed": 12345},
        "output": {"folder": "out", "archive": "archive", "pdf": pdf},
        "email": {
            "enabled": False,
            "host": "127.0.0.1",
            "port": 2525,
            "security": "none",
            "sender": "sitrep@tessaly.example",
            "recipients": ["epi-team@tessaly.example", "director@tessaly.example"],
            "subject_prefix": "[ILI]",
            "timeout_s": 5,
            "retries": 0,
            "retry_backoff_s": 0,
        },
    }
    week = Week(folder, folder / "sitrep.toml", ids, names, table, prior, boundaries, raw)
    week.write_config(**(config or {}))
    return week


def to_toml(raw: dict[str, dict[str, Any]]) -> str:
    """Minimal TOML writer for the configuration (tables of scalars, lists, sub-tables)."""

    def value(v: Any) -> str:
        return toml_value(v, ensure_ascii=False)

    lines: list[str] = []
    for section, values in raw.items():
        subs = {k: v for k, v in values.items() if isinstance(v, dict)}
        lines.append(f"[{section}]")
        lines += [f"{k} = {value(v)}" for k, v in values.items() if not isinstance(v, dict)]
        for name, sub in subs.items():
            lines.append(f"[{section}.{name}]")
            lines += [f"{k} = {value(v)}" for k, v in sub.items()]
        lines.append("")
    return "\n".join(lines)


def build(week: Week, **kwargs: Any) -> Any:
    """``pipeline.build`` on the week's configuration (today = TODAY)."""
    from sitrep import pipeline

    kwargs.setdefault("today", TODAY)
    return pipeline.build(week.config(), **kwargs)


def read_outputs(result: Any) -> dict[str, bytes]:
    """Every file the build wrote into the output folder, by relative name."""
    root = Path(result.outputs[0]).parent
    while not (root / "report.html").exists():
        root = root.parent
    return {str(p.relative_to(root)): p.read_bytes() for p in result.outputs}


def run_cli(args: Sequence[str]) -> tuple[int, str, str]:
    """``cli.main(args)`` with stdout and stderr captured."""
    from sitrep import cli

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = cli.main(list(args))
    return code, out.getvalue(), err.getvalue()


def tree_hashes(folder: Path) -> dict[str, str]:
    """SHA-256 of every file under ``folder`` (empty when it does not exist).

    sitrep's own cache of derived data (``.cache/`` under the archive root,
    e.g. spatial weights) is left out: it is not a report or a bundle. So is
    the archive's index page (``index.html``, ``_compare/``), rewritten after
    every build with the time it was checked.
    """
    if not folder.exists():
        return {}
    skipped = {".cache", "_compare"}
    return {
        str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
        and not skipped & set(p.relative_to(folder).parts)
        and p.relative_to(folder).as_posix() != "index.html"
    }


# --------------------------------------------------------------------------- scanners


def pdf_text(data: bytes) -> str:
    import pypdf

    return "\n".join(page.extract_text() for page in pypdf.PdfReader(io.BytesIO(data)).pages)


def squash(text: str) -> str:
    """Text without any whitespace (PDF extraction breaks lines inside table cells)."""
    return re.sub(r"\s+", "", text)


class HtmlScan(html.parser.HTMLParser):
    """What a browser would run or fetch, and the text it would show (html.parser)."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.scripts: list[str] = []
        self.urls: list[tuple[str, str, str]] = []
        self.handlers: list[tuple[str, str]] = []
        self.text: list[str] = []
        self.cells: list[str] = []
        self._script: list[str] | None = None
        self._skip = 0
        self._cell: list[str] | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        values = dict(attrs)
        self.tags.append((tag, values))
        for key, val in attrs:
            if key.startswith("on"):
                self.handlers.append((tag, key))
            if (
                key in ("src", "href", "action", "formaction", "data", "srcset", "xlink:href")
                and val
            ):
                self.urls.append((tag, key, val))
        if tag == "script":
            self._script = []
        if tag in ("script", "style"):
            self._skip += 1
        if tag in ("td", "th"):
            self._cell = []

    def handle_endtag(self, tag: str) -> None:
        if tag == "script" and self._script is not None:
            self.scripts.append("".join(self._script))
            self._script = None
        if tag in ("script", "style") and self._skip:
            self._skip -= 1
        if tag in ("td", "th") and self._cell is not None:
            self.cells.append("".join(self._cell).strip())
            self._cell = None

    def handle_data(self, data: str) -> None:
        if self._script is not None:
            self._script.append(data)
        if self._skip:
            return
        self.text.append(data)
        if self._cell is not None:
            self._cell.append(data)


def scan_html(text: str) -> HtmlScan:
    scan = HtmlScan()
    scan.feed(text)
    scan.close()
    return scan


# --------------------------------------------------------------------------- loopback servers


# Canary and png_1x1 live in http_fixtures.py (re-exported here for the hardening tests).


# --------------------------------------------------------------------------- PDF fonts

_HEX = re.compile(r"<([0-9A-Fa-f]+)>")


def _cmap_pairs(text: str, section: str) -> list[list[str]]:
    """Lines of the ``begin<section>`` ... ``end<section>`` blocks of a CMap, as tokens."""
    out: list[list[str]] = []
    for block in re.findall(rf"begin{section}(.*?)end{section}", text, flags=re.S):
        for line in block.strip().splitlines():
            if line.strip():
                out.append(re.findall(r"<[0-9A-Fa-f]+>|\[[^\]]*\]|\d+", line))
    return out


def _to_unicode(text: str) -> dict[int, str]:
    """code -> text of a ToUnicode CMap (bfchar and bfrange; PDF 32000-1 §9.10.3)."""
    mapping: dict[int, str] = {}

    def utf16(hexstr: str) -> str:
        return bytes.fromhex(hexstr).decode("utf-16-be", "replace")

    for tokens in _cmap_pairs(text, "bfchar"):
        mapping[int(tokens[0][1:-1], 16)] = utf16(tokens[1][1:-1])
    for tokens in _cmap_pairs(text, "bfrange"):
        lo, hi = int(tokens[0][1:-1], 16), int(tokens[1][1:-1], 16)
        if tokens[2].startswith("["):
            for k, dst in enumerate(_HEX.findall(tokens[2])):
                mapping[lo + k] = utf16(dst)
        else:
            start = tokens[2][1:-1]
            base = int(start, 16)
            for k in range(hi - lo + 1):
                mapping[lo + k] = utf16(f"{base + k:0{len(start)}x}")
    return mapping


def _code_to_cid(encoding: Any) -> Callable[[int], int]:
    """Code -> CID for a Type0 font: Identity-H, or an embedded CMap's cidchar/cidrange."""
    import pypdf

    if isinstance(encoding, pypdf.generic.NameObject):
        if str(encoding) not in ("/Identity-H", "/Identity-V"):
            raise AssertionError(f"unexpected predefined CMap {encoding}")
        return lambda code: code
    text = encoding.get_object().get_data().decode("latin-1")
    table: dict[int, int] = {}
    for tokens in _cmap_pairs(text, "cidchar"):
        table[int(tokens[0][1:-1], 16)] = int(tokens[1])
    for tokens in _cmap_pairs(text, "cidrange"):
        lo, hi, cid = int(tokens[0][1:-1], 16), int(tokens[1][1:-1], 16), int(tokens[2])
        for k in range(hi - lo + 1):
            table[lo + k] = cid + k
    return lambda code: table.get(code, 0)


def pdf_glyph_coverage(data: bytes) -> tuple[set[str], set[str]]:
    """(characters drawn with a real glyph, characters drawn as .notdef) in a PDF's Type0 fonts.

    For each composite font: code -> CID through its /Encoding, CID -> GID
    through /CIDToGIDMap (must be /Identity), code -> Unicode through
    /ToUnicode. GID 0 is the .notdef glyph (OpenType spec, 'glyf' / 'loca'
    tables): a character whose only codes reach GID 0 prints as a blank box.
    """
    import pypdf

    drawn: set[str] = set()
    notdef: set[str] = set()
    seen: set[int] = set()
    for page in pypdf.PdfReader(io.BytesIO(data)).pages:
        fonts = page.get("/Resources", {}).get("/Font", {})
        for ref in fonts.values():
            font = ref.get_object()
            if id(font) in seen or font.get("/Subtype") != "/Type0":
                continue
            seen.add(id(font))
            descendant = font["/DescendantFonts"][0].get_object()
            assert descendant.get("/CIDToGIDMap", "/Identity") == "/Identity"
            cid_of = _code_to_cid(font["/Encoding"])
            unicode_of = _to_unicode(font["/ToUnicode"].get_object().get_data().decode("latin-1"))
            for code, text in unicode_of.items():
                for ch in text:
                    (notdef if cid_of(code) == 0 else drawn).add(ch)
    return drawn, notdef - drawn
