"""Gather the weekly extracts as received, for the nowcast (docs/methods.md section 12).

Sources, the first one to hold a report week wins: this week's table and last week's
(``input.table``, ``input.prior_table``), the input table kept in the first version of each
archived bundle of the jurisdiction (``ARCHIVE/<jurisdiction>/<week>/v1/inputs/table.*``), and
every table file in ``input.past_extracts``. An extract's report week is its latest week.
The nowcast itself is pure (:func:`sitrep.analysis.nowcast.nowcast`); this module only reads.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from sitrep.analysis.nowcast import Extract, Nowcast, nowcast
from sitrep.config import Config
from sitrep.errors import ConfigError, InputError
from sitrep.ingest.read import read_count_table
from sitrep.model import CountTable
from sitrep.weeks import EpiWeek, WeekSystem

__all__ = ["TABLE_SUFFIXES", "extract_of", "gather_extracts", "nowcast_week"]

TABLE_SUFFIXES = frozenset({".csv", ".txt", ".xlsx", ".parquet", ".pq"})
"""Files of ``input.past_extracts`` read as extracts (others, and hidden files, are ignored)."""


def extract_of(table: CountTable, source: str) -> Extract:
    """The plain table the nowcast reads: district, week and the two counts of every row."""
    rows = pd.DataFrame(
        {
            "district_id": table.frame["district_id"].astype(str).to_numpy(),
            "week": list(table.frame["week"]),
            "ili_visits": table.frame["ili_visits"].to_numpy(),
            "total_visits": table.frame["total_visits"].to_numpy(),
        }
    )
    return Extract(table.latest_week, rows, source)


def _read(path: Path, config: Config, role: str) -> CountTable:
    """Read one past extract like this week's table; a bad file is an error naming it."""
    table, report = read_count_table(path, config.input, WeekSystem(config.weeks.system), role=role)
    if table is None:
        first = report.errors[0] if report.errors else None
        where = f" (line {first.line}, column {first.column!r})" if first and first.line else ""
        message = first.message if first else "no rows"
        raise InputError(
            f"{path}: cannot be read as a past extract for the nowcast{where}: {message}; fix "
            "or remove the file (input.past_extracts)"
        )
    frame = table.frame
    bad = frame[(frame["ili_visits"] < 0) | (frame["ili_visits"] > frame["total_visits"])]
    if len(bad):
        row = bad.iloc[0]
        raise InputError(
            f"{path}: line {int(row['line'])}, district {row['district_id']}: ILI visits "
            f"{int(row['ili_visits'])} against {int(row['total_visits'])} visits in all; a past "
            "extract for the nowcast needs 0 <= ILI visits <= all visits"
        )
    return table


def _folder_files(folder: Path) -> list[Path]:
    if not folder.is_dir():
        state = "is not a folder" if folder.exists() else "does not exist"
        raise ConfigError(
            f"input.past_extracts = {str(folder)!r} {state}; give a folder of earlier weekly "
            "extracts (one file per week) or remove the key"
        )
    return sorted(
        p
        for p in folder.iterdir()
        if p.is_file() and not p.name.startswith(".") and p.suffix.lower() in TABLE_SUFFIXES
    )


def _archived_tables(config: Config) -> list[Path]:
    """The input table of the first version of every archived week of this jurisdiction."""
    from sitrep.deliver.archive import bundle_folders, jurisdiction_slug

    root = config.output.archive
    if root is None:
        return []
    found = []
    for bundle_id, path in bundle_folders(root / jurisdiction_slug(config.report.jurisdiction)):
        if bundle_id.endswith("/v1"):
            found.extend(sorted((path / "inputs").glob("table.*")))
    return found


def gather_extracts(
    config: Config, table: CountTable, prior: CountTable | None
) -> tuple[Extract, ...]:
    """Every extract on file, one per report week (see the module docstring for the order)."""
    out: dict[EpiWeek, Extract] = {}
    given = [(table, table.source.path.name)]
    if prior is not None:
        given.append((prior, prior.source.path.name))
    for t, name in given:
        out.setdefault(t.latest_week, extract_of(t, name))
    paths = _archived_tables(config)
    if config.input.past_extracts is not None:
        paths += _folder_files(config.input.past_extracts)
    for path in paths:
        past = _read(path, config, role="past_extract")
        out.setdefault(past.latest_week, extract_of(past, str(path)))
    return tuple(out[w] for w in sorted(out))


def nowcast_week(
    config: Config, table: CountTable, prior: CountTable | None, week: EpiWeek
) -> Nowcast | None:
    """The nowcast of ``week`` and the weeks before it, or None when ``nowcast.enabled`` is off."""
    if not config.nowcast.enabled:
        return None
    extracts = [e for e in gather_extracts(config, table, prior) if e.report_week <= week]
    return nowcast(extracts, week, config.nowcast, seed=config.analysis.seed)
