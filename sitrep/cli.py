"""The ``sitrep`` command: a thin argparse front end over :mod:`sitrep.pipeline`.

Exit codes (also in ``sitrep --help``):

====  ==========================================================
0     done
1     blocked by validation (or an input could not be read)
2     usage or configuration error
3     delivery failed (archive, PDF engine or e-mail)
4     built and archived, held for review (``sitrep approve``)
5     already archived: the week has a bundle and nothing was built
====  ==========================================================

Heavy libraries are imported only inside the verbs that need them, so
``--help`` stays instant.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from sitrep.errors import (
    AnalysisError,
    ArchiveExists,
    ConfigError,
    DeliveryError,
    InputError,
    RenderError,
    ReviewRequired,
    SitrepError,
    ValidationFailed,
)

if TYPE_CHECKING:
    from sitrep.config import Config
    from sitrep.deliver.signing import PublicKey
    from sitrep.model import ValidationReport

__all__ = [
    "EXIT_ARCHIVED",
    "EXIT_BLOCKED",
    "EXIT_DELIVERY",
    "EXIT_HELD",
    "EXIT_OK",
    "EXIT_USAGE",
    "main",
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


_QUIET = (
    "no progress: without it each stage prints a line with its time to stderr (a bar for the "
    "long ones on a terminal); the files written and errors are still printed"
)


def _demo_inputs() -> Path:
    """The demo scenario folder shipped inside the package (``sitrep.demo_inputs``)."""
    import importlib.resources

    folder = Path(str(importlib.resources.files("sitrep.demo_inputs")))
    if not (folder / "sitrep.toml").is_file():
        raise ConfigError(
            f"the demo inputs are missing from the installed package ({folder}); reinstall "
            "sitrep, or pass --inputs FOLDER"
        )
    return folder


def _date_arg(text: str) -> dt.date:
    """argparse type for ``--today``: an ISO date such as 2026-11-30."""
    try:
        return dt.date.fromisoformat(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a date like 2026-11-30, got {text!r}") from None


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="sitrep",
        description="Weekly influenza-like-illness situation report by district.",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="store_true", help="print the version and exit")
    sub = parser.add_subparsers(dest="verb", metavar="VERB")

    def verb(name: str, help_text: str) -> argparse.ArgumentParser:
        return sub.add_parser(
            name,
            help=help_text,
            description=help_text,
            epilog=EPILOG,
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )

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
    p.add_argument("--quiet", action="store_true", help=_QUIET)

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
    p.add_argument("--quiet", action="store_true", help=_QUIET)
    p.add_argument(
        "--today",
        type=_date_arg,
        default=None,
        metavar="YYYY-MM-DD",
        help="the day the future-week rule compares with (default: today); for "
        "rebuilding or testing past weeks",
    )

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
        type=_date_arg,
        default=None,
        metavar="YYYY-MM-DD",
        help="the day the future-week rule compares with (default: today)",
    )
    p.add_argument("--json", action="store_true", help="print the findings as JSON")

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
        type=_date_arg,
        default=None,
        metavar="YYYY-MM-DD",
        help="the day the check's future-week rule compares with (default: today)",
    )

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

    p = verb(
        "index", "write the archive's audit index (index.html) and a comparison page per reissue"
    )
    p.epilog = (
        "exit codes: 0 written and every bundle verifies · 1 written, but a bundle fails its\n"
        "checksums or breaks its chain (marked in the index) · 2 the folder is not an archive"
    )
    p.add_argument("archive", type=Path, help="the archive root ([output] archive)")

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
        type=_date_arg,
        default=None,
        metavar="YYYY-MM-DD",
        help="the day the future-week rule compares with (default: today)",
    )

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
    return parser


def _load(path: Path) -> Config:
    from sitrep.config import load_config

    return load_config(path)


def _print_findings(report: ValidationReport, stream: object = None) -> None:
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


def _cmd_demo(args: argparse.Namespace) -> int:
    import dataclasses

    inputs = args.inputs or _demo_inputs()
    config = _load(inputs / "sitrep.toml")
    out = args.out.resolve()
    config = dataclasses.replace(
        config, output=dataclasses.replace(config.output, folder=out, archive=out / "archive")
    )
    return _build(config, out, reissue=None, archive=True, demo=True, quiet=args.quiet)


def _build(
    config: Config,
    out: Path | None,
    *,
    reissue: str | None,
    archive: bool,
    demo: bool = False,
    today: dt.date | None = None,
    quiet: bool = False,
) -> int:
    from sitrep import pipeline
    from sitrep.progress import Progress, TextProgress

    def progress() -> Progress:
        """Stage lines on stderr (a bar on a terminal); nothing with --quiet."""
        return Progress() if quiet else TextProgress(sys.stderr)

    def log(message: str) -> None:
        if not quiet:
            print(message)

    try:
        result = pipeline.build(
            config,
            out_dir=out,
            archive=archive,
            reissue_reason=reissue,
            today=today,
            log=log,
            progress=progress(),
        )
    except ValidationFailed as exc:
        if exc.report is not None:
            _print_findings(exc.report, sys.stderr)
        raise
    except DeliveryError as exc:
        if demo and isinstance(exc, ArchiveExists):
            print(f"note: {exc}")
            result = pipeline.build(
                config, out_dir=out, archive=False, today=today, log=log, progress=progress()
            )
        else:
            raise
    for path in result.outputs:
        print(f"wrote {path}")
    warnings = len(result.validation.warnings)
    print(f"week {result.week}: done with {warnings} data-quality warning(s)")
    if result.bundle is not None:
        from sitrep.deliver.review import held_message, review_state

        review = review_state(result.bundle.path, config.delivery.require_review)
        if not review.may_send:
            print(
                f"draft {result.bundle.path}: "
                + held_message(
                    review,
                    result.bundle.path,
                    reviewer=config.delivery.reviewer,
                    config_path=config.source,
                )
            )
    return EXIT_OK


def _cmd_build(args: argparse.Namespace) -> int:
    configs = list(args.config or [])
    if args.configs_dir is not None:
        from sitrep.batch import configs_in

        configs += configs_in(args.configs_dir)
    if not configs:
        raise ConfigError("build needs --config FILE (repeatable) or --configs-dir FOLDER")
    batch = len(configs) > 1 or args.configs_dir is not None or args.scheduler is not None
    if not batch and args.workers is None:
        return _build(
            _load(configs[0]),
            args.out,
            reissue=args.reissue,
            archive=not args.no_archive,
            today=args.today,
            quiet=args.quiet,
        )
    from sitrep.batch import batch_exit_code, run_batch, summary_table

    results = run_batch(
        configs,
        workers=args.workers,
        scheduler=args.scheduler,
        out_root=args.out,
        archive=not args.no_archive,
        reissue_reason=args.reissue,
        today=args.today,
    )
    print(summary_table(results))
    return batch_exit_code(results)


def _cmd_check(args: argparse.Namespace) -> int:
    import dataclasses

    from sitrep import pipeline

    config = _load(args.config)
    overrides = {}
    if args.table is not None:
        overrides["table"] = args.table.resolve()
    if args.prior is not None:
        overrides["prior_table"] = args.prior.resolve()
    if overrides:
        config = dataclasses.replace(config, input=dataclasses.replace(config.input, **overrides))
    report = pipeline.check(config, today=args.today or dt.date.today())
    if args.json:
        doc = {
            "blocked": report.blocked,
            "errors": len(report.errors),
            "warnings": len(report.warnings),
            "findings": [f.as_dict() for f in report.findings],
        }
        print(json.dumps(doc, indent=2, ensure_ascii=False))
    else:
        _print_findings(report)
    return EXIT_BLOCKED if report.blocked else EXIT_OK


def _cmd_init(args: argparse.Namespace) -> int:
    from sitrep import pipeline
    from sitrep.starter import propose, write_config

    proposal = propose(args.table, args.boundaries)
    out = write_config(proposal, args.out, force=args.force)
    guesses = out.read_text(encoding="utf-8").count("# GUESS")
    print(f"wrote {out} ({guesses} value(s) marked GUESS: check them)")
    for note in proposal.notes:
        print(f"note: {note}")
    print(f"sitrep check --config {out}:")
    report = pipeline.check(_load(out), today=args.today or dt.date.today())
    _print_findings(report)
    return EXIT_BLOCKED if report.blocked else EXIT_OK


def _cmd_templates(args: argparse.Namespace) -> int:
    from sitrep.render.html import packaged_template_dir
    from sitrep.render.templates import TEMPLATES, copy_templates

    if args.copy is None:
        print(f"packaged templates: {packaged_template_dir()}")
        for t in TEMPLATES:
            print(f"  {t.name:<16} {t.purpose}")
        print("copy them with: sitrep templates --copy DIR; variables: docs/templates.md")
        return EXIT_OK
    for path in copy_templates(args.copy, force=args.force):
        print(f"wrote {path}")
    print(f'set report.template_dir = "{args.copy}" and keep only the files you change')
    return EXIT_OK


_SIGNATURE_WORDS = {
    "valid": "signed by {fp} (a trusted key) at {at}",
    "valid-untrusted": "signed by {fp} at {at}; no trusted key was given (--public-key or "
    "output.trusted_keys), so this shows integrity, not who signed it",
    "untrusted-key": "signed by {fp}, which is NOT a trusted key",
    "invalid": "the signature is INVALID",
    "missing": "the signature file is MISSING (the manifest records one by {fp})",
    "unsigned": "unsigned (built without a signing key)",
    "unsigned-before-chain": "unsigned (written before bundles were signed and chained)",
}


def _trusted_keys(args: argparse.Namespace) -> tuple[PublicKey, ...]:
    from sitrep.deliver.signing import load_public_keys

    paths = list(args.public_key or [])
    if args.config is not None:
        paths.extend(_load(args.config).output.trusted_keys)
    return load_public_keys(paths)


def _cmd_verify(args: argparse.Namespace) -> int:
    from sitrep.deliver.archive import verify_bundle

    if (args.bundle is None) == (args.chain is None):
        raise ConfigError(
            "pass a bundle folder, or --chain ARCHIVE/<jurisdiction> (one of the two)"
        )
    trusted = _trusted_keys(args)
    if args.chain is not None:
        return _verify_chain(args.chain, trusted)
    if not args.bundle.is_dir():
        raise ConfigError(
            f"{args.bundle} is not a folder; pass ARCHIVE/<jurisdiction>/<year>-W<ww>/v<k>"
        )
    result = verify_bundle(args.bundle, trusted)
    for label, names in (
        ("missing", result.missing),
        ("changed", result.changed),
        ("extra", result.extra),
    ):
        for name in names:
            print(f"{label}: {name}")
    if not result.ok:
        for problem in result.problems:
            print(f"  {problem}")
    words = _SIGNATURE_WORDS[result.signature].format(fp=result.signed_by, at=result.signed_at)
    print(
        f"{'OK' if result.ok else 'FAILED'}: {result.checked} file(s) checked in {args.bundle}; "
        f"signature: {words}"
    )
    from sitrep.deliver.review import read_approvals, review_record_path

    approvals, problem = read_approvals(args.bundle) if result.ok else ((), "")
    if problem:
        print(f"FAILED: review record {review_record_path(args.bundle)}: {problem}")
        return EXIT_BLOCKED
    if approvals:
        for a in approvals:
            print(f"review: approved by {a.by} at {a.time}" + (f" ({a.note})" if a.note else ""))
    elif result.ok:
        print("review: draft, not approved (sitrep approve BUNDLE --by NAME signs it off)")
    return EXIT_OK if result.ok else EXIT_BLOCKED


def _verify_chain(folder: Path, trusted: tuple[PublicKey, ...]) -> int:
    from sitrep.deliver.chain import verify_chain

    report = verify_chain(folder, trusted)
    for link in report.links:
        place = f"link {link.sequence}" if link.sequence is not None else "no link"
        words = (
            _SIGNATURE_WORDS.get(link.signature, link.signature).split(";")[0].format(fp="", at="")
        )
        print(f"{link.status:>12}  {link.bundle_id:<14} {place:<8} {words}")
        for problem in link.problems:
            print(f"              {problem}")
    if report.head is not None:
        print(
            f"head: link {report.head.sequence} is {report.head.bundle_id}, checksum list SHA-256 "
            f"{report.head.checksums_sha256}; compare it with the latest report you received "
            "(a removed latest bundle leaves no broken link)"
        )
    if report.ok:
        print(f"OK: {len(report.links)} bundle(s) in {folder}, no broken link")
        return EXIT_OK
    print(f"FAILED: first break at {report.first_break}")
    return EXIT_BLOCKED


def _cmd_keys(args: argparse.Namespace) -> int:
    from sitrep.deliver.signing import generate_keys

    files = generate_keys(args.out)
    print(f"private key: {files.private} (mode 0600; keep it outside the archive, back it up)")
    print(f"public key:  {files.public} (give it to auditors; list it in output.trusted_keys)")
    print(f"fingerprint: {files.fingerprint}")
    print(f'next: set output.signing_key = "{files.private.resolve()}" in the configuration')
    return EXIT_OK


def _cmd_index(args: argparse.Namespace) -> int:
    from sitrep.deliver.index import write_index
    from sitrep.errors import DeliveryError

    if not args.archive.is_dir():
        raise ConfigError(
            f"{args.archive} is not a folder; pass the archive root ([output] archive)"
        )
    try:
        written, entries = write_index(args.archive)
    except DeliveryError as exc:
        raise ConfigError(str(exc)) from None
    bad = [e for e in entries if e.checksums != "ok" or "broken" in e.chain]
    for e in bad:
        print(
            f"problem: {e.jurisdiction} {e.week} v{e.version}: checksums {e.checksums}, chain {e.chain}"
        )
    print(f"wrote {written[-1]} ({len(entries)} bundle(s); {len(written) - 1} comparison page(s))")
    return EXIT_BLOCKED if bad else EXIT_OK


def _cmd_check_draft(args: argparse.Namespace) -> int:
    from sitrep.deliver.archive import verify_bundle
    from sitrep.deliver.draft_check import as_json, check_draft, read_edited_draft

    if not args.bundle.is_dir():
        raise ConfigError(
            f"{args.bundle} is not a folder; pass ARCHIVE/<jurisdiction>/<year>-W<ww>/v<k>"
        )
    if (args.bundle / "manifest-sha256.txt").is_file() and not verify_bundle(args.bundle).ok:
        raise ConfigError(
            f"{args.bundle} fails `sitrep verify`; a draft cannot be checked against a changed bundle"
        )
    try:
        paragraphs = read_edited_draft(args.edited)
    except InputError as exc:
        raise ConfigError(str(exc)) from None
    findings = check_draft(args.bundle, paragraphs)
    if args.json:
        print(json.dumps(as_json(findings), indent=2, ensure_ascii=False))
    else:
        for f in findings:
            print(f.line())
        verdict = (
            f"{len(findings)} place(s) in {args.edited.name} would mislead; fix them or ask the "
            "surveillance team"
            if findings
            else f"OK: {len(paragraphs)} paragraph(s) of {args.edited.name} agree with {args.bundle}"
        )
        print(verdict)
    return EXIT_BLOCKED if findings else EXIT_OK


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


def _cmd_send(args: argparse.Namespace) -> int:
    from sitrep.delivery_jobs import send_archived

    config = _load(args.config)
    try:
        outcome = send_archived(config, args.bundle, dry_run=args.dry_run, resend=args.resend)
    except ValidationFailed as exc:
        if exc.report is not None:
            _print_findings(exc.report, sys.stderr)
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


def _cmd_approve(args: argparse.Namespace) -> int:
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


def _cmd_run(args: argparse.Namespace) -> int:
    from sitrep.delivery_jobs import scheduled_run

    config = _load(args.config)
    try:
        report = scheduled_run(
            config, dry_run=args.dry_run, today=args.today, log=lambda m: print(m)
        )
    except ValidationFailed as exc:
        if exc.report is not None:
            _print_findings(exc.report, sys.stderr)
        raise
    _refresh_index(config)
    print(report.message, file=sys.stdout if report.ok else sys.stderr)
    if report.status == "held":
        return EXIT_HELD
    return EXIT_OK if report.ok else EXIT_DELIVERY


COMMANDS = {
    "demo": _cmd_demo,
    "build": _cmd_build,
    "check": _cmd_check,
    "init": _cmd_init,
    "templates": _cmd_templates,
    "verify": _cmd_verify,
    "check-draft": _cmd_check_draft,
    "index": _cmd_index,
    "keys": _cmd_keys,
    "send": _cmd_send,
    "run": _cmd_run,
    "approve": _cmd_approve,
}


def _drop_unusable_source_date_epoch() -> None:
    """Ignore an inherited SOURCE_DATE_EPOCH that is not whole seconds (e.g. empty).

    Libraries read it while they are imported (numpy's f2py does ``int('')``),
    so it is checked before any heavy import; sitrep sets its own value from
    the report week when it writes outputs.
    """
    import os

    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if epoch is not None and not (epoch.strip().isascii() and epoch.strip().isdigit()):
        del os.environ["SOURCE_DATE_EPOCH"]
        print(
            f"note: SOURCE_DATE_EPOCH={epoch!r} is not whole seconds since 1970; ignored",
            file=sys.stderr,
        )


def main(argv: Sequence[str] | None = None) -> int:
    """Run the CLI; returns the exit code (see the module docstring)."""
    _drop_unusable_source_date_epoch()
    parser = _parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse exits 2 on usage errors, 0 on --help
        return int(exc.code or 0)
    if args.version:
        from sitrep import __version__

        print(f"sitrep {__version__}")
        return EXIT_OK
    if args.verb is None:
        parser.print_help()
        return EXIT_USAGE
    try:
        return COMMANDS[args.verb](args)
    except ConfigError as exc:
        print(f"configuration error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except ValidationFailed as exc:
        print(f"blocked: {exc}", file=sys.stderr)
        return EXIT_BLOCKED
    except (InputError, AnalysisError, RenderError) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_BLOCKED
    except ArchiveExists as exc:  # nothing was to be delivered: not a delivery failure
        print(str(exc), file=sys.stderr)
        return EXIT_ARCHIVED
    except DeliveryError as exc:
        print(f"delivery failed: {exc}", file=sys.stderr)
        return EXIT_DELIVERY
    except ReviewRequired as exc:
        print(f"held: {exc}", file=sys.stderr)
        return EXIT_HELD
    except SitrepError as exc:  # pragma: no cover - every branch is listed above
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_BLOCKED
    except KeyboardInterrupt:
        print("interrupted; nothing was archived", file=sys.stderr)
        return 130
    except Exception as exc:  # a bug, not bad input: say so in one line, keep the detail on request
        import os
        import traceback

        if os.environ.get("SITREP_DEBUG"):
            traceback.print_exc()
        print(
            f"internal error ({type(exc).__name__}: {exc}); nothing was archived or sent. "
            "Set SITREP_DEBUG=1 to see the details and report them.",
            file=sys.stderr,
        )
        return EXIT_BLOCKED


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
