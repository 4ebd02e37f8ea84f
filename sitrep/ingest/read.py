"""Read weekly count tables (CSV, XLSX, Parquet) into a typed :class:`CountTable`.

This module is the only reader of rate tables. Reading is stage 1 of
validation: every cell is parsed and typed, and *all* cells that fail are
returned as findings before any value rule runs (those live in
:mod:`sitrep.ingest.validate`). Bad content never raises; only a file that
cannot be opened at all raises :class:`~sitrep.errors.InputError`.
"""

from __future__ import annotations

import csv
import dataclasses
import datetime as dt
import difflib
import hashlib
import io
import re
import unicodedata
import warnings
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np
import pandas as pd

from sitrep.config import ColumnMap, InputSettings
from sitrep.errors import InputError
from sitrep.ingest.findings import FindingCollector, line_list
from sitrep.ingest.rules import Stage, descriptions
from sitrep.model import CountTable, InputFile, Severity, SourceColumns, ValidationReport
from sitrep.weeks import EpiWeek, WeekSystem

__all__ = ["RULES", "pad_id", "read_count_table"]

RULES: tuple[tuple[str, str], ...] = descriptions(Stage.TABLE_FILE)
"""Rule ids of the table reader with one-line descriptions (from the registry)."""

_CSV_EXT = {".csv", ".txt"}
_XLSX_EXT = {".xlsx"}
_PARQUET_EXT = {".parquet", ".pq"}
_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")
_MB = 1_000_000
_EXACT_FLOAT = 2**53  # every integer below this is exactly representable as a float
_DIGITS = re.compile(r"^-?\d+$")


class BadWeek(NamedTuple):
    """A week cell that cannot be read: the rule it breaks and the message."""

    rule: str
    message: str


@dataclasses.dataclass(frozen=True)
class _Col:
    """One column as text, dictionary-encoded: cell i is ``uniques[codes[i]]``."""

    codes: np.ndarray  # integer codes into uniques
    uniques: np.ndarray  # object array of str ("" for an empty cell)

    @classmethod
    def of(cls, values: Sequence[str] | np.ndarray) -> _Col:
        codes, uniques = pd.factorize(np.asarray(values, dtype=object), use_na_sentinel=False)
        return cls(codes, np.asarray(uniques, dtype=object))

    def text(self, i: int) -> str:
        return str(self.uniques[self.codes[i]])

    def take(self, keep: np.ndarray) -> _Col:
        return _Col(self.codes[keep], self.uniques)

    def __len__(self) -> int:
        return len(self.codes)


@dataclasses.dataclass
class _Raw:
    """A table as text: header names, one text column per header cell, source lines."""

    header: list[str]
    columns: list[_Col]
    lines: np.ndarray  # int64, 1-based line of each row (header = 1)
    numeric_id_cells: dict[int, np.ndarray] = dataclasses.field(default_factory=dict)
    """Column position -> boolean mask of cells stored as numbers (XLSX)."""
    numeric_columns: set[int] = dataclasses.field(default_factory=set)
    """Column positions whose whole storage type is numeric (Parquet)."""


def read_count_table(
    path: Path, settings: InputSettings, system: WeekSystem, *, role: str = "table"
) -> tuple[CountTable | None, ValidationReport]:
    """Read a weekly count table and type every cell (validation stage 1).

    The file type is chosen by extension: ``.csv``/``.txt`` (text, decoded
    with ``settings.encoding``; ``"utf-8"`` also accepts a byte-order mark;
    fields split on ``settings.delimiter``), ``.xlsx`` (worksheet
    ``settings.sheet`` or the first one; cached values of formulas) and
    ``.parquet``/``.pq``. The size cap ``settings.max_input_mb`` (1 MB =
    10**6 bytes) is checked on the file's size before any byte is parsed.

    Every cell is read as text first. District ids and names are Unicode
    NFC-normalised and, when ``settings.strip_id_whitespace``, stripped of
    surrounding whitespace; ids stay text (leading zeros kept). Counts must be
    plain decimal numbers in the declared ``settings.decimal`` notation
    (``12``, ``-3``, ``12.0``; no thousands separators, signs such as ``%``
    or ``<5``, or exponents); an integral decimal such as ``12.0`` is read as
    12. The week comes from the columns named in ``settings.columns``:
    ``year`` + ``week_number``, else ``week_start`` or ``week_end`` (ISO
    dates ``YYYY-MM-DD``, which must fall on the first or last weekday of
    ``system``), else the ``week`` label (``2026-W47``). Rows whose cells are
    all empty (e.g. a trailing ``,,,,,`` line) are skipped.

    Parameters
    ----------
    path : pathlib.Path
        The table file.
    settings : InputSettings
        Encoding, delimiter, decimal mark, sheet, id rule, size cap, column map.
    system : WeekSystem
        The declared week-numbering system of the table.
    role : str, optional
        Provenance role recorded in :class:`~sitrep.model.InputFile`.

    Returns
    -------
    tuple of (CountTable or None, ValidationReport)
        The typed table (``None`` when any stage-1 error was found) and every
        stage-1 finding, sorted by file, line, column and rule. The frame is
        sorted by week then district id; its ``week`` column is an ordered
        categorical of :class:`~sitrep.weeks.EpiWeek`; a supplied rate column
        is added as ``rate_percent`` (converted to percent from
        ``columns.rate_scale``); ``CountTable.columns`` gives the names of
        the columns in the file.

    Raises
    ------
    InputError
        Only when the file cannot be opened (missing, a folder, no
        permission); the message names the path.

    Notes
    -----
    Lines are 1-based with the header as line 1, as a text editor shows them.
    For XLSX they are worksheet row numbers; for Parquet, row index + 2 (the
    line the row would have in a CSV export). Numeric id cells (XLSX numbers,
    Parquet numeric columns) holding whole numbers are read as their digits
    and their lines recorded in ``CountTable.numeric_id_lines``, so that
    the boundary check can tell a lost leading zero (``id-leading-zeros``)
    from a match; any other number is an ``id-numeric`` error. With
    ``settings.id_zero_pad = K``, all-digit ids shorter than K digits are
    left-padded with zeros (one ``id-zero-padded`` note).
    """
    path = Path(path)
    out = FindingCollector(path.name)
    try:
        size = path.stat().st_size
    except OSError as exc:
        raise InputError(f"cannot open the {role} file {path}: {exc.strerror or exc}") from exc
    if path.is_dir():
        raise InputError(f"the {role} file {path} is a folder; give the path of a file")
    limit = settings.max_input_mb * _MB
    if size > limit:
        out.error(
            "file-too-large",
            f"the file is {size / _MB:,.1f} MB, above the cap of {settings.max_input_mb:g} MB "
            "(input.max_input_mb); it was not parsed. Check that this is the right file, "
            "or raise input.max_input_mb",
            value=str(size),
        )
        return None, out.report()
    ext = path.suffix.lower()
    if ext not in _CSV_EXT | _XLSX_EXT | _PARQUET_EXT:
        out.error(
            "file-format-unknown",
            f"expected a .csv, .txt, .xlsx, .parquet or .pq file, got '{path.suffix or '(none)'}'; "
            "save the table in one of these formats",
            value=path.suffix,
        )
        return None, out.report()
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read the {role} file {path}: {exc.strerror or exc}") from exc
    source = InputFile(role, path, hashlib.sha256(data).hexdigest(), len(data))

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        if ext in _CSV_EXT:
            raw = _read_csv(data, settings, out)
        elif ext in _XLSX_EXT:
            raw = _read_xlsx(data, settings, out)
        else:
            raw = _read_parquet(data, settings, out)
    for w in caught:
        out.add(
            Severity.INFO,
            "reader-warning",
            f"the file reader warned: {w.message}",
        )
    if raw is None:
        return None, out.report()
    typed = _type_table(raw, settings, system, out)
    if typed is None or out.has_errors:
        return None, out.report()
    table = CountTable(
        frame=typed.frame,
        system=system,
        source=source,
        columns=typed.columns,
        numeric_id_lines=typed.numeric_id_lines,
    )
    return table, out.report()


# --------------------------------------------------------------------------- readers


def _decode(data: bytes, encoding: str, out: FindingCollector, delimiter: str = ",") -> str | None:
    codec = "utf-8-sig" if encoding.lower().replace("_", "-") in ("utf-8", "utf8") else encoding
    try:
        return data.decode(codec)
    except LookupError:
        out.error(
            "file-encoding",
            f"input.encoding = {encoding!r} is not a known text encoding; use e.g. 'utf-8', "
            "'latin-1' or 'cp1252'",
            value=encoding,
        )
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        line_start = data.rfind(b"\n", 0, exc.start) + 1
        col = exc.start - line_start + 1
        bad = data[exc.start : exc.end].hex(" ")
        column = _column_at(data, line_start, exc.start, delimiter)
        where = f" in column {column!r}" if column else ""
        out.error(
            "file-encoding",
            f"line {line} is not valid {encoding} (byte 0x{bad} at character {col}{where}); the "
            "file was probably saved in another encoding. Set input.encoding to the file's "
            "encoding (for example 'latin-1' or 'cp1252') or re-save it as UTF-8",
            line=line,
            column=column,
            value=f"0x{bad}",
        )
    return None


def _column_at(data: bytes, line_start: int, position: int, delimiter: str) -> str | None:
    """Header name of the field that byte ``position`` (on the line starting at ``line_start``)
    falls in, counting fields with the csv module on text decoded with replacement."""
    header_end = data.find(b"\n")
    header_bytes = data[: header_end if header_end >= 0 else len(data)]
    if header_bytes.startswith(b"\xef\xbb\xbf"):
        header_bytes = header_bytes[3:]
    try:
        header = next(
            csv.reader([header_bytes.decode("utf-8", "replace").rstrip("\r")], delimiter=delimiter)
        )
        before = data[line_start:position].decode("utf-8", "replace")
        fields = next(csv.reader([before + "x"], delimiter=delimiter))
    except (csv.Error, StopIteration):
        return None
    index = len(fields) - 1
    return _nfc(header[index]).strip() if 0 <= index < len(header) else None


def _read_csv(data: bytes, settings: InputSettings, out: FindingCollector) -> _Raw | None:
    text = _decode(data, settings.encoding, out, settings.delimiter)
    if text is None:
        return None
    if not text.strip():
        out.error(
            "file-empty",
            "the file is empty; expected a header line and one row per district and week. "
            "Check that the export finished",
        )
        return None
    utf8 = settings.encoding.lower().replace("_", "-") in ("utf-8", "utf8")
    if utf8:
        utf8_bytes = data[3:] if data.startswith(b"\xef\xbb\xbf") else data
    else:
        utf8_bytes = text.encode("utf-8")
    raw = _csv_fast(utf8_bytes, text, settings.delimiter)
    if raw is None:
        raw = _csv_exact(text, settings.delimiter, out)
    return raw


def _csv_fast(data: bytes, text: str, delimiter: str) -> _Raw | None:
    """Parse with pyarrow; return None (use the exact parser) if lines may not map 1:1.

    ``data`` is ``text`` encoded as UTF-8 (without a byte-order mark).
    """
    import pyarrow as pa
    import pyarrow.csv as pacsv

    end = text.find("\n")
    try:
        first = next(csv.reader(io.StringIO(text if end < 0 else text[:end]), delimiter=delimiter))
    except (csv.Error, StopIteration):
        return None
    n = len(first)
    names = [f"c{i}" for i in range(n)]
    try:
        table = pacsv.read_csv(
            io.BytesIO(data),
            read_options=pacsv.ReadOptions(column_names=names),
            parse_options=pacsv.ParseOptions(delimiter=delimiter, ignore_empty_lines=True),
            convert_options=pacsv.ConvertOptions(
                column_types={c: pa.string() for c in names},
                strings_can_be_null=False,
                quoted_strings_can_be_null=False,
            ),
        )
    except (pa.ArrowInvalid, pa.ArrowException):
        return None
    lines = _nonblank_lines(data)
    if lines is None or len(lines) != table.num_rows:
        return None  # a record spans lines (quoted newline) or odd line endings
    header_row = [table.column(i)[0].as_py() for i in range(n)]
    columns = [_arrow_col(table.column(i).slice(1)) for i in range(n)]
    return _Raw(header=header_row, columns=columns, lines=lines[1:])


def _arrow_col(col: Any) -> _Col:
    """Arrow column -> dictionary-encoded text column (each distinct value converted once)."""
    import pyarrow.compute as pc

    enc = pc.dictionary_encode(col).combine_chunks()
    uniques = list(enc.dictionary.to_pylist())
    if enc.null_count:
        uniques.append("")
    indices = enc.indices.fill_null(len(uniques) - 1) if enc.null_count else enc.indices
    codes = indices.to_numpy(zero_copy_only=False)
    return _Col(codes, np.array(uniques, dtype=object))


def _nonblank_lines(data: bytes) -> np.ndarray | None:
    """1-based numbers of the lines that are not empty (LF or CRLF endings only)."""
    if b"\r" in data and data.count(b"\r") != data.count(b"\r\n"):
        return None  # bare CR line endings: let the exact parser count
    if b"\n\n" not in data and b"\n\r\n" not in data and not data.startswith((b"\n", b"\r\n")):
        n = data.count(b"\n") + (0 if data.endswith(b"\n") else 1)
        return np.arange(1, n + 1, dtype=np.int64)
    arr = np.frombuffer(data, dtype=np.uint8)
    ends = np.flatnonzero(arr == 10)
    if len(data) and not data.endswith(b"\n"):
        ends = np.append(ends, len(data))
    starts = np.concatenate(([0], ends[:-1] + 1))
    length = ends - starts
    has_cr = np.zeros(len(ends), dtype=bool)
    inside = ends < len(data)
    has_cr[inside] = arr[np.maximum(ends[inside] - 1, 0)] == 13
    length = length - has_cr
    return (np.flatnonzero(length > 0) + 1).astype(np.int64)


def _csv_exact(text: str, delimiter: str, out: FindingCollector) -> _Raw | None:
    """Parse with the csv module, which knows each record's first line."""
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, strict=True)
    header: list[str] | None = None
    rows: list[list[str]] = []
    lines: list[int] = []
    start = 1
    try:
        for record in reader:
            if not record:
                start = reader.line_num + 1
                continue
            if header is None:
                header = record
            else:
                if len(record) != len(header) and any(c.strip() for c in record):
                    out.error(
                        "row-field-count",
                        f"expected {len(header)} fields as in the header, got {len(record)}; "
                        f"check for a stray or missing {delimiter!r} (or an unquoted "
                        f"{delimiter!r} inside a name) on this line",
                        line=start,
                        value=str(len(record)),
                    )
                record = (record + [""] * len(header))[: len(header)]
                rows.append(record)
                lines.append(start)
            start = reader.line_num + 1
    except csv.Error as exc:
        out.error(
            "file-unparseable",
            f"the CSV cannot be parsed near line {reader.line_num}: {exc}; check the quoting "
            "on that line",
            line=reader.line_num,
        )
        return None
    if header is None:
        out.error("file-empty", "the file holds only blank lines; expected a header and rows")
        return None
    columns = [_Col.of([r[i] for r in rows]) for i in range(len(header))]
    return _Raw(header=header, columns=columns, lines=np.array(lines, dtype=np.int64))


def _number_text(value: float | int, decimal: str) -> str:
    if isinstance(value, bool):
        return str(value)
    if isinstance(value, int):
        return str(value)
    if float(value).is_integer() and abs(value) < _EXACT_FLOAT:
        return str(int(value))
    return repr(float(value)).replace(".", decimal)


def _read_xlsx(data: bytes, settings: InputSettings, out: FindingCollector) -> _Raw | None:
    import openpyxl

    if not data:
        out.error("file-empty", "the file holds no bytes; expected an XLSX workbook")
        return None
    try:
        book = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    except Exception as exc:  # openpyxl raises many unrelated types for corrupt files
        out.error(
            "file-unparseable",
            f"the file is not a readable XLSX workbook ({type(exc).__name__}: {exc}); "
            "re-save it from the spreadsheet program as .xlsx",
        )
        return None
    try:
        if settings.sheet is not None and settings.sheet not in book.sheetnames:
            out.error(
                "sheet-missing",
                f"expected a worksheet named {settings.sheet!r} (input.sheet), got sheets "
                f"{', '.join(map(repr, book.sheetnames))}; set input.sheet to one of these",
                value=settings.sheet,
            )
            return None
        sheet = book[settings.sheet] if settings.sheet is not None else book.worksheets[0]
        if settings.sheet is None and len(book.worksheets) > 1:
            cmap = settings.columns
            wanted = [
                _nfc(c).strip() for c in (cmap.district_id, cmap.ili_visits, cmap.total_visits)
            ]
            if not set(wanted) <= set(_sheet_header(sheet)):
                other = next(
                    (
                        ws.title
                        for ws in book.worksheets[1:]
                        if set(wanted) <= set(_sheet_header(ws))
                    ),
                    None,
                )
                if other is not None:
                    out.error(
                        "sheet-elsewhere",
                        f"the first worksheet {sheet.title!r} lacks the configured columns "
                        f"({', '.join(map(repr, wanted))}) but worksheet {other!r} has them; set "
                        f"input.sheet = {other!r} to read it (sitrep reads the first worksheet "
                        "unless input.sheet names another)",
                        value=other,
                    )
                    return None
        id_name = _nfc(settings.columns.district_id)
        header: list[str] | None = None
        id_pos: int | None = None
        cols: list[list[str]] = []
        numeric_id: list[bool] = []
        lines: list[int] = []
        for number, values in enumerate(sheet.iter_rows(values_only=True), start=1):
            cells = list(values)
            if header is None:
                if not any(v is not None and str(v).strip() for v in cells):
                    continue
                while cells and (cells[-1] is None or str(cells[-1]).strip() == ""):
                    cells.pop()
                header = ["" if v is None else str(v) for v in cells]
                names = [_nfc(h).strip() for h in header]
                id_pos = names.index(id_name) if id_name in names else None
                cols = [[] for _ in header]
                continue
            cells = (cells + [None] * len(header))[: len(header)]
            for i, v in enumerate(cells):
                if v is None:
                    text = ""
                elif isinstance(v, (dt.datetime, dt.date)):
                    text = (v.date() if isinstance(v, dt.datetime) else v).isoformat()
                elif isinstance(v, (int, float)) and not isinstance(v, bool):
                    text = _number_text(v, settings.decimal)
                else:
                    text = str(v)
                cols[i].append(text)
            numeric_id.append(
                id_pos is not None
                and isinstance(cells[id_pos], (int, float))
                and not isinstance(cells[id_pos], bool)
            )
            lines.append(number)
    finally:
        book.close()
    if header is None:
        out.error("file-empty", "the worksheet is empty; expected a header row and data rows")
        return None
    raw = _Raw(
        header=header,
        columns=[_Col.of(c) for c in cols],
        lines=np.array(lines, dtype=np.int64),
    )
    if id_pos is not None:
        raw.numeric_id_cells[id_pos] = np.array(numeric_id, dtype=bool)
    return raw


def _sheet_header(sheet: Any) -> list[str]:
    """The first non-empty row of a worksheet, as stripped NFC text."""
    for values in sheet.iter_rows(values_only=True):
        if any(v is not None and str(v).strip() for v in values):
            return [_nfc(str(v)).strip() for v in values if v is not None]
    return []


def _read_parquet(data: bytes, settings: InputSettings, out: FindingCollector) -> _Raw | None:
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.parquet as pq

    if not data:
        out.error("file-empty", "the file holds no bytes; expected a Parquet file")
        return None
    try:
        table = pq.read_table(io.BytesIO(data))
    except (pa.ArrowException, OSError, ValueError) as exc:
        out.error(
            "file-unparseable",
            f"the file is not a readable Parquet file ({exc}); re-export it",
        )
        return None
    header = list(table.column_names)
    columns: list[_Col] = []
    numeric: set[int] = set()
    for i, name in enumerate(header):
        col = table.column(name)
        kind = col.type
        if pa.types.is_integer(kind) or pa.types.is_floating(kind) or pa.types.is_decimal(kind):
            numeric.add(i)
        enc = pc.dictionary_encode(col).combine_chunks()
        uniques = [_cell_text(v, settings.decimal) for v in enc.dictionary.to_pylist()]
        codes = enc.indices.fill_null(len(uniques)).to_numpy(zero_copy_only=False)
        columns.append(_Col(codes, np.array(uniques + [""], dtype=object)))
    lines = np.arange(2, table.num_rows + 2, dtype=np.int64)
    return _Raw(header=header, columns=columns, lines=lines, numeric_columns=numeric)


def _cell_text(value: Any, decimal: str) -> str:
    if value is None:
        return ""
    if isinstance(value, (dt.datetime, dt.date)):
        return (value.date() if isinstance(value, dt.datetime) else value).isoformat()
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return _number_text(value, decimal)
    return str(value)


# --------------------------------------------------------------------------- typing


def _nfc(text: str) -> str:
    return unicodedata.normalize("NFC", text)


def _opt(name: str | None) -> str | None:
    return name if name else None


def _week_spec(cmap: ColumnMap, out: FindingCollector) -> tuple[str, list[str]] | None:
    """Which week representation the column map declares: kind and column names."""
    alternatives: list[tuple[str, list[str]]] = []
    year, number = _opt(cmap.year), _opt(cmap.week_number)
    if year or number:
        if not (year and number):
            out.error(
                "week-columns-ambiguous",
                "columns.year and columns.week_number must be set together; got only "
                f"{'year' if year else 'week_number'}. Set both, or use columns.week",
            )
            return None
        alternatives.append(("year-week", [year, number]))
    if _opt(cmap.week_start):
        alternatives.append(("start", [cmap.week_start]))  # type: ignore[list-item]
    if _opt(cmap.week_end):
        alternatives.append(("end", [cmap.week_end]))  # type: ignore[list-item]
    if len(alternatives) > 1:
        out.error(
            "week-columns-ambiguous",
            "the column map declares more than one way to give the week ("
            + ", ".join(k for k, _ in alternatives)
            + "); keep exactly one of year+week_number, week_start or week_end",
        )
        return None
    if alternatives:
        return alternatives[0]
    if _opt(cmap.week):
        return ("label", [cmap.week])  # type: ignore[list-item]
    out.error(
        "week-columns-ambiguous",
        "the column map names no week column; set columns.week (a label like 2026-W47), "
        "columns.year + columns.week_number, columns.week_start or columns.week_end",
    )
    return None


_INT_TEXT = {".": re.compile(r"^[+-]?\d+(?:\.\d+)?$"), ",": re.compile(r"^[+-]?\d+(?:,\d+)?$")}
_THOUSANDS = re.compile(r"^[+-]?\d{1,3}(?:[ ,.'\u00a0\u202f]\d{3})+$")


def _number_hint(text: str, decimal: str) -> str:
    if "%" in text:
        return "remove the % sign and give the count"
    if text.startswith(("<", ">", "≤", "≥")):
        return "a censored value such as <5 cannot be counted; supply the exact count"
    other = "," if decimal == "." else "."
    decimal_like = re.match(rf"^[+-]?\d+\{other}\d+$", text) is not None
    if _THOUSANDS.match(text):
        if decimal_like:  # '3,779' is 3779 with grouping, or 3.779 with a decimal comma
            return (
                f"it has a thousands separator or uses {other!r} as the decimal mark; export "
                f"numbers without grouping, or set input.decimal = {other!r} if that is the "
                "file's decimal mark"
            )
        return "it looks like a thousands separator; export numbers without grouping"
    if decimal_like:
        return (
            f"it uses {other!r} as the decimal mark but input.decimal is {decimal!r}; "
            f"set input.decimal = {other!r} if that is the file's convention"
        )
    return "give a plain number such as 12"


def _parse_number(text: str, decimal: str) -> float | None:
    """Plain decimal number in the declared notation, else None."""
    t = text.strip()
    if not _INT_TEXT[decimal].match(t):
        return None
    return float(t.replace(",", ".")) if decimal == "," else float(t)


def _apply_unique(
    col: _Col, parse: Callable[[str], Any]
) -> tuple[np.ndarray, list[Any], np.ndarray]:
    """Parse each distinct text once: (codes, parsed uniques, unique texts)."""
    return col.codes, [parse(str(u)) for u in col.uniques], col.uniques


@dataclasses.dataclass(frozen=True)
class _Typed:
    """The typed frame and what findings need to know about the file's columns."""

    frame: pd.DataFrame
    columns: SourceColumns
    numeric_id_lines: tuple[int, ...]


def _type_table(
    raw: _Raw, settings: InputSettings, system: WeekSystem, out: FindingCollector
) -> _Typed | None:
    cmap = settings.columns
    names = [_nfc(h).strip() for h in raw.header]
    # duplicated header cells (blank names are unmapped and ignored)
    positions: dict[str, list[int]] = {}
    for i, h in enumerate(names):
        if h:
            positions.setdefault(h, []).append(i)
    for h, pos in positions.items():
        if len(pos) > 1:
            out.error(
                "column-duplicated",
                f"expected each column name once, got {h!r} in columns "
                f"{', '.join(str(p + 1) for p in pos)}; remove or rename the extra column so "
                "that no count is read twice",
                line=1,
                column=h,
                value=h,
            )
    spec = _week_spec(cmap, out)
    present = ", ".join(repr(h) for h in names if h) or "(none)"

    def find(name: str | None, required: bool, what: str) -> int | None:
        if not name:
            return None
        key = _nfc(name).strip()
        if key in positions:
            return positions[key][0]
        close = difflib.get_close_matches(key, [h for h in names if h], n=1, cutoff=0.6)
        hint = f" (did you mean {close[0]!r}?)" if close else ""
        if required:
            out.error(
                "column-missing",
                f"expected a column {key!r} for the {what}, got columns {present}{hint}; "
                "rename the column or set the column map in the configuration",
                line=1,
                column=key,
            )
        else:
            out.add(
                Severity.WARNING,
                "column-optional-missing",
                f"the optional column {key!r} ({what}) is not in the file (columns: "
                f"{present}){hint}; it is treated as not supplied",
                line=1,
                column=key,
            )
        return None

    pos_id = find(cmap.district_id, True, "district id")
    pos_name = find(_opt(cmap.district_name), False, "district name")
    pos_sites = find(_opt(cmap.reporting_sites), False, "number of reporting sites")
    pos_ili = find(cmap.ili_visits, True, "ILI visits")
    pos_total = find(cmap.total_visits, True, "total visits")
    pos_rate = find(_opt(cmap.rate), True, "supplied rate") if _opt(cmap.rate) else None
    pos_week = [find(c, True, "week") for c in spec[1]] if spec else []
    if out.has_errors:
        return None

    n = len(raw.lines)
    # drop rows whose every cell is blank (e.g. a trailing ",,,,," line)
    blank = np.ones(n, dtype=bool)
    for col in raw.columns:
        if not blank.any():
            break
        empty_u = np.array([not str(u).strip() for u in col.uniques], dtype=bool)
        blank &= empty_u[col.codes] if len(col.uniques) else True
    if blank.any():
        keep = ~blank
        last_kept = int(np.flatnonzero(keep).max()) if keep.any() else -1
        for i in np.flatnonzero(blank).tolist():
            if i < last_kept:
                out.add(
                    Severity.INFO,
                    "row-blank",
                    "this row has no values and was skipped",
                    line=int(raw.lines[i]),
                )
        raw = _Raw(
            header=raw.header,
            columns=[c.take(keep) for c in raw.columns],
            lines=raw.lines[keep],
            numeric_id_cells={k: v[keep] for k, v in raw.numeric_id_cells.items()},
            numeric_columns=raw.numeric_columns,
        )
        n = len(raw.lines)
    if n == 0:
        out.error(
            "file-header-only",
            "the file has a header but no data rows; expected one row per district and "
            "week. Check that the export finished",
            line=1,
        )
        return None

    assert pos_id is not None and pos_ili is not None and pos_total is not None and spec
    lines = raw.lines

    def col_name(pos: int) -> str:
        return names[pos]

    # ---- district ids
    numeric_id_lines = _numeric_id_lines(raw, pos_id)
    strip = settings.strip_id_whitespace
    id_codes, id_parsed, _ = _apply_unique(
        raw.columns[pos_id], lambda t: _nfc(t.strip() if strip else t)
    )
    id_u = np.array(id_parsed, dtype=object)
    id_u = _ids_as_read(raw, pos_id, id_codes, id_u, col_name(pos_id), settings, out)
    empty_ids = np.flatnonzero(np.array([not u.strip() for u in id_parsed], dtype=bool)[id_codes])
    for i in empty_ids.tolist():
        out.error(
            "id-missing",
            "expected a district id, got an empty cell; fill in the id or delete the row",
            line=int(lines[i]),
            column=col_name(pos_id),
            value=raw.columns[pos_id].text(i),
        )

    def id_at(i: int) -> str | None:
        return str(id_u[id_codes[i]]) or None

    def cell_error(rule: str, pos: int, rows: np.ndarray, message: Callable[[str], str]) -> None:
        for i in rows:
            value = raw.columns[pos].text(i)
            out.error(
                rule,
                message(value),
                line=int(lines[i]),
                column=col_name(pos),
                district_id=id_at(i),
                value=value,
            )

    # ---- names
    if pos_name is not None:
        codes, parsed, _ = _apply_unique(raw.columns[pos_name], lambda t: _nfc(t.strip()))
        district_names = np.array(parsed, dtype=object)[codes]
    else:
        district_names = np.array([""] * n, dtype=object)

    # ---- counts
    decimal = settings.decimal

    def count_column(pos: int, required: bool, what: str) -> np.ndarray:
        codes, parsed, texts = _apply_unique(raw.columns[pos], lambda t: _parse_number(t, decimal))
        blank_u = np.array([not str(t).strip() for t in texts], dtype=bool)
        bad_u = np.array([p is None for p in parsed], dtype=bool) & ~blank_u
        frac_u = np.array([p is not None and not float(p).is_integer() for p in parsed], dtype=bool)
        if required:
            cell_error(
                "cell-missing",
                pos,
                np.flatnonzero(blank_u[codes]),
                lambda v: (
                    f"expected the number of {what}, got an empty cell; enter the count "
                    "(0 if there were none) or delete the row"
                ),
            )
        cell_error(
            "cell-not-number",
            pos,
            np.flatnonzero(bad_u[codes]),
            lambda v: (
                f"expected the number of {what} as a plain number, got {v!r}; "
                + _number_hint(v.strip(), decimal)
            ),
        )
        cell_error(
            "count-not-integer",
            pos,
            np.flatnonzero(frac_u[codes]),
            lambda v: (
                f"expected a whole number of {what}, got {v!r}; counts of visits or "
                "sites cannot be fractional. Check the export (was a rate put in this column?)"
            ),
        )
        values = np.array([np.nan if p is None else p for p in parsed], dtype=np.float64)
        return values[codes] if len(parsed) else np.zeros(0)

    ili = count_column(pos_ili, True, "ILI visits")
    total = count_column(pos_total, True, "total visits")
    sites = (
        count_column(pos_sites, False, "reporting sites")
        if pos_sites is not None
        else np.full(n, np.nan)
    )
    rate = None
    if pos_rate is not None:
        codes, parsed, texts = _apply_unique(
            raw.columns[pos_rate], lambda t: _parse_number(t, decimal)
        )
        blank_u = np.array([not str(t).strip() for t in texts], dtype=bool)
        bad_u = np.array([p is None for p in parsed], dtype=bool) & ~blank_u
        cell_error(
            "cell-not-number",
            pos_rate,
            np.flatnonzero(bad_u[codes]),
            lambda v: (
                f"expected the supplied rate as a plain number, got {v!r}; "
                + _number_hint(v.strip(), decimal)
            ),
        )
        values = np.array([np.nan if p is None else p for p in parsed], dtype=np.float64)[codes]
        rate = values / 10.0 if cmap.rate_scale == "per_1000" else values

    # ---- weeks
    week_codes, categories = _type_weeks(
        raw, spec, pos_week, names, system, id_at, out, settings.date_format
    )

    if out.has_errors or week_codes is None:
        return None

    # ---- assemble, sorted by week then district id
    order_cat = sorted(range(len(categories)), key=categories.__getitem__)
    rank = np.empty(len(categories), dtype=np.int64)
    rank[order_cat] = np.arange(len(categories))
    week_rank = rank[week_codes]
    id_rank_u = np.empty(len(id_u), dtype=np.int64)
    id_rank_u[np.argsort(np.asarray(id_u, dtype=str), kind="stable")] = np.arange(len(id_u))
    order = np.lexsort((lines, id_rank_u[id_codes], week_rank))
    sorted_cats = [categories[i] for i in order_cat]
    frame = pd.DataFrame(
        {
            "district_id": pd.Series(id_u[id_codes[order]], dtype=object),
            "district_name": pd.Series(district_names[order], dtype=object),
            "week": pd.Categorical.from_codes(
                week_rank[order], categories=pd.Index(sorted_cats, dtype=object), ordered=True
            ),
            "reporting_sites": sites[order].astype(np.float64),
            "ili_visits": ili[order].astype(np.int64),
            "total_visits": total[order].astype(np.int64),
            "line": lines[order].astype(np.int64),
        }
    )
    source_columns = {
        "district_id": col_name(pos_id),
        "ili_visits": col_name(pos_ili),
        "total_visits": col_name(pos_total),
        "week": ", ".join(col_name(p) for p in pos_week if p is not None),
    }
    if pos_name is not None:
        source_columns["district_name"] = col_name(pos_name)
    if pos_sites is not None:
        source_columns["reporting_sites"] = col_name(pos_sites)
    if rate is not None and pos_rate is not None:
        frame["rate_percent"] = rate[order]
        source_columns["rate_percent"] = col_name(pos_rate)
    return _Typed(frame, SourceColumns(**source_columns), numeric_id_lines)


def pad_id(ident: str, width: int | None) -> str:
    """``ident`` left-padded with zeros to ``width`` digits when it is all digits and shorter."""
    if width and ident.isascii() and ident.isdigit() and len(ident) < width:
        return ident.zfill(width)
    return ident


def _numeric_id_lines(raw: _Raw, pos_id: int) -> tuple[int, ...]:
    """Lines whose id cell was stored as a number (XLSX cell or Parquet numeric column)."""
    if pos_id in raw.numeric_columns:
        mask = raw.columns[pos_id].uniques[raw.columns[pos_id].codes] != ""
    else:
        mask = raw.numeric_id_cells.get(pos_id, np.zeros(len(raw.lines), dtype=bool))
    return tuple(int(x) for x in raw.lines[mask])


def _ids_as_read(
    raw: _Raw,
    pos_id: int,
    id_codes: np.ndarray,
    id_u: np.ndarray,
    column: str,
    settings: InputSettings,
    out: FindingCollector,
) -> np.ndarray:
    """Check numeric id cells, report stripped whitespace, pad ids; return the id uniques.

    A number that is a whole number is read as its digits (the boundary check
    then says whether it matched); any other number (4101.5, 1e+20) is an error.
    """
    col = raw.columns[pos_id]
    numeric = set(_numeric_id_lines(raw, pos_id))
    if numeric:
        for i in np.flatnonzero(np.isin(raw.lines, list(numeric))).tolist():
            text = col.text(i).strip()
            if text and not _DIGITS.match(text):
                out.error(
                    "id-numeric",
                    f"expected a district id, got the number {text}, which is not a whole "
                    "number; an id read from it could be wrong. Format the id column as Text "
                    "in the spreadsheet and enter the ids as they are in the boundary file",
                    line=int(raw.lines[i]),
                    column=column,
                    district_id=text,
                    value=text,
                )
    if settings.strip_id_whitespace:
        changed_u = np.array(
            [
                _nfc(str(u)) != str(p) and str(p) != ""
                for u, p in zip(col.uniques, id_u, strict=True)
            ],
            dtype=bool,
        )
        rows = np.flatnonzero(changed_u[id_codes]) if len(changed_u) else np.zeros(0, np.int64)
        if len(rows):
            lines = sorted(int(raw.lines[i]) for i in rows)
            out.add(
                Severity.INFO,
                "id-whitespace-stripped",
                f"{len(lines)} district id{'s' if len(lines) != 1 else ''} had spaces around "
                f"them, removed before matching (input.strip_id_whitespace), on line"
                f"{'s' if len(lines) != 1 else ''} {line_list(lines)}",
                line=lines[0],
                column=column,
                value=str(len(lines)),
            )
    width = settings.id_zero_pad
    if width:
        padded = np.array([pad_id(str(u), width) for u in id_u], dtype=object)
        changed = np.flatnonzero(padded != id_u)
        if len(changed):
            rows = np.flatnonzero(np.isin(id_codes, changed))
            example = f"{id_u[changed[0]]} -> {padded[changed[0]]}"
            out.add(
                Severity.INFO,
                "id-zero-padded",
                f"{len(changed)} district id{'s' if len(changed) != 1 else ''} on {len(rows)} "
                f"line{'s' if len(rows) != 1 else ''} were padded with leading zeros to "
                f"{width} digits (input.id_zero_pad = {width}; e.g. {example})",
                line=int(raw.lines[rows].min()),
                column=column,
                value=str(len(changed)),
            )
            return padded
    return id_u


def _type_weeks(
    raw: _Raw,
    spec: tuple[str, list[str]],
    pos_week: list[int | None],
    names: list[str],
    system: WeekSystem,
    id_at: Callable[[int], str | None],
    out: FindingCollector,
    date_format: str | None = None,
) -> tuple[np.ndarray | None, list[EpiWeek]]:
    """Parse the week cells; return codes into a list of distinct EpiWeeks."""
    kind = spec[0]
    lines = raw.lines
    sys_name = system.value.upper()

    def parse_label(t: str) -> EpiWeek | BadWeek:
        try:
            return EpiWeek.parse(t.strip(), system)
        except ValueError as exc:
            return BadWeek("week-invalid", str(exc))

    if kind == "label":
        pos = pos_week[0]
        assert pos is not None
        texts = raw.columns[pos]
    elif kind == "year-week":
        py, pw = pos_week
        assert py is not None and pw is not None
        cy, cw = raw.columns[py], raw.columns[pw]
        pair_codes, pairs = pd.factorize(cy.codes * (len(cw.uniques) + 1) + cw.codes)
        texts = _Col(
            pair_codes.astype(np.int64),
            np.array(
                [
                    f"{str(cy.uniques[p // (len(cw.uniques) + 1)]).strip()}|"
                    f"{str(cw.uniques[p % (len(cw.uniques) + 1)]).strip()}"
                    for p in pairs
                ],
                dtype=object,
            ),
        )
        pos = pw
    else:
        pos = pos_week[0]
        assert pos is not None
        texts = raw.columns[pos]

    def parse_year_week(t: str) -> EpiWeek | BadWeek:
        y, w = t.split("|")
        if not (re.fullmatch(r"\d{4}", y) and re.fullmatch(r"\d{1,2}", w)):
            return BadWeek(
                "week-invalid",
                f"expected a 4-digit year and a week number, got year {y!r} and week {w!r}",
            )
        try:
            return EpiWeek(int(y), int(w), system)
        except ValueError as exc:
            return BadWeek("week-invalid", str(exc))

    first_day = system.first_weekday
    last_day = (first_day + 6) % 7
    day_names = ["Monday", "Tuesday", "Wednesday", "Thursday", "Friday", "Saturday", "Sunday"]

    def parse_date(t: str) -> EpiWeek | BadWeek:
        t = t.strip()
        if _DATE.match(t):
            try:
                day = dt.date.fromisoformat(t)
            except ValueError as exc:
                return BadWeek("week-invalid", f"expected a valid date, got {t!r} ({exc})")
        elif date_format:
            try:
                day = dt.datetime.strptime(t, date_format).date()
            except ValueError:
                return BadWeek(
                    "week-invalid",
                    f"expected a date written as input.date_format = {date_format!r} (or ISO "
                    f"YYYY-MM-DD), got {t!r}; check the declared format against the file",
                )
        else:
            return BadWeek(
                "week-invalid",
                f"expected an ISO date YYYY-MM-DD, got {t!r}; if the file writes dates another "
                "way, declare it with input.date_format (e.g. '%m/%d/%Y' for 10/07/2023)",
            )
        want = first_day if kind == "start" else last_day
        if day.weekday() != want:
            return BadWeek(
                "week-date-weekday",
                f"expected a week {'start' if kind == 'start' else 'end'} date on a "
                f"{day_names[want]} ({sys_name} weeks run {day_names[first_day]} to "
                f"{day_names[last_day]}), got {t} which is a {day_names[day.weekday()]}; "
                "check input.columns and weeks.system",
            )
        return EpiWeek.from_date(day, system)

    parser = {"label": parse_label, "year-week": parse_year_week}.get(kind, parse_date)
    codes, parsed, uniques = _apply_unique(texts, parser)
    used = np.bincount(codes, minlength=len(parsed)) > 0  # blank rows dropped leave unused texts
    bad = np.array([not isinstance(p, EpiWeek) for p in parsed], dtype=bool) & used
    if bad.any():
        for u in np.flatnonzero(bad):
            rule, message = parsed[u]
            if not str(uniques[u]).strip().strip("|"):
                message = "expected a week, got an empty cell; fill in the week or delete the row"
            elif rule == "week-invalid":
                message = (
                    f"{message} ({sys_name} system, weeks.system); "
                    "give the week as declared in the column map"
                )
            for i in np.flatnonzero(codes == u).tolist():
                out.error(
                    rule,
                    message,
                    line=int(lines[i]),
                    column=names[pos],
                    district_id=id_at(i),
                    value=texts.text(i).replace("|", " "),
                )
        return None, []
    # merge equal weeks given in different spellings (e.g. '2026-W7' and '2026-W07')
    distinct: dict[EpiWeek, int] = {}
    remap = np.array(
        [
            distinct.setdefault(p, len(distinct)) if ok else -1
            for p, ok in zip(parsed, used, strict=True)
        ],
        dtype=np.int64,
    )
    return remap[codes], list(distinct)
