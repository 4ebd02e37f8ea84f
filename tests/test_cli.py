"""Tests of the `check`, `verify`, `send` and `run` verbs of the CLI, called in-process.

Exit codes are the table in ``sitrep.cli`` and ``sitrep.errors`` (0 done, 1 blocked,
2 usage or configuration, 3 delivery). E-mail goes to a real SMTP server (aiosmtpd)
bound to 127.0.0.1 on a free port; fault references docs/faults.md F11 (b, c, f),
F17 (every offending cell named by file, line and column) and F8 (verify). The demo
week comes from the session fixture ``demo_build`` (tests/conftest.py); every test
that changes a bundle works on its own copy.
"""

from __future__ import annotations

import email
import email.policy
import json
import re
import shutil
from pathlib import Path
from typing import Any

import pytest
from mail_fixtures import RecordingHandler, free_port, smtp_server
from toml_fixtures import demo_config_file

from sitrep import cli, errors
from sitrep.deliver.archive import write_bundle
from sitrep.deliver.mail import eml_path, sent_record_path

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_inputs"
W46, W47 = DEMO / "extract_2026-W46.csv", DEMO / "extract_2026-W47.csv"
TODAY = "2026-11-30"  # the Monday the demo week is reported (tests/conftest.py TODAY)
RECIPIENTS = ["leadership@quillmarsh.example", "partners@quillmarsh.example"]


# --------------------------------------------------------------------------- helpers


def write_config(folder: Path, *, port: int | None = None, **changes: Any) -> Path:
    """The demo configuration with absolute input paths, tmp outputs and loopback e-mail.

    ``changes`` are ``section__key=value``. Sending needs no sign-off here
    (``delivery.require_review = "never"``); the review gate has its own tests.
    """
    changes = {"delivery__require_review": "never", **changes}
    return demo_config_file(folder, email__port=port or free_port(), **changes)


def run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = cli.main(list(argv))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def parse(raw: bytes) -> email.message.EmailMessage:
    return email.message_from_bytes(raw, policy=email.policy.default)  # type: ignore[return-value]


def line_of(path: Path, district: str, week: str) -> int:
    """1-based line (header = 1) of a district's row for a week, read from the file itself."""
    for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), start=1):
        cells = line.split(",")
        if cells[0] == district and cells[2] == week:
            return number
    raise AssertionError(f"no row for {district} {week} in {path}")


@pytest.fixture()
def bundle(demo_build: Any, tmp_path: Path) -> Path:
    """A private copy of the demo week's v1 bundle (the send record goes next to it)."""
    _, result, _ = demo_build
    source = result.bundle.path
    target = tmp_path / "archive" / source.parent.parent.name / source.parent.name / "v1"
    shutil.copytree(source, target)
    return target


# --------------------------------------------------------------------------- help and exit codes


@pytest.mark.parametrize("verb", ["demo", "init", "build", "check", "verify", "send", "run"])
def test_every_verb_has_help(verb: str, capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = run(capsys, verb, "--help")
    assert code == 0
    assert out.startswith(f"usage: sitrep {verb}")
    assert "exit codes" in out


def test_top_level_help_and_usage_errors(capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = run(capsys, "--help")
    assert code == 0 and "usage: sitrep" in out and "exit codes" in out
    assert run(capsys)[0] == cli.EXIT_USAGE  # no verb: prints help, usage error
    assert run(capsys, "send")[0] == cli.EXIT_USAGE  # missing BUNDLE and --config
    code, _, err = run(capsys, "check", "--config", "x.toml", "--today", "30/11/2026")
    assert code == cli.EXIT_USAGE and "expected a date like 2026-11-30" in err


def test_exit_codes_match_the_documented_tables(monkeypatch: pytest.MonkeyPatch) -> None:
    # The table in the cli docstring ...
    table = dict(re.findall(r"^(\d)\s{2,}(\S.*)$", cli.__doc__ or "", flags=re.MULTILINE))
    assert set(table) == {"0", "1", "2", "3", "4", "5"}
    assert (cli.EXIT_OK, cli.EXIT_BLOCKED, cli.EXIT_USAGE, cli.EXIT_DELIVERY, cli.EXIT_HELD) == (
        0,
        1,
        2,
        3,
        4,
    )
    assert cli.EXIT_ARCHIVED == 5 and table["5"].startswith("already archived")
    assert table["0"] == "done" and table["1"].startswith("blocked")
    assert table["2"].startswith("usage") and table["3"].startswith("delivery")
    assert "held for review" in table["4"]
    # ... and the exception tree in the errors docstring: main() maps each class to its code.
    tree = re.findall(r"── (\w+) [^\n]*-> exit (\d)$", errors.__doc__ or "", flags=re.MULTILINE)
    assert [name for name, _ in tree] == [
        "ConfigError",
        "InputError",
        "ValidationFailed",
        "AnalysisError",
        "RenderError",
        "DeliveryError",
        "ArchiveExists",
        "ReviewRequired",
    ]
    for name, code in tree:
        exc_type = getattr(errors, name)

        def boom(args: Any, exc_type: type[Exception] = exc_type) -> int:
            raise exc_type("planted")

        monkeypatch.setitem(cli.COMMANDS, "verify", boom)
        assert cli.main(["verify", "anything"]) == int(code), name


# --------------------------------------------------------------------------- check


def test_check_demo_inputs_passes_with_warnings(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    config = write_config(tmp_path)
    code, out, err = run(capsys, "check", "--config", str(config), "--today", TODAY)
    assert code == 0, err
    header = out.splitlines()[0].split()
    assert header == ["severity", "rule", "file:line", "column", "district", "message"]
    # The demo's revisions are one grouped line, located at the first revised row of the file.
    row = next(line for line in out.splitlines() if line.startswith("warning   revision-large"))
    assert f"extract_2026-W47.csv:{line_of(W47, '002', '2026-W46')}" in row
    assert "4 districts, lines " in row  # one revised row per district
    # The demo week rises everywhere: no district is a value spike against that movement.
    assert "value-spike" not in out
    assert re.search(
        r"^0 error\(s\), \d+ warning\(s\), 0 note\(s\) in \d+ group\(s\)$", out, flags=re.MULTILINE
    )

    code, out, _ = run(capsys, "check", "--config", str(config), "--today", TODAY, "--json")
    doc = json.loads(out)
    assert code == 0 and doc["blocked"] is False and doc["errors"] == 0
    assert doc["warnings"] == len(doc["findings"]) > 0
    assert {"severity", "rule", "file", "line", "column", "district_id", "message"} <= set(
        doc["findings"][0]
    )


def test_check_broken_table_names_file_line_and_column(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    config = write_config(tmp_path)
    bad = tmp_path / "extract_broken.csv"
    lines = W47.read_text(encoding="utf-8").splitlines()
    target = line_of(W47, "012", "2026-W47")
    cells = lines[target - 1].split(",")
    cells[4] = str(int(cells[5]) + 7)  # ILI visits above all visits (docs/faults.md F17)
    lines[target - 1] = ",".join(cells)
    bad.write_text("\n".join(lines) + "\n", encoding="utf-8")

    code, out, _ = run(
        capsys,
        "check",
        "--config",
        str(config),
        "--table",
        str(bad),
        "--prior",
        str(W46),
        "--today",
        TODAY,
    )
    assert code == cli.EXIT_BLOCKED
    row = next(line for line in out.splitlines() if line.startswith("error"))
    assert "count-ili-exceeds-total" in row and f"extract_broken.csv:{target}" in row
    assert "ili_visits" in row and " 012 " in row
    assert "blocked" in out.splitlines()[-1]

    code, out, _ = run(
        capsys, "check", "--config", str(config), "--table", str(bad), "--json", "--today", TODAY
    )
    doc = json.loads(out)
    errors_found = [f for f in doc["findings"] if f["severity"] == "error"]
    assert code == cli.EXIT_BLOCKED and doc["blocked"] is True
    assert [
        (f["rule"], f["file"], f["line"], f["column"], f["district_id"]) for f in errors_found
    ] == [("count-ili-exceeds-total", "extract_broken.csv", target, "ili_visits", "012")]


def test_check_config_with_unknown_key_exits_2(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    config = write_config(tmp_path)
    text = config.read_text(encoding="utf-8")
    config.write_text(text.replace("[weeks]\n", "[weeks]\nseason_start = 40\n"), encoding="utf-8")
    code, out, err = run(capsys, "check", "--config", str(config))
    assert code == cli.EXIT_USAGE and out == ""
    assert "unknown key 'season_start' in [weeks]" in err and "season_start_week" in err


def test_check_missing_table_is_blocked(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    config = write_config(tmp_path)
    code, _, err = run(
        capsys, "check", "--config", str(config), "--table", str(tmp_path / "nope.csv")
    )
    assert code == cli.EXIT_BLOCKED and "nope.csv" in err


# --------------------------------------------------------------------------- verify


def test_verify_passes_then_names_the_changed_file(
    bundle: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    code, out, _ = run(capsys, "verify", str(bundle))
    assert code == 0 and out.startswith("OK: ")
    target = bundle / "report.html"
    target.chmod(0o644)  # bundle files are created read-only
    data = bytearray(target.read_bytes())
    data[200] ^= 0x01
    target.write_bytes(bytes(data))
    code, out, _ = run(capsys, "verify", str(bundle))
    assert code == cli.EXIT_BLOCKED
    assert "changed: report.html" in out.splitlines()
    assert out.splitlines()[-1].startswith("FAILED")


def test_verify_of_a_missing_folder_is_a_usage_error(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    code, _, err = run(capsys, "verify", str(tmp_path / "v9"))
    assert code == cli.EXIT_USAGE and "is not a folder" in err


# --------------------------------------------------------------------------- send


def test_send_delivers_the_bundle_then_refuses_a_second_send(
    bundle: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    handler = RecordingHandler()
    with smtp_server(handler) as port:
        config = write_config(tmp_path / "cfg", port=port)
        code, out, err = run(capsys, "send", str(bundle), "--config", str(config))
        assert code == 0, err
        assert out.startswith("sent: accepted by 127.0.0.1")
        # Decision: a repeated send is refused with exit 3 (a delivery guard), unless --resend.
        code, out, err = run(capsys, "send", str(bundle), "--config", str(config))
        assert code == cli.EXIT_DELIVERY and "already sent" in err and "--resend" in err
        assert len(handler.messages) == 1
        code, out, err = run(capsys, "send", str(bundle), "--config", str(config), "--resend")
        assert code == 0, err
    assert len(handler.messages) == 2
    mail_from, rcpts, raw = handler.messages[0]
    assert mail_from == "sitrep@quillmarsh.example" and rcpts == RECIPIENTS
    msg = parse(raw)
    # MMWR 2026-W47 = 22-28 Nov 2026 (epiweeks.Week(2026, 47).startdate()/enddate()).
    assert msg["Subject"] == (
        "[ILI] Province of Quillmarsh: ILI situation report, week 47 2026 (22 Nov to 28 Nov 2026)"
    )
    assert msg["Reply-To"] == "surveillance@quillmarsh.example"
    body = msg.get_body(("plain",)).get_content().replace("\r\n", "\n")  # type: ignore[union-attr]
    assert body.strip() == (bundle / "email.txt").read_text(encoding="utf-8").strip()
    assert "Key messages" in body and "Cautions" in body
    attachments = list(msg.iter_attachments())
    assert [a.get_content_type() for a in attachments] == ["application/pdf"]
    assert attachments[0].get_content() == (bundle / "report.pdf").read_bytes()
    assert attachments[0].get_filename() == "province-of-quillmarsh-2026-W47-v1.pdf"
    record = json.loads(sent_record_path(bundle).read_text())
    assert [s["status"] for s in record["sends"]] == ["sent", "sent"]
    assert record["sends"][0]["message_id"] == msg["Message-ID"]
    assert parse(handler.messages[1][2])["Message-ID"] != msg["Message-ID"]
    assert run(capsys, "verify", str(bundle))[0] == 0  # the record lives beside the bundle


def test_send_dry_run_writes_eml_beside_the_bundle(
    bundle: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    handler = RecordingHandler()
    with smtp_server(handler) as port:
        config = write_config(tmp_path / "cfg", port=port, email__enabled=False)
        code, out, err = run(capsys, "send", str(bundle), "--config", str(config), "--dry-run")
    assert code == 0, err
    assert "nothing was sent" in out
    eml = eml_path(bundle)
    assert eml == bundle.parent / "v1.eml"
    written = parse(eml.read_bytes())
    assert [a.get_content() for a in written.iter_attachments()] == [
        (bundle / "report.pdf").read_bytes()
    ]
    assert written["Subject"].startswith("[ILI] Province of Quillmarsh")
    assert handler.sessions == 0 and not sent_record_path(bundle).exists()


def test_send_of_a_blocked_bundle_exits_1_and_sends_nothing(
    bundle: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # A complete, checksummed bundle whose validation result blocks the run (docs/faults.md F11 f).
    manifest = json.loads((bundle / "manifest.json").read_text())
    for key in ("bundle", "files", "reissue", "chain", "signature"):
        manifest.pop(key, None)
    validation = {
        "blocked": True,
        "errors": 1,
        "warnings": 0,
        "findings": [
            {
                "severity": "error",
                "rule": "count-ili-exceeds-total",
                "file": "t.csv",
                "line": 7,
                "column": "ili_visits",
                "district_id": "004",
                "value": "9 > 3",
                "message": "expected ILI visits (9) to be at most total visits (3)",
            }
        ],
    }
    files = {n: (bundle / n).read_bytes() for n in ("report.pdf", "report.html", "email.txt")}
    files["validation.json"] = json.dumps(validation).encode()
    blocked = write_bundle(
        tmp_path / "other", "Province of Quillmarsh", "2026-W47", files, manifest
    ).path
    handler = RecordingHandler()
    with smtp_server(handler) as port:
        config = write_config(tmp_path / "cfg", port=port)
        code, out, err = run(capsys, "send", str(blocked), "--config", str(config))
        assert code == cli.EXIT_BLOCKED
        assert "blocked by validation" in err and "t.csv:7" in err
        code, _, _ = run(capsys, "send", str(blocked), "--config", str(config), "--dry-run")
        assert code == cli.EXIT_BLOCKED
    assert handler.messages == [] and handler.sessions == 0
    assert not sent_record_path(blocked).exists() and not eml_path(blocked).exists()


def test_send_unknown_outcome_advises_checking_before_resend(
    bundle: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    handler = RecordingHandler(drop_after_data=True)
    with smtp_server(handler) as port:
        config = write_config(tmp_path / "cfg", port=port)
        code, out, err = run(capsys, "send", str(bundle), "--config", str(config))
        assert code == cli.EXIT_DELIVERY
        assert out.startswith("unknown: ")
        assert "Check with a recipient whether it arrived before running" in err
        assert f"sitrep send {bundle} --config {config} --resend" in err
        code, _, err = run(capsys, "send", str(bundle), "--config", str(config))
        assert code == cli.EXIT_DELIVERY and "--resend" in err
    assert len(handler.messages) == 1  # stored once by the server; not resent


def test_send_partial_and_failed_exit_3(
    bundle: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    dead = free_port()  # nothing listens here
    config = write_config(tmp_path / "dead", port=dead)
    code, out, err = run(capsys, "send", str(bundle), "--config", str(config))
    assert code == cli.EXIT_DELIVERY and out.startswith("failed: could not talk to 127.0.0.1")
    handler = RecordingHandler(refuse=(RECIPIENTS[1],))
    with smtp_server(handler) as port:
        config = write_config(tmp_path / "cfg", port=port)
        code, out, err = run(
            capsys, "send", str(bundle), "--config", str(config)
        )  # failed needs no --resend
    assert code == cli.EXIT_DELIVERY and out.startswith("partial: ")
    assert f"refused {RECIPIENTS[1]}" in err
    assert [rcpts for _, rcpts, _ in handler.messages] == [[RECIPIENTS[0]]]


@pytest.mark.parametrize(
    ("changes", "message"),
    [
        ({"email__enabled": False}, "email.enabled is false"),
        ({"email__recipients": []}, "email.recipients is empty"),
        (
            {"report__jurisdiction": "Another Province"},
            "holds the report of 'Province of Quillmarsh'",
        ),
    ],
)
def test_send_configuration_problems_exit_2(
    bundle: Path,
    tmp_path: Path,
    capsys: pytest.CaptureFixture[str],
    changes: dict[str, Any],
    message: str,
) -> None:
    handler = RecordingHandler()
    with smtp_server(handler) as port:
        config = write_config(tmp_path / "cfg", port=port, **changes)
        code, _, err = run(capsys, "send", str(bundle), "--config", str(config))
    assert code == cli.EXIT_USAGE and message in err
    assert handler.sessions == 0


def test_send_of_a_folder_that_is_no_bundle_exits_2(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    config = write_config(tmp_path / "cfg")
    code, _, err = run(capsys, "send", str(tmp_path), "--config", str(config))
    assert code == cli.EXIT_USAGE and "is not a sitrep bundle" in err


def test_build_today_sets_the_day_of_the_future_week_rule(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # the demo week 2026-W47 runs 22 to 28 November 2026 (MMWR); a build dated 21 November
    # sees it as a future week and is blocked, one dated the Monday after builds it
    cfg = write_config(tmp_path, output__pdf=False)
    code, out, err = run(
        capsys, "build", "--config", str(cfg), "--no-archive", "--today", "2026-11-21"
    )
    assert code == cli.EXIT_BLOCKED
    assert "week-future" in err and "2026-W47" in err
    assert not (tmp_path / "out" / "report.html").exists()
    code, out, err = run(capsys, "build", "--config", str(cfg), "--no-archive", "--today", TODAY)
    assert code == cli.EXIT_OK, err
    assert (tmp_path / "out" / "report.html").is_file()
    code, out, err = run(capsys, "build", "--config", str(cfg), "--today", "30/11/2026")
    assert code == cli.EXIT_USAGE and "expected a date like 2026-11-30" in err
