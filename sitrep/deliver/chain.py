"""Walk a jurisdiction's hash chain of bundles and say which link breaks, if any.

Each bundle written since the chain exists records, in ``manifest.json``::

    "chain": {"sequence": 7, "previous": {"bundle": "2026-W46/v1", "manifest_sha256": "<hex>"}}

where ``manifest_sha256`` is the SHA-256 of the previous bundle's
``manifest-sha256.txt`` (the file its signature covers). The walk checks, in
sequence order: every bundle verifies on its own (checksums, signature, place);
sequence numbers run 1, 2, ... without gaps or repeats; each link names the
bundle that holds the sequence before it, with that bundle's checksum list as
it is on disk; and no unsigned bundle follows a signed one. Bundles written
before the chain existed (no ``chain`` entry) are listed as such, checked
for their checksums only, and are not a break.

What a chain cannot show on its own: that the *latest* bundle was removed.
The walk prints the head (sequence and hash) for comparison with the last
report a reader received.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from pathlib import Path

from sitrep.deliver.archive import (
    ChainLink,
    VerifyResult,
    bundle_folders,
    read_chain_link,
    verify_bundle,
)
from sitrep.deliver.signing import PublicKey
from sitrep.errors import DeliveryError

__all__ = ["ChainReport", "LinkReport", "verify_chain"]


@dataclasses.dataclass(frozen=True)
class LinkReport:
    """One bundle as the walk found it.

    ``status``: ``ok``, ``broken`` (this link or the bundle itself is wrong),
    or ``before-chain`` (written before the chain existed; checksums only).
    """

    bundle_id: str
    sequence: int | None
    status: str
    signature: str
    problems: tuple[str, ...] = ()


@dataclasses.dataclass(frozen=True)
class ChainReport:
    """Outcome of :func:`verify_chain`; ``first_break`` names the first broken link."""

    ok: bool
    links: tuple[LinkReport, ...]
    first_break: str | None
    head: ChainLink | None
    bundles: Mapping[str, VerifyResult] = dataclasses.field(default_factory=dict)
    """Each bundle's own :func:`verify_bundle` result, by bundle id (for callers that show it)."""


def verify_chain(jurisdiction_dir: Path, trusted_keys: tuple[PublicKey, ...] = ()) -> ChainReport:
    """Check every bundle of ``ARCHIVE/<jurisdiction>`` and the links between them.

    Raises
    ------
    DeliveryError
        ``jurisdiction_dir`` is not a folder or holds no bundle.
    """
    jurisdiction_dir = Path(jurisdiction_dir)
    if not jurisdiction_dir.is_dir():
        raise DeliveryError(
            f"{jurisdiction_dir} is not a folder; pass ARCHIVE/<jurisdiction> (the folder that "
            "holds the <year>-W<ww> week folders)"
        )
    folders = bundle_folders(jurisdiction_dir)
    if not folders:
        raise DeliveryError(f"{jurisdiction_dir} holds no bundle (no <year>-W<ww>/v<k> folder)")

    checked: dict[str, VerifyResult] = {bid: verify_bundle(p, trusted_keys) for bid, p in folders}
    links = {bid: read_chain_link(bid, p) for bid, p in folders}
    chained = sorted(
        (link for link in links.values() if link is not None),
        key=lambda k: (k.sequence, k.bundle_id),
    )

    reports: list[LinkReport] = [
        LinkReport(
            bid,
            None,
            "ok" if checked[bid].ok else "broken",
            checked[bid].signature,
            () if checked[bid].ok else checked[bid].problems,
        )
        for bid, _ in folders
        if links[bid] is None
    ]
    reports = [
        dataclasses.replace(r, status="before-chain") if r.status == "ok" else r for r in reports
    ]

    by_sequence: dict[int, list[ChainLink]] = {}
    for link in chained:
        by_sequence.setdefault(link.sequence, []).append(link)
    seen_signed = False
    for link in chained:
        problems = list(checked[link.bundle_id].problems)
        problems.extend(_link_problems(link, by_sequence))
        signed = checked[link.bundle_id].signature not in ("unsigned", "unsigned-before-chain")
        if seen_signed and not signed:
            problems.append("unsigned, but an earlier bundle of this jurisdiction is signed")
        seen_signed = seen_signed or signed
        reports.append(
            LinkReport(
                link.bundle_id,
                link.sequence,
                "broken" if problems else "ok",
                checked[link.bundle_id].signature,
                tuple(problems),
            )
        )
    if chained and chained[0].sequence != 1:
        earliest = chained[0]
        reports.append(
            LinkReport(
                f"(before {earliest.bundle_id})",
                None,
                "broken",
                "",
                (f"links 1 to {earliest.sequence - 1} are missing: bundles were removed",),
            )
        )

    broken = [r for r in reports if r.status == "broken"]
    first_break = None
    if broken:
        first = min(broken, key=lambda r: (r.sequence is not None, r.sequence or 0, r.bundle_id))
        first_break = (
            f"{first.bundle_id}: {first.problems[0]}" if first.problems else first.bundle_id
        )
    head = chained[-1] if chained else None
    return ChainReport(not broken, tuple(reports), first_break, head, checked)


def _link_problems(link: ChainLink, by_sequence: dict[int, list[ChainLink]]) -> list[str]:
    """What is wrong with ``link``'s pointer to the link before it."""
    import json

    problems: list[str] = []
    if len(by_sequence[link.sequence]) > 1:
        others = ", ".join(k.bundle_id for k in by_sequence[link.sequence] if k is not link)
        problems.append(f"link {link.sequence} is claimed by this bundle and by {others}")
    try:
        manifest = json.loads((link.path / "manifest.json").read_text(encoding="utf-8"))
        previous = manifest["chain"].get("previous")
    except (OSError, ValueError, KeyError, TypeError, AttributeError):
        return [*problems, "its chain entry cannot be read"]
    if link.sequence == 1:
        if previous is not None:
            problems.append("link 1 names a previous bundle")
        return problems
    before = by_sequence.get(link.sequence - 1)
    if not isinstance(previous, dict):
        return [*problems, f"link {link.sequence} names no previous bundle"]
    if not before:
        return [
            *problems,
            f"the previous link ({link.sequence - 1}, {previous.get('bundle')}) is missing: "
            "a bundle was removed",
        ]
    match = [k for k in before if k.bundle_id == previous.get("bundle")]
    if not match:
        found = ", ".join(k.bundle_id for k in before)
        problems.append(
            f"it follows {previous.get('bundle')}, but link {link.sequence - 1} is {found}: "
            "bundles were moved or swapped"
        )
    elif match[0].checksums_sha256 != previous.get("manifest_sha256"):
        problems.append(
            f"{previous.get('bundle')} was replaced after this bundle was written: its checksum "
            f"list has SHA-256 {match[0].checksums_sha256}, this link recorded "
            f"{previous.get('manifest_sha256')}"
        )
    return problems
