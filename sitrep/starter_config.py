"""The configuration file text of a ``sitrep init`` proposal, and writing it (checked) to disk.

Every guessed value carries a ``# GUESS`` comment saying what it was inferred
from; the file is loaded with :func:`sitrep.config.load_config` before it
replaces anything.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from sitrep.errors import ConfigError

if TYPE_CHECKING:
    from sitrep.starter import Proposal

__all__ = ["render_config", "write_config"]


def _q(value: str) -> str:
    from json import dumps

    return dumps(value, ensure_ascii=False)


def _line(key: str, value: str, reason: str | None, width: int = 44) -> str:
    text = f"{key} = {value}"
    if reason:
        return f"{text.ljust(width)} # GUESS: {reason}; check it"
    return text


def _rel(path: Path, base: Path) -> str:
    try:
        return Path(path).resolve().relative_to(base.resolve()).as_posix()
    except ValueError:
        return Path(path).resolve().as_posix()


def render_config(prop: Proposal, out: Path, jurisdiction: str = "My jurisdiction") -> str:
    """The configuration file text for ``prop``, written to sit at ``out``."""
    lines = [
        "# sitrep configuration proposed by `sitrep init` from",
        f"#   table:      {prop.table.name}",
        f"#   boundaries: {prop.boundaries.name}",
        "# Every line marked GUESS was inferred from the files: check it before the first report.",
        "# Settings not shown keep their defaults; sitrep's demo configuration lists every key.",
        "# Relative paths are resolved against this file's folder.",
        "",
        "[report]",
        _line(
            "jurisdiction",
            _q(jurisdiction),
            "a placeholder; shown in the header and the archive path",
        ),
        'title = "Weekly influenza-like illness situation report"',
        _line("contact", _q("Surveillance team"), "a placeholder for the report's contact line"),
        "",
        *_input_lines(prop, out.parent),
        "",
        "[input.columns]                                  # column names as in the table",
        *_column_lines(prop),
        "",
        "[weeks]",
        _line("system", _q(prop.week_system[0]), prop.week_system[1]),
        "season_start_week = 40                           # the week each season starts",
        "",
        "[output]",
        'folder = "sitrep-out"',
        'archive = "sitrep-out/archive"',
        "",
        "[email]",
        "enabled = false                                  # set up [email] when the report is ready to send",
    ]
    if prop.notes:
        lines += ["", "# Notes from `sitrep init`:"] + [f"# - {n}" for n in prop.notes]
    return "\n".join(lines) + "\n"


def _input_lines(prop: Proposal, base: Path) -> list[str]:
    """The ``[input]`` table: files (relative to ``base``), layer, fields, sheet, CSV dialect."""
    lines = [
        "[input]",
        f"table = {_q(_rel(prop.table, base))}",
        '# prior_table = "last_week.csv"              # last week\'s extract, for revisions and change',
        '# history = "past_seasons.csv"               # past seasons, for baselines and thresholds',
        f"boundaries = {_q(_rel(prop.boundaries, base))}",
    ]
    if prop.layer:
        lines.append(f"boundaries_layer = {_q(prop.layer)}")
    lines.append(_line("boundaries_id_column", _q(prop.boundaries_id[0]), prop.boundaries_id[1]))
    name, why = prop.boundaries_name
    if name:
        lines.append(_line("boundaries_name_column", _q(name), why))
    else:
        lines.append(
            'boundaries_name_column = ""                # no name field found: ids are shown'
        )
    if prop.sheet:
        lines.append(_line("sheet", _q(prop.sheet), "the worksheet holding the most data"))
    if prop.table.suffix.lower() in (".csv", ".txt"):
        lines.append(
            _line("delimiter", _q(prop.delimiter), "the character splitting the header most often")
        )
        lines.append(f"encoding = {_q(prop.encoding)}")
    return lines


_COLUMN_ORDER = (
    "district_id",
    "district_name",
    "week",
    "year",
    "week_number",
    "week_start",
    "week_end",
    "ili_visits",
    "total_visits",
    "reporting_sites",
    "rate",
)


def _column_lines(prop: Proposal) -> list[str]:
    """The ``[input.columns]`` keys: each proposed column, blanks for those not found."""
    lines = []
    for key in _COLUMN_ORDER:
        if key in prop.columns:
            column, reason = prop.columns[key]
            lines.append(_line(key, _q(column), reason))
        elif key == "week" and any(k in prop.columns for k in ("year", "week_start", "week_end")):
            lines.append(
                'week = ""                                    # the week comes from the columns below'
            )
        elif key in ("district_name", "reporting_sites"):
            lines.append(f'{key} = ""'.ljust(44) + " # not found in the table")
    if prop.rate_scale:
        lines.append(_line("rate_scale", _q(prop.rate_scale[0]), prop.rate_scale[1]))
    return lines


def write_config(prop: Proposal, out: Path, *, force: bool = False) -> Path:
    """Write the proposal to ``out`` (refusing to replace a file unless ``force``)."""
    out = Path(out)
    if out.exists() and not force:
        raise ConfigError(f"{out} exists; choose another --out or pass --force to replace it")
    text = render_config(prop, out)
    from sitrep.config import load_config

    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_name(out.name + ".tmp")
    tmp.write_text(text, encoding="utf-8")
    try:
        load_config(tmp)  # the proposal must be a valid configuration
    except ConfigError:
        tmp.unlink()
        raise
    tmp.replace(out)
    return out
