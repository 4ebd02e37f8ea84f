"""Durable writes outside the bundles: the plain output folder and files beside the bundles.

Bundles are created once, with exclusive creation (:mod:`sitrep.deliver.archive`);
everything else sitrep writes (the output folder, send records, the index
page) replaces a file by rename, so a reader sees the old content or the new,
never part of it.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Mapping
from pathlib import Path

from sitrep.deliver.layout import check_confined, check_names
from sitrep.errors import DeliveryError

__all__ = ["check_outputs", "fsync_dir", "make_dirs", "replace_file", "write_outputs"]


def fsync_dir(path: Path) -> None:
    """Flush a folder's entries (new or renamed files) to disk."""
    fd = os.open(path, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    try:
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


def make_dirs(target: Path) -> list[Path]:
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
    checked = check_names(list(names))
    for n in checked:
        check_confined(folder, folder.joinpath(*n.split("/")))
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
            check_confined(folder, target)
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
            fsync_dir(target.parent)
            written.append(target)
    except DeliveryError:
        raise
    except OSError as exc:
        raise DeliveryError(f"writing outputs to {folder} failed: {exc}") from exc
    return tuple(written)
