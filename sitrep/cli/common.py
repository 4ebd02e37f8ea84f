"""What the commands share: exit codes, the help epilog, argument types, printed findings."""

from __future__ import annotations

import argparse
import datetime as dt
import sys
from pathlib import Path
from typing import TYPE_CHECKING

from sitrep.errors import ConfigError

if TYPE_CHECKING:
    from sitrep.config import Config
    from sitrep.model import ValidationReport

__all__ = [
    "EPILOG",
    "EXIT_ARCHIVED",
    "EXIT_BLOCKED",
    "EXIT_DELIVERY",
    "EXIT_HELD",
    "EXIT_OK",
    "EXIT_USAGE",
    "QUIET",
    "date_arg",
    "demo_inputs",
    "load",
    "print_findings",
]

EXIT_OK = 0
EXIT_BLOCKED = 1
EXIT_USAGE = 2
EXIT_DELIVERY = 3
EXIT_HELD = 4
EXIT_ARCHIVED = 5

EPILOG = """exit codes: 0 done · 1 blocked by validation or unreadable input ·
2 usage or configuration error · 3 delivery failed (archive, PDF or e-mail) ·
4 built and archived, held for review (sitrep approve releases it) ·
5 already archived (nothing built: --no-archive to preview, --reissue to correct)"""


QUIET = (
    "no progress: without it each stage prints a line with its time to stderr (a bar for the "
    "long ones on a terminal); the files written and errors are still printed"
)


def demo_inputs() -> Path:
    """The demo scenario folder shipped inside the package (``sitrep.demo_inputs``)."""
    import importlib.resources

    folder = Path(str(importlib.resources.files("sitrep.demo_inputs")))
    if not (folder / "sitrep.toml").is_file():
        raise ConfigError(
            f"the demo inputs are missing from the installed package ({folder}); reinstall "
            "sitrep, or pass --inputs FOLDER"
        )
    return folder


def date_arg(text: str) -> dt.date:
    """argparse type for ``--today``: an ISO date such as 2026-11-30."""
    try:
        return dt.date.fromisoformat(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a date like 2026-11-30, got {text!r}") from None


def load(path: Path) -> Config:
    from sitrep.config import load_config

    return load_config(path)


def print_findings(report: ValidationReport, stream: object = None) -> None:
    """Print findings as a table: severity, rule, file:line, column, district, message.

    Findings of one rule on one file and column are printed as one line with
    their count and first locations; ``check --json`` and validation.json list
    every one.
    """
    out = stream or sys.stdout
    if not report.findings:
        print("no findings: the inputs passed every check", file=out)  # type: ignore[arg-type]
        return
    header = ("severity", "rule", "file:line", "column", "district", "message")
    order = {"error": 0, "warning": 1, "info": 2}
    groups = sorted(report.grouped(), key=lambda g: order[g.severity.value])  # errors first
    rows = []
    for g in groups:
        f = g.first
        districts = g.districts()
        rows.append(
            (
                f.severity.value,
                f.rule,
                (f.file or "-") + (f":{f.line}" if f.line is not None else ""),
                f.column or "-",
                districts[0]
                if len(districts) == 1
                else (f"{len(districts)} districts" if districts else "-"),
                g.message(),
            )
        )
    widths = [max(len(row[i]) for row in (header, *rows)) for i in range(5)]
    for row in (header, *rows):
        cells = "  ".join(cell.ljust(width) for cell, width in zip(row[:5], widths, strict=True))
        print(f"{cells}  {row[5]}", file=out)  # type: ignore[arg-type]
    notes = len(report.findings) - len(report.errors) - len(report.warnings)
    summary = f"{len(report.errors)} error(s), {len(report.warnings)} warning(s), {notes} note(s)"
    if len(groups) < len(report.findings):
        summary += f" in {len(groups)} group(s)"
    if report.blocked:
        summary += ": blocked, a build would stop here and nothing would be archived or sent"
    print(summary, file=out)  # type: ignore[arg-type]
