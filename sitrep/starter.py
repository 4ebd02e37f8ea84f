"""``sitrep init``: propose a first configuration from a table and a boundary file.

The proposal reads only the table's header and a sample of its rows, and the
boundary layer's fields; it never changes the inputs. Every proposed value
that is not certain is written with a ``# GUESS`` comment saying what it was
inferred from, so the user knows what to check. The result is an ordinary
configuration (``load_config`` reads it; ``sitrep check`` and ``sitrep
build`` use it).

How columns are recognised (common practice, no published source):

- the district id: the table column whose values overlap most with the
  values of some boundary field (ids compared as stripped text); that field
  is the boundary id field. Names are matched the same way. This survives
  renamed and truncated headers (a Shapefile's dBASE field names are cut at
  10 characters);
- the week: a column of labels such as ``2026-W47``; else a year column
  (whole numbers 1900..2100) with a week-number column (1..53); else a
  column of dates, read as the week's first or last day from the weekday
  they fall on (Sunday or Saturday: MMWR weeks; Monday: ISO weeks);
- counts: whole-number columns, by words in the header (ILI / influenza-like;
  total, all, visits, patients, encounters; sites, clinics, providers), the
  ILI column being the one never above the total;
- a rate column: a number close to ILI / total x 100 (percent) or x 1000.
"""

from __future__ import annotations

import csv
import dataclasses
import datetime as dt
import io
import re
import unicodedata
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from sitrep.errors import InputError
from sitrep.starter_config import render_config, write_config

__all__ = ["Proposal", "propose", "render_config", "write_config"]

SAMPLE_ROWS = 5000
"""Rows of the table read to recognise columns."""

_LABEL = re.compile(r"^\s*(\d{4})\s*-?\s*W\s*(\d{1,2})\s*$", re.IGNORECASE)
_DATE_FORMATS = ("%Y-%m-%d", "%Y/%m/%d", "%d.%m.%Y")


@dataclasses.dataclass
class Proposal:
    """The proposed settings, each with the reason (a guess) or None (read, not guessed)."""

    table: Path
    boundaries: Path
    delimiter: str = ","
    encoding: str = "utf-8"
    sheet: str | None = None
    layer: str | None = None
    columns: dict[str, tuple[str, str | None]] = dataclasses.field(default_factory=dict)
    """ColumnMap key -> (column name as in the file, reason when guessed)."""
    boundaries_id: tuple[str, str | None] = ("district_id", None)
    boundaries_name: tuple[str | None, str | None] = (None, None)
    rate_scale: tuple[str, str | None] | None = None
    week_system: tuple[str, str] = ("mmwr", "the default; the week labels do not say")
    notes: list[str] = dataclasses.field(default_factory=list)
    """Things the user must settle that no setting can guess."""


# --------------------------------------------------------------------------- reading


def _norm(text: str) -> str:
    return re.sub(r"[^a-z0-9%]+", " ", unicodedata.normalize("NFKC", text).lower()).strip()


def _read_table_sample(path: Path, prop: Proposal) -> tuple[list[str], list[list[str]]]:
    """Header and up to SAMPLE_ROWS rows, as text."""
    ext = path.suffix.lower()
    if ext in (".csv", ".txt"):
        data = path.read_bytes()
        try:
            text = data.decode("utf-8-sig")
        except UnicodeDecodeError:
            text = data.decode("latin-1")
            prop.encoding = "latin-1"
            prop.notes.append(
                "the table is not UTF-8; input.encoding is set to 'latin-1' (a GUESS: check "
                "accented names in the report)"
            )
        first = text.split("\n", 1)[0]
        prop.delimiter = max((",", ";", "\t", "|"), key=first.count)
        reader = csv.reader(io.StringIO(text), delimiter=prop.delimiter)
        rows = []
        header: list[str] | None = None
        for row in reader:
            if header is None:
                if any(c.strip() for c in row):
                    header = row
                continue
            rows.append(row)
            if len(rows) >= SAMPLE_ROWS:
                break
        return header or [], rows
    if ext == ".xlsx":
        import openpyxl

        book = openpyxl.load_workbook(path, read_only=True, data_only=True)
        try:
            best: tuple[int, str, list[str], list[list[str]]] | None = None
            for sheet in book.worksheets:
                header, rows = [], []
                for values in sheet.iter_rows(values_only=True):
                    cells = ["" if v is None else _cell_text(v) for v in values]
                    if not header:
                        if any(c.strip() for c in cells):
                            header = cells
                        continue
                    rows.append(cells)
                    if len(rows) >= SAMPLE_ROWS:
                        break
                while header and not header[-1].strip():
                    header.pop()
                score = len(rows) * len(header)
                if best is None or score > best[0]:
                    best = (score, sheet.title, header, rows)
            if best is None:
                return [], []
            if len(book.worksheets) > 1:
                prop.sheet = best[1]
            return best[2], best[3]
        finally:
            book.close()
    if ext in (".parquet", ".pq"):
        import pyarrow.parquet as pq

        table = pq.read_table(path)
        names = list(table.column_names)
        cols = [table.column(n).to_pylist()[:SAMPLE_ROWS] for n in names]
        return names, [
            ["" if v is None else _cell_text(v) for v in row] for row in zip(*cols, strict=True)
        ]
    raise InputError(f"expected a .csv, .txt, .xlsx or .parquet table, got {path.name}")


def _cell_text(v: Any) -> str:
    if isinstance(v, dt.datetime):
        return v.date().isoformat()
    if isinstance(v, dt.date):
        return v.isoformat()
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    return str(v)


def _read_boundary_fields(path: Path, prop: Proposal) -> dict[str, list[str]]:
    """Text values of every attribute field of the boundary layer."""
    import pyogrio

    layer = None
    if path.suffix.lower() == ".gpkg":
        layers = [(str(name), str(kind)) for name, kind in pyogrio.list_layers(path)]
        polygons = [n for n, kind in layers if "polygon" in kind.lower()] or [n for n, _ in layers]
        if not polygons:
            raise InputError(f"the GeoPackage {path.name} holds no layer")
        layer = polygons[0]
        prop.layer = layer
        if len(polygons) > 1:
            prop.notes.append(
                f"the GeoPackage has several polygon layers ({', '.join(polygons)}); the first "
                "is used (input.boundaries_layer, a GUESS)"
            )
    frame = pyogrio.read_dataframe(path, layer=layer, read_geometry=False)
    return {
        str(c): ["" if v is None else _cell_text(v).strip() for v in frame[c]]
        for c in frame.columns
    }


# --------------------------------------------------------------------------- recognising


def _integers(values: Sequence[str]) -> list[int] | None:
    out = []
    for v in values:
        s = v.strip().replace(",", "")
        if not s:
            continue
        try:
            f = float(s)
        except ValueError:
            return None
        if not f.is_integer():
            return None
        out.append(int(f))
    return out or None


def _numbers(values: Sequence[str]) -> list[float | None] | None:
    out: list[float | None] = []
    for v in values:
        s = v.strip().replace(",", ".") if v.count(",") == 1 and "." not in v else v.strip()
        if not s:
            out.append(None)
            continue
        try:
            out.append(float(s))
        except ValueError:
            return None
    return out


def _dates(values: Sequence[str]) -> list[dt.date] | None:
    out = []
    for v in values:
        s = v.strip()[:10]
        if not s:
            continue
        for fmt in _DATE_FORMATS:
            try:
                out.append(dt.datetime.strptime(s, fmt).date())
                break
            except ValueError:
                continue
        else:
            return None
    return out or None


def _has(header: str, *words: str) -> bool:
    tokens = _norm(header).split()
    text = " ".join(tokens)
    return any(w in tokens or (len(w) > 3 and w in text) for w in words)


def propose(table: Path, boundaries: Path) -> Proposal:
    """Read the headers and fields and propose a configuration (see the module notes).

    Raises
    ------
    InputError
        If a file cannot be read or no district id can be matched.
    """
    table, boundaries = Path(table), Path(boundaries)
    for p in (table, boundaries):
        if not p.is_file():
            raise InputError(f"{p} is not a file")
    prop = Proposal(table=table, boundaries=boundaries)
    header, rows = _read_table_sample(table, prop)
    if not header or not rows:
        raise InputError(f"{table.name} has no header row and data rows to read")
    cols = {
        h: [(r[i] if i < len(r) else "") for r in rows] for i, h in enumerate(header) if h.strip()
    }
    fields = _read_boundary_fields(boundaries, prop)
    _propose_id(prop, cols, fields)
    _propose_names(prop, cols, fields)
    _propose_week(prop, cols)
    _propose_counts(prop, cols)
    _propose_rate(prop, cols)
    unused = [h for h in cols if h not in _taken(prop)]
    if unused:
        prop.notes.append(f"columns not used: {', '.join(unused)}")
    return prop


Columns = dict[str, list[str]]
"""The sampled table: header -> cell texts."""


def _taken(prop: Proposal) -> set[str]:
    """The table columns already given a role."""
    return {column for column, _ in prop.columns.values()}


def _take(prop: Proposal, key: str, column: str, reason: str | None) -> None:
    prop.columns[key] = (column, reason)


def _propose_id(prop: Proposal, cols: Columns, fields: Columns) -> None:
    """The district id column and boundary id field: the best overlap of their values."""
    best = (0.0, "", "")
    for h, values in cols.items():
        vs = {v.strip() for v in values if v.strip()}
        if not vs:
            continue
        for f, fvalues in fields.items():
            fv = {v for v in fvalues if v}
            if not fv:
                continue
            share = len(vs & fv) / len(vs)
            bonus = 0.01 if _has(h, "id", "code") else 0.0
            if share + bonus > best[0]:
                best = (share + bonus, h, f)
    if best[0] < 0.5:
        raise InputError(
            f"no column of {prop.table.name} shares its values with a field of "
            f"{prop.boundaries.name} (table columns: {', '.join(cols)}; boundary fields: "
            f"{', '.join(fields)}); the district ids must be written the same way in both"
        )
    share = min(best[0], 1.0)
    _take(
        prop,
        "district_id",
        best[1],
        f"{share:.0%} of its values are ids in the boundary field {best[2]!r}",
    )
    prop.boundaries_id = (best[2], f"the field whose values match the table's {best[1]!r}")


def _propose_names(prop: Proposal, cols: Columns, fields: Columns) -> None:
    """The district name column and field: text values matching another boundary field, else
    a header word."""
    id_field, taken = prop.boundaries_id[0], _taken(prop)
    name_col = None
    for h, values in cols.items():
        if h in taken or _numbers(values) is not None:
            continue
        vs = {v.strip() for v in values if v.strip()}
        for f, fvalues in fields.items():
            if f == id_field:
                continue
            if vs and len(vs & set(fvalues)) / len(vs) >= 0.5:
                name_col = h
                prop.boundaries_name = (f, f"the field whose values match the table's {h!r}")
                break
        if name_col:
            break
    if name_col is None:
        for h, values in cols.items():
            if (
                h not in taken
                and _has(h, "name", "district", "area", "region")
                and _numbers(values) is None
            ):
                name_col = h
                break
    if prop.boundaries_name[0] is None:
        for f, fvalues in fields.items():
            if f != id_field and _has(f, "name", "nam", "label") and _numbers(fvalues) is None:
                prop.boundaries_name = (f, "a text field whose name suggests district names")
                break
    if name_col is not None:
        _take(prop, "district_name", name_col, "a text column of names")


def _propose_week(prop: Proposal, cols: Columns) -> None:
    """The week: labels, else year and week-number columns, else dates; an ISO header."""
    if not (_week_by_label(prop, cols) or _week_by_number(prop, cols)):
        _week_by_date(prop, cols)
    if not any(k in prop.columns for k in ("week", "year", "week_start", "week_end")):
        raise InputError(
            f"no week column was recognised in {prop.table.name} (columns: {', '.join(cols)}); "
            "expected week labels (2026-W47), year and week-number columns, or dates"
        )
    for h in cols:
        if "iso" in _norm(h).split() and any(k in prop.columns for k in ("week", "week_number")):
            prop.week_system = ("iso", f"the header {h!r} says ISO")


def _week_by_label(prop: Proposal, cols: Columns) -> bool:
    taken = _taken(prop)
    label = next(
        (
            h
            for h, v in cols.items()
            if h not in taken
            and all(_LABEL.match(x) for x in v if x.strip())
            and any(x.strip() for x in v)
        ),
        None,
    )
    if label is not None:
        _take(prop, "week", label, "values are epi-week labels like 2026-W47")
    return label is not None


def _week_by_number(prop: Proposal, cols: Columns) -> bool:
    taken = _taken(prop)
    year = week = None
    for h, v in cols.items():
        ints = _integers(v) if h not in taken else None
        if ints and all(1900 <= x <= 2100 for x in ints) and _has(h, "year", "yr", "season"):
            year = h
            break
    for h, v in cols.items():
        ints = _integers(v) if h not in taken and h != year else None
        if ints and all(1 <= x <= 53 for x in ints) and _has(h, "week", "wk", "epiweek", "epi"):
            week = h
            break
    if year and week:
        _take(prop, "year", year, "whole numbers 1900..2100 under a year-like header")
        _take(prop, "week_number", week, "whole numbers 1..53 under a week-like header")
        return True
    return False


def _week_by_date(prop: Proposal, cols: Columns) -> None:
    taken = _taken(prop)
    for h, v in cols.items():
        days = _dates(v) if h not in taken else None
        if not days:
            continue
        weekdays = {d.weekday() for d in days}
        ending = _has(h, "end", "ending", "to")
        if weekdays == {6}:  # Sunday: MMWR start (or ISO end)
            key, system = ("week_end", "iso") if ending else ("week_start", "mmwr")
        elif weekdays == {5}:  # Saturday: MMWR end
            key, system = "week_end", "mmwr"
        elif weekdays == {0}:  # Monday: ISO start
            key, system = "week_start", "iso"
        else:
            continue
        _take(prop, key, h, f"dates that all fall on a {days[0]:%A}")
        prop.week_system = (system, f"the dates fall on {days[0]:%A}s")
        break


def _propose_counts(prop: Proposal, cols: Columns) -> None:
    """ILI, total and sites: whole-number columns by header words; ILI never above total."""
    taken = _taken(prop)
    counts: dict[str, list[int]] = {}
    for h, v in cols.items():
        whole = _integers(v) if h not in taken else None
        if whole is not None and all(x >= 0 for x in whole):
            counts[h] = whole
    ili = next(
        (
            h
            for h in counts
            if _has(h, "ili", "influenza", "flu") and not _has(h, "%", "pct", "percent", "rate")
        ),
        None,
    )
    total = next(
        (
            h
            for h in counts
            if h != ili
            and _has(h, "total", "all", "visits", "patients", "encounters", "consultations", "seen")
            and not _has(h, "site", "sites", "clinic", "provider")
        ),
        None,
    )
    if ili and total:
        pairs = list(zip(cols[ili], cols[total], strict=True))
        if all(float(a or 0) <= float(b or 0) for a, b in pairs):
            _take(prop, "ili_visits", ili, "whole numbers under an ILI header")
            _take(prop, "total_visits", total, "whole numbers, never below the ILI column")
        else:
            _take(prop, "ili_visits", total, "the smaller of the two count columns")
            _take(prop, "total_visits", ili, "the larger of the two count columns")
    if "ili_visits" not in prop.columns or "total_visits" not in prop.columns:
        raise InputError(
            f"the ILI and total visit columns were not recognised in {prop.table.name} "
            f"(columns: {', '.join(cols)}); set input.columns.ili_visits and total_visits by hand"
        )
    taken = _taken(prop)
    sites = next(
        (
            h
            for h in counts
            if h not in taken
            and _has(h, "site", "sites", "clinic", "clinics", "provider", "providers", "practices")
        ),
        None,
    )
    if sites:
        _take(prop, "reporting_sites", sites, "whole numbers under a sites header")


def _propose_rate(prop: Proposal, cols: Columns) -> None:
    """A supplied rate: numbers close to ILI / total x 100 (percent) or x 1000."""
    taken = _taken(prop)
    ili_v, tot_v = cols[prop.columns["ili_visits"][0]], cols[prop.columns["total_visits"][0]]
    for h, v in cols.items():
        nums = _numbers(v) if h not in taken else None
        if nums is None:
            continue
        for scale, factor in (("percent", 100.0), ("per_1000", 1000.0)):
            close = []
            for x, a, b in zip(nums, ili_v, tot_v, strict=True):
                try:
                    expected = float(a) / float(b) * factor
                except (ValueError, ZeroDivisionError):
                    continue
                if x is not None:
                    close.append(abs(x - expected) <= max(0.05, 0.01 * expected))
            if close and sum(close) / len(close) >= 0.9:
                _take(prop, "rate", h, f"numbers close to ILI / total x {factor:g}")
                prop.rate_scale = (scale, f"the values match ILI / total x {factor:g}")
                return
