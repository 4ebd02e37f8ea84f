"""Commands that deliver archived bundles: send, approve and the scheduled run."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import TYPE_CHECKING

from sitrep.cli.common import EXIT_DELIVERY, EXIT_HELD, EXIT_OK, load, print_findings
from sitrep.errors import ValidationFailed

if TYPE_CHECKING:
    from sitrep.config import Config

__all__ = ["cmd_approve", "cmd_run", "cmd_send"]


def _resend_advice(bundle: Path, config_path: Path) -> str:
    return (
        "the message may or may not have been delivered. Check with a recipient whether it arrived "
        f"before running `sitrep send {bundle} --config {config_path} --resend`; resending now "
        "could deliver it twice"
    )


def _refresh_index(config: Config) -> None:
    """The archive index shows delivery outcomes: rewrite it after a send."""
    if config.output.archive is not None and config.output.archive.is_dir():
        from sitrep.deliver.index import refresh_index

        refresh_index(config.output.archive, lambda m: print(m, file=sys.stderr))


def cmd_send(args: argparse.Namespace) -> int:
    from sitrep.delivery_jobs import send_archived

    config = load(args.config)
    try:
        outcome = send_archived(config, args.bundle, dry_run=args.dry_run, resend=args.resend)
    except ValidationFailed as exc:
        if exc.report is not None:
            print_findings(exc.report, sys.stderr)
        raise
    _refresh_index(config)
    if outcome.status == "dry-run":
        print(f"dry run: {outcome.detail}; nothing was sent")
        return EXIT_OK
    print(f"{outcome.status}: {outcome.detail}; Message-ID {outcome.message_id}")
    if outcome.accepted:
        print(f"accepted: {', '.join(outcome.accepted)}")
    if outcome.status == "sent":
        return EXIT_OK
    if outcome.status == "unknown":
        print(f"delivery unknown: {_resend_advice(args.bundle, args.config)}", file=sys.stderr)
    elif outcome.status == "partial":
        print(
            f"partly delivered: refused {', '.join(sorted(outcome.refused))}; fix [email] recipients, "
            "then use --resend (the accepted recipients get a second copy)",
            file=sys.stderr,
        )
    else:
        print(f"delivery failed: {outcome.detail}", file=sys.stderr)
    return EXIT_DELIVERY


def cmd_approve(args: argparse.Namespace) -> int:
    from sitrep.deliver.review import approve_bundle

    approval, reasons = approve_bundle(args.bundle, by=args.by, note=args.note)
    what = "; ".join(r.describe() for r in reasons) or "no finding held it"
    print(f"approved {args.bundle} by {approval.by} at {approval.time} ({what})")
    print("`sitrep send BUNDLE --config FILE` or the next `sitrep run` sends it")
    archive = args.bundle.resolve().parents[2]  # ARCHIVE/<jurisdiction>/<week>/v<k>
    if (archive / "index.html").is_file():  # the index shows review states: keep it current
        from sitrep.deliver.index import refresh_index

        refresh_index(archive, lambda m: print(m, file=sys.stderr))
    return EXIT_OK


def cmd_run(args: argparse.Namespace) -> int:
    from sitrep.delivery_jobs import scheduled_run

    config = load(args.config)
    try:
        report = scheduled_run(
            config, dry_run=args.dry_run, today=args.today, log=lambda m: print(m)
        )
    except ValidationFailed as exc:
        if exc.report is not None:
            print_findings(exc.report, sys.stderr)
        raise
    _refresh_index(config)
    print(report.message, file=sys.stdout if report.ok else sys.stderr)
    if report.status == "held":
        return EXIT_HELD
    return EXIT_OK if report.ok else EXIT_DELIVERY
