"""A table file as text: CSV, XLSX and Parquet read into dictionary-encoded text columns.

Every cell is kept as text (numbers in the declared decimal notation, dates
as ISO), with the 1-based line each row came from; typing is done by
:mod:`sitrep.ingest.columns`. Bad content becomes findings, never an exception.
"""

from __future__ import annotations

import csv
import dataclasses
import datetime as dt
import io
import unicodedata
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from sitrep.config import InputSettings
from sitrep.ingest.findings import FindingCollector

__all__ = ["Col", "Raw", "nfc", "read_csv", "read_parquet", "read_xlsx"]

_EXACT_FLOAT = 2**53  # every integer below this is exactly representable as a float


@dataclasses.dataclass(frozen=True)
class Col:
    """One column as text, dictionary-encoded: cell i is ``uniques[codes[i]]``."""

    codes: np.ndarray  # integer codes into uniques
    uniques: np.ndarray  # object array of str ("" for an empty cell)

    @classmethod
    def of(cls, values: Sequence[str] | np.ndarray) -> Col:
        codes, uniques = pd.factorize(np.asarray(values, dtype=object), use_na_sentinel=False)
        return cls(codes, np.asarray(uniques, dtype=object))

    def text(self, i: int) -> str:
        return str(self.uniques[self.codes[i]])

    def take(self, keep: np.ndarray) -> Col:
        return Col(self.codes[keep], self.uniques)

    def __len__(self) -> int:
        return len(self.codes)


@dataclasses.dataclass
class Raw:
    """A table as text: header names, one text column per header cell, source lines."""

    header: list[str]
    columns: list[Col]
    lines: np.ndarray  # int64, 1-based line of each row (header = 1)
    numeric_id_cells: dict[int, np.ndarray] = dataclasses.field(default_factory=dict)
    """Column position -> boolean mask of cells stored as numbers (XLSX)."""
    numeric_columns: set[int] = dataclasses.field(default_factory=set)
    """Column positions whose whole storage type is numeric (Parquet)."""


def nfc(text: str) -> str:
    return unicodedata.normalize("NFC", text)


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
    return nfc(header[index]).strip() if 0 <= index < len(header) else None


def read_csv(data: bytes, settings: InputSettings, out: FindingCollector) -> Raw | None:
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


def _csv_fast(data: bytes, text: str, delimiter: str) -> Raw | None:
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
    return Raw(header=header_row, columns=columns, lines=lines[1:])


def _arrow_col(col: Any) -> Col:
    """Arrow column -> dictionary-encoded text column (each distinct value converted once)."""
    import pyarrow.compute as pc

    enc = pc.dictionary_encode(col).combine_chunks()
    uniques = list(enc.dictionary.to_pylist())
    if enc.null_count:
        uniques.append("")
    indices = enc.indices.fill_null(len(uniques) - 1) if enc.null_count else enc.indices
    codes = indices.to_numpy(zero_copy_only=False)
    return Col(codes, np.array(uniques, dtype=object))


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


def _csv_exact(text: str, delimiter: str, out: FindingCollector) -> Raw | None:
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
    columns = [Col.of([r[i] for r in rows]) for i in range(len(header))]
    return Raw(header=header, columns=columns, lines=np.array(lines, dtype=np.int64))


def _number_text(value: float | int, decimal: str) -> str:
    if isinstance(value, bool):
        return str(value)
    if isinstance(value, int):
        return str(value)
    if float(value).is_integer() and abs(value) < _EXACT_FLOAT:
        return str(int(value))
    return repr(float(value)).replace(".", decimal)


def read_xlsx(data: bytes, settings: InputSettings, out: FindingCollector) -> Raw | None:
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
        sheet = _choose_sheet(book, settings, out)
        raw = None if sheet is None else _sheet_rows(sheet, settings)
    finally:
        book.close()
    if sheet is not None and raw is None:
        out.error("file-empty", "the worksheet is empty; expected a header row and data rows")
    return raw


def _choose_sheet(book: Any, settings: InputSettings, out: FindingCollector) -> Any:
    """The worksheet ``input.sheet``, else the first one (None, with an error, when the
    named one is missing or only another worksheet has the configured columns)."""
    if settings.sheet is not None and settings.sheet not in book.sheetnames:
        out.error(
            "sheet-missing",
            f"expected a worksheet named {settings.sheet!r} (input.sheet), got sheets "
            f"{', '.join(map(repr, book.sheetnames))}; set input.sheet to one of these",
            value=settings.sheet,
        )
        return None
    sheet = book[settings.sheet] if settings.sheet is not None else book.worksheets[0]
    if settings.sheet is not None or len(book.worksheets) <= 1:
        return sheet
    cmap = settings.columns
    wanted = [nfc(c).strip() for c in (cmap.district_id, cmap.ili_visits, cmap.total_visits)]
    if set(wanted) <= set(_sheet_header(sheet)):
        return sheet
    other = next(
        (ws.title for ws in book.worksheets[1:] if set(wanted) <= set(_sheet_header(ws))), None
    )
    if other is None:
        return sheet
    out.error(
        "sheet-elsewhere",
        f"the first worksheet {sheet.title!r} lacks the configured columns "
        f"({', '.join(map(repr, wanted))}) but worksheet {other!r} has them; set "
        f"input.sheet = {other!r} to read it (sitrep reads the first worksheet "
        "unless input.sheet names another)",
        value=other,
    )
    return None


def _sheet_rows(sheet: Any, settings: InputSettings) -> Raw | None:
    """The worksheet as text columns from its first non-empty row (None: no header)."""
    id_name = nfc(settings.columns.district_id)
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
            names = [nfc(h).strip() for h in header]
            id_pos = names.index(id_name) if id_name in names else None
            cols = [[] for _ in header]
            continue
        cells = (cells + [None] * len(header))[: len(header)]
        for i, v in enumerate(cells):
            cols[i].append(_cell_text(v, settings.decimal))
        numeric_id.append(
            id_pos is not None
            and isinstance(cells[id_pos], (int, float))
            and not isinstance(cells[id_pos], bool)
        )
        lines.append(number)
    if header is None:
        return None
    raw = Raw(
        header=header, columns=[Col.of(c) for c in cols], lines=np.array(lines, dtype=np.int64)
    )
    if id_pos is not None:
        raw.numeric_id_cells[id_pos] = np.array(numeric_id, dtype=bool)
    return raw


def _sheet_header(sheet: Any) -> list[str]:
    """The first non-empty row of a worksheet, as stripped NFC text."""
    for values in sheet.iter_rows(values_only=True):
        if any(v is not None and str(v).strip() for v in values):
            return [nfc(str(v)).strip() for v in values if v is not None]
    return []


def read_parquet(data: bytes, settings: InputSettings, out: FindingCollector) -> Raw | None:
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
    columns: list[Col] = []
    numeric: set[int] = set()
    for i, name in enumerate(header):
        col = table.column(name)
        kind = col.type
        if pa.types.is_integer(kind) or pa.types.is_floating(kind) or pa.types.is_decimal(kind):
            numeric.add(i)
        enc = pc.dictionary_encode(col).combine_chunks()
        uniques = [_cell_text(v, settings.decimal) for v in enc.dictionary.to_pylist()]
        codes = enc.indices.fill_null(len(uniques)).to_numpy(zero_copy_only=False)
        columns.append(Col(codes, np.array(uniques + [""], dtype=object)))
    lines = np.arange(2, table.num_rows + 2, dtype=np.int64)
    return Raw(header=header, columns=columns, lines=lines, numeric_columns=numeric)


def _cell_text(value: Any, decimal: str) -> str:
    if value is None:
        return ""
    if isinstance(value, (dt.datetime, dt.date)):
        return (value.date() if isinstance(value, dt.datetime) else value).isoformat()
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return _number_text(value, decimal)
    return str(value)
