"""The sign-off gate (sitrep.deliver.review): held drafts, `sitrep approve`, the review record.

End to end through the CLI (``cli.main([...])`` in-process) against a loopback SMTP
server (aiosmtpd on 127.0.0.1), as in tests/test_delivery_jobs.py. The demo week
(MMWR 2026-W47, built from the W46 and W47 extracts) has five data-quality warnings,
four of them ``revision-large``; the districts the report names on page 1 come from
the render context (``ReportContext.named_district_ids``), so the test reads them from
the report's own page-1 text, not from a list typed here. Under the default policy
("on-warnings") the demo is held; the W47 extract alone (no last week's table, so no
revision rules) is a clean week. Each policy builds the week once (about 10 s each).
The hash chain of the review record uses SHA-256 (FIPS 180-4) through hashlib.
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime as dt
import hashlib
import io
import json
import shutil
import subprocess
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from mail_fixtures import RecordingHandler, smtp_server
from toml_fixtures import demo_config_file

from sitrep import cli
from sitrep.batch import run_batch, summary_table
from sitrep.config import Config, load_config
from sitrep.deliver.archive import verify_bundle, write_bundle
from sitrep.deliver.mail import build_message
from sitrep.deliver.review import (
    approve_bundle,
    hold_reasons,
    read_approvals,
    review_record_path,
    review_state,
)
from sitrep.delivery_jobs import delivery_state, scheduled_run
from sitrep.errors import ConfigError, DeliveryError, ValidationFailed

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_inputs"
W46, W47 = DEMO / "extract_2026-W46.csv", DEMO / "extract_2026-W47.csv"
MONDAY = "2026-11-30"  # Monday after MMWR 2026-W47 (22-28 Nov 2026)
SLUG = "province-of-quillmarsh"
REVIEWER = "the duty epidemiologist"  # [delivery] reviewer in demo_inputs/sitrep.toml


def make_config(folder: Path, port: int, inbox_files: tuple[Path, ...], **changes: Any) -> Path:
    inbox = folder / "inbox"
    inbox.mkdir(parents=True, exist_ok=True)
    for f in inbox_files:
        shutil.copyfile(f, inbox / f.name)
    return demo_config_file(
        folder / "cfg",
        input__table=None,
        input__prior_table=None,
        input__inbox=str(inbox),
        output__archive=str(folder / "archive"),
        email__port=port,
        **changes,
    )


def cli_run(*argv: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = cli.main(list(argv))
    return code, out.getvalue(), err.getvalue()


def page_one_text(pdf: Path) -> str:
    """Text of page 1 of a PDF (poppler's pdftotext), whitespace folded."""
    text = subprocess.run(
        ["pdftotext", "-f", "1", "-l", "1", str(pdf), "-"],
        check=True,
        capture_output=True,
        text=True,
    ).stdout
    return " ".join(text.split())


def writable_copy(bundle: Path, target: Path) -> Path:
    """Copy a bundle (its files are read-only) to ``target/<week>/v1`` and make the files writable."""
    dest = target / bundle.parent.name / bundle.name
    shutil.copytree(bundle, dest)
    for p in dest.rglob("*"):
        if p.is_file():
            p.chmod(0o644)
    return dest


# --------------------------------------------------------------------------- on-warnings: the demo


@dataclasses.dataclass
class Held:
    folder: Path
    config: Path
    bundle: Path
    handler: RecordingHandler
    steps: dict[str, tuple[int, str, str]]
    received: dict[str, int]
    pristine: Path
    """A copy of the held bundle taken before anything was approved (for tampering)."""
    state_when_held: str


@pytest.fixture(scope="module")
def held(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Held]:
    """The demo week under the default policy: run (held), send (held), approve, run, run."""
    folder = tmp_path_factory.mktemp("held")
    handler = RecordingHandler()
    steps: dict[str, tuple[int, str, str]] = {}
    received: dict[str, int] = {}
    with smtp_server(handler) as port:
        config = make_config(folder, port, (W46, W47))
        bundle = folder / "archive" / SLUG / "2026-W47" / "v1"
        steps["run"] = cli_run("run", "--config", str(config), "--today", MONDAY)
        received["run"] = len(handler.messages)
        pristine = writable_copy(bundle, folder / "pristine")
        steps["send"] = cli_run("send", str(bundle), "--config", str(config))
        steps["send-resend"] = cli_run("send", str(bundle), "--config", str(config), "--resend")
        steps["run-again"] = cli_run("run", "--config", str(config), "--today", MONDAY)
        received["held"] = len(handler.messages)
        state_when_held = delivery_state(bundle).status
        steps["verify-draft"] = cli_run("verify", str(bundle))
        steps["approve"] = cli_run(
            "approve",
            str(bundle),
            "--by",
            "Dr Ilsa Marrow",
            "--note",
            "revisions checked with the districts",
        )
        steps["verify-approved"] = cli_run("verify", str(bundle))
        steps["run-approved"] = cli_run("run", "--config", str(config), "--today", MONDAY)
        received["approved"] = len(handler.messages)
        steps["run-after"] = cli_run("run", "--config", str(config), "--today", MONDAY)
        received["after"] = len(handler.messages)
        yield Held(folder, config, bundle, handler, steps, received, pristine, state_when_held)


def test_default_policy_is_on_warnings() -> None:
    assert Config().delivery.require_review == "on-warnings"
    assert load_config(DEMO / "sitrep.toml").delivery.require_review == "on-warnings"


def test_on_warnings_holds_the_demo_week_and_says_who_must_review_what(held: Held) -> None:
    code, out, err = held.steps["run"]
    assert code == cli.EXIT_HELD == 4, err
    assert held.received["run"] == 0
    assert verify_bundle(held.bundle).ok  # built and archived, untouched by the hold
    assert held.state_when_held == "unsent"
    manifest = json.loads((held.bundle / "manifest.json").read_text(encoding="utf-8"))
    named = {d["id"]: d["name"] for d in manifest["page_one_districts"]}
    # Every district the manifest lists as named on page 1 is named in the PDF's page 1 (only the
    # top-third list is cut short there, after its first eight names), and the demo's revised
    # districts that page 1 names are the ones the message lists.
    page_one = page_one_text(held.bundle / "report.pdf")
    findings = json.loads((held.bundle / "validation.json").read_text(encoding="utf-8"))["findings"]
    revised = sorted(f["district_id"] for f in findings if f["rule"] == "revision-large")
    assert revised == ["002", "021", "033", "041"]
    on_page_one = [i for i in revised if named.get(i) and named[i] in page_one]
    assert on_page_one and on_page_one == [i for i in revised if i in named]
    assert "held for review" in err and "'on-warnings'" in err
    assert f"Reviewer: {REVIEWER}" in err
    for i in on_page_one:
        assert f"{i} {named[i]}" in err
    for i in set(revised) - set(on_page_one):
        assert f"{i} " not in err.split("To review:")[1].split(":")[0]
    assert f"sitrep approve {held.bundle}" in err


def test_send_and_resend_of_a_held_bundle_exit_4_and_send_nothing(held: Held) -> None:
    for step in ("send", "send-resend", "run-again"):
        code, _, err = held.steps[step]
        assert code == 4 and "held for review" in err, (step, err)
    assert held.received["held"] == 0
    assert not (held.folder / "archive" / SLUG / "2026-W47" / "v2").exists()  # no rebuild either


def test_approve_records_reviewer_time_and_note_outside_the_bundle(held: Held) -> None:
    code, out, err = held.steps["approve"]
    assert code == 0, err
    record = review_record_path(held.bundle)
    assert record == held.bundle.parent / "v1.review.jsonl"
    lines = record.read_bytes().splitlines()
    assert len(lines) == 1
    entry = json.loads(lines[0])
    assert (
        entry["by"] == "Dr Ilsa Marrow" and entry["note"] == "revisions checked with the districts"
    )
    assert entry["time"].endswith("Z")
    assert (
        entry["manifest_sha256"]
        == hashlib.sha256((held.bundle / "manifest.json").read_bytes()).hexdigest()
    )
    assert entry["prev_sha256"] == "0" * 64
    assert {r["rule"] for r in entry["approved"]} == {"revision-large"}
    # the bundle itself still verifies: nothing was written inside it
    assert verify_bundle(held.bundle).ok
    code, out, _ = held.steps["verify-draft"]
    assert code == 0 and "review: draft, not approved" in out
    code, out, _ = held.steps["verify-approved"]
    assert code == 0 and "OK:" in out and "review: approved by Dr Ilsa Marrow" in out


def test_after_approval_the_next_run_sends_exactly_once(held: Held) -> None:
    code, out, err = held.steps["run-approved"]
    assert code == 0, err
    assert "e-mail sent" in out and "approved by Dr Ilsa Marrow" in out
    assert held.received["approved"] == 1
    code, out, err = held.steps["run-after"]
    assert code == 0 and "nothing to do" in out, err
    assert held.received["after"] == 1
    _, _, raw = held.handler.messages[0]
    assert b"internal-" not in raw  # only the partner PDF is attached
    index = (held.folder / "archive" / "index.html").read_text(encoding="utf-8")
    assert "approved by Dr Ilsa Marrow" in index  # the archive index shows the review state


def test_approving_a_tampered_bundle_is_refused(held: Held, tmp_path: Path) -> None:
    bundle = writable_copy(held.pristine, tmp_path)
    with open(bundle / "report.pdf", "ab") as fh:
        fh.write(b"%")
    code, _, err = cli_run("approve", str(bundle), "--by", "Dr Ilsa Marrow")
    assert code == cli.EXIT_DELIVERY and "fails verification" in err
    assert not review_record_path(bundle).exists()


def test_an_edited_review_record_approves_nothing(held: Held, tmp_path: Path) -> None:
    bundle = writable_copy(held.pristine, tmp_path)
    approve_bundle(bundle, by="A. Reviewer")
    approve_bundle(bundle, by="B. Reviewer", note="second look")
    approvals, problem = read_approvals(bundle)
    assert [a.by for a in approvals] == ["A. Reviewer", "B. Reviewer"] and problem == ""
    record = review_record_path(bundle)
    first, second = record.read_bytes().splitlines()
    assert json.loads(second)["prev_sha256"] == hashlib.sha256(first).hexdigest()
    # edit the first line: the second no longer follows it
    record.write_bytes(first.replace(b"A. Reviewer", b"Z. Nobody") + b"\n" + second + b"\n")
    assert review_state(bundle, "on-warnings").status == "broken"
    code, out, _ = cli_run("verify", str(bundle))
    assert code == cli.EXIT_BLOCKED and "review record" in out
    with pytest.raises(DeliveryError, match="cannot be trusted"):
        approve_bundle(bundle, by="C. Reviewer")
    # drop the first line: the second does not start the chain
    record.write_bytes(second + b"\n")
    assert review_state(bundle, "on-warnings").status == "broken"
    # a sound approval line moved next to another bundle (another manifest) approves nothing
    other = write_bundle(
        tmp_path / "arch",
        "Elsewhere",
        "2026-W47",
        {"validation.json": (bundle / "validation.json").read_bytes()},
        {"page_one_districts": []},
    )
    review_record_path(other.path).write_bytes(first + b"\n")
    state = review_state(other.path, "on-warnings")
    assert state.status == "broken" and "another manifest" in state.problem


def test_send_of_a_bundle_with_a_broken_review_record_exits_4(held: Held, tmp_path: Path) -> None:
    bundle = writable_copy(held.pristine, tmp_path)
    approve_bundle(bundle, by="A. Reviewer")
    record = review_record_path(bundle)
    record.write_bytes(b'{"kind": "sitrep-approval"}\n' + record.read_bytes())  # a line slipped in
    code, _, err = cli_run("send", str(bundle), "--config", str(held.config))
    assert code == 4 and "cannot be trusted" in err


def test_review_record_survives_verify_and_a_rebuild(held: Held, tmp_path: Path) -> None:
    """Runs last in this module: it adds v2 to the shared archive."""
    record = review_record_path(held.bundle)
    before = record.read_bytes()
    build_config = demo_config_file(
        tmp_path,
        output__archive=str(held.folder / "archive"),
        email__port=1,
    )
    code, _, err = cli_run("build", "--config", str(build_config), "--today", MONDAY)
    assert code == cli.EXIT_ARCHIVED and "already archived" in err  # the week is archived: v1 kept
    assert record.read_bytes() == before
    assert verify_bundle(held.bundle).ok
    assert review_state(held.bundle, "on-warnings").status == "approved"
    code, out, err = cli_run(
        "build", "--config", str(build_config), "--today", MONDAY, "--reissue", "late returns"
    )
    assert code == 0, err
    v2 = held.bundle.parent / "v2"
    assert "draft " + str(v2) in out and "held for review" in out
    assert record.read_bytes() == before  # v1's approvals are untouched ...
    assert review_state(held.bundle, "on-warnings").status == "approved"
    assert review_state(v2, "on-warnings").status == "held"  # ... and do not approve v2
    assert not review_record_path(v2).exists()
    code, out, _ = cli_run("verify", str(held.bundle))
    assert code == 0 and "approved by Dr Ilsa Marrow" in out


# --------------------------------------------------------------------------- never / always


def test_never_sends_the_demo_week_at_once(tmp_path: Path) -> None:
    handler = RecordingHandler()
    with smtp_server(handler) as port:
        config = make_config(tmp_path, port, (W46, W47), delivery__require_review="never")
        code, out, err = cli_run("run", "--config", str(config), "--today", MONDAY)
    assert code == 0, err
    assert "e-mail sent" in out and len(handler.messages) == 1
    bundle = tmp_path / "archive" / SLUG / "2026-W47" / "v1"
    assert not review_record_path(bundle).exists()  # nobody approved: the policy let it go
    assert review_state(bundle, "on-warnings").status == "held"  # it would have been held


def test_always_holds_a_clean_week_until_approved(tmp_path: Path) -> None:
    handler = RecordingHandler()
    with smtp_server(handler) as port:
        config = make_config(tmp_path, port, (W47,), delivery__require_review="always")
        code, out, err = cli_run("run", "--config", str(config), "--today", MONDAY)
        bundle = tmp_path / "archive" / SLUG / "2026-W47" / "v1"
        validation = json.loads((bundle / "validation.json").read_text(encoding="utf-8"))
        assert validation["findings"] == []  # a clean week: nothing to hold it on warnings
        assert review_state(bundle, "on-warnings").status == "not-required"
        assert code == 4 and "holds every week" in err, err
        assert len(handler.messages) == 0
        approve_bundle(bundle, by="Dr Ilsa Marrow")
        loaded = load_config(config)
        report = scheduled_run(loaded, today=None, now=None)
        assert report.status == "sent" and len(handler.messages) == 1
        assert scheduled_run(loaded).status == "nothing-to-do" and len(handler.messages) == 1


def test_dry_run_of_a_held_bundle_writes_the_eml_but_sends_nothing(
    held: Held, tmp_path: Path
) -> None:
    bundle = writable_copy(held.pristine, tmp_path)
    code, out, err = cli_run("send", str(bundle), "--config", str(held.config), "--dry-run")
    assert code == 0, err
    assert (bundle.parent / "v1.eml").is_file() and delivery_state(bundle).status == "unsent"


def test_batch_summary_names_held_bundles(tmp_path: Path) -> None:
    config = demo_config_file(tmp_path / "j1")
    results = run_batch([config], workers=1, today=dt.date(2026, 11, 30))
    assert results[0].status == "ok" and results[0].exit_code == 0 and results[0].held
    table = summary_table(results)
    assert "held Province of Quillmarsh" in table and "sitrep approve" in table


# --------------------------------------------------------------------------- rules on constructed bundles


def fake_bundle(folder: Path, findings: list[dict[str, Any]], page_one: list[str] | None) -> Path:
    folder.mkdir(parents=True)
    manifest: dict[str, Any] = {"files": {}}
    if page_one is not None:
        manifest["page_one_districts"] = [{"id": i, "name": f"District {i}"} for i in page_one]
    (folder / "manifest.json").write_text(json.dumps(manifest), encoding="utf-8")
    (folder / "validation.json").write_text(json.dumps({"findings": findings}), encoding="utf-8")
    return folder


def finding(severity: str, rule: str, district: str | None) -> dict[str, Any]:
    return {"severity": severity, "rule": rule, "district_id": district, "message": "m"}


def test_hold_rules_on_warnings(tmp_path: Path) -> None:
    named = ["001", "002"]
    cases = [
        ([finding("warning", "value-spike", "001")], [("value-spike", ("001",))]),
        ([finding("warning", "value-spike", "009")], []),  # a district page 1 does not name
        ([finding("info", "district-name-differs", "001")], []),  # notes never hold
        ([finding("warning", "completeness-drop", None)], [("completeness-drop", ())]),
        ([finding("warning", "revision-summary", None)], []),
        ([finding("error", "count-negative", "009")], [("count-negative", ("009",))]),
        (
            [
                finding("warning", "revision-large", "002"),
                finding("warning", "revision-large", "001"),
            ],
            [("revision-large", ("001", "002"))],
        ),
    ]
    for n, (found, expected) in enumerate(cases):
        bundle = fake_bundle(tmp_path / f"c{n}", found, named)
        reasons = hold_reasons(bundle)
        assert [(r.rule, r.district_ids) for r in reasons] == expected, found
        state = review_state(bundle, "on-warnings")
        assert state.status == ("held" if expected else "not-required")
        assert review_state(bundle, "always").status == "held"
        assert review_state(bundle, "never").status == "not-required"


def test_hold_rules_fail_closed(tmp_path: Path) -> None:
    # a manifest without page_one_districts (an older bundle): any district warning holds
    bundle = fake_bundle(tmp_path / "old", [finding("warning", "value-spike", "009")], None)
    assert [r.rule for r in hold_reasons(bundle)] == ["value-spike"]
    broken = fake_bundle(tmp_path / "broken", [], ["001"])
    (broken / "validation.json").write_text("{not json", encoding="utf-8")
    assert [r.severity for r in hold_reasons(broken)] == ["error"]
    with pytest.raises(ConfigError):
        review_state(broken, "sometimes")  # type: ignore[arg-type]


def test_approve_refuses_an_empty_name_and_a_blocked_run(held: Held, tmp_path: Path) -> None:
    bundle = writable_copy(held.pristine, tmp_path)
    with pytest.raises(ConfigError, match="--by"):
        approve_bundle(bundle, by="  ")
    with pytest.raises(ConfigError, match="line break"):
        approve_bundle(bundle, by="A", note="two\nlines")
    blocked = fake_bundle(
        tmp_path / "blocked" / "v1", [finding("error", "count-negative", "001")], []
    )
    files = {"validation.json": (blocked / "validation.json").read_bytes()}
    made = write_bundle(tmp_path / "arch", "Blocked", "2026-W47", files, {"page_one_districts": []})
    with pytest.raises(ValidationFailed, match="blocked"):
        approve_bundle(made.path, by="A")
    assert not review_record_path(made.path).exists()


def test_mail_refuses_internal_attachments() -> None:
    with pytest.raises(DeliveryError, match="internal"):
        build_message(
            subject="s",
            body="b",
            sender="a@example.org",
            recipients=["b@example.org"],
            reply_to=None,
            attachments=[("internal-data-quality.csv", b"x", "text/csv")],
            message_id_seed="seed",
            date=dt.datetime(2026, 11, 30, tzinfo=dt.UTC),
        )
