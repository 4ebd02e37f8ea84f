"""Hardening, what goes out: the archive, e-mail, output paths, resource limits, and empty
inputs.

docs/faults.md items F8, F11, F12, F20 and F23, through ``pipeline.build`` and
``cli.main`` on the invented week of ``hardening_helpers``, with a loopback SMTP server
(aiosmtpd on 127.0.0.1) and a loopback canary HTTP server. References: POSIX rename and
``O_EXCL`` semantics (Python ``os`` docs), GNU coreutils ``sha256sum -c`` (the archive's
checksum list), RFC 5321 reply classes and RFC 1047 for the send rules (unit tests of
those are in test_mail.py), RFC 5322 header syntax (no CR/LF inside a header value).
These tests run as root here, where ``chmod 0444`` would not stop an overwrite.
"""

from __future__ import annotations

import email
import email.policy
import inspect
import json
import os
import shutil
import subprocess
import time
import types
from pathlib import Path

import pytest
from hardening_helpers import (
    WEEKS,
    Canary,
    build,
    make_week,
    run_cli,
    table_rows,
    tree_hashes,
    write_csv,
)
from mail_fixtures import RecordingHandler, smtp_server

from sitrep.errors import ArchiveExists, DeliveryError, ValidationFailed

ROOT = Path(__file__).resolve().parents[1]


def sha256sum_check(bundle: Path) -> subprocess.CompletedProcess[str]:
    """GNU coreutils' own verification of the bundle's checksum list."""
    return subprocess.run(
        ["sha256sum", "--check", "--strict", "manifest-sha256.txt"],
        cwd=bundle,
        capture_output=True,
        text=True,
        timeout=30,
    )


def leftovers(folder: Path) -> list[Path]:
    """Temporary files or folders of sitrep's writers under ``folder``."""
    return [p for p in folder.rglob("*") if p.name.startswith(".tmp-") or p.name.endswith(".tmp")]


# --------------------------------------------------------------------------- F8


def test_h08_failed_pdf_leaves_nothing_behind(tmp_path: Path) -> None:
    """The PDF engine refuses a remote resource (fail closed): no output, no archive."""
    templates = tmp_path / "templates"
    templates.mkdir()
    with Canary() as canary:
        packaged = (ROOT / "templates" / "report.html.j2").read_text(encoding="utf-8")
        (templates / "report.html.j2").write_text(
            packaged.replace("</body>", f'<img src="{canary.url}x.png" alt="">\n</body>'),
            encoding="utf-8",
        )
        week = make_week(tmp_path / "week", config={"report": {"template_dir": str(templates)}})
        with pytest.raises(DeliveryError):
            build(week)
        assert canary.requests == []
    assert tree_hashes(week.out) == {} and tree_hashes(week.archive) == {}


def test_h08_archive_is_complete_or_absent_and_never_overwritten(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from sitrep.deliver import archive

    week = make_week(tmp_path / "week", pdf=False)
    # 1. the disk fails while the bundle is written: no bundle, no temporary folder, no outputs
    real_write = archive._write_exclusive
    calls = {"n": 0}

    def failing_write(path: Path, data: bytes, mode: int = 0o444) -> None:
        calls["n"] += 1
        if calls["n"] == 4:
            raise OSError(28, "No space left on device")
        real_write(path, data, mode)

    monkeypatch.setattr(archive, "_write_exclusive", failing_write)
    with pytest.raises(DeliveryError, match="No space left"):
        build(week)
    monkeypatch.setattr(archive, "_write_exclusive", real_write)
    assert calls["n"] == 4
    assert not list(week.archive.rglob("v1")) and not leftovers(week.archive)
    assert tree_hashes(week.out) == {}

    # 2. the output folder fails half-way (os.replace): no partial or temporary file
    real_replace = os.replace
    replaced = {"n": 0}

    def failing_replace(src: str, dst: str) -> None:
        replaced["n"] += 1
        if replaced["n"] == 3:
            raise OSError(5, "Input/output error")
        real_replace(src, dst)

    monkeypatch.setattr(archive.os, "replace", failing_replace)
    with pytest.raises(DeliveryError, match="Input/output error"):
        build(week)
    monkeypatch.setattr(archive.os, "replace", real_replace)
    assert not leftovers(week.out)
    bundle = next(week.archive.rglob("v1"))
    listed = json.loads((bundle / "manifest.json").read_text())["files"]
    written = sorted(p for p in week.out.rglob("*") if p.is_file())
    assert len(written) == 2
    for path in written:  # what is there under a final name is complete
        entry = listed[str(path.relative_to(week.out))]
        assert path.stat().st_size == entry["size"]
    assert sha256sum_check(bundle).returncode == 0

    # 3. a second run for the same week refuses; --reissue writes v2; v1 is untouched
    before = tree_hashes(bundle)
    with pytest.raises(ArchiveExists):
        build(week)
    assert tree_hashes(bundle) == before
    code, out, err = run_cli(
        ["build", "--config", str(week.config_path), "--reissue", "late reports from D03"]
    )
    assert code == 0, err
    v2 = bundle.with_name("v2")
    assert json.loads((v2 / "manifest.json").read_text())["reissue"] == {
        "reason": "late reports from D03",
        "supersedes": "v1",
    }
    assert tree_hashes(bundle) == before
    for folder in (bundle, v2):
        check = sha256sum_check(folder)
        assert check.returncode == 0, check.stdout + check.stderr
        assert check.stdout.count(": OK") == len(
            (folder / "manifest-sha256.txt").read_text().splitlines()
        )


# --------------------------------------------------------------------------- F11


def test_h11_mail_goes_out_only_for_a_clean_run_and_reports_refusals(tmp_path: Path) -> None:
    recorder = RecordingHandler(refuse=("director@tessaly.example",))
    with smtp_server(recorder) as port:

        def bad(rows: list[list[str]]) -> list[list[str]]:
            return [
                r[:4] + ["9999", r[5]] if r[0] == "D02" and r[2] == WEEKS[-1] else r for r in rows
            ]

        week = make_week(
            tmp_path / "week", edit_table=bad, config={"email": {"enabled": True, "port": port}}
        )
        # (f) an error-class finding: blocked, nothing archived, nothing sent
        code, out, err = run_cli(
            ["run", "--config", str(week.config_path), "--today", "2026-11-30"]
        )
        assert code == 1 and "count-ili-exceeds-total" in out + err
        assert (
            recorder.sessions == 0 and recorder.messages == [] and tree_hashes(week.archive) == {}
        )

        # a clean run: archived, sent once; the refused recipient is reported, not hidden
        write_csv(week.table, table_rows(week.ids, week.names, WEEKS, 4))
        code, out, err = run_cli(
            ["run", "--config", str(week.config_path), "--today", "2026-11-30"]
        )
        assert code == 3 and "refused for director@tessaly.example" in err  # 550, RFC 5321
        assert len(recorder.messages) == 1
        assert recorder.messages[0][1] == ["epi-team@tessaly.example"]
        sent = next(week.archive.rglob("v1.sent.json"))
        record = json.loads(sent.read_text())["sends"][-1]
        assert record["status"] == "partial"
        assert list(record["refused"]) == ["director@tessaly.example"]
        message = email.message_from_bytes(recorder.messages[0][2], policy=email.policy.default)
        assert message["Message-ID"] == record["message_id"]
        # the Monday job run again keeps reporting the refusal but sends no second copy
        code, out, err = run_cli(
            ["run", "--config", str(week.config_path), "--today", "2026-11-30"]
        )
        assert code == 3 and "director@tessaly.example" in err and len(recorder.messages) == 1

    # (e) CR/LF in a configured header value is refused when the configuration is loaded
    week.write_config(email={"subject_prefix": "[ILI]\r\nBcc: everyone@tessaly.example"})
    code, _, err = run_cli(["check", "--config", str(week.config_path)])
    assert code == 2 and "control character" in err


# --------------------------------------------------------------------------- F12


@pytest.mark.parametrize(
    "name",
    [
        "../../x",
        "/etc/cron.d/x",
        "sub/../../x",
        "a\x00b",
        "..%2Fx",
        "a\\b",
        "./x",
        ".hidden",
        "a//b",
        " x",
    ],
)
def test_h12_output_names_that_leave_the_folder_are_refused_before_any_write(
    tmp_path: Path, name: str
) -> None:
    from sitrep.deliver.archive import write_bundle, write_outputs

    folder = tmp_path / "out"
    with pytest.raises(DeliveryError, match="not allowed"):
        write_outputs(folder, {"report.html": b"<p>ok</p>", name: b"payload"})
    with pytest.raises(DeliveryError, match="not allowed"):
        write_bundle(
            tmp_path / "archive",
            "Region",
            "2026-W47",
            {"report.html": b"<p>ok</p>", name: b"payload"},
            {"note": "test"},
        )
    assert [p for p in tmp_path.rglob("*") if p.is_file()] == []


@pytest.fixture(scope="module")
def escaping(tmp_path_factory: pytest.TempPathFactory) -> types.SimpleNamespace:
    """A build whose output folder holds a symbolic link leading out of it."""
    folder = tmp_path_factory.mktemp("escape")
    outside = folder / "outside"
    outside.mkdir()
    week = make_week(
        folder / "week", pdf=False, config={"report": {"jurisdiction": "../../../outside/Region"}}
    )
    week.out.mkdir()
    (week.out / "figures").symlink_to(outside, target_is_directory=True)
    before = tree_hashes(week.out)
    # refused with the other checks, before any work (sitrep check finds it too)
    with pytest.raises(ValidationFailed) as info:
        build(week)
    assert info.value.report is not None
    errors = info.value.report.errors
    assert [f.rule for f in errors] == ["output-folder-unusable"] and "leaves" in errors[0].message
    return types.SimpleNamespace(week=week, outside=outside, before=before, error=info.value)


def test_h12_a_symlink_out_of_the_output_folder_is_refused(escaping: types.SimpleNamespace) -> None:
    assert list(escaping.outside.iterdir()) == []
    assert tree_hashes(escaping.week.out) == escaping.before
    # the configured jurisdiction cannot climb out of the archive root either
    for path in escaping.week.archive.rglob("*"):
        assert path.resolve().is_relative_to(escaping.week.archive.resolve())
    # a NUL in a configured path is refused when the configuration is loaded
    escaping.week.write_config(output={"folder": "out\u0000/x"})
    try:
        code, _, err = run_cli(["check", "--config", str(escaping.week.config_path)])
    finally:
        escaping.week.write_config(output={"folder": "out"})
    assert code == 2 and "control character" in err


def test_h12_a_refused_output_folder_archives_nothing(escaping: types.SimpleNamespace) -> None:
    assert tree_hashes(escaping.week.archive) == {}


# --------------------------------------------------------------------------- F20


def test_h20_oversized_inputs_are_refused_before_parsing(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    week = make_week(tmp_path / "week", pdf=False)
    big = tmp_path / "huge.csv"
    with open(big, "wb") as fh:  # sparse: no disk blocks, never committed
        fh.truncate(200 * 1024 * 1024)
    read = Path.read_bytes

    def guarded(path: Path) -> bytes:
        assert Path(path).resolve() != big.resolve(), "the oversized file was read"
        return read(path)

    monkeypatch.setattr(Path, "read_bytes", guarded)
    started = time.perf_counter()
    code, out, err = run_cli(
        ["check", "--config", str(week.config_path), "--table", str(big), "--json"]
    )
    elapsed = time.perf_counter() - started
    doc = json.loads(out)
    assert code == 1 and [f["rule"] for f in doc["findings"]] == ["file-too-large"]
    assert "209.7 MB" in doc["findings"][0]["message"] and elapsed < 5
    shutil.copy(week.boundaries, tmp_path / "big.gpkg")
    with open(tmp_path / "big.gpkg", "r+b") as fh:
        fh.truncate(200 * 1024 * 1024)
    week.write_config(input={"boundaries": str(tmp_path / "big.gpkg")})
    code, out, _ = run_cli(["check", "--config", str(week.config_path), "--json"])
    assert code == 1 and "boundaries-too-large" in out


def test_h20_pdf_render_is_bounded_in_time() -> None:
    from sitrep.deliver.pdf import PdfWorker, html_to_pdf

    rows = "".join(
        f"<tr><td>District {k} " + "long name " * 20 + f"</td><td>{k}</td></tr>"
        for k in range(40_000)
    )
    started = time.perf_counter()
    with pytest.raises(DeliveryError, match="not finished within 2 s"):
        html_to_pdf(f"<html><body><table>{rows}</table></body></html>", timeout_s=2)
    assert time.perf_counter() - started < 15
    # the pipeline's own render has a finite default limit and never asks for none
    default = inspect.signature(PdfWorker.start).parameters["timeout_s"].default
    assert 0 < default < float("inf")
    assert "timeout_s=None" not in (ROOT / "sitrep" / "pipeline.py").read_text(encoding="utf-8")


# --------------------------------------------------------------------------- F23


@pytest.mark.parametrize(
    ("content", "rule"),
    [
        (b"", "file-empty"),
        (
            b"district_id,district_name,epi_week,reporting_sites,ili_visits,total_visits\n",
            "file-header-only",
        ),
    ],
)
def test_h23_empty_or_header_only_table_blocks_everything(
    tmp_path: Path, content: bytes, rule: str
) -> None:
    recorder = RecordingHandler()
    with smtp_server(recorder) as port:
        week = make_week(
            tmp_path / "week", pdf=False, config={"email": {"enabled": True, "port": port}}
        )
        week.table.write_bytes(content)
        code, out, err = run_cli(["check", "--config", str(week.config_path), "--json"])
        assert code == 1 and [f["rule"] for f in json.loads(out)["findings"]] == [rule]
        code, out, err = run_cli(["build", "--config", str(week.config_path)])
        assert code == 1 and rule in err
        code, out, err = run_cli(
            ["run", "--config", str(week.config_path), "--today", "2026-11-30"]
        )
        assert code == 1 and week.table.name in out + err
        assert recorder.sessions == 0 and recorder.messages == []
    assert tree_hashes(week.out) == {} and tree_hashes(week.archive) == {}
    with pytest.raises(ValidationFailed):
        build(week)
