"""The argument parser of ``sitrep``: one function per verb adds that verb's arguments."""

from __future__ import annotations

import argparse
from collections.abc import Callable
from pathlib import Path

from sitrep.cli.common import EPILOG, QUIET, date_arg

__all__ = ["parser"]

Verb = Callable[[str, str], argparse.ArgumentParser]
"""Adds a verb's subparser given its name and one-line help."""


def parser() -> argparse.ArgumentParser:
    """The ``sitrep`` parser with every verb (``args.verb`` names the one given)."""
    top = argparse.ArgumentParser(
        prog="sitrep",
        description="Weekly influenza-like-illness situation report by district.",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    top.add_argument("--version", action="store_true", help="print the version and exit")
    sub = top.add_subparsers(dest="verb", metavar="VERB")

    def verb(name: str, help_text: str) -> argparse.ArgumentParser:
        return sub.add_parser(
            name,
            help=help_text,
            description=help_text,
            epilog=EPILOG,
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )

    for add in (
        _demo_args,
        _build_args,
        _check_args,
        _init_args,
        _templates_args,
        _verify_args,
        _keys_args,
        _index_args,
        _check_draft_args,
        _send_args,
        _run_args,
        _approve_args,
    ):
        add(verb)
    return top


def _demo_args(verb: Verb) -> None:
    p = verb("demo", "build the invented demo week into an output folder")
    p.add_argument(
        "--out",
        type=Path,
        default=Path("sitrep-demo"),
        help="output folder (default ./sitrep-demo)",
    )
    p.add_argument(
        "--inputs",
        type=Path,
        default=None,
        help="demo inputs folder (default: the copy shipped inside the package)",
    )
    p.add_argument("--quiet", action="store_true", help=QUIET)


def _build_args(verb: Verb) -> None:
    p = verb("build", "validate, analyse, render and archive this week's report")
    p.add_argument(
        "--config",
        type=Path,
        action="append",
        default=None,
        help="the jurisdiction's TOML configuration; repeat it to build several (a batch)",
    )
    p.add_argument(
        "--configs-dir",
        type=Path,
        default=None,
        metavar="FOLDER",
        help="batch: build every *.toml file in FOLDER",
    )
    p.add_argument(
        "--workers",
        type=int,
        default=None,
        metavar="N",
        help="batch: local worker processes (default: 2, or 1 for one configuration)",
    )
    p.add_argument(
        "--scheduler",
        default=None,
        metavar="ADDRESS",
        help="batch: run on this Dask distributed scheduler, e.g. tcp://10.1.2.3:8786",
    )
    p.add_argument(
        "--out",
        type=Path,
        default=None,
        help="output folder (default: output.folder; in a batch FOLDER/<jurisdiction>/)",
    )
    p.add_argument(
        "--reissue",
        metavar="REASON",
        default=None,
        help="write a new version of an already archived week, giving the reason",
    )
    p.add_argument("--no-archive", action="store_true", help="write the output folder only")
    p.add_argument("--quiet", action="store_true", help=QUIET)
    p.add_argument(
        "--today",
        type=date_arg,
        default=None,
        metavar="YYYY-MM-DD",
        help="the day the future-week rule compares with (default: today); for "
        "rebuilding or testing past weeks",
    )


def _check_args(verb: Verb) -> None:
    p = verb("check", "validate the inputs only; print the findings")
    p.epilog = (
        "exit codes: 0 no error-level finding (warnings may be listed) · 1 at least one error\n"
        "(a build would be blocked) or an unreadable input · 2 usage or configuration error"
    )
    p.add_argument(
        "--config", type=Path, required=True, help="the jurisdiction's TOML configuration"
    )
    p.add_argument(
        "--table", type=Path, default=None, help="this week's table (overrides input.table)"
    )
    p.add_argument(
        "--prior", type=Path, default=None, help="last week's table (overrides input.prior_table)"
    )
    p.add_argument(
        "--today",
        type=date_arg,
        default=None,
        metavar="YYYY-MM-DD",
        help="the day the future-week rule compares with (default: today)",
    )
    p.add_argument("--json", action="store_true", help="print the findings as JSON")


def _init_args(verb: Verb) -> None:
    p = verb("init", "propose a configuration from a table and a boundary file, then check it")
    p.epilog = (
        "Reads the table's header and a sample of rows and the boundary layer's fields, proposes\n"
        "the column mapping, the week system and the id field, writes a commented configuration\n"
        "(every inferred value is marked GUESS) and runs `sitrep check` on it.\n"
        "exit codes: 0 written and no error-level finding · 1 written but check found an error,\n"
        "or an input could not be read · 2 usage error (e.g. --out exists without --force)"
    )
    p.add_argument(
        "--table", type=Path, required=True, help="a weekly table (CSV, XLSX or Parquet)"
    )
    p.add_argument(
        "--boundaries",
        type=Path,
        required=True,
        help="the district boundaries (GeoPackage, GeoJSON or Shapefile)",
    )
    p.add_argument(
        "--out",
        type=Path,
        default=Path("sitrep.toml"),
        help="where to write the configuration (default ./sitrep.toml)",
    )
    p.add_argument("--force", action="store_true", help="replace --out when it exists")
    p.add_argument(
        "--today",
        type=date_arg,
        default=None,
        metavar="YYYY-MM-DD",
        help="the day the check's future-week rule compares with (default: today)",
    )


def _templates_args(verb: Verb) -> None:
    p = verb(
        "templates", "show where the packaged templates are, or copy them to start an override"
    )
    p.epilog = (
        "Without --copy: prints the packaged template folder and its files. With --copy DIR:\n"
        'writes them into DIR; then set report.template_dir = "DIR" and keep only the files you\n'
        "change (missing ones fall back to the packaged templates). docs/templates.md lists the\n"
        "variables each template receives.\n"
        "exit codes: 0 done · 2 usage error (DIR holds a template file and --force is not given)"
    )
    p.add_argument(
        "--copy",
        type=Path,
        default=None,
        metavar="DIR",
        help="write the packaged templates into DIR (created when missing)",
    )
    p.add_argument("--force", action="store_true", help="replace template files already in DIR")


def _verify_args(verb: Verb) -> None:
    p = verb(
        "verify", "recompute every checksum of an archived bundle, check its signature or a chain"
    )
    p.epilog = (
        "Also prints the bundle's review state (draft, or approved by whom and when) from\n"
        "<bundle>.review.jsonl beside it.\n"
        "exit codes: 0 every checksum (and signature, and link) is good · 1 a file is missing,\n"
        "changed or extra, a signature is missing, invalid or by an untrusted key, a chain\n"
        "link is broken, or the review record was altered · 2 the path is not a bundle (or\n"
        "jurisdiction) folder, or a key is unreadable"
    )
    p.add_argument(
        "bundle",
        type=Path,
        nargs="?",
        default=None,
        help="bundle folder, e.g. ARCHIVE/<jurisdiction>/2026-W47/v1",
    )
    p.add_argument(
        "--chain",
        type=Path,
        default=None,
        metavar="FOLDER",
        help="walk the hash chain of every bundle in ARCHIVE/<jurisdiction> instead",
    )
    p.add_argument(
        "--public-key",
        type=Path,
        action="append",
        default=None,
        metavar="FILE",
        help="a trusted public key (PEM); repeat it for keys from before a rotation",
    )
    p.add_argument(
        "--config",
        type=Path,
        default=None,
        help="take the trusted keys from output.trusted_keys of this configuration",
    )


def _keys_args(verb: Verb) -> None:
    p = verb("keys", "create the key pair that signs archived bundles")
    keys = p.add_subparsers(dest="keys_verb", metavar="ACTION", required=True)
    k = keys.add_parser(
        "init",
        help="write a new Ed25519 key pair into a folder",
        description="Write a new Ed25519 key pair (private 0600, public 0644) into "
        "FOLDER and print the public key's fingerprint. Keep the private key "
        "outside the archive and point output.signing_key at it.",
        epilog="exit codes: 0 written · 3 a key file exists (never overwritten)",
    )
    k.add_argument(
        "--out",
        type=Path,
        required=True,
        metavar="FOLDER",
        help="folder for the key pair (created 0700 when missing)",
    )


def _index_args(verb: Verb) -> None:
    p = verb(
        "index", "write the archive's audit index (index.html) and a comparison page per reissue"
    )
    p.epilog = (
        "exit codes: 0 written and every bundle verifies · 1 written, but a bundle fails its\n"
        "checksums or breaks its chain (marked in the index) · 2 the folder is not an archive"
    )
    p.add_argument("archive", type=Path, help="the archive root ([output] archive)")


def _check_draft_args(verb: Verb) -> None:
    p = verb("check-draft", "compare an edited draft with the bundle it came from")
    p.epilog = (
        "exit codes: 0 nothing in the edit contradicts the bundle · 1 at least one figure, district,\n"
        "week, direction word or caution would mislead (each is listed with its paragraph) ·\n"
        "2 the bundle or the edited file cannot be read"
    )
    p.add_argument(
        "bundle", type=Path, help="bundle folder, e.g. ARCHIVE/<jurisdiction>/2026-W47/v1"
    )
    p.add_argument("edited", type=Path, help="the edited draft: .docx, .md or .txt")
    p.add_argument("--json", action="store_true", help="print the findings as JSON")


def _send_args(verb: Verb) -> None:
    p = verb("send", "e-mail an archived bundle's PDF")
    p.epilog = (
        "exit codes: 0 sent, or written as <bundle>.eml with --dry-run · 1 the archived run was\n"
        "blocked by validation (nothing is sent) · 2 usage or configuration error (e-mail disabled,\n"
        "no recipients, another jurisdiction's bundle) · 3 delivery failed, partial or unknown, the\n"
        "bundle fails verification, or it was already sent: a second send is refused unless --resend ·\n"
        "4 held for review (delivery.require_review): nothing is sent until `sitrep approve`.\n"
        "After 'unknown' (connection lost once the message was transmitted) ask a recipient whether\n"
        "it arrived before using --resend."
    )
    p.add_argument("bundle", type=Path, help="bundle folder")
    p.add_argument(
        "--config", type=Path, required=True, help="the jurisdiction's TOML configuration"
    )
    p.add_argument(
        "--dry-run", action="store_true", help="write the message as .eml instead of sending"
    )
    p.add_argument("--resend", action="store_true", help="send again although the bundle was sent")


def _run_args(verb: Verb) -> None:
    p = verb(
        "run", "the scheduled Monday job: newest extract in the inbox -> build -> archive -> send"
    )
    p.epilog = (
        "The report week is the latest week of the newest extract matching input.inbox_pattern in\n"
        "input.inbox; the extract with the next older week is last week's table. A week already\n"
        "archived and sent is left alone (exit 0, 'nothing to do'); archived but unsent is sent.\n"
        "A bundle held for review (delivery.require_review) is archived but not sent; after\n"
        "`sitrep approve BUNDLE --by NAME` the next run sends it.\n"
        "exit codes: 0 done or nothing to do · 1 blocked by validation or unreadable/ambiguous\n"
        "extracts (nothing archived or sent) · 2 usage or configuration error · 3 delivery failed,\n"
        "partial or unknown (see the message; nothing is resent automatically) · 4 built and\n"
        "archived, held for review (the message says who must review what)"
    )
    p.add_argument(
        "--config", type=Path, required=True, help="the jurisdiction's TOML configuration"
    )
    p.add_argument(
        "--dry-run", action="store_true", help="write the e-mail as .eml instead of sending"
    )
    p.add_argument(
        "--today",
        type=date_arg,
        default=None,
        metavar="YYYY-MM-DD",
        help="the day the future-week rule compares with (default: today)",
    )


def _approve_args(verb: Verb) -> None:
    p = verb("approve", "sign off an archived bundle held for review, so that it can be sent")
    p.epilog = (
        "Appends one line (reviewer, UTC time, note, the findings that held it, the checksum of\n"
        "the bundle's manifest and of the line before) to <bundle>.review.jsonl beside the bundle;\n"
        "the bundle itself is not changed. Then `sitrep send` or the next `sitrep run` sends it.\n"
        "exit codes: 0 approved · 1 the run was blocked by validation · 2 usage error ·\n"
        "3 the bundle fails verification or its review record was altered (nothing written)"
    )
    p.add_argument(
        "bundle", type=Path, help="bundle folder, e.g. ARCHIVE/<jurisdiction>/2026-W47/v1"
    )
    p.add_argument("--by", required=True, metavar="NAME", help="who reviewed the report")
    p.add_argument("--note", default="", help="what was checked (one line)")
