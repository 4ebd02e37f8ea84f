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

The folder layout and name checks are in :mod:`sitrep.deliver.layout`, checking
a bundle in :mod:`sitrep.deliver.verify`, the plain output folder in
:mod:`sitrep.deliver.files` and the reproducibility clock in
:mod:`sitrep.deliver.reproducible`; their public names are importable from here too.
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
import shutil
import tempfile
from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any

from sitrep.deliver.files import check_outputs, fsync_dir, make_dirs, replace_file, write_outputs
from sitrep.deliver.layout import (
    MANIFEST_JSON,
    MANIFEST_SHA256,
    RESERVED,
    WEEK_DIR,
    already_archived,
    archived_results,
    bundle_dir,
    check_confined,
    check_name,
    check_names,
    jurisdiction_slug,
    next_version,
    versions,
    week_folder,
)
from sitrep.deliver.reproducible import (
    read_source_date_epoch,
    reproducible_env,
    source_date_epoch,
)
from sitrep.deliver.signing import SIGNATURE_FILE, Signer, signature_document
from sitrep.deliver.verify import VerifyResult, verify_bundle
from sitrep.errors import ArchiveExists, DeliveryError

__all__ = [
    "MANIFEST_JSON",
    "MANIFEST_SHA256",
    "Bundle",
    "ChainLink",
    "VerifyResult",
    "already_archived",
    "archived_results",
    "bundle_dir",
    "bundle_folders",
    "chain_head",
    "check_name",
    "check_outputs",
    "jurisdiction_slug",
    "manifest_bytes",
    "next_version",
    "read_chain_link",
    "read_source_date_epoch",
    "replace_file",
    "reproducible_env",
    "source_date_epoch",
    "verify_bundle",
    "write_bundle",
    "write_outputs",
]

_MANIFEST_KEYS = ("bundle", "files", "reissue", "chain", "signature")
"""Top-level manifest keys written by :func:`write_bundle`; callers may not pass them."""
_LOCK_FILE = ".chain.lock"
_TMP_PREFIX = ".tmp-"
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
class ChainLink:
    """A bundle's place in its jurisdiction's hash chain, as read from disk."""

    bundle_id: str
    """``<year>-W<ww>/v<k>``."""
    path: Path
    sequence: int
    checksums_sha256: str
    """SHA-256 of the bundle's ``manifest-sha256.txt``: what the next link records."""
    signed: bool


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
    names = check_names(list(files), reserved=RESERVED)
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
    week = week_folder(week_label)
    slug = jurisdiction_slug(jurisdiction)
    week_dir = archive_root / slug / week

    check_confined(archive_root, week_dir)
    manifest_bytes(manifest)  # refuse a manifest that is not JSON before anything is created
    _check_version(jurisdiction, week, week_dir, reissue_reason)  # again under the lock
    fresh = not os.path.lexists(week_dir.parent)
    for d in make_dirs(week_dir.parent):
        fsync_dir(d)
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
    existing = versions(week_dir)
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
    """Number the version, link it to the chain head and publish it (under the chain lock)."""
    existing = _check_version(jurisdiction, week, week_dir, reissue_reason)
    version = existing[-1] + 1 if existing else 1
    contents = {n: bytes(files[n]) for n in names}
    head = chain_head(week_dir.parent)
    if head is not None and head.signed and signer is None:
        raise DeliveryError(
            f"the latest bundle of {jurisdiction} ({head.bundle_id}) is signed, and no signing key "
            "is configured now; an unsigned bundle after a signed one is refused. Set "
            "output.signing_key (or $SITREP_SIGNING_KEY) to the jurisdiction's key"
        )
    full_manifest = _full_manifest(
        manifest,
        {
            "jurisdiction": jurisdiction,
            "jurisdiction_slug": week_dir.parent.name,
            "week": week,
            "version": version,
        },
        contents,
        (
            {"reason": reissue_reason, "supersedes": f"v{existing[-1]}"}
            if reissue_reason is not None
            else None
        ),
        head,
        signer,
    )
    _add_manifests(contents, full_manifest, f"{week}/v{version}", signer)
    final = _publish(archive_root, week_dir, week, version, contents)
    return Bundle(
        path=final,
        jurisdiction=jurisdiction,
        week_label=week,
        version=version,
        files=tuple(sorted(contents)),
    )


def _full_manifest(
    manifest: Mapping[str, Any],
    bundle: dict[str, Any],
    contents: Mapping[str, bytes],
    reissue: dict[str, Any] | None,
    head: ChainLink | None,
    signer: Signer | None,
) -> dict[str, Any]:
    """The caller's manifest plus the keys :func:`write_bundle` records (``_MANIFEST_KEYS``)."""
    full: dict[str, Any] = dict(manifest)
    full["bundle"] = bundle
    full["files"] = {
        n: {"sha256": _sha256(data), "size": len(data)} for n, data in contents.items()
    }
    if reissue is not None:
        full["reissue"] = reissue
    full["chain"] = {
        "sequence": head.sequence + 1 if head else 1,
        "previous": (
            {"bundle": head.bundle_id, "manifest_sha256": head.checksums_sha256} if head else None
        ),
    }
    full["signature"] = (
        {"algorithm": "Ed25519", "fingerprint": signer.public.fingerprint, "file": SIGNATURE_FILE}
        if signer is not None
        else None
    )
    return full


def _add_manifests(
    contents: dict[str, bytes], full_manifest: Mapping[str, Any], place: str, signer: Signer | None
) -> None:
    """Add ``manifest.json``, ``manifest-sha256.txt`` and (when signing) ``manifest.sig``."""
    contents[MANIFEST_JSON] = manifest_bytes(full_manifest)
    contents[MANIFEST_SHA256] = "".join(
        f"{_sha256(contents[n])}  {n}\n" for n in sorted(contents)
    ).encode("ascii")
    if signer is not None:
        contents[SIGNATURE_FILE] = signature_document(
            signer, place, contents[MANIFEST_SHA256], dt.datetime.now(dt.UTC)
        )


def _publish(
    archive_root: Path, week_dir: Path, week: str, version: int, contents: Mapping[str, bytes]
) -> Path:
    """Write every file into a temporary folder in the week folder, then rename it to ``v<k>``."""
    final = week_dir / f"v{version}"
    created = make_dirs(week_dir)
    check_confined(archive_root, week_dir)
    tmp: Path | None = None
    try:
        tmp = Path(tempfile.mkdtemp(prefix=f"{_TMP_PREFIX}v{version}-", dir=week_dir))
        os.chmod(tmp, 0o755)
        _write_tree(tmp, contents)
        _rename_into_place(tmp, final, week)
        tmp = None
        for d in [week_dir, *created]:
            fsync_dir(d)
    except OSError as exc:
        raise DeliveryError(f"writing the archive bundle {final} failed: {exc}") from exc
    finally:
        if tmp is not None:
            shutil.rmtree(tmp, ignore_errors=True)
    return final


def _write_tree(tmp: Path, contents: Mapping[str, bytes]) -> None:
    """Create each file (and its folders) below ``tmp`` exclusively; fsync every folder."""
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
        fsync_dir(d)


def _rename_into_place(tmp: Path, final: Path, week: str) -> None:
    """Rename the finished folder to ``v<k>``; a version that appeared meanwhile is never replaced."""
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
        weeks = [e for e in os.scandir(jurisdiction_dir) if WEEK_DIR.match(e.name)]
    except FileNotFoundError:
        return []
    except OSError as exc:
        raise DeliveryError(f"cannot list archive folder {jurisdiction_dir}: {exc}") from exc
    for w in weeks:
        if w.is_dir(follow_symlinks=False):
            for v in versions(Path(w.path)):
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
