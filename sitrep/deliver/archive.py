"""The audit archive: one immutable, checksummed bundle per jurisdiction and week.

Layout::

    ARCHIVE/<jurisdiction slug>/<year>-W<ww>/v<k>/
        report.pdf, report.html, draft.md, ..., inputs/..., figures/...
        manifest.json            per-file SHA-256 and size + what the caller recorded
        manifest-sha256.txt      "<sha256>  <name>" lines, accepted by ``sha256sum -c``
        manifest.sig             Ed25519 signature over manifest-sha256.txt (signing.py; when a
                                 key is configured)
    ARCHIVE/<jurisdiction slug>/<year>-W<ww>/v<k>.sent.json   (mail.py; outside the bundle)
    ARCHIVE/<jurisdiction slug>/<year>-W<ww>/v<k>.eml         (mail.py dry run; outside the bundle)

A published bundle is never changed. Immutability comes from exclusive
creation and the checksum manifest, not from file permissions (root ignores
``chmod``). A new version (``v<k+1>``) is written only when a reissue reason is
given, and its manifest names the version it supersedes.

Every bundle's manifest also records its link in the jurisdiction's hash
chain: a sequence number (1, 2, ... in the order bundles were published,
reissues included) and the SHA-256 of the previous bundle's
``manifest-sha256.txt``. Removing, replacing or reordering a past bundle
breaks the next link (:mod:`sitrep.deliver.chain` walks it). Once a bundle of
a jurisdiction is signed, the next one must be signed too.

This module also owns the reproducibility clock: :func:`source_date_epoch`
derives ``SOURCE_DATE_EPOCH`` from the report week and :func:`reproducible_env`
sets it for the duration of a build.
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime as dt
import enum
import errno
import hashlib
import json
import os
import re
import shutil
import tempfile
import unicodedata
from collections.abc import Iterator, Mapping
from pathlib import Path, PurePosixPath
from typing import Any

from sitrep.deliver.signing import (
    SIGNATURE_FILE,
    PublicKey,
    Signer,
    check_signature,
    signature_document,
)
from sitrep.errors import ArchiveExists, DeliveryError

__all__ = [
    "MANIFEST_JSON",
    "MANIFEST_SHA256",
    "Bundle",
    "ChainLink",
    "VerifyResult",
    "already_archived",
    "bundle_folders",
    "chain_head",
    "read_chain_link",
    "bundle_dir",
    "check_name",
    "check_outputs",
    "jurisdiction_slug",
    "next_version",
    "read_source_date_epoch",
    "replace_file",
    "reproducible_env",
    "source_date_epoch",
    "verify_bundle",
    "write_bundle",
    "write_outputs",
]

MANIFEST_JSON = "manifest.json"
"""Name of the JSON manifest inside a bundle."""
MANIFEST_SHA256 = "manifest-sha256.txt"
"""Name of the ``sha256sum -c`` checksum list inside a bundle."""
_RESERVED = frozenset({MANIFEST_JSON, MANIFEST_SHA256, SIGNATURE_FILE})
_MANIFEST_KEYS = ("bundle", "files", "reissue", "chain", "signature")
"""Top-level manifest keys written by :func:`write_bundle`; callers may not pass them."""

_COMPONENT = re.compile(r"^[A-Za-z0-9_][A-Za-z0-9._+-]*$")
_WEEK = re.compile(r"^\s*(\d{4})\s*-?\s*W\s*(\d{1,2})\s*$", re.IGNORECASE)
_VERSION_DIR = re.compile(r"^v([1-9][0-9]*)$")
_WEEK_DIR = re.compile(r"^[0-9]{4}-W[0-9]{2}$")
_LOCK_FILE = ".chain.lock"
_SUM_LINE = re.compile(r"^([0-9a-f]{64}) [ *](.+)$")
_TMP_PREFIX = ".tmp-"
_SLUG_MAX = 64
_FILE_MODE = 0o444
"""Bundle files are created read-only: a hint to people, not the protection."""


@dataclasses.dataclass(frozen=True)
class Bundle:
    """A bundle as written by :func:`write_bundle`.

    ``files`` lists every file in the bundle (the caller's files plus
    ``manifest.json`` and ``manifest-sha256.txt``), sorted by name.
    """

    path: Path
    jurisdiction: str
    week_label: str
    version: int
    files: tuple[str, ...]


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


@dataclasses.dataclass(frozen=True)
class ChainLink:
    """A bundle's place in its jurisdiction's hash chain, as read from disk."""

    bundle_id: str
    """``<year>-W<ww>/v<k>``."""
    path: Path
    sequence: int
    checksums_sha256: str
    """SHA-256 of the bundle's ``manifest-sha256.txt``: what the next link records."""
    signed: bool


# --------------------------------------------------------------------------- names


def jurisdiction_slug(jurisdiction: str) -> str:
    """Folder name for a jurisdiction: safe ASCII, never empty.

    The name is Unicode-normalised (NFKD), reduced to ASCII (accents dropped),
    lower-cased, and every run of characters outside ``[a-z0-9]`` becomes one
    ``-``; leading and trailing ``-`` are removed and the result is cut to 64
    characters. When nothing is left (an empty name, or a script with no ASCII
    letters such as Greek), the slug is ``j-`` plus the first 12 hex digits of
    the SHA-256 of the NFC-normalised name, so distinct names stay distinct.

    Parameters
    ----------
    jurisdiction : str
        Display name from ``[report] jurisdiction``.

    Returns
    -------
    str
        Matches ``^[a-z0-9][a-z0-9-]*$``.

    Examples
    --------
    >>> jurisdiction_slug("Île-de-France / Nord")
    'ile-de-france-nord'
    >>> jurisdiction_slug("../../etc")
    'etc'
    """
    ascii_name = unicodedata.normalize("NFKD", jurisdiction).encode("ascii", "ignore").decode()
    slug = re.sub(r"[^a-z0-9]+", "-", ascii_name.lower()).strip("-")[:_SLUG_MAX].strip("-")
    if slug:
        return slug
    digest = hashlib.sha256(unicodedata.normalize("NFC", jurisdiction).encode("utf-8")).hexdigest()
    return f"j-{digest[:12]}"


def _week_folder(week_label: str) -> str:
    match = _WEEK.match(str(week_label))
    if not match or not 1 <= int(match.group(2)) <= 53:
        raise DeliveryError(
            f"expected a report week label like 2026-W47 (week 1..53), got {week_label!r}; "
            "pass str(EpiWeek)"
        )
    return f"{int(match.group(1)):04d}-W{int(match.group(2)):02d}"


def bundle_dir(archive_root: Path, jurisdiction: str, week_label: str, version: int) -> Path:
    """Path of one bundle: ``ARCHIVE/<jurisdiction slug>/<year>-W<ww>/v<k>/``.

    Parameters
    ----------
    archive_root : Path
        ``[output] archive``.
    jurisdiction : str
        Display name; turned into a folder name by :func:`jurisdiction_slug`.
    week_label : str
        Report week such as ``2026-W47`` (``2026W7`` is accepted and written
        ``2026-W07``).
    version : int
        Bundle version, 1 for the first issue.

    Returns
    -------
    Path
        The bundle folder (it need not exist).

    Raises
    ------
    DeliveryError
        If the week label cannot be read or ``version`` is below 1.
    """
    if isinstance(version, bool) or not isinstance(version, int) or version < 1:
        raise DeliveryError(f"bundle version must be a whole number >= 1, got {version!r}")
    return (
        Path(archive_root)
        / jurisdiction_slug(jurisdiction)
        / _week_folder(week_label)
        / f"v{version}"
    )


def _versions(week_dir: Path) -> list[int]:
    try:
        entries = list(os.scandir(week_dir))
    except FileNotFoundError:
        return []
    except OSError as exc:
        raise DeliveryError(f"cannot list archive folder {week_dir}: {exc}") from exc
    return sorted(
        int(m.group(1))
        for e in entries
        if (m := _VERSION_DIR.match(e.name)) and e.is_dir(follow_symlinks=False)
    )


def already_archived(jurisdiction: str, week_label: str, current: Path) -> ArchiveExists:
    """The error for a week that is archived when no reissue was asked for.

    It says that nothing was built or written, and names the two ways on:
    ``--no-archive`` to preview the week again, ``--reissue`` to publish a
    correction.
    """
    return ArchiveExists(
        f"{jurisdiction} {week_label} is already archived as {current}; a published week is "
        "never overwritten and nothing was written. To look at the report again without "
        "archiving, run sitrep build --no-archive; to publish a corrected version, run "
        'sitrep build --reissue "<reason>"',
        week=week_label,
        bundle=str(current),
    )


def next_version(archive_root: Path, jurisdiction: str, week_label: str) -> int:
    """The version number the next bundle of this week would get (1 when none exists).

    Only folders named ``v<k>`` count; temporary build folders (``.tmp-*``) and
    mail sidecar files do not.
    """
    week_dir = bundle_dir(archive_root, jurisdiction, week_label, 1).parent
    found = _versions(week_dir)
    return found[-1] + 1 if found else 1


def archived_results(
    archive_root: Path, jurisdiction: str, week_label: str
) -> tuple[tuple[Path, bytes], ...]:
    """``results.json`` of every archived version of a week, oldest first (path, bytes).

    Disclosure control reads them so that a reissue keeps withheld what an
    earlier version withheld (docs/methods.md §6.2). A version without the
    file is skipped.

    Raises
    ------
    DeliveryError
        If a version's results.json exists but cannot be read.
    """
    week_dir = bundle_dir(archive_root, jurisdiction, week_label, 1).parent
    out = []
    for version in _versions(week_dir):
        path = week_dir / f"v{version}" / "results.json"
        try:
            out.append((path, path.read_bytes()))
        except FileNotFoundError:
            continue
        except OSError as exc:
            raise DeliveryError(f"cannot read {path}: {exc}") from exc
    return tuple(out)


def check_name(name: str) -> str:
    """Check one output file name and return it unchanged.

    A name is a relative POSIX path whose components each match
    ``[A-Za-z0-9_][A-Za-z0-9._+-]*``. That excludes absolute paths, ``..`` and
    ``.`` components, empty components (``a//b``), backslashes, NUL and every
    other control character, spaces, percent-encodings (``..%2Fx``) and hidden
    files. Components are at most 255 bytes.

    Raises
    ------
    DeliveryError
        If the name is not of that form; the message names it and the rule.
    """
    if not isinstance(name, str) or not name:
        raise DeliveryError(f"output file name must be a non-empty string, got {name!r}")
    parts = name.split("/")
    bad = [p for p in parts if not _COMPONENT.match(p) or len(p.encode()) > 255]
    if name.startswith("/") or bad:
        raise DeliveryError(
            f"output file name {name!r} is not allowed: use a relative path whose parts use only "
            "letters, digits, '.', '_', '+', '-' (not starting with '.'); absolute paths, '..', "
            "backslashes, spaces and control characters are refused"
        )
    return name


def _check_names(names: list[str], *, reserved: frozenset[str] = frozenset()) -> list[str]:
    checked = sorted(check_name(n) for n in names)
    folded: dict[str, str] = {}
    for n in checked:
        if n in reserved:
            raise DeliveryError(f"{n!r} is written by sitrep itself; rename the caller's file")
        if n.casefold() in folded:
            raise DeliveryError(
                f"output names {folded[n.casefold()]!r} and {n!r} differ only in case; "
                "they would collide on case-insensitive file systems"
            )
        folded[n.casefold()] = n
    as_set = set(checked)
    for n in checked:
        for parent in PurePosixPath(n).parents:
            if str(parent) != "." and str(parent) in as_set:
                raise DeliveryError(f"{str(parent)!r} is both a file and the folder of {n!r}")
    return checked


def _check_confined(root: Path, target: Path) -> None:
    """Refuse when an existing part of ``target`` resolves outside ``root``.

    ``target`` is a lexical path below ``root``. Walk from ``target`` up to
    the deepest part that exists (stopping at ``root``), resolve it (following
    symbolic links, also dangling ones) and require the result to lie inside
    ``root.resolve()``. Parts that do not exist yet are created later by
    sitrep itself, so they cannot be links.
    """
    try:
        root_real = root.resolve()
        probe = target
        while probe != root and not os.path.lexists(probe):
            probe = probe.parent
        if not os.path.lexists(probe):
            return
        real = probe.resolve()
    except (OSError, ValueError, RuntimeError) as exc:
        raise DeliveryError(f"cannot resolve output path {target}: {exc}") from exc
    if not (real == root_real or real.is_relative_to(root_real)):
        raise DeliveryError(
            f"output path {target} leaves {root} ({probe} resolves to {real}); remove the "
            "symbolic link or choose another folder"
        )


# --------------------------------------------------------------------------- low-level writes


def _fsync_dir(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _write_exclusive(path: Path, data: bytes, mode: int = _FILE_MODE) -> None:
    """Create ``path`` (never an existing file or symlink), write, flush and fsync."""
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0)
    fd = os.open(path, flags, mode)
    try:
        view = memoryview(data)
        while view:
            written = os.write(fd, view)
            view = view[written:]
        os.fsync(fd)
    finally:
        os.close(fd)


def replace_file(path: Path, data: bytes) -> None:
    """Write a file *beside* the bundles (send record, index page) by rename, mode 0644.

    A reader sees the old content or the new, never half of it. Bundles
    themselves are never rewritten: they use exclusive creation.
    """
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _json_default(value: Any) -> Any:
    if isinstance(value, Path):
        return str(value)
    if isinstance(value, (dt.date, dt.datetime)):
        return value.isoformat()
    if isinstance(value, enum.Enum):
        return value.value
    if isinstance(value, (set, frozenset)):
        return sorted(value)
    raise TypeError(f"{type(value).__name__} is not JSON-serialisable")


def manifest_bytes(manifest: Mapping[str, Any]) -> bytes:
    """Deterministic JSON: sorted keys, 2-space indent, UTF-8, trailing newline.

    ``Path`` becomes a string, dates ISO 8601, enums their value, sets sorted
    lists. NaN and infinity are refused (not valid JSON).
    """
    try:
        text = json.dumps(
            manifest,
            sort_keys=True,
            indent=2,
            ensure_ascii=False,
            allow_nan=False,
            default=_json_default,
        )
    except (TypeError, ValueError) as exc:
        raise DeliveryError(
            f"manifest cannot be written as JSON ({exc}); pass str, numbers, bools, lists and dicts"
        ) from exc
    return (text + "\n").encode("utf-8")


# --------------------------------------------------------------------------- bundles


def write_bundle(
    archive_root: Path,
    jurisdiction: str,
    week_label: str,
    files: Mapping[str, bytes],
    manifest: Mapping[str, Any],
    *,
    reissue_reason: str | None = None,
    signer: Signer | None = None,
) -> Bundle:
    """Archive one week's outputs as a new, complete, checksummed bundle.

    Steps, in order:

    1. Check every name (:func:`check_name`; ``manifest.json`` and
       ``manifest-sha256.txt`` are reserved) and build the manifest and the
       checksum list in memory. Nothing is written if this fails.
    2. Work out the version: 1 for a new week. If the week has bundles and no
       reissue reason is given, raise :class:`~sitrep.errors.ArchiveExists`;
       with a reason, write ``v<k+1>`` and record
       ``"reissue": {"reason": ..., "supersedes": "v<k>"}``.
    3. Refuse when an existing folder on the way (jurisdiction or week folder)
       is a symbolic link leading outside ``archive_root``; then create the
       missing folders.
    4. Create a temporary folder ``.tmp-v<k>-*`` *inside the week folder* (same
       file system, so the final rename is atomic) and write each file with
       exclusive create (``O_EXCL | O_NOFOLLOW``), flush and fsync; then
       ``manifest.json``, then ``manifest-sha256.txt``; fsync every folder.
    5. ``os.rename`` the temporary folder to ``v<k>`` and fsync the week
       folder. On Linux a rename onto an *empty* folder succeeds, onto a
       non-empty one it fails; the code checks that ``v<k>`` does not exist
       just before the rename and treats a failed rename as ``ArchiveExists``
       (another run published the same version first). A bundle is never
       overwritten.

    On any exception the temporary folder is removed, so the archive holds the
    complete bundle or nothing.

    Parameters
    ----------
    archive_root : Path
        ``[output] archive``; created when missing.
    jurisdiction : str
        Display name (folder name via :func:`jurisdiction_slug`).
    week_label : str
        Report week, e.g. ``2026-W47``.
    files : Mapping[str, bytes]
        Relative file name -> content, e.g. ``"report.pdf"``,
        ``"inputs/table.csv"``, ``"figures/ili_map.png"``.
    manifest : Mapping[str, Any]
        What the caller records (inputs, versions, parameters, seed, week
        system, run time). It may not use the keys ``bundle``, ``files`` or
        ``reissue``, which this function writes.
    reissue_reason : str or None
        Why an archived week is issued again (``sitrep build --reissue``).
    signer : Signer or None
        Signs ``manifest-sha256.txt`` into ``manifest.sig``. Refused as missing
        when the jurisdiction's latest bundle is signed (no silent downgrade).

    Returns
    -------
    Bundle
        Where the bundle went and what it holds.

    Raises
    ------
    ArchiveExists
        The week is archived and no reissue reason was given, or another run
        published the same version first.
    DeliveryError
        A name is refused, a path leaves the archive, the manifest is not
        JSON-serialisable, a reissue is asked for a week with no bundle, or the
        file system fails.

    Notes
    -----
    The bundle's bytes depend only on ``files``, ``manifest``, the week, the
    version and the reissue reason, never on the archive location or the
    clock, so identical inputs give byte-identical bundles. The manifest's
    ``files`` maps each name to ``{"sha256", "size"}``; ``bundle`` records
    ``jurisdiction``, ``jurisdiction_slug``, ``week`` and ``version``;
    ``chain`` the link (``sequence``, ``previous``: ``{"bundle", "manifest_sha256"}``
    or null for the first); ``signature`` the key's fingerprint or null. The
    chain head is read and the bundle published under a lock on the
    jurisdiction folder, so two runs cannot both extend the same link. Only
    ``manifest.sig`` records a clock (its signing time); Ed25519 signatures are
    otherwise deterministic.
    """
    archive_root = Path(archive_root)
    names = _check_names(list(files), reserved=_RESERVED)
    for n in names:
        if not isinstance(files[n], (bytes, bytearray, memoryview)):
            raise DeliveryError(f"content of {n!r} must be bytes, got {type(files[n]).__name__}")
    clash = sorted(set(manifest) & set(_MANIFEST_KEYS))
    if clash:
        raise DeliveryError(
            f"manifest key(s) {', '.join(map(repr, clash))} are written by write_bundle; "
            "rename them in the caller's manifest"
        )
    if reissue_reason is not None:
        if not reissue_reason.strip() or any(ord(c) < 32 for c in reissue_reason):
            raise DeliveryError(
                f"reissue reason must be one line of text, got {reissue_reason!r}; "
                'use --reissue "corrected district 07 counts"'
            )
    week = _week_folder(week_label)
    slug = jurisdiction_slug(jurisdiction)
    week_dir = archive_root / slug / week

    _check_confined(archive_root, week_dir)
    manifest_bytes(manifest)  # refuse a manifest that is not JSON before anything is created
    _check_version(jurisdiction, week, week_dir, reissue_reason)  # again under the lock
    fresh = not os.path.lexists(week_dir.parent)
    for d in _make_dirs(week_dir.parent):
        _fsync_dir(d)
    try:
        with _chain_lock(week_dir.parent):
            return _write_bundle_locked(
                archive_root,
                jurisdiction,
                week,
                week_dir,
                names,
                files,
                manifest,
                reissue_reason,
                signer,
            )
    except BaseException:
        if fresh:  # leave no empty jurisdiction folder (nor its lock file) behind
            with contextlib.suppress(OSError):
                os.unlink(week_dir.parent / _LOCK_FILE)
                os.rmdir(week_dir.parent)
        raise


def _check_version(
    jurisdiction: str, week: str, week_dir: Path, reissue_reason: str | None
) -> list[int]:
    """The week's existing versions; refuses a rebuild without a reason and a reissue of nothing."""
    existing = _versions(week_dir)
    if existing and reissue_reason is None:
        raise already_archived(jurisdiction, week, week_dir / f"v{existing[-1]}")
    if not existing and reissue_reason is not None:
        raise DeliveryError(
            f"--reissue was given but {jurisdiction} {week} has no archived bundle in {week_dir}; "
            "run without --reissue to publish v1"
        )
    return existing


def _write_bundle_locked(
    archive_root: Path,
    jurisdiction: str,
    week: str,
    week_dir: Path,
    names: list[str],
    files: Mapping[str, bytes],
    manifest: Mapping[str, Any],
    reissue_reason: str | None,
    signer: Signer | None,
) -> Bundle:
    slug = week_dir.parent.name
    existing = _check_version(jurisdiction, week, week_dir, reissue_reason)
    version = existing[-1] + 1 if existing else 1

    contents = {n: bytes(files[n]) for n in names}
    full_manifest: dict[str, Any] = dict(manifest)
    full_manifest["bundle"] = {
        "jurisdiction": jurisdiction,
        "jurisdiction_slug": slug,
        "week": week,
        "version": version,
    }
    full_manifest["files"] = {
        n: {"sha256": _sha256(data), "size": len(data)} for n, data in contents.items()
    }
    if reissue_reason is not None:
        full_manifest["reissue"] = {"reason": reissue_reason, "supersedes": f"v{existing[-1]}"}
    head = chain_head(week_dir.parent)
    if head is not None and head.signed and signer is None:
        raise DeliveryError(
            f"the latest bundle of {jurisdiction} ({head.bundle_id}) is signed, and no signing key "
            "is configured now; an unsigned bundle after a signed one is refused. Set "
            "output.signing_key (or $SITREP_SIGNING_KEY) to the jurisdiction's key"
        )
    full_manifest["chain"] = {
        "sequence": head.sequence + 1 if head else 1,
        "previous": (
            {"bundle": head.bundle_id, "manifest_sha256": head.checksums_sha256} if head else None
        ),
    }
    full_manifest["signature"] = (
        {"algorithm": "Ed25519", "fingerprint": signer.public.fingerprint, "file": SIGNATURE_FILE}
        if signer is not None
        else None
    )
    contents[MANIFEST_JSON] = manifest_bytes(full_manifest)
    contents[MANIFEST_SHA256] = "".join(
        f"{_sha256(contents[n])}  {n}\n" for n in sorted(contents)
    ).encode("ascii")
    if signer is not None:
        contents[SIGNATURE_FILE] = signature_document(
            signer, f"{week}/v{version}", contents[MANIFEST_SHA256], dt.datetime.now(dt.UTC)
        )

    final = week_dir / f"v{version}"
    created = _make_dirs(week_dir)
    _check_confined(archive_root, week_dir)
    tmp: Path | None = None
    try:
        tmp = Path(tempfile.mkdtemp(prefix=f"{_TMP_PREFIX}v{version}-", dir=week_dir))
        os.chmod(tmp, 0o755)
        dirs = {tmp}
        for n in sorted(contents):
            target = tmp.joinpath(*n.split("/"))
            for parent in reversed(target.relative_to(tmp).parents):
                d = tmp / parent
                if d not in dirs:
                    os.mkdir(d, 0o755)
                    dirs.add(d)
            _write_exclusive(target, contents[n])
        for d in sorted(dirs, key=lambda p: len(p.parts), reverse=True):
            _fsync_dir(d)
        if os.path.lexists(final):
            raise ArchiveExists(
                f"{final} was already archived by another sitrep run while this one was writing "
                "it; nothing was overwritten",
                week=week,
                bundle=str(final),
            )
        try:
            os.rename(tmp, final)
        except OSError as exc:
            if exc.errno in (errno.EEXIST, errno.ENOTEMPTY, errno.EISDIR, errno.ENOTDIR):
                raise ArchiveExists(
                    f"{final} was already archived by another sitrep run that published it first; "
                    "nothing was overwritten",
                    week=week,
                    bundle=str(final),
                ) from exc
            raise
        tmp = None
        for d in [week_dir, *created]:
            _fsync_dir(d)
    except OSError as exc:
        raise DeliveryError(f"writing the archive bundle {final} failed: {exc}") from exc
    finally:
        if tmp is not None:
            shutil.rmtree(tmp, ignore_errors=True)
    return Bundle(
        path=final,
        jurisdiction=jurisdiction,
        week_label=week,
        version=version,
        files=tuple(sorted(contents)),
    )


@contextlib.contextmanager
def _chain_lock(jurisdiction_dir: Path) -> Iterator[None]:
    """An exclusive lock on the jurisdiction folder for reading the chain head and publishing."""
    import fcntl

    try:
        fd = os.open(
            jurisdiction_dir / _LOCK_FILE,
            os.O_RDWR | os.O_CREAT | getattr(os, "O_NOFOLLOW", 0),
            0o644,
        )
    except OSError as exc:
        raise DeliveryError(f"cannot lock archive folder {jurisdiction_dir}: {exc}") from exc
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX)
        except OSError as exc:
            if (
                exc.errno != errno.ENOLCK
            ):  # a file system without locks: verify --chain shows a fork
                raise DeliveryError(
                    f"cannot lock archive folder {jurisdiction_dir}: {exc}"
                ) from exc
        yield
    finally:
        os.close(fd)


def bundle_folders(jurisdiction_dir: Path) -> list[tuple[str, Path]]:
    """Every ``<year>-W<ww>/v<k>`` folder of a jurisdiction, as ``(bundle id, path)``, sorted."""
    found: list[tuple[str, int, Path]] = []
    try:
        weeks = [e for e in os.scandir(jurisdiction_dir) if _WEEK_DIR.match(e.name)]
    except FileNotFoundError:
        return []
    except OSError as exc:
        raise DeliveryError(f"cannot list archive folder {jurisdiction_dir}: {exc}") from exc
    for w in weeks:
        if w.is_dir(follow_symlinks=False):
            for v in _versions(Path(w.path)):
                found.append((w.name, v, Path(w.path) / f"v{v}"))
    return [(f"{w}/v{v}", p) for w, v, p in sorted(found)]


def read_chain_link(bundle_id: str, path: Path) -> ChainLink | None:
    """The chain entry of one bundle, or None for a bundle without one (or unreadable)."""
    try:
        manifest = json.loads((path / MANIFEST_JSON).read_text(encoding="utf-8"))
        chain = manifest["chain"]
        sequence = chain["sequence"]
        checksums = (path / MANIFEST_SHA256).read_bytes()
    except (OSError, ValueError, KeyError, TypeError):
        return None
    if isinstance(sequence, bool) or not isinstance(sequence, int):
        return None
    return ChainLink(
        bundle_id=bundle_id,
        path=path,
        sequence=sequence,
        checksums_sha256=_sha256(checksums),
        signed=isinstance(manifest.get("signature"), dict),
    )


def chain_head(jurisdiction_dir: Path) -> ChainLink | None:
    """The chained bundle with the highest sequence number, or None before the first."""
    links = [
        link
        for bundle_id, path in bundle_folders(jurisdiction_dir)
        if (link := read_chain_link(bundle_id, path)) is not None
    ]
    return max(links, key=lambda link: link.sequence) if links else None


def _make_dirs(target: Path) -> list[Path]:
    """Create the missing folders up to ``target``; return the parents to fsync."""
    missing: list[Path] = []
    probe = target
    while not os.path.lexists(probe) and probe != probe.parent:
        missing.append(probe)
        probe = probe.parent
    try:
        for d in reversed(missing):
            with contextlib.suppress(FileExistsError):
                os.mkdir(d, 0o755)
    except OSError as exc:
        raise DeliveryError(f"cannot create archive folder {target}: {exc}") from exc
    if not target.is_dir():
        raise DeliveryError(f"archive path {target} exists but is not a folder; move it away")
    return [d.parent for d in missing]


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
    problems: list[str] = []
    missing: set[str] = set()
    changed: set[str] = set()

    sums: dict[str, str] = {}
    sums_path = path / MANIFEST_SHA256
    if sums_path.is_file() and not sums_path.is_symlink():
        try:
            lines = sums_path.read_text(encoding="utf-8").splitlines()
        except (OSError, UnicodeDecodeError) as exc:
            lines = []
            problems.append(f"{MANIFEST_SHA256} cannot be read: {exc}")
            changed.add(MANIFEST_SHA256)
        for i, line in enumerate(lines, start=1):
            m = _SUM_LINE.match(line)
            if not m:
                problems.append(f"{MANIFEST_SHA256} line {i} is not '<sha256>  <name>': {line!r}")
                changed.add(MANIFEST_SHA256)
                continue
            sums[m.group(2)] = m.group(1)
    else:
        missing.add(MANIFEST_SHA256)
        problems.append(f"{MANIFEST_SHA256} is missing")

    listed: dict[str, dict[str, Any]] = {}
    manifest: dict[str, Any] = {}
    man_path = path / MANIFEST_JSON
    if man_path.is_file() and not man_path.is_symlink():
        try:
            manifest = json.loads(man_path.read_text(encoding="utf-8"))
            if not isinstance(manifest, dict):
                raise TypeError("not a JSON object")
            entries = manifest["files"]
            if not isinstance(entries, dict):
                raise TypeError("'files' is not an object")
            listed = {str(k): v for k, v in entries.items() if isinstance(v, dict)}
        except (OSError, ValueError, KeyError, TypeError) as exc:
            problems.append(f"{MANIFEST_JSON} cannot be read as a sitrep manifest: {exc}")
            changed.add(MANIFEST_JSON)
    else:
        missing.add(MANIFEST_JSON)
        problems.append(f"{MANIFEST_JSON} is missing")

    if sums and listed:
        only_sums = sorted(set(sums) - set(listed) - _RESERVED)
        only_json = sorted(set(listed) - set(sums))
        for n in only_sums:
            problems.append(f"{n} is in {MANIFEST_SHA256} but not in {MANIFEST_JSON}")
        for n in only_json:
            problems.append(f"{n} is in {MANIFEST_JSON} but not in {MANIFEST_SHA256}")

    expected = sorted(set(sums) | set(listed) | ({MANIFEST_JSON} if sums else set()))
    checked = 0
    for name in expected:
        try:
            check_name(name)
        except DeliveryError:
            problems.append(f"manifest lists a file name that is not allowed: {name!r}")
            changed.add(name)
            continue
        file_path = path.joinpath(*name.split("/"))
        if not os.path.lexists(file_path):
            if name not in missing:
                missing.add(name)
                problems.append(f"{name} is missing")
            continue
        if file_path.is_symlink() or not file_path.is_file():
            changed.add(name)
            problems.append(f"{name} is not a regular file")
            continue
        try:
            digest, size = _hash_file(file_path)
        except OSError as exc:
            changed.add(name)
            problems.append(f"{name} cannot be read: {exc}")
            continue
        checked += 1
        if name in sums and sums[name] != digest:
            changed.add(name)
            problems.append(f"{name}: SHA-256 is {digest}, {MANIFEST_SHA256} says {sums[name]}")
        entry = listed.get(name)
        if entry is not None:
            if entry.get("sha256") != digest:
                changed.add(name)
                problems.append(
                    f"{name}: SHA-256 is {digest}, {MANIFEST_JSON} says {entry.get('sha256')}"
                )
            if entry.get("size") != size:
                changed.add(name)
                problems.append(
                    f"{name}: size is {size} bytes, {MANIFEST_JSON} says {entry.get('size')}"
                )

    signature = _check_bundle_signature(path, manifest, trusted_keys, problems)
    problems.extend(_check_place(path, manifest))

    known = set(expected) | {MANIFEST_SHA256, MANIFEST_JSON}
    if signature.status != "unsigned" and signature.status != "unsigned-before-chain":
        known.add(SIGNATURE_FILE)
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
    for e in sorted(extra):
        problems.append(f"{e} is not listed in the manifest")

    ok = not (missing or changed or extra or problems)
    return VerifyResult(
        ok=ok,
        missing=tuple(sorted(missing)),
        changed=tuple(sorted(changed)),
        extra=tuple(sorted(extra)),
        checked=checked,
        problems=tuple(problems),
        signature=signature.status,
        signed_by=signature.fingerprint,
        signed_at=signature.signed_at,
    )


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
    if not (_WEEK_DIR.match(path.parent.name) and _VERSION_DIR.match(path.name)):
        return []  # a copy outside an archive layout: nothing to compare with
    here = f"{path.parent.name}/{path.name}"
    there = f"{recorded.get('week')}/v{recorded.get('version')}"
    return (
        []
        if here == there
        else [f"{MANIFEST_JSON} says this is bundle {there}, but it sits in {here}"]
    )


# --------------------------------------------------------------------------- plain output folder


def check_outputs(folder: Path, names: list[str]) -> list[str]:
    """Check, without writing, that :func:`write_outputs` may write ``names`` into ``folder``.

    Every name must pass :func:`check_name` (and not collide with another by
    case or as a folder), and no existing part of any target path may be a
    symbolic link leading out of ``folder``. Call it before archiving, so a
    run whose output folder would be refused archives nothing either.

    Returns
    -------
    list of str
        The names, sorted.

    Raises
    ------
    DeliveryError
        A name is refused or a path leaves ``folder``.
    """
    folder = Path(folder)
    checked = _check_names(list(names))
    for n in checked:
        _check_confined(folder, folder.joinpath(*n.split("/")))
    return checked


def write_outputs(folder: Path, files: Mapping[str, bytes]) -> tuple[Path, ...]:
    """Write files into a plain (non-archive) output folder, each one atomically.

    Names are checked as in :func:`check_name` and every target is checked to
    stay inside ``folder`` (no symbolic link on the way may lead out) before
    anything is written. Each file is written to a temporary name in its own
    folder, flushed and fsynced, then moved over the final name with
    ``os.replace`` (atomic on POSIX) and the folder is fsynced. Existing files
    of the same name are replaced; a reader sees the old or the new file,
    never a part. On failure the temporary file is removed.

    Parameters
    ----------
    folder : Path
        Output folder (``[output] folder``); created when missing.
    files : Mapping[str, bytes]
        Relative name -> content.

    Returns
    -------
    tuple of Path
        The written files, in name order.

    Raises
    ------
    DeliveryError
        A name is refused, a path leaves ``folder``, or the file system fails.
    """
    folder = Path(folder)
    names = check_outputs(folder, list(files))
    written: list[Path] = []
    try:
        folder.mkdir(parents=True, exist_ok=True)
        for n in names:
            target = folder.joinpath(*n.split("/"))
            target.parent.mkdir(parents=True, exist_ok=True)
            _check_confined(folder, target)
            if target.is_dir() and not target.is_symlink():
                raise DeliveryError(f"{target} is a folder; cannot write file {n!r} there")
            fd, tmp_name = tempfile.mkstemp(
                prefix=f".{target.name}.", suffix=".tmp", dir=target.parent
            )
            try:
                with os.fdopen(fd, "wb") as fh:
                    fh.write(bytes(files[n]))
                    fh.flush()
                    os.fsync(fh.fileno())
                os.chmod(tmp_name, 0o644)
                os.replace(tmp_name, target)
            except BaseException:
                with contextlib.suppress(FileNotFoundError):
                    os.unlink(tmp_name)
                raise
            _fsync_dir(target.parent)
            written.append(target)
    except DeliveryError:
        raise
    except OSError as exc:
        raise DeliveryError(f"writing outputs to {folder} failed: {exc}") from exc
    return tuple(written)


# --------------------------------------------------------------------------- reproducibility


def source_date_epoch(week_end: dt.date) -> int:
    """``SOURCE_DATE_EPOCH`` for a report week: 12:00 UTC on the week's last day.

    Tools that embed a timestamp (WeasyPrint's font subsetting, matplotlib's
    PDF/SVG writers) use this value instead of "now", so two builds of the same
    week give identical bytes (reproducible-builds.org SOURCE_DATE_EPOCH
    specification). Noon UTC keeps the stamp on the same calendar day in every
    time zone from UTC-12 to UTC+11.

    Parameters
    ----------
    week_end : datetime.date
        Last day of the report week (``EpiWeek.end``).

    Returns
    -------
    int
        Seconds since 1970-01-01T00:00:00Z.

    Examples
    --------
    >>> source_date_epoch(dt.date(1970, 1, 1))
    43200
    """
    if isinstance(week_end, dt.datetime) or not isinstance(week_end, dt.date):
        raise DeliveryError(f"week_end must be a datetime.date, got {week_end!r}")
    noon = dt.datetime(week_end.year, week_end.month, week_end.day, 12, tzinfo=dt.UTC)
    return int(noon.timestamp())


def read_source_date_epoch(env: Mapping[str, str] = os.environ) -> int | None:
    """Read ``SOURCE_DATE_EPOCH`` from ``env``: its value, or None when unset.

    Raises
    ------
    DeliveryError
        If the variable is set but empty or not a non-negative whole number
        (fontTools would otherwise crash deep inside the PDF writer).
    """
    raw = env.get("SOURCE_DATE_EPOCH")
    if raw is None:
        return None
    value = _parse_epoch(raw)
    if value is None:
        raise DeliveryError(
            f"SOURCE_DATE_EPOCH is set to {raw!r}; expected whole seconds since 1970 such as "
            "1795780800. Unset it, or let sitrep build set it from the report week"
        )
    return value


def _parse_epoch(raw: str) -> int | None:
    raw = raw.strip()
    if not raw.isascii() or not raw.isdigit():
        return None
    return int(raw)


@contextlib.contextmanager
def reproducible_env(epoch: int) -> Iterator[int]:
    """Set ``SOURCE_DATE_EPOCH`` to ``epoch`` for the duration of a ``with`` block.

    The report week's value always wins over an inherited one, because a
    bundle must be reproducible from its inputs alone; an inherited value
    that is empty or not a number is therefore replaced rather than passed on
    to tools that would crash on it. The previous state (unset, empty, or any
    value) is restored on exit, also after an exception.

    Parameters
    ----------
    epoch : int
        Usually ``source_date_epoch(week.end)``.

    Yields
    ------
    int
        ``epoch``.

    Raises
    ------
    DeliveryError
        If ``epoch`` is not a non-negative whole number.
    """
    if isinstance(epoch, bool) or not isinstance(epoch, int) or epoch < 0:
        raise DeliveryError(f"SOURCE_DATE_EPOCH must be a whole number >= 0, got {epoch!r}")
    previous = os.environ.get("SOURCE_DATE_EPOCH")
    os.environ["SOURCE_DATE_EPOCH"] = str(epoch)
    try:
        yield epoch
    finally:
        if previous is None:
            os.environ.pop("SOURCE_DATE_EPOCH", None)
        else:
            os.environ["SOURCE_DATE_EPOCH"] = previous
