"""Tests of sitrep.delivery_jobs: the scheduled Monday run and sending an archived bundle.

The run is driven through the CLI (``cli.main([...])`` in-process) against a real
SMTP server (aiosmtpd) bound to 127.0.0.1 on a free port. Fault references:
docs/faults.md F6 (archive unchanged after a blocked week, hashed), F8 (no
overwrite; reissue writes v<k+1>), F11 (f: nothing sent for a blocked run; c: a
connection lost after DATA is "unknown" and never resent automatically, RFC 1047).
Epi-week dates are checked against the ``epiweeks`` package (MMWR calendar).
The demo week is built once for the module (about 8 s) and once more for the reissue.
"""

from __future__ import annotations

import contextlib
import csv
import dataclasses
import datetime as dt
import email
import email.policy
import hashlib
import io
import json
import shutil
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from epiweeks import Week
from mail_fixtures import RecordingHandler, free_port, smtp_server
from toml_fixtures import demo_config_file

from sitrep import cli, pipeline
from sitrep.config import load_config
from sitrep.deliver.archive import verify_bundle
from sitrep.deliver.mail import eml_path, sent_record_path
from sitrep.delivery_jobs import (
    delivery_state,
    email_subject,
    find_extracts,
    scheduled_run,
)
from sitrep.errors import DeliveryError, InputError, ValidationFailed
from sitrep.weeks import EpiWeek, WeekSystem

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_inputs"
W46, W47 = DEMO / "extract_2026-W46.csv", DEMO / "extract_2026-W47.csv"
MONDAY_W48 = "2026-11-30"  # Monday after MMWR 2026-W47 (22-28 Nov 2026, epiweeks.Week(2026, 47))
MONDAY_W49 = "2026-12-07"  # Monday after MMWR 2026-W48 (29 Nov-5 Dec 2026, epiweeks.Week(2026, 48))
RECIPIENTS = ["leadership@quillmarsh.example", "partners@quillmarsh.example"]
SLUG = "province-of-quillmarsh"


# --------------------------------------------------------------------------- helpers


def write_config(folder: Path, *, port: int, inbox: Path, archive: Path, **changes: Any) -> Path:
    """The demo configuration with absolute input paths, a tmp archive and loopback e-mail.

    No table or prior_table: ``sitrep run`` takes its extracts from ``inbox``.
    """
    defaults = {
        "input__table": None,
        "input__prior_table": None,
        "input__inbox": str(inbox),
        "delivery__require_review": "never",
        "output__archive": str(archive),
        "email__port": port,
    }
    return demo_config_file(folder, **{**defaults, **changes})


def make_inbox(folder: Path, *files: Path) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    for f in files:
        shutil.copyfile(f, folder / f.name)
    return folder


def broken_w48(target: Path, district: str = "017") -> int:
    """Season-to-date extract through 2026-W48 in which one district's ILI visits exceed all
    visits; returns that row's line number (header = line 1)."""
    rows = list(csv.DictReader(W47.read_text(encoding="utf-8").splitlines()))
    new = [dict(r, epi_week="2026-W48") for r in rows if r["epi_week"] == "2026-W47"]
    bad_line = 0
    for i, r in enumerate(new):
        if r["district_id"] == district:
            r["ili_visits"] = str(int(r["total_visits"]) + 5)
            bad_line = len(rows) + i + 2
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=list(rows[0]), lineterminator="\n")
    writer.writeheader()
    writer.writerows(rows + new)
    target.write_text(buffer.getvalue(), encoding="utf-8")
    return bad_line


def tree_digest(folder: Path) -> dict[str, str]:
    """SHA-256 of every file under ``folder`` (names relative), to show nothing changed."""
    return {
        str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


def parse(raw: bytes) -> email.message.EmailMessage:
    return email.message_from_bytes(raw, policy=email.policy.default)  # type: ignore[return-value]


def run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = cli.main(list(argv))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


# --------------------------------------------------------------------------- the Monday run


@dataclasses.dataclass
class Scenario:
    folder: Path
    inbox: Path
    archive: Path
    config: Path
    handler: RecordingHandler
    port: int
    first: tuple[int, str, str]
    received_after_first: int


@pytest.fixture(scope="module")
def scenario(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Scenario]:
    """First `sitrep run` over an inbox holding the W46 and W47 demo extracts."""
    folder = tmp_path_factory.mktemp("monday")
    inbox = make_inbox(folder / "inbox", W46, W47)
    archive = folder / "archive"
    handler = RecordingHandler()
    with smtp_server(handler) as port:
        config = write_config(folder / "cfg", port=port, inbox=inbox, archive=archive)
        out, err = io.StringIO(), io.StringIO()
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            code = cli.main(["run", "--config", str(config), "--today", MONDAY_W48])
        yield Scenario(
            folder,
            inbox,
            archive,
            config,
            handler,
            port,
            (code, out.getvalue(), err.getvalue()),
            len(handler.messages),
        )


def test_first_run_builds_archives_and_sends(scenario: Scenario) -> None:
    code, out, err = scenario.first
    assert code == 0, err
    bundle = scenario.archive / SLUG / "2026-W47" / "v1"
    assert verify_bundle(bundle).ok
    assert "newest extract extract_2026-W47.csv ends in week 2026-W47" in out
    assert "e-mail sent" in out
    # The next older extract was used as last week's table.
    manifest = json.loads((bundle / "manifest.json").read_text())
    roles = {i["role"]: i for i in manifest["inputs"]}
    assert roles["table"]["sha256"] == hashlib.sha256(W47.read_bytes()).hexdigest()
    assert roles["prior_table"]["sha256"] == hashlib.sha256(W46.read_bytes()).hexdigest()
    # Exactly one message, to the configured recipients, with the bundle's text and PDF.
    assert scenario.received_after_first == 1
    mail_from, rcpts, raw = scenario.handler.messages[0]
    assert mail_from == "sitrep@quillmarsh.example" and rcpts == RECIPIENTS
    msg = parse(raw)
    week = Week(2026, 47)  # epiweeks: MMWR 2026-W47 runs Sun 22 Nov to Sat 28 Nov 2026
    assert (week.startdate(), week.enddate()) == (dt.date(2026, 11, 22), dt.date(2026, 11, 28))
    assert msg["Subject"] == (
        "[ILI] Province of Quillmarsh: ILI situation report, week 47 2026 (22 Nov to 28 Nov 2026)"
    )
    # SMTP carries CRLF line ends (RFC 5321 §2.3.8); compare the text with LF.
    body = msg.get_body(("plain",)).get_content().replace("\r\n", "\n")  # type: ignore[union-attr]
    email_txt = (bundle / "email.txt").read_text(encoding="utf-8")
    assert body.strip() == email_txt.strip()
    assert "Key messages" in body and "Cautions" in body
    pdfs = [p.get_content() for p in msg.iter_attachments()]
    assert pdfs == [(bundle / "report.pdf").read_bytes()]
    state = delivery_state(bundle)
    assert state.status == "sent" and state.last is not None
    assert state.last["message_id"] == msg["Message-ID"]


def test_second_run_does_nothing(scenario: Scenario, capsys: pytest.CaptureFixture[str]) -> None:
    before = tree_digest(scenario.archive)
    with smtp_server(scenario.handler) as port:
        assert port  # a server is listening, so "nothing sent" is not for want of one
        code, out, err = run(capsys, "run", "--config", str(scenario.config), "--today", MONDAY_W48)
    assert code == 0, err
    assert "already archived" in out and "nothing to do" in out
    assert len(scenario.handler.messages) == 1
    assert tree_digest(scenario.archive) == before


def test_blocked_newest_extract_sends_nothing_and_leaves_archive_untouched(
    scenario: Scenario, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    inbox = make_inbox(tmp_path / "inbox", W46, W47)
    bad_line = broken_w48(inbox / "extract_2026-W48.csv")
    handler = RecordingHandler()
    before = tree_digest(scenario.archive)
    with smtp_server(handler) as port:
        config = write_config(tmp_path / "cfg", port=port, inbox=inbox, archive=scenario.archive)
        code, out, err = run(capsys, "run", "--config", str(config), "--today", MONDAY_W49)
    assert code == cli.EXIT_BLOCKED
    assert "count-ili-exceeds-total" in err
    assert f"extract_2026-W48.csv:{bad_line}" in err and "ili_visits" in err
    assert handler.messages == [] and handler.sessions == 0
    assert tree_digest(scenario.archive) == before
    assert not (scenario.archive / SLUG / "2026-W48").exists()


def test_reissue_is_sent_by_run_and_unknown_is_never_resent(
    scenario: Scenario, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    archive = tmp_path / "archive"
    shutil.copytree(scenario.archive, archive)  # v1 and its send record, isolated from others
    reason = "corrected district 017 counts"
    config = load_config(
        write_config(tmp_path / "cfg0", port=1, inbox=scenario.inbox, archive=archive)
    )
    config = dataclasses.replace(
        config, input=dataclasses.replace(config.input, table=W47, prior_table=W46)
    )
    result = pipeline.build(config, reissue_reason=reason, today=dt.date.fromisoformat(MONDAY_W48))
    assert result.bundle is not None and result.bundle.path.name == "v2"
    html = (result.bundle.path / "report.html").read_text(encoding="utf-8")
    assert "supersedes version 1" in html and reason in html

    dropper = RecordingHandler(drop_after_data=True)
    with smtp_server(dropper) as port:
        cfg = write_config(tmp_path / "cfg", port=port, inbox=scenario.inbox, archive=archive)
        code, out, err = run(capsys, "run", "--config", str(cfg), "--today", MONDAY_W48)
        assert code == cli.EXIT_DELIVERY
        assert "archived" in out and "not sent" in out  # v2 was sent, not rebuilt
        assert "Check with a recipient" in err and "--resend" in err and "v2" in err
        assert len(dropper.messages) == 1  # the server did store it
        subject = parse(dropper.messages[0][2])["Subject"]
        assert subject.endswith("(22 Nov to 28 Nov 2026), version 2, supersedes v1")
        code, out, err = run(capsys, "run", "--config", str(cfg), "--today", MONDAY_W48)
        assert code == cli.EXIT_DELIVERY and "Check with a recipient" in err
        assert len(dropper.messages) == 1  # not resent automatically
    assert not (archive / SLUG / "2026-W47" / "v3").exists()
    assert delivery_state(result.bundle.path).status == "unknown"
    good = RecordingHandler()
    with smtp_server(good) as port:
        cfg = write_config(tmp_path / "cfg2", port=port, inbox=scenario.inbox, archive=archive)
        code, out, err = run(
            capsys, "send", str(result.bundle.path), "--config", str(cfg), "--resend"
        )
    assert code == 0, err
    assert len(good.messages) == 1 and delivery_state(result.bundle.path).status == "sent"


def test_dry_run_writes_eml_and_records_nothing(
    scenario: Scenario, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    archive = tmp_path / "archive"
    shutil.copytree(scenario.archive / SLUG / "2026-W47" / "v1", archive / SLUG / "2026-W47" / "v1")
    bundle = archive / SLUG / "2026-W47" / "v1"
    config = write_config(
        tmp_path / "cfg",
        port=free_port(),
        inbox=scenario.inbox,
        archive=archive,
        email__enabled=False,
    )
    code, out, err = run(capsys, "run", "--config", str(config), "--dry-run", "--today", MONDAY_W48)
    assert code == 0, err
    assert "dry run" in out
    written = parse(eml_path(bundle).read_bytes())
    assert [p.get_content() for p in written.iter_attachments()] == [
        (bundle / "report.pdf").read_bytes()
    ]
    assert not sent_record_path(bundle).exists()
    assert delivery_state(bundle).status == "unsent"


# --------------------------------------------------------------------------- inbox rules (no build)


def test_extracts_are_ordered_by_week_not_by_name(tmp_path: Path) -> None:
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    shutil.copyfile(W47, inbox / "extract_a.csv")
    shutil.copyfile(W46, inbox / "extract_z.csv")
    config = load_config(write_config(tmp_path, port=1, inbox=inbox, archive=tmp_path / "a"))
    found = find_extracts(config)
    assert [(str(e.week), e.path.name) for e in found] == [
        ("2026-W46", "extract_z.csv"),
        ("2026-W47", "extract_a.csv"),
    ]
    assert found[1].sha256 == hashlib.sha256(W47.read_bytes()).hexdigest()


def test_unreadable_extract_stops_the_run_instead_of_being_skipped(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    inbox = make_inbox(tmp_path / "inbox", W46, W47)
    (inbox / "extract_2026-W48.csv").write_text("district_id;oops\n001;2\n", encoding="utf-8")
    config = write_config(
        tmp_path / "cfg", port=free_port(), inbox=inbox, archive=tmp_path / "archive"
    )
    code, out, err = run(capsys, "run", "--config", str(config), "--today", MONDAY_W49)
    assert code == cli.EXIT_BLOCKED
    assert "extract_2026-W48.csv" in err and "move it out of the inbox" in err
    assert not (tmp_path / "archive").exists()
    with pytest.raises(ValidationFailed):
        find_extracts(load_config(config))


def test_two_extracts_ending_in_the_same_week_are_refused(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    inbox = make_inbox(tmp_path / "inbox", W46, W47)
    shutil.copyfile(W47, inbox / "extract_2026-W47-resent.csv")
    config = write_config(
        tmp_path / "cfg", port=free_port(), inbox=inbox, archive=tmp_path / "archive"
    )
    code, out, err = run(capsys, "run", "--config", str(config), "--today", MONDAY_W48)
    assert code == cli.EXIT_BLOCKED
    assert "extract_2026-W47.csv" in err and "extract_2026-W47-resent.csv" in err
    assert not (tmp_path / "archive").exists()


def test_archive_ahead_of_the_inbox_is_refused(scenario: Scenario, tmp_path: Path) -> None:
    inbox = make_inbox(tmp_path / "inbox", W46)  # W47 is archived, but its extract is gone
    config = load_config(
        write_config(tmp_path / "cfg", port=1, inbox=inbox, archive=scenario.archive)
    )
    with pytest.raises(InputError, match="already holds week 2026-W47"):
        scheduled_run(config)


@pytest.mark.parametrize(
    ("changes", "message"),
    [
        ({"email__enabled": False}, "email.enabled is false"),
        ({"email__recipients": []}, "email.recipients is empty"),
        ({"weeks__report_week": "2026-W46"}, "weeks.report_week"),
        ({"input__inbox": None}, "input.inbox is not set"),
        ({"output__archive": None}, "output.archive is not set"),
    ],
)
def test_configuration_problems_exit_2_before_anything_is_built(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], changes: dict[str, Any], message: str
) -> None:
    inbox = make_inbox(tmp_path / "inbox", W46, W47)
    config = write_config(
        tmp_path / "cfg", port=free_port(), inbox=inbox, archive=tmp_path / "archive", **changes
    )
    code, out, err = run(capsys, "run", "--config", str(config), "--today", MONDAY_W48)
    assert code == cli.EXIT_USAGE
    assert message in err
    assert not (tmp_path / "archive").exists() and not (tmp_path / "cfg" / "out").exists()


# --------------------------------------------------------------------------- pure parts


def test_subject_names_jurisdiction_week_and_dates() -> None:
    config = load_config(DEMO / "sitrep.toml")
    week = Week(2026, 47)  # epiweeks reference for the MMWR calendar
    subject = email_subject(config, EpiWeek(2026, 47, WeekSystem.MMWR))
    assert subject == (
        "Province of Quillmarsh: ILI situation report, week 47 2026 "
        f"({week.startdate().day} Nov to {week.enddate().day} Nov 2026)"
    )
    assert not subject.startswith("[ILI]")  # send_bundle adds the prefix once


def test_subject_of_a_week_spanning_new_year_gives_both_years() -> None:
    config = load_config(DEMO / "sitrep.toml")
    ref = Week(2014, 53)  # epiweeks: MMWR 2014-W53 is 28 Dec 2014 to 3 Jan 2015
    assert (ref.startdate(), ref.enddate()) == (dt.date(2014, 12, 28), dt.date(2015, 1, 3))
    subject = email_subject(config, EpiWeek(2014, 53, WeekSystem.MMWR), version=2, supersedes="v1")
    assert subject.endswith("week 53 2014 (28 Dec 2014 to 3 Jan 2015), version 2, supersedes v1")


def _record(bundle: Path, *statuses: str) -> None:
    sends = [
        {"status": s, "message_id": f"<{i}@x.example>", "time": f"2026-11-30T07:0{i}:00+00:00"}
        for i, s in enumerate(statuses)
    ]
    sent_record_path(bundle).write_text(json.dumps({"bundle": bundle.name, "sends": sends}))


@pytest.mark.parametrize(
    ("statuses", "expected", "decider"),
    [
        ((), "unsent", None),
        (("failed",), "failed", 0),
        (("failed", "failed"), "failed", 1),
        (("failed", "unknown"), "unknown", 1),
        (("partial",), "partial", 0),
        (("unknown", "sent"), "sent", 1),
        (("sent", "unknown"), "sent", 0),  # delivered once: the week counts as sent
    ],
)
def test_delivery_state_rules(
    tmp_path: Path, statuses: tuple[str, ...], expected: str, decider: int | None
) -> None:
    bundle = tmp_path / "v1"
    bundle.mkdir()
    if statuses:
        _record(bundle, *statuses)
    state = delivery_state(bundle)
    assert state.status == expected and state.sends == len(statuses)
    if decider is None:
        assert state.last is None
    else:
        assert state.last is not None and state.last["message_id"] == f"<{decider}@x.example>"


def test_unreadable_send_record_fails_closed(tmp_path: Path) -> None:
    bundle = tmp_path / "v1"
    bundle.mkdir()
    sent_record_path(bundle).write_text("{not json")
    with pytest.raises(DeliveryError, match="unknown"):
        delivery_state(bundle)
