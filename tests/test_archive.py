"""Tests of sitrep.deliver.archive: immutable, atomic, confined, verifiable bundles.

Fault references are docs/faults.md F8 (half-written files, overwrite), F12
(path traversal) and F19 (SOURCE_DATE_EPOCH).
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import os
import shutil
import subprocess
from pathlib import Path

import pytest

from sitrep.deliver import archive
from sitrep.deliver.archive import (
    MANIFEST_JSON,
    MANIFEST_SHA256,
    bundle_dir,
    jurisdiction_slug,
    next_version,
    reproducible_env,
    source_date_epoch,
    verify_bundle,
    write_bundle,
    write_outputs,
)
from sitrep.errors import ArchiveExists, DeliveryError
from sitrep.weeks import EpiWeek, WeekSystem

WEEK = "2026-W47"
FILES = {
    "report.pdf": b"%PDF-1.7\n% invented test content\n",
    "report.html": "<html><body>Ωμέγα district</body></html>".encode(),
    "results.csv": b"district_id,ili_percent\n01,2.5\n02,3.1\n",
    "validation.json": b'{"blocked": false, "findings": []}\n',
    "inputs/table.csv": b"district_id,epi_week,ili_visits,total_visits\n01,2026-W47,5,200\n",
    "figures/ili_map.png": bytes(range(256)) * 4,
}
MANIFEST = {
    "inputs": [{"role": "table", "sha256": "0" * 64, "size_bytes": 10}],
    "versions": {"sitrep": "0.1.0"},
    "parameters": {"seed": 12345, "permutations": 999},
    "week_system": "mmwr",
    "run_time": "2026-11-28T12:00:00+00:00",
}


def tree(root: Path) -> dict[str, bytes]:
    """Every regular file below root, relative POSIX name -> bytes."""
    return {
        p.relative_to(root).as_posix(): p.read_bytes()
        for p in sorted(root.rglob("*"))
        if p.is_file()
    }


def all_entries(root: Path) -> list[str]:
    return sorted(p.relative_to(root).as_posix() for p in root.rglob("*")) if root.exists() else []


# --------------------------------------------------------------------------- layout and names


def test_bundle_dir_layout() -> None:
    # Layout ARCHIVE/<jurisdiction slug>/<year>-W<ww>/v<k>/ from the Deliver issue.
    path = bundle_dir(Path("/arch"), "Île-de-France", "2026W7", 3)
    assert path == Path("/arch/ile-de-france/2026-W07/v3")
    with pytest.raises(DeliveryError, match="2026-W47"):
        bundle_dir(Path("/arch"), "X", "week 47", 1)
    with pytest.raises(DeliveryError, match=">= 1"):
        bundle_dir(Path("/arch"), "X", WEEK, 0)


@pytest.mark.parametrize(
    ("name", "slug"),
    [
        # NFKD decomposition drops the combining accent (Unicode UAX #15): Î -> I + U+0302.
        ("Île-de-France", "ile-de-france"),
        # NFKD maps the compatibility ligature U+FB01 to "fi" (Unicode UAX #15).
        ("ﬁeld district", "field-district"),
        ("../../etc/cron.d", "etc-cron-d"),
        ("  North  East  ", "north-east"),
    ],
)
def test_jurisdiction_slug_is_safe_ascii(name: str, slug: str) -> None:
    assert jurisdiction_slug(name) == slug


@pytest.mark.parametrize("name", ["", "   ", "Αθήνα", "東京", "...", "/"])
def test_jurisdiction_slug_never_empty(name: str) -> None:
    slug = jurisdiction_slug(name)
    assert slug and slug[0].isalnum() and set(slug) <= set("abcdefghijklmnopqrstuvwxyz0123456789-")
    assert slug not in (".", "..")


def test_slug_fallback_keeps_names_apart() -> None:
    assert jurisdiction_slug("Αθήνα") != jurisdiction_slug("Πάτρα")


def test_next_version_is_one_when_nothing_archived(tmp_path: Path) -> None:
    assert next_version(tmp_path, "Region", WEEK) == 1
    write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST)
    assert next_version(tmp_path, "Region", WEEK) == 2
    assert next_version(tmp_path, "Region", "2026-W48") == 1


# --------------------------------------------------------------------------- writing


def test_manifest_records_every_file(tmp_path: Path) -> None:
    bundle = write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST)
    assert bundle.path == tmp_path / "region" / WEEK / "v1"
    assert bundle.version == 1 and bundle.week_label == WEEK
    assert set(bundle.files) == set(FILES) | {MANIFEST_JSON, MANIFEST_SHA256}
    assert tree(bundle.path).keys() == set(bundle.files)
    raw = (bundle.path / MANIFEST_JSON).read_bytes()
    manifest = json.loads(raw)
    # Deterministic form asked for in the brief: sort_keys, indent=2, trailing newline.
    assert raw.decode() == json.dumps(manifest, sort_keys=True, indent=2, ensure_ascii=False) + "\n"
    for name, data in FILES.items():
        # Reference digest from hashlib (FIPS 180-4 SHA-256), independent of the archive code.
        assert manifest["files"][name] == {
            "sha256": hashlib.sha256(data).hexdigest(),
            "size": len(data),
        }
    for key, value in MANIFEST.items():
        assert manifest[key] == value
    assert manifest["bundle"] == {
        "jurisdiction": "Region",
        "jurisdiction_slug": "region",
        "week": WEEK,
        "version": 1,
    }
    assert "reissue" not in manifest


def test_sha256sum_accepts_the_checksum_list(tmp_path: Path) -> None:
    if shutil.which("sha256sum") is None:
        pytest.skip("GNU coreutils sha256sum is not installed")
    bundle = write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST)
    # GNU coreutils `sha256sum -c` is the outside reference for the list format.
    done = subprocess.run(
        ["sha256sum", "--strict", "-c", MANIFEST_SHA256],
        cwd=bundle.path,
        capture_output=True,
        text=True,
        timeout=30,
        check=False,
    )
    assert done.returncode == 0, done.stdout + done.stderr
    listed = {line.rsplit(": ", 1)[0] for line in done.stdout.splitlines()}
    assert listed == set(FILES) | {MANIFEST_JSON}
    # ... and it fails once a byte changes (the check can fail).
    target = bundle.path / "results.csv"
    target.chmod(0o644)
    target.write_bytes(target.read_bytes().replace(b"2.5", b"2.6"))
    again = subprocess.run(
        ["sha256sum", "-c", MANIFEST_SHA256],
        cwd=bundle.path,
        capture_output=True,
        text=True,
        timeout=30,
        check=False,
    )
    assert again.returncode != 0 and "results.csv: FAILED" in again.stdout


def test_identical_inputs_give_byte_identical_bundles(tmp_path: Path) -> None:
    a = write_bundle(tmp_path / "one", "Region", WEEK, FILES, MANIFEST)
    b = write_bundle(
        tmp_path / "two" / "deeper", "Region", WEEK, dict(reversed(FILES.items())), MANIFEST
    )
    assert tree(a.path) == tree(b.path)
    assert a.files == b.files
    c = write_bundle(tmp_path / "three", "Region", WEEK, FILES, {**MANIFEST, "run_time": "other"})
    assert tree(c.path)[MANIFEST_JSON] != tree(a.path)[MANIFEST_JSON]


def test_second_write_raises_archive_exists(tmp_path: Path) -> None:
    first = write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST)
    before = tree(first.path)
    with pytest.raises(ArchiveExists, match="--reissue") as info:
        write_bundle(tmp_path, "Region", WEEK, {**FILES, "report.pdf": b"changed"}, MANIFEST)
    assert str(first.path) in str(info.value)
    assert tree(first.path) == before
    assert sorted(p.name for p in first.path.parent.iterdir()) == ["v1"]


def test_reissue_writes_next_version_that_supersedes(tmp_path: Path) -> None:
    first = write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST)
    second = write_bundle(
        tmp_path,
        "Region",
        WEEK,
        {**FILES, "results.csv": b"fixed\n"},
        MANIFEST,
        reissue_reason="district 02 counts corrected",
    )
    assert second.version == 2 and second.path == first.path.parent / "v2"
    manifest = json.loads((second.path / MANIFEST_JSON).read_text())
    assert manifest["reissue"] == {"reason": "district 02 counts corrected", "supersedes": "v1"}
    third = write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST, reissue_reason="again")
    assert json.loads((third.path / MANIFEST_JSON).read_text())["reissue"]["supersedes"] == "v2"
    assert verify_bundle(first.path).ok and verify_bundle(second.path).ok


def test_reissue_without_a_bundle_and_bad_reason_refused(tmp_path: Path) -> None:
    with pytest.raises(DeliveryError, match="without --reissue"):
        write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST, reissue_reason="why")
    write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST)
    for reason in ("", "   ", "line one\nline two"):
        with pytest.raises(DeliveryError, match="one line"):
            write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST, reissue_reason=reason)


def test_caller_may_not_overwrite_reserved_names_or_keys(tmp_path: Path) -> None:
    with pytest.raises(DeliveryError, match="written by sitrep"):
        write_bundle(tmp_path, "R", WEEK, {**FILES, MANIFEST_JSON: b"{}"}, MANIFEST)
    with pytest.raises(DeliveryError, match="'files'"):
        write_bundle(tmp_path, "R", WEEK, FILES, {**MANIFEST, "files": {}})
    with pytest.raises(DeliveryError, match="JSON"):
        write_bundle(tmp_path, "R", WEEK, FILES, {"bad": float("nan")})
    with pytest.raises(DeliveryError, match="JSON"):
        write_bundle(tmp_path, "R", WEEK, FILES, {"bad": object()})
    assert all_entries(tmp_path) == []


def test_non_json_types_in_manifest_are_converted(tmp_path: Path) -> None:
    week = EpiWeek(2026, 47, WeekSystem.MMWR)
    bundle = write_bundle(
        tmp_path,
        "R",
        WEEK,
        FILES,
        {"path": Path("/data/x.csv"), "week_end": week.end, "system": WeekSystem.ISO},
    )
    manifest = json.loads((bundle.path / MANIFEST_JSON).read_text())
    # MMWR week 2026-W47 ends Saturday 2026-11-28 (CDC MMWR week calendar; epiweeks package).
    assert manifest["week_end"] == "2026-11-28"
    assert manifest["path"] == "/data/x.csv" and manifest["system"] == "iso"


# --------------------------------------------------------------------------- atomicity (F8)


def leftovers(week_dir: Path) -> list[str]:
    return sorted(p.name for p in week_dir.iterdir()) if week_dir.exists() else []


def test_failed_rename_leaves_no_bundle_and_no_temp(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    def boom(src: object, dst: object) -> None:
        raise OSError(5, "injected I/O error")

    monkeypatch.setattr(archive.os, "rename", boom)
    with pytest.raises(DeliveryError, match="injected"):
        write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST)
    assert leftovers(tmp_path / "region" / WEEK) == []
    monkeypatch.undo()
    assert write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST).version == 1


def test_failure_mid_file_write_leaves_nothing(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    real_write = os.write
    calls = {"n": 0}

    def flaky_write(fd: int, data: object) -> int:
        calls["n"] += 1
        if calls["n"] == 4:  # fourth file of seven
            raise OSError(28, "No space left on device (injected)")
        return real_write(fd, data)  # type: ignore[arg-type]

    monkeypatch.setattr(archive.os, "write", flaky_write)
    with pytest.raises(DeliveryError, match="No space left"):
        write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST)
    assert calls["n"] == 4
    assert leftovers(tmp_path / "region" / WEEK) == []


def test_keyboard_interrupt_mid_write_leaves_nothing(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    real_fsync = os.fsync
    calls = {"n": 0}

    def interrupted(fd: int) -> None:
        calls["n"] += 1
        if calls["n"] == 2:
            raise KeyboardInterrupt
        real_fsync(fd)

    monkeypatch.setattr(archive.os, "fsync", interrupted)
    with pytest.raises(KeyboardInterrupt):
        write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST)
    assert leftovers(tmp_path / "region" / WEEK) == []


def test_race_on_final_name_is_archive_exists(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Another run publishes v1 between our check and our rename: nothing is overwritten."""
    real_rename = os.rename

    def racing_rename(src: str, dst: str) -> None:
        os.mkdir(dst)
        Path(dst, "report.pdf").write_bytes(b"the other run's bundle")
        real_rename(src, dst)

    monkeypatch.setattr(archive.os, "rename", racing_rename)
    with pytest.raises(ArchiveExists, match="nothing was overwritten"):
        write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST)
    week_dir = tmp_path / "region" / WEEK
    assert leftovers(week_dir) == ["v1"]
    assert tree(week_dir / "v1") == {"report.pdf": b"the other run's bundle"}


def test_existing_file_content_is_never_replaced_even_as_root(tmp_path: Path) -> None:
    """Exclusive create refuses an existing file although root ignores chmod (docs/faults.md L2)."""
    target = tmp_path / "f.txt"
    target.write_bytes(b"published")
    target.chmod(0o444)
    with pytest.raises(FileExistsError):
        archive._write_exclusive(target, b"new")
    assert target.read_bytes() == b"published"


# --------------------------------------------------------------------------- confinement (F12)


BAD_NAMES = [
    "../../x",
    "/etc/cron.d/x",
    "sub/../../x",
    "a\x00b",
    "..%2Fx",
    "..\\..\\x",
    "sub\\x",
    "",
    ".",
    "..",
    "a//b",
    "./x",
    ".hidden",
    "name with space",
    "line\nbreak",
    "a/",
    "C:\\Windows\\x",
    "x" * 256,
]


@pytest.mark.parametrize("name", BAD_NAMES)
def test_bad_names_rejected_before_any_write(tmp_path: Path, name: str) -> None:
    root = tmp_path / "archive"
    outside = tmp_path / "outside"
    outside.mkdir()
    with pytest.raises(DeliveryError, match="not allowed|non-empty"):
        write_bundle(root, "Region", WEEK, {**FILES, name: b"evil"}, MANIFEST)
    assert not root.exists()
    assert list(outside.iterdir()) == []
    with pytest.raises(DeliveryError, match="not allowed|non-empty"):
        write_outputs(root, {"ok.txt": b"fine", name: b"evil"})
    assert not root.exists()


def test_case_and_file_folder_collisions_rejected(tmp_path: Path) -> None:
    with pytest.raises(DeliveryError, match="differ only in case"):
        write_bundle(tmp_path, "R", WEEK, {"Report.pdf": b"1", "report.pdf": b"2"}, {})
    with pytest.raises(DeliveryError, match="both a file and the folder"):
        write_bundle(tmp_path, "R", WEEK, {"figures": b"1", "figures/a.png": b"2"}, {})


def test_symlinked_child_leaving_root_rejected(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    root.mkdir()
    outside = tmp_path / "outside"
    outside.mkdir()
    (root / "region").symlink_to(outside, target_is_directory=True)
    with pytest.raises(DeliveryError, match="leaves"):
        write_bundle(root, "Region", WEEK, FILES, MANIFEST)
    assert list(outside.iterdir()) == []
    # The same for the week folder one level down, and a dangling link.
    (root / "region").unlink()
    (root / "region").mkdir()
    (root / "region" / WEEK).symlink_to(outside / "not-yet", target_is_directory=True)
    with pytest.raises(DeliveryError, match="leaves"):
        write_bundle(root, "Region", WEEK, FILES, MANIFEST)
    assert list(outside.iterdir()) == []


def test_symlink_inside_root_is_allowed(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    (root / "real").mkdir(parents=True)
    (root / "region").symlink_to(root / "real", target_is_directory=True)
    bundle = write_bundle(root, "Region", WEEK, FILES, MANIFEST)
    assert (root / "real" / WEEK / "v1" / "report.pdf").read_bytes() == FILES["report.pdf"]
    assert verify_bundle(bundle.path).ok


def test_write_outputs_symlink_leaving_folder_rejected(tmp_path: Path) -> None:
    folder = tmp_path / "out"
    folder.mkdir()
    outside = tmp_path / "outside"
    outside.mkdir()
    (folder / "figures").symlink_to(outside, target_is_directory=True)
    with pytest.raises(DeliveryError, match="leaves"):
        write_outputs(folder, {"a.txt": b"1", "figures/map.png": b"2"})
    assert list(outside.iterdir()) == []
    assert not (folder / "a.txt").exists()


# --------------------------------------------------------------------------- verify


def test_verify_passes_then_reports_changed_missing_extra(tmp_path: Path) -> None:
    bundle = write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST)
    result = verify_bundle(bundle.path)
    assert result.ok and result.checked == len(FILES) + 1
    assert (result.missing, result.changed, result.extra, result.problems) == ((), (), (), ())

    html = bundle.path / "report.html"
    html.chmod(0o644)
    data = bytearray(html.read_bytes())
    data[10] ^= 0x01  # one byte changed, same size
    html.write_bytes(bytes(data))
    result = verify_bundle(bundle.path)
    assert not result.ok and result.changed == ("report.html",)
    assert result.missing == () and result.extra == ()

    (bundle.path / "figures" / "ili_map.png").unlink()
    (bundle.path / "notes.txt").write_text("added later")
    (bundle.path / "figures" / "new").mkdir()
    result = verify_bundle(bundle.path)
    assert result.missing == ("figures/ili_map.png",)
    assert result.extra == ("figures/new/", "notes.txt")
    assert any("notes.txt" in p for p in result.problems)


def test_verify_detects_consistent_edit_of_json_manifest(tmp_path: Path) -> None:
    """Changing a file and its manifest.json entry still fails: the .txt list covers manifest.json."""
    bundle = write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST)
    csv = bundle.path / "results.csv"
    csv.chmod(0o644)
    csv.write_bytes(b"forged\n")
    man = bundle.path / MANIFEST_JSON
    manifest = json.loads(man.read_text())
    manifest["files"]["results.csv"] = {
        "sha256": hashlib.sha256(b"forged\n").hexdigest(),
        "size": 7,
    }
    man.chmod(0o644)
    man.write_text(json.dumps(manifest, sort_keys=True, indent=2) + "\n")
    result = verify_bundle(bundle.path)
    assert not result.ok
    assert set(result.changed) == {"results.csv", MANIFEST_JSON}


def test_verify_handles_missing_manifests_and_symlinks(tmp_path: Path) -> None:
    bundle = write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST)
    pdf = bundle.path / "report.pdf"
    pdf.unlink()
    pdf.symlink_to(tmp_path / "elsewhere.pdf")
    (tmp_path / "elsewhere.pdf").write_bytes(FILES["report.pdf"])
    result = verify_bundle(bundle.path)
    assert "report.pdf" in result.changed and not result.ok
    (bundle.path / MANIFEST_SHA256).unlink()
    result = verify_bundle(bundle.path)
    assert MANIFEST_SHA256 in result.missing and not result.ok
    with pytest.raises(DeliveryError, match="not a bundle folder"):
        verify_bundle(tmp_path / "nope")


def test_verify_ignores_mail_sidecars_next_to_bundle(tmp_path: Path) -> None:
    bundle = write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST)
    (bundle.path.parent / "v1.sent.json").write_text("{}")
    (bundle.path.parent / "v1.eml").write_text("x")
    assert verify_bundle(bundle.path).ok
    assert next_version(tmp_path, "Region", WEEK) == 2


def test_tampered_manifest_cannot_point_outside(tmp_path: Path) -> None:
    bundle = write_bundle(tmp_path, "Region", WEEK, FILES, MANIFEST)
    sums = bundle.path / MANIFEST_SHA256
    sums.chmod(0o644)
    sums.write_text(sums.read_text() + f"{'0' * 64}  ../../../etc/hostname\n")
    result = verify_bundle(bundle.path)
    assert not result.ok and "../../../etc/hostname" in result.changed
    assert result.checked == len(FILES) + 1


# --------------------------------------------------------------------------- write_outputs


def test_write_outputs_replaces_atomically(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    folder = tmp_path / "out"
    paths = write_outputs(folder, {"b.txt": b"two", "sub/a.txt": b"one"})
    assert paths == (folder / "b.txt", folder / "sub" / "a.txt")
    assert tree(folder) == {"b.txt": b"two", "sub/a.txt": b"one"}
    write_outputs(folder, {"b.txt": b"three"})
    assert (folder / "b.txt").read_bytes() == b"three"

    def boom(src: object, dst: object) -> None:
        raise OSError(5, "injected")

    monkeypatch.setattr(archive.os, "replace", boom)
    with pytest.raises(DeliveryError, match="injected"):
        write_outputs(folder, {"b.txt": b"four"})
    assert tree(folder) == {"b.txt": b"three", "sub/a.txt": b"one"}  # old file intact, no temp


# --------------------------------------------------------------------------- SOURCE_DATE_EPOCH (F19)


def test_source_date_epoch_from_week_end() -> None:
    # Reference: GNU coreutils `date -u -d '2026-11-28 12:00' +%s` prints 1795867200.
    assert source_date_epoch(dt.date(2026, 11, 28)) == 1795867200
    # Reference: `date -u -d '2021-01-09 12:00' +%s` prints 1610193600 (end of MMWR 2021-W01,
    # CDC MMWR week calendar).
    week = EpiWeek(2021, 1, WeekSystem.MMWR)
    assert week.end == dt.date(2021, 1, 9)
    assert source_date_epoch(week.end) == 1610193600
    with pytest.raises(DeliveryError, match="datetime.date"):
        source_date_epoch(dt.datetime(2026, 11, 28, 12))  # type: ignore[arg-type]


@pytest.mark.parametrize("inherited", [None, "", "not-a-number", "1600000000"])
def test_reproducible_env_sets_and_restores(
    monkeypatch: pytest.MonkeyPatch, inherited: str | None
) -> None:
    if inherited is None:
        monkeypatch.delenv("SOURCE_DATE_EPOCH", raising=False)
    else:
        monkeypatch.setenv("SOURCE_DATE_EPOCH", inherited)
    with reproducible_env(1795867200) as value:
        assert value == 1795867200
        assert os.environ["SOURCE_DATE_EPOCH"] == "1795867200"
        assert archive.read_source_date_epoch() == 1795867200
    assert os.environ.get("SOURCE_DATE_EPOCH") == inherited
    with pytest.raises(RuntimeError), reproducible_env(1):
        raise RuntimeError
    assert os.environ.get("SOURCE_DATE_EPOCH") == inherited


@pytest.mark.parametrize("raw", ["", " ", "abc", "-5", "1.5", "١٢٣"])
def test_bad_inherited_epoch_gives_clear_error(raw: str) -> None:
    with pytest.raises(DeliveryError, match="SOURCE_DATE_EPOCH is set to"):
        archive.read_source_date_epoch({"SOURCE_DATE_EPOCH": raw})
    assert archive.read_source_date_epoch({}) is None


def test_reproducible_env_rejects_bad_epoch() -> None:
    for bad in (-1, 1.5, "1", True):
        with pytest.raises(DeliveryError), reproducible_env(bad):  # type: ignore[arg-type]
            pass
