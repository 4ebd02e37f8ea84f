"""Where bundles live and which names they may hold: the archive's folder layout.

``ARCHIVE/<jurisdiction slug>/<year>-W<ww>/v<k>/`` (see :mod:`sitrep.deliver.archive`).
Every output name is checked here before anything is written, and every
target path is checked to stay inside its root (no symbolic link may lead out).
"""

from __future__ import annotations

import hashlib
import os
import re
import unicodedata
from pathlib import Path, PurePosixPath

from sitrep.deliver.signing import SIGNATURE_FILE
from sitrep.errors import ArchiveExists, DeliveryError

__all__ = [
    "MANIFEST_JSON",
    "MANIFEST_SHA256",
    "RESERVED",
    "VERSION_DIR",
    "WEEK_DIR",
    "already_archived",
    "archived_results",
    "bundle_dir",
    "check_confined",
    "check_name",
    "check_names",
    "jurisdiction_slug",
    "next_version",
    "versions",
    "week_folder",
]

MANIFEST_JSON = "manifest.json"
"""Name of the JSON manifest inside a bundle."""
MANIFEST_SHA256 = "manifest-sha256.txt"
"""Name of the ``sha256sum -c`` checksum list inside a bundle."""
RESERVED = frozenset({MANIFEST_JSON, MANIFEST_SHA256, SIGNATURE_FILE})
"""Names sitrep writes into every bundle itself; a caller's file may not use them."""

_COMPONENT = re.compile(r"^[A-Za-z0-9_][A-Za-z0-9._+-]*$")
_WEEK = re.compile(r"^\s*(\d{4})\s*-?\s*W\s*(\d{1,2})\s*$", re.IGNORECASE)
VERSION_DIR = re.compile(r"^v([1-9][0-9]*)$")
"""A bundle folder: ``v<k>``."""
WEEK_DIR = re.compile(r"^[0-9]{4}-W[0-9]{2}$")
"""A week folder: ``<year>-W<ww>``."""
_SLUG_MAX = 64


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


def week_folder(week_label: str) -> str:
    """The week folder name ``<year>-W<ww>`` of a week label (``2026W7`` -> ``2026-W07``)."""
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
        / week_folder(week_label)
        / f"v{version}"
    )


def versions(week_dir: Path) -> list[int]:
    """The bundle versions ``v<k>`` in a week folder, ascending (none when it is missing)."""
    try:
        entries = list(os.scandir(week_dir))
    except FileNotFoundError:
        return []
    except OSError as exc:
        raise DeliveryError(f"cannot list archive folder {week_dir}: {exc}") from exc
    return sorted(
        int(m.group(1))
        for e in entries
        if (m := VERSION_DIR.match(e.name)) and e.is_dir(follow_symlinks=False)
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
    found = versions(week_dir)
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
    for version in versions(week_dir):
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


def check_names(names: list[str], *, reserved: frozenset[str] = frozenset()) -> list[str]:
    """Check every name (:func:`check_name`), refuse reserved names and case or folder clashes."""
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


def check_confined(root: Path, target: Path) -> None:
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
