"""Read weekly count tables (CSV, XLSX, Parquet) into a typed :class:`CountTable`.

This module is the only reader of rate tables. Reading is stage 1 of
validation: every cell is parsed and typed, and *all* cells that fail are
returned as findings before any value rule runs (those live in
:mod:`sitrep.ingest.validate`). Bad content never raises; only a file that
cannot be opened at all raises :class:`~sitrep.errors.InputError`.

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

from __future__ import annotations

import dataclasses
import difflib
import hashlib
import warnings
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from sitrep.config import ColumnMap, InputSettings
from sitrep.errors import InputError
from sitrep.ingest.count_cells import Cells, apply_unique, count_column, rate_column
from sitrep.ingest.findings import FindingCollector
from sitrep.ingest.id_cells import ids_as_read, numeric_id_lines, pad_id
from sitrep.ingest.raw_table import Raw, nfc, read_csv, read_parquet, read_xlsx
from sitrep.ingest.rules import Stage, descriptions
from sitrep.ingest.week_cells import WeekSpec, type_weeks
from sitrep.model import CountTable, InputFile, Severity, SourceColumns, ValidationReport
from sitrep.weeks import WeekSystem

__all__ = ["RULES", "pad_id", "read_count_table"]

RULES: tuple[tuple[str, str], ...] = descriptions(Stage.TABLE_FILE)
"""Rule ids of the table reader with one-line descriptions (from the registry)."""

_CSV_EXT = {".csv", ".txt"}
_XLSX_EXT = {".xlsx"}
_PARQUET_EXT = {".parquet", ".pq"}
_MB = 1_000_000


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
    """
    path = Path(path)
    out = FindingCollector(path.name)
    ext = _check_file(path, settings, role, out)
    if ext is None:
        return None, out.report()
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read the {role} file {path}: {exc.strerror or exc}") from exc
    source = InputFile(role, path, hashlib.sha256(data).hexdigest(), len(data))
    raw = _parse(data, ext, settings, out)
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


def _check_file(
    path: Path, settings: InputSettings, role: str, out: FindingCollector
) -> str | None:
    """The file's lower-case extension, or None (with an error) when it is too large or of an
    unknown format; raises InputError when it cannot be opened."""
    try:
        size = path.stat().st_size
    except OSError as exc:
        raise InputError(f"cannot open the {role} file {path}: {exc.strerror or exc}") from exc
    if path.is_dir():
        raise InputError(f"the {role} file {path} is a folder; give the path of a file")
    if size > settings.max_input_mb * _MB:
        out.error(
            "file-too-large",
            f"the file is {size / _MB:,.1f} MB, above the cap of {settings.max_input_mb:g} MB "
            "(input.max_input_mb); it was not parsed. Check that this is the right file, "
            "or raise input.max_input_mb",
            value=str(size),
        )
        return None
    ext = path.suffix.lower()
    if ext not in _CSV_EXT | _XLSX_EXT | _PARQUET_EXT:
        out.error(
            "file-format-unknown",
            f"expected a .csv, .txt, .xlsx, .parquet or .pq file, got '{path.suffix or '(none)'}'; "
            "save the table in one of these formats",
            value=path.suffix,
        )
        return None
    return ext


def _parse(data: bytes, ext: str, settings: InputSettings, out: FindingCollector) -> Raw | None:
    """The file as text columns by its format; the reader's own warnings become notes."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        if ext in _CSV_EXT:
            raw = read_csv(data, settings, out)
        elif ext in _XLSX_EXT:
            raw = read_xlsx(data, settings, out)
        else:
            raw = read_parquet(data, settings, out)
    for w in caught:
        out.add(Severity.INFO, "reader-warning", f"the file reader warned: {w.message}")
    return raw


# --------------------------------------------------------------------------- typing


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


@dataclasses.dataclass(frozen=True)
class _Typed:
    """The typed frame and what findings need to know about the file's columns."""

    frame: pd.DataFrame
    columns: SourceColumns
    numeric_id_lines: tuple[int, ...]


@dataclasses.dataclass(frozen=True)
class _Positions:
    """Where the mapped columns are in the header (None: optional and not in the file)."""

    id: int
    name: int | None
    sites: int | None
    ili: int
    total: int
    rate: int | None
    week: list[int]


@dataclasses.dataclass(frozen=True)
class _Ids:
    """District ids per row: codes into the distinct ids as read (stripped, padded)."""

    codes: np.ndarray
    uniques: np.ndarray
    numeric_lines: tuple[int, ...]

    def at(self, i: int) -> str | None:
        return str(self.uniques[self.codes[i]]) or None


def _type_table(
    raw: Raw, settings: InputSettings, system: WeekSystem, out: FindingCollector
) -> _Typed | None:
    """Find the mapped columns, drop blank rows, type ids, names, counts and weeks, assemble."""
    names = [nfc(h).strip() for h in raw.header]
    positions = _header_positions(names, out)
    spec = _week_spec(settings.columns, out)
    pos = _find_columns(settings.columns, names, positions, spec, out)
    if out.has_errors or pos is None or spec is None:
        return None
    raw = _drop_blank_rows(raw, out)
    if len(raw.lines) == 0:
        out.error(
            "file-header-only",
            "the file has a header but no data rows; expected one row per district and "
            "week. Check that the export finished",
            line=1,
        )
        return None
    ids = _district_ids(raw, pos.id, names, settings, out)
    cells = Cells(raw, names, ids.at, out)
    decimal = settings.decimal
    ili = count_column(cells, pos.ili, True, "ILI visits", decimal)
    total = count_column(cells, pos.total, True, "total visits", decimal)
    sites = (
        count_column(cells, pos.sites, False, "reporting sites", decimal)
        if pos.sites is not None
        else np.full(len(raw.lines), np.nan)
    )
    rate = None
    if pos.rate is not None:
        rate = rate_column(cells, pos.rate, decimal, settings.columns.rate_scale == "per_1000")
    week_codes, categories = type_weeks(
        raw, WeekSpec(*spec), pos.week, names, system, ids.at, out, settings.date_format
    )
    if out.has_errors or week_codes is None:
        return None
    counts = {"reporting_sites": sites, "ili_visits": ili, "total_visits": total}
    return _assemble(
        raw, names, pos, ids, _district_names(raw, pos.name), counts, rate, (week_codes, categories)
    )


def _header_positions(names: list[str], out: FindingCollector) -> dict[str, list[int]]:
    """The positions of each header name; a name given twice is an error (blanks ignored)."""
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
    return positions


def _find_column(
    name: str | None,
    required: bool,
    what: str,
    names: list[str],
    positions: dict[str, list[int]],
    out: FindingCollector,
) -> int | None:
    """The position of a mapped column; a missing one is an error, or a warning when optional."""
    if not name:
        return None
    key = nfc(name).strip()
    if key in positions:
        return positions[key][0]
    present = ", ".join(repr(h) for h in names if h) or "(none)"
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


def _find_columns(
    cmap: ColumnMap,
    names: list[str],
    positions: dict[str, list[int]],
    spec: tuple[str, list[str]] | None,
    out: FindingCollector,
) -> _Positions | None:
    """Every mapped column's position, or None when a required one is missing."""

    def find(name: str | None, required: bool, what: str) -> int | None:
        return _find_column(name, required, what, names, positions, out)

    pos_id = find(cmap.district_id, True, "district id")
    pos_name = find(_opt(cmap.district_name), False, "district name")
    pos_sites = find(_opt(cmap.reporting_sites), False, "number of reporting sites")
    pos_ili = find(cmap.ili_visits, True, "ILI visits")
    pos_total = find(cmap.total_visits, True, "total visits")
    pos_rate = find(_opt(cmap.rate), True, "supplied rate") if _opt(cmap.rate) else None
    pos_week = [find(c, True, "week") for c in spec[1]] if spec else []
    if pos_id is None or pos_ili is None or pos_total is None or None in pos_week:
        return None
    weeks = [p for p in pos_week if p is not None]
    return _Positions(pos_id, pos_name, pos_sites, pos_ili, pos_total, pos_rate, weeks)


def _drop_blank_rows(raw: Raw, out: FindingCollector) -> Raw:
    """``raw`` without the rows whose every cell is blank (e.g. a trailing ",,,,," line); each
    such row before the last kept one is noted."""
    blank = np.ones(len(raw.lines), dtype=bool)
    for col in raw.columns:
        if not blank.any():
            break
        empty_u = np.array([not str(u).strip() for u in col.uniques], dtype=bool)
        blank &= empty_u[col.codes] if len(col.uniques) else True
    if not blank.any():
        return raw
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
    return Raw(
        header=raw.header,
        columns=[c.take(keep) for c in raw.columns],
        lines=raw.lines[keep],
        numeric_id_cells={k: v[keep] for k, v in raw.numeric_id_cells.items()},
        numeric_columns=raw.numeric_columns,
    )


def _district_ids(
    raw: Raw, pos_id: int, names: list[str], settings: InputSettings, out: FindingCollector
) -> _Ids:
    """The id of every row as read (NFC, stripped when so set, padded); blank ids are errors."""
    id_number_lines = numeric_id_lines(raw, pos_id)
    strip = settings.strip_id_whitespace
    id_codes, id_parsed, _ = apply_unique(
        raw.columns[pos_id], lambda t: nfc(t.strip() if strip else t)
    )
    id_u = np.array(id_parsed, dtype=object)
    id_u = ids_as_read(raw, pos_id, id_codes, id_u, names[pos_id], settings, out)
    empty_ids = np.flatnonzero(np.array([not u.strip() for u in id_parsed], dtype=bool)[id_codes])
    for i in empty_ids.tolist():
        out.error(
            "id-missing",
            "expected a district id, got an empty cell; fill in the id or delete the row",
            line=int(raw.lines[i]),
            column=names[pos_id],
            value=raw.columns[pos_id].text(i),
        )
    return _Ids(id_codes, id_u, id_number_lines)


def _district_names(raw: Raw, pos_name: int | None) -> np.ndarray:
    """The district name of every row (NFC, stripped), or blanks without a name column."""
    if pos_name is None:
        return np.array([""] * len(raw.lines), dtype=object)
    codes, parsed, _ = apply_unique(raw.columns[pos_name], lambda t: nfc(t.strip()))
    return np.array(parsed, dtype=object)[codes]


def _assemble(
    raw: Raw,
    names: list[str],
    pos: _Positions,
    ids: _Ids,
    district_names: np.ndarray,
    counts: dict[str, np.ndarray],
    rate: np.ndarray | None,
    weeks: tuple[np.ndarray, list[Any]],
) -> _Typed:
    """The typed frame sorted by week then district id (then line), and the source columns."""
    week_codes, categories = weeks
    lines = raw.lines
    order_cat = sorted(range(len(categories)), key=categories.__getitem__)
    rank = np.empty(len(categories), dtype=np.int64)
    rank[order_cat] = np.arange(len(categories))
    week_rank = rank[week_codes]
    id_u, id_codes = ids.uniques, ids.codes
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
            "reporting_sites": counts["reporting_sites"][order].astype(np.float64),
            "ili_visits": counts["ili_visits"][order].astype(np.int64),
            "total_visits": counts["total_visits"][order].astype(np.int64),
            "line": lines[order].astype(np.int64),
        }
    )
    source_columns = {
        "district_id": names[pos.id],
        "ili_visits": names[pos.ili],
        "total_visits": names[pos.total],
        "week": ", ".join(names[p] for p in pos.week),
    }
    if pos.name is not None:
        source_columns["district_name"] = names[pos.name]
    if pos.sites is not None:
        source_columns["reporting_sites"] = names[pos.sites]
    if rate is not None and pos.rate is not None:
        frame["rate_percent"] = rate[order]
        source_columns["rate_percent"] = names[pos.rate]
    return _Typed(frame, SourceColumns(**source_columns), ids.numeric_lines)
