"""Jobs around an archived bundle: send it, and the scheduled Monday run.

Like :mod:`sitrep.pipeline`, this module composes stages; nothing in the
stages imports it.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import json
from collections.abc import Callable
from pathlib import Path

from sitrep.config import Config
from sitrep.deliver.archive import bundle_dir, next_version
from sitrep.deliver.mail import SendOutcome, send_bundle
from sitrep.errors import ConfigError, DeliveryError, ValidationFailed
from sitrep.ingest.read import read_count_table
from sitrep.weeks import EpiWeek, WeekSystem

__all__ = ["email_subject", "find_extracts", "scheduled_run", "send_archived"]


def email_subject(config: Config, week: EpiWeek) -> str:
    """Subject line: prefix, jurisdiction, week and dates."""
    prefix = f"{config.email.subject_prefix} " if config.email.subject_prefix else ""
    return (
        f"{prefix}{config.report.jurisdiction}: ILI situation report, week {week.week} "
        f"{week.year} ({week.start:%d %b} to {week.end:%d %b %Y})"
    )


def send_archived(
    config: Config,
    bundle: Path,
    *,
    dry_run: bool = False,
    resend: bool = False,
    now: dt.datetime | None = None,
) -> SendOutcome:
    """E-mail the PDF of an archived bundle with the key messages as the body."""
    manifest_path = bundle / "manifest.json"
    if not manifest_path.is_file():
        raise DeliveryError(f"{bundle} is not a sitrep bundle (no manifest.json)")
    manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
    if manifest.get("validation", {}).get("errors", 0):
        raise DeliveryError(f"{bundle} was built from inputs that failed validation; nothing is sent")
    if not (config.email.enabled or dry_run):
        raise ConfigError("email.enabled is false; set it to true or use --dry-run")
    if not config.email.recipients and not dry_run:
        raise ConfigError("email.recipients is empty")
    system = WeekSystem(manifest.get("week_system", config.weeks.system))
    week = EpiWeek.parse(manifest["report_week"], system)
    body_path = bundle / "email.txt"
    body = body_path.read_text(encoding="utf-8") if body_path.is_file() else ""
    return send_bundle(
        bundle,
        config.email,
        subject=email_subject(config, week),
        body=body,
        dry_run=dry_run,
        resend=resend,
        now=now or dt.datetime.now(dt.UTC),
    )


def find_extracts(config: Config) -> list[tuple[EpiWeek, Path]]:
    """Extracts in the inbox with the latest week each holds, oldest first."""
    inbox = config.input.inbox
    if inbox is None:
        raise ConfigError("input.inbox is not set; `sitrep run` needs the folder extracts arrive in")
    if not inbox.is_dir():
        raise ConfigError(f"input.inbox {inbox} is not a folder")
    system = WeekSystem(config.weeks.system)
    found = []
    for path in sorted(inbox.glob(config.input.inbox_pattern)):
        if not path.is_file():
            continue
        table, _ = read_count_table(path, config.input, system, role="table")
        if table is not None:
            found.append((table.latest_week, path))
    found.sort(key=lambda item: (item[0], item[1].name))
    return found


def scheduled_run(
    config: Config,
    *,
    dry_run: bool = False,
    log: Callable[[str], None] = lambda _: None,
) -> str:
    """The Monday job: newest extract -> build -> archive -> send; idempotent.

    If the newest week is already archived and sent, nothing is done and the
    returned message says so. If it is archived but not sent, it is sent.
    """
    from sitrep import pipeline
    from sitrep.errors import ArchiveExists

    if config.output.archive is None:
        raise ConfigError("output.archive is not set; the scheduled run always archives")
    extracts = find_extracts(config)
    if not extracts:
        raise ConfigError(f"no readable extract matching {config.input.inbox_pattern!r} in {config.input.inbox}")
    week, newest = extracts[-1]
    older = [p for w, p in extracts if w < week]
    config = dataclasses.replace(
        config,
        input=dataclasses.replace(
            config.input, table=newest, prior_table=older[-1] if older else config.input.prior_table
        ),
    )
    log(f"newest extract {newest.name} ends in week {week}")
    existing = next_version(config.output.archive, config.report.jurisdiction, str(week)) - 1
    if existing >= 1:
        bundle = bundle_dir(config.output.archive, config.report.jurisdiction, str(week), existing)
        if Path(str(bundle) + ".sent.json").is_file():
            return f"week {week} is already archived ({bundle}) and sent; nothing to do"
        log(f"week {week} is archived but not sent; sending {bundle}")
    else:
        try:
            result = pipeline.build(config, log=log)
        except ArchiveExists:  # raced with another run
            return f"week {week} was archived by another run; nothing to do"
        except ValidationFailed:
            raise
        assert result.bundle is not None
        bundle = result.bundle.path
    outcome = send_archived(config, bundle, dry_run=dry_run)
    if outcome.status not in ("sent",) and not dry_run:
        raise DeliveryError(f"e-mail for week {week}: {outcome.status}: {outcome.detail}")
    return f"week {week}: archived in {bundle}; e-mail {outcome.status if not dry_run else 'written as .eml (dry run)'}"
