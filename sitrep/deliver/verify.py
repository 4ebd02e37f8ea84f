"""Checking a bundle: every checksum recomputed against both manifests, signature and place.

:func:`verify_bundle` reads a bundle written by :mod:`sitrep.deliver.archive`
and lists what is missing, changed or extra; it never writes.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import re
from collections.abc import Mapping
from pathlib import Path, PurePosixPath
from typing import Any

from sitrep.deliver.layout import (
    MANIFEST_JSON,
    MANIFEST_SHA256,
    RESERVED,
    VERSION_DIR,
    WEEK_DIR,
    check_name,
)
from sitrep.deliver.signing import SIGNATURE_FILE, PublicKey, check_signature
from sitrep.errors import DeliveryError

__all__ = ["VerifyResult", "verify_bundle"]

_SUM_LINE = re.compile(r"^([0-9a-f]{64}) [ *](.+)$")


@dataclasses.dataclass(frozen=True)
class VerifyResult:
    """Outcome of :func:`verify_bundle`.

    ``missing``: listed in a manifest but absent; ``changed``: present but its
    SHA-256 or size differs from a manifest (or it is not a regular file);
    ``extra``: present in the bundle folder but listed nowhere (folders end in
    ``/``); ``problems``: human-readable descriptions of everything wrong,
    including unreadable or inconsistent manifests; ``checked``: number of
    files whose checksum was recomputed.
    """

    ok: bool
    missing: tuple[str, ...]
    changed: tuple[str, ...]
    extra: tuple[str, ...]
    checked: int
    problems: tuple[str, ...] = ()
    signature: str = "unsigned"
    """``unsigned``; ``unsigned-before-chain`` (a bundle from before signing and the
    chain existed); or a :class:`~sitrep.deliver.signing.SignatureCheck` status:
    ``valid``, ``valid-untrusted``, ``untrusted-key``, ``invalid``; or ``missing``
    (the manifest says signed, ``manifest.sig`` is gone)."""
    signed_by: str = ""
    """Fingerprint of the signing key, when signed."""
    signed_at: str = ""


@dataclasses.dataclass
class _Tally:
    """What is wrong so far, in the order it was found."""

    problems: list[str] = dataclasses.field(default_factory=list)
    missing: set[str] = dataclasses.field(default_factory=set)
    changed: set[str] = dataclasses.field(default_factory=set)

    def lack(self, name: str, problem: str) -> None:
        self.missing.add(name)
        self.problems.append(problem)

    def differ(self, name: str, problem: str) -> None:
        self.changed.add(name)
        self.problems.append(problem)


def _hash_file(path: Path) -> tuple[str, int]:
    h = hashlib.sha256()
    size = 0
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
            size += len(chunk)
    return h.hexdigest(), size


def verify_bundle(path: Path, trusted_keys: tuple[PublicKey, ...] = ()) -> VerifyResult:
    """Recompute every checksum of a bundle and compare with both manifests.

    Every name listed in ``manifest-sha256.txt`` or in ``manifest.json``'s
    ``files`` is checked (names are confined as in :func:`check_name`, so a
    tampered manifest cannot make this read outside the bundle). A file is
    *changed* when its SHA-256 differs from either list, its size differs
    from ``manifest.json``, or it is not a regular file (a symbolic link is
    not followed). Files and folders present but listed nowhere are *extra*.
    The two lists must name the same files (``manifest.json`` and
    ``manifest-sha256.txt`` aside).

    Mail sidecars (``v<k>.sent.json``, ``v<k>.eml``) live next to the bundle
    folder, not inside it, so they never count as extra.

    When ``manifest.json`` records a signature, ``manifest.sig`` must be there
    and sign this bundle's ``manifest-sha256.txt`` at this place (week and
    version); with ``trusted_keys`` the signing key must be one of them, and an
    unsigned bundle written since the chain exists fails. A bundle whose
    manifest names another week or version than its folder fails too (a
    moved or swapped bundle).

    Parameters
    ----------
    path : Path
        The bundle folder (``.../v<k>``).
    trusted_keys : tuple of PublicKey
        Public keys the signature must come from (``--public-key``,
        ``output.trusted_keys``); empty: the signature is only checked for
        consistency, which proves nothing against someone who re-signs.

    Returns
    -------
    VerifyResult
        ``ok`` is True only when nothing is missing, changed, extra or
        otherwise wrong.

    Raises
    ------
    DeliveryError
        If ``path`` is not a folder.
    """
    path = Path(path)
    if not path.is_dir():
        raise DeliveryError(
            f"{path} is not a bundle folder; pass ARCHIVE/<jurisdiction>/<week>/v<k>"
        )
    tally = _Tally()
    sums = _read_sums(path, tally)
    manifest, listed = _read_manifest(path, tally)
    if sums and listed:
        _compare_lists(sums, listed, tally)
    expected = sorted(set(sums) | set(listed) | ({MANIFEST_JSON} if sums else set()))
    checked = sum(_check_file(path, name, sums, listed, tally) for name in expected)

    signature = _check_bundle_signature(path, manifest, trusted_keys, tally.problems)
    tally.problems.extend(_check_place(path, manifest))

    known = set(expected) | {MANIFEST_SHA256, MANIFEST_JSON}
    if signature.status != "unsigned" and signature.status != "unsigned-before-chain":
        known.add(SIGNATURE_FILE)
    extra = _extra_entries(path, known)
    for e in sorted(extra):
        tally.problems.append(f"{e} is not listed in the manifest")

    ok = not (tally.missing or tally.changed or extra or tally.problems)
    return VerifyResult(
        ok=ok,
        missing=tuple(sorted(tally.missing)),
        changed=tuple(sorted(tally.changed)),
        extra=tuple(sorted(extra)),
        checked=checked,
        problems=tuple(tally.problems),
        signature=signature.status,
        signed_by=signature.fingerprint,
        signed_at=signature.signed_at,
    )


def _read_sums(path: Path, tally: _Tally) -> dict[str, str]:
    """Name -> SHA-256 from ``manifest-sha256.txt`` (empty when it is missing or unreadable)."""
    sums: dict[str, str] = {}
    sums_path = path / MANIFEST_SHA256
    if not sums_path.is_file() or sums_path.is_symlink():
        tally.lack(MANIFEST_SHA256, f"{MANIFEST_SHA256} is missing")
        return sums
    try:
        lines = sums_path.read_text(encoding="utf-8").splitlines()
    except (OSError, UnicodeDecodeError) as exc:
        lines = []
        tally.differ(MANIFEST_SHA256, f"{MANIFEST_SHA256} cannot be read: {exc}")
    for i, line in enumerate(lines, start=1):
        m = _SUM_LINE.match(line)
        if not m:
            tally.differ(
                MANIFEST_SHA256, f"{MANIFEST_SHA256} line {i} is not '<sha256>  <name>': {line!r}"
            )
            continue
        sums[m.group(2)] = m.group(1)
    return sums


def _read_manifest(path: Path, tally: _Tally) -> tuple[dict[str, Any], dict[str, dict[str, Any]]]:
    """``manifest.json`` and its ``files`` entries (both empty when missing or unreadable)."""
    listed: dict[str, dict[str, Any]] = {}
    manifest: dict[str, Any] = {}
    man_path = path / MANIFEST_JSON
    if not man_path.is_file() or man_path.is_symlink():
        tally.lack(MANIFEST_JSON, f"{MANIFEST_JSON} is missing")
        return manifest, listed
    try:
        manifest = json.loads(man_path.read_text(encoding="utf-8"))
        if not isinstance(manifest, dict):
            raise TypeError("not a JSON object")
        entries = manifest["files"]
        if not isinstance(entries, dict):
            raise TypeError("'files' is not an object")
        listed = {str(k): v for k, v in entries.items() if isinstance(v, dict)}
    except (OSError, ValueError, KeyError, TypeError) as exc:
        tally.differ(MANIFEST_JSON, f"{MANIFEST_JSON} cannot be read as a sitrep manifest: {exc}")
    return manifest, listed


def _compare_lists(sums: Mapping[str, str], listed: Mapping[str, Any], tally: _Tally) -> None:
    """The two manifests must name the same files (the manifests themselves aside)."""
    for n in sorted(set(sums) - set(listed) - RESERVED):
        tally.problems.append(f"{n} is in {MANIFEST_SHA256} but not in {MANIFEST_JSON}")
    for n in sorted(set(listed) - set(sums)):
        tally.problems.append(f"{n} is in {MANIFEST_JSON} but not in {MANIFEST_SHA256}")


def _check_file(
    path: Path,
    name: str,
    sums: Mapping[str, str],
    listed: Mapping[str, dict[str, Any]],
    tally: _Tally,
) -> int:
    """Hash one listed file and compare with both manifests; 1 when it was hashed, else 0."""
    try:
        check_name(name)
    except DeliveryError:
        tally.differ(name, f"manifest lists a file name that is not allowed: {name!r}")
        return 0
    file_path = path.joinpath(*name.split("/"))
    if not os.path.lexists(file_path):
        if name not in tally.missing:
            tally.lack(name, f"{name} is missing")
        return 0
    if file_path.is_symlink() or not file_path.is_file():
        tally.differ(name, f"{name} is not a regular file")
        return 0
    try:
        digest, size = _hash_file(file_path)
    except OSError as exc:
        tally.differ(name, f"{name} cannot be read: {exc}")
        return 0
    if name in sums and sums[name] != digest:
        tally.differ(name, f"{name}: SHA-256 is {digest}, {MANIFEST_SHA256} says {sums[name]}")
    entry = listed.get(name)
    if entry is not None:
        if entry.get("sha256") != digest:
            tally.differ(
                name, f"{name}: SHA-256 is {digest}, {MANIFEST_JSON} says {entry.get('sha256')}"
            )
        if entry.get("size") != size:
            tally.differ(
                name, f"{name}: size is {size} bytes, {MANIFEST_JSON} says {entry.get('size')}"
            )
    return 1


def _extra_entries(path: Path, known: set[str]) -> set[str]:
    """Files and folders (ending in ``/``) in the bundle folder that no manifest lists."""
    known_dirs = {str(p) for n in known for p in PurePosixPath(n).parents if str(p) != "."}
    extra: set[str] = set()
    for dirpath, dirnames, filenames in os.walk(path):
        rel = Path(dirpath).relative_to(path)
        for d in dirnames:
            r = (rel / d).as_posix()
            if r not in known_dirs:
                extra.add(r + "/")
        dirnames[:] = [d for d in dirnames if (rel / d).as_posix() in known_dirs]
        for f in filenames:
            r = (rel / f).as_posix()
            if r not in known:
                extra.add(r)
    return extra


@dataclasses.dataclass(frozen=True)
class _Signature:
    status: str
    fingerprint: str = ""
    signed_at: str = ""


def _check_bundle_signature(
    path: Path, manifest: Mapping[str, Any], trusted: tuple[PublicKey, ...], problems: list[str]
) -> _Signature:
    """Check ``manifest.sig`` against what the manifest records; append what is wrong."""
    sig_path = path / SIGNATURE_FILE
    present = os.path.lexists(sig_path)
    recorded = manifest.get("signature")
    if not isinstance(recorded, dict):
        if present:
            problems.append(
                f"{SIGNATURE_FILE} is present but {MANIFEST_JSON} records the bundle as unsigned"
            )
            return _Signature("invalid")
        if "chain" not in manifest:
            return _Signature("unsigned-before-chain")
        if trusted:
            problems.append(
                "the bundle is unsigned, but a trusted key was given: it was built without a "
                "signing key, or its signature was removed and both manifests rewritten"
            )
        return _Signature("unsigned")
    fp = str(recorded.get("fingerprint", ""))
    if not present:
        problems.append(
            f"{SIGNATURE_FILE} is missing ({MANIFEST_JSON} records a signature by {fp})"
        )
        return _Signature("missing", fp)
    if sig_path.is_symlink() or not sig_path.is_file():
        problems.append(f"{SIGNATURE_FILE} is not a regular file")
        return _Signature("invalid", fp)
    try:
        document = sig_path.read_bytes()
        checksums = (path / MANIFEST_SHA256).read_bytes()
    except OSError as exc:
        problems.append(f"{SIGNATURE_FILE} cannot be checked: {exc}")
        return _Signature("invalid", fp)
    result = check_signature(document, checksums, f"{path.parent.name}/{path.name}", trusted)
    problems.extend(result.problems)
    if result.ok and result.fingerprint != fp:
        problems.append(
            f"{SIGNATURE_FILE} is signed by {result.fingerprint}, {MANIFEST_JSON} records {fp}"
        )
        return _Signature("invalid", result.fingerprint, result.signed_at)
    return _Signature(result.status, result.fingerprint, result.signed_at)


def _check_place(path: Path, manifest: Mapping[str, Any]) -> list[str]:
    """A bundle must sit where its manifest says (week folder and version)."""
    recorded = manifest.get("bundle")
    if not isinstance(recorded, dict):
        return []
    if not (WEEK_DIR.match(path.parent.name) and VERSION_DIR.match(path.name)):
        return []  # a copy outside an archive layout: nothing to compare with
    here = f"{path.parent.name}/{path.name}"
    there = f"{recorded.get('week')}/v{recorded.get('version')}"
    return (
        []
        if here == there
        else [f"{MANIFEST_JSON} says this is bundle {there}, but it sits in {here}"]
    )
