"""Commands on archived bundles: verify, keys, index and check-draft."""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import TYPE_CHECKING

from sitrep.cli.common import EXIT_BLOCKED, EXIT_OK, load
from sitrep.errors import ConfigError, InputError

if TYPE_CHECKING:
    from sitrep.deliver.signing import PublicKey

__all__ = ["cmd_check_draft", "cmd_index", "cmd_keys", "cmd_verify"]

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
        paths.extend(load(args.config).output.trusted_keys)
    return load_public_keys(paths)


def cmd_verify(args: argparse.Namespace) -> int:
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


def cmd_keys(args: argparse.Namespace) -> int:
    from sitrep.deliver.signing import generate_keys

    files = generate_keys(args.out)
    print(f"private key: {files.private} (mode 0600; keep it outside the archive, back it up)")
    print(f"public key:  {files.public} (give it to auditors; list it in output.trusted_keys)")
    print(f"fingerprint: {files.fingerprint}")
    print(f'next: set output.signing_key = "{files.private.resolve()}" in the configuration')
    return EXIT_OK


def cmd_index(args: argparse.Namespace) -> int:
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


def cmd_check_draft(args: argparse.Namespace) -> int:
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
