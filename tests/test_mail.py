"""Tests of sitrep.deliver.mail against a real SMTP server (aiosmtpd) on 127.0.0.1.

Fault references: docs/faults.md F11, L6. Reply-code classes follow RFC 5321
§4.2.1 (4yz transient, 5yz permanent); the lost-connection rule follows RFC 1047.
Every server binds to the loopback interface on a free port and is stopped in
a ``finally``; client timeouts are 5 s.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import email
import email.policy
import json
import shutil
import ssl
import subprocess
from pathlib import Path
from typing import Any

import pytest
from aiosmtpd.smtp import AuthResult
from mail_fixtures import RecordingHandler, free_port, smtp_server

from sitrep.config import EmailSettings
from sitrep.deliver.archive import verify_bundle, write_bundle
from sitrep.deliver.mail import (
    build_message,
    eml_path,
    send_bundle,
    send_message,
    sent_record_path,
)
from sitrep.errors import DeliveryError

PDF = b"%PDF-1.7\n" + bytes(range(256)) * 8 + b"\n%%EOF\n"
NOW = dt.datetime(2026, 11, 30, 7, 0, tzinfo=dt.UTC)
SENDER = "sitrep@health.example"
TO = ("epi-team@health.example", "director@health.example")


def no_sleep(seconds: float) -> None:
    raise AssertionError(f"no retry expected, but a back-off of {seconds} s was asked for")


class Handler(RecordingHandler):
    """The shared recording handler, plus a login check (ili-bot / s3cret-pass) that records tries."""

    def __init__(self, **options: Any) -> None:
        super().__init__(**options)
        self.logins: list[tuple[bytes, bytes]] = []

    def authenticate(
        self, server: Any, session: Any, envelope: Any, mechanism: str, auth_data: Any
    ) -> AuthResult:
        self.logins.append((auth_data.login, auth_data.password))
        ok = (auth_data.login, auth_data.password) == (b"ili-bot", b"s3cret-pass")
        return AuthResult(success=ok, handled=False)


@pytest.fixture(scope="module")
def certificate(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    """A self-signed certificate for 127.0.0.1 made with `openssl req` (cryptography is absent)."""
    try:
        import cryptography  # noqa: F401
    except ImportError:
        if shutil.which("openssl") is None:
            pytest.skip("neither the cryptography package nor the openssl program is available")
    folder = tmp_path_factory.mktemp("tls")
    cert, key = folder / "cert.pem", folder / "key.pem"
    subprocess.run(
        [
            "openssl",
            "req",
            "-x509",
            "-newkey",
            "ec",
            "-pkeyopt",
            "ec_paramgen_curve:prime256v1",
            "-nodes",
            "-keyout",
            str(key),
            "-out",
            str(cert),
            "-days",
            "2",
            "-subj",
            "/CN=127.0.0.1",
            "-addext",
            "subjectAltName=IP:127.0.0.1",
        ],
        check=True,
        capture_output=True,
        timeout=60,
    )
    return cert, key


def server_context(certificate: tuple[Path, Path]) -> ssl.SSLContext:
    ctx = ssl.SSLContext(ssl.PROTOCOL_TLS_SERVER)
    ctx.load_cert_chain(*certificate)
    return ctx


def trusting_context(certificate: tuple[Path, Path]) -> ssl.SSLContext:
    """A verifying client context that trusts only the test certificate."""
    return ssl.create_default_context(cafile=str(certificate[0]))


def settings(port: int, **changes: Any) -> EmailSettings:
    base = EmailSettings(
        enabled=True,
        host="127.0.0.1",
        port=port,
        security="none",
        sender=SENDER,
        recipients=TO,
        reply_to="epi-desk@health.example",
        timeout_s=5.0,
        retries=3,
        retry_backoff_s=30.0,
    )
    return dataclasses.replace(base, **changes)


def message(seed: str = "Region|2026-W47|v1|run-1", **changes: Any) -> email.message.EmailMessage:
    args: dict[str, Any] = {
        "subject": "ILI situation report, Region, week 2026-W47",
        "body": "ILI activity rose in 3 of 20 districts.\nCaution: two districts reported late.\n",
        "sender": SENDER,
        "recipients": TO,
        "reply_to": "epi-desk@health.example",
        "attachments": [("region-2026-W47-v1.pdf", PDF, "application/pdf")],
        "message_id_seed": seed,
        "date": NOW,
    }
    args.update(changes)
    return build_message(**args)


def parse(raw: bytes) -> email.message.EmailMessage:
    return email.message_from_bytes(raw, policy=email.policy.default)  # type: ignore[return-value]


def pdf_parts(msg: email.message.EmailMessage) -> list[bytes]:
    return [
        p.get_content() for p in msg.iter_attachments() if p.get_content_type() == "application/pdf"
    ]


# --------------------------------------------------------------------------- building


def test_message_headers_and_round_trip() -> None:
    msg = message()
    parsed = parse(msg.as_bytes())
    assert parsed["From"] == SENDER
    assert [a.addr_spec for a in parsed["To"].addresses] == list(TO)
    assert parsed["Reply-To"] == "epi-desk@health.example"
    assert parsed["Subject"] == "ILI situation report, Region, week 2026-W47"
    # RFC 5322 §3.3 date-time; 2026-11-30 is a Monday (calendar; MMWR 2026-W47 ends Sat 28th).
    assert parsed["Date"] == "Mon, 30 Nov 2026 07:00:00 +0000"
    assert parsed["Auto-Submitted"] == "auto-generated"  # RFC 3834 §5
    assert pdf_parts(parsed) == [PDF]
    assert "rose in 3 of 20" in parsed.get_body(("plain",)).get_content()  # type: ignore[union-attr]


def test_message_id_deterministic_and_unique_per_seed() -> None:
    first, again, other = message(), message(), message(seed="Region|2026-W47|v1|run-2")
    assert first["Message-ID"] == again["Message-ID"]
    assert first["Message-ID"] != other["Message-ID"]
    # RFC 5322 §3.6.4 msg-id: "<" id-left "@" id-right ">"
    assert first["Message-ID"].startswith("<") and first["Message-ID"].endswith("@health.example>")


@pytest.mark.parametrize(
    "field",
    ["subject", "sender", "recipients", "reply_to", "attachment"],
)
@pytest.mark.parametrize("bad", ["\r\nBcc: victim@evil.example", "\nX-Injected: 1", "a\rb"])
def test_header_injection_refused(field: str, bad: str) -> None:
    changes: dict[str, Any] = {
        "subject": {"subject": "Week 47" + bad},
        "sender": {"sender": SENDER + bad},
        "recipients": {"recipients": (TO[0], TO[1] + bad)},
        "reply_to": {"reply_to": "desk@health.example" + bad},
        "attachment": {"attachments": [("r.pdf" + bad, PDF, "application/pdf")]},
    }[field]
    with pytest.raises(DeliveryError, match="line break"):
        message(**changes)


def test_bad_message_arguments_refused() -> None:
    with pytest.raises(DeliveryError, match="time zone-aware"):
        message(date=dt.datetime(2026, 11, 30, 7, 0))
    with pytest.raises(DeliveryError, match="recipients"):
        message(recipients=())
    with pytest.raises(DeliveryError, match="not an address"):
        message(recipients=("not an address",))
    with pytest.raises(DeliveryError, match="MIME type"):
        message(attachments=[("r.pdf", PDF, "pdf")])


# --------------------------------------------------------------------------- SMTP outcomes


def test_delivery_with_attachment_intact() -> None:
    handler = Handler()
    with smtp_server(handler) as port:
        outcome = send_message(message(), settings(port), sleep=no_sleep)
    assert outcome.status == "sent" and outcome.attempts == 1
    assert outcome.accepted == TO and dict(outcome.refused) == {}
    assert len(handler.messages) == 1
    mail_from, rcpts, raw = handler.messages[0]
    assert mail_from == SENDER and rcpts == list(TO)
    received = parse(raw)
    assert pdf_parts(received) == [PDF]
    assert received["Message-ID"] == outcome.message_id


def test_transient_4xx_is_retried_with_backoff() -> None:
    handler = Handler(data_replies=("451 4.3.0 try again later", "452 4.3.1 out of memory"))
    waits: list[float] = []
    with smtp_server(handler) as port:
        outcome = send_message(message(), settings(port), sleep=waits.append)
    assert outcome.status == "sent" and outcome.attempts == 3
    assert waits == [30.0, 60.0]  # retry_backoff_s * 2**(n-1)
    assert len(handler.messages) == 1


def test_4xx_gives_up_after_configured_retries() -> None:
    handler = Handler(data_replies=("421 4.3.2 shutting down",) * 5)
    waits: list[float] = []
    with smtp_server(handler) as port:
        outcome = send_message(
            message(), settings(port, retries=2, retry_backoff_s=1.0), sleep=waits.append
        )
    assert outcome.status == "failed" and outcome.attempts == 3
    assert waits == [1.0, 2.0]
    assert "421" in outcome.detail and handler.messages == []


def test_permanent_5xx_is_not_retried() -> None:
    handler = Handler(data_replies=("554 5.6.0 message content rejected",))
    with smtp_server(handler) as port:
        outcome = send_message(message(), settings(port), sleep=no_sleep)
    assert outcome.status == "failed" and outcome.attempts == 1
    assert "554" in outcome.detail
    assert handler.messages == []


def test_refused_recipient_is_reported() -> None:
    handler = Handler(refuse=(TO[1],))
    with smtp_server(handler) as port:
        outcome = send_message(message(), settings(port), sleep=no_sleep)
    assert outcome.status == "partial"
    assert outcome.accepted == (TO[0],)
    assert list(outcome.refused) == [TO[1]] and outcome.refused[TO[1]][0] == 550
    assert [rcpts for _, rcpts, _ in handler.messages] == [[TO[0]]]


def test_all_recipients_refused_with_5xx_fails_without_retry() -> None:
    handler = Handler(refuse=TO)
    with smtp_server(handler) as port:
        outcome = send_message(message(), settings(port), sleep=no_sleep)
    assert outcome.status == "failed" and outcome.attempts == 1
    assert set(outcome.refused) == set(TO)
    assert handler.messages == []


def test_disconnect_after_data_is_unknown_and_not_resent() -> None:
    handler = Handler(drop_after_data=True)
    with smtp_server(handler) as port:
        outcome = send_message(message(), settings(port, retries=3), sleep=no_sleep)
    assert outcome.status == "unknown" and outcome.attempts == 1
    assert "may have accepted" in outcome.detail
    assert len(handler.messages) == 1  # the server did store it: a resend would duplicate


def test_connection_refused_is_retried_then_failed() -> None:
    port = free_port()  # nothing listens here
    waits: list[float] = []
    outcome = send_message(
        message(), settings(port, retries=1, retry_backoff_s=0.5), sleep=waits.append
    )
    assert outcome.status == "failed" and outcome.attempts == 2 and waits == [0.5]
    assert "could not talk" in outcome.detail


def test_starttls_self_signed_rejected_by_default_context(certificate: tuple[Path, Path]) -> None:
    handler = Handler()
    with smtp_server(
        handler, tls_context=server_context(certificate), require_starttls=True
    ) as port:
        outcome = send_message(message(), settings(port, security="starttls"), sleep=no_sleep)
        assert outcome.status == "failed" and outcome.attempts == 1
        assert "certificate" in outcome.detail
        assert handler.messages == []
        # Positive control: the same server works once its certificate is trusted.
        trusted = send_message(
            message(),
            settings(port, security="starttls"),
            ssl_context=trusting_context(certificate),
        )
    assert trusted.status == "sent" and len(handler.messages) == 1


def test_implicit_tls_self_signed_rejected(certificate: tuple[Path, Path]) -> None:
    handler = Handler()
    with smtp_server(handler, ssl_context=server_context(certificate)) as port:
        outcome = send_message(message(), settings(port, security="tls"), sleep=no_sleep)
        assert outcome.status == "failed" and "certificate" in outcome.detail
        trusted = send_message(
            message(),
            settings(port, security="tls"),
            ssl_context=trusting_context(certificate),
        )
    assert trusted.status == "sent" and len(handler.messages) == 1


def test_server_without_starttls_is_not_used_in_clear() -> None:
    handler = Handler()
    with smtp_server(handler) as port:
        outcome = send_message(message(), settings(port, security="starttls"), sleep=no_sleep)
    assert outcome.status == "failed" and "STARTTLS" in outcome.detail
    assert handler.messages == []


def test_login_from_environment_never_in_outcome(certificate: tuple[Path, Path]) -> None:
    handler = Handler()
    env = {"SITREP_SMTP_USER": "ili-bot", "SITREP_SMTP_PASSWORD": "s3cret-pass"}
    cfg = settings(
        0, security="starttls", username_env="SITREP_SMTP_USER", password_env="SITREP_SMTP_PASSWORD"
    )
    with smtp_server(
        handler,
        tls_context=server_context(certificate),
        require_starttls=True,
        auth_required=True,
        authenticator=handler.authenticate,
    ) as port:
        cfg = dataclasses.replace(cfg, port=port)
        outcome = send_message(message(), cfg, env=env, ssl_context=trusting_context(certificate))
        wrong = send_message(
            message(),
            cfg,
            env={**env, "SITREP_SMTP_PASSWORD": "wrong"},
            ssl_context=trusting_context(certificate),
            sleep=no_sleep,
        )
    assert outcome.status == "sent" and handler.logins[0] == (b"ili-bot", b"s3cret-pass")
    assert wrong.status == "failed" and "login refused" in wrong.detail and wrong.attempts == 1
    for result in (outcome, wrong):
        assert "s3cret-pass" not in json.dumps(result.as_dict())


def test_credential_configuration_errors() -> None:
    cfg = settings(25, security="starttls", username_env="U", password_env="P")
    with pytest.raises(DeliveryError, match="P") as info:
        send_message(message(), cfg, env={"U": "user"})
    assert "user" not in str(info.value)
    with pytest.raises(DeliveryError, match="both"):
        send_message(message(), settings(25, username_env="U"), env={"U": "x"})
    with pytest.raises(DeliveryError, match="unencrypted"):
        send_message(
            message(), settings(25, username_env="U", password_env="P"), env={"U": "u", "P": "p"}
        )


# --------------------------------------------------------------------------- bundles


def make_bundle(root: Path, *, blocked: bool = False) -> Path:
    validation = {
        "blocked": blocked,
        "findings": [{"severity": "error", "rule": "x"}] if blocked else [],
    }
    bundle = write_bundle(
        root,
        "Region",
        "2026-W47",
        {"report.pdf": PDF, "validation.json": json.dumps(validation).encode()},
        {"run_time": "2026-11-28T12:00:00+00:00"},
    )
    return bundle.path


def send(bundle: Path, port: int, **kwargs: Any) -> Any:
    kwargs.setdefault("sleep", no_sleep)
    return send_bundle(
        bundle,
        kwargs.pop("cfg", settings(port)),
        subject="ILI report Region 2026-W47",
        body="Key messages...",
        now=NOW,
        **kwargs,
    )


def test_send_bundle_records_and_refuses_second_send(tmp_path: Path) -> None:
    bundle = make_bundle(tmp_path)
    handler = Handler()
    with smtp_server(handler) as port:
        first = send(bundle, port, cfg=settings(port, subject_prefix="[ILI]"))
        with pytest.raises(DeliveryError, match="--resend"):
            send(bundle, port)
        again = send(bundle, port, resend=True)
    assert first.status == "sent" and again.status == "sent"
    assert first.message_id != again.message_id
    assert len(handler.messages) == 2
    received = parse(handler.messages[0][2])
    assert received["Subject"] == "[ILI] ILI report Region 2026-W47"
    assert pdf_parts(received) == [PDF]
    assert next(received.iter_attachments()).get_filename() == "region-2026-W47-v1.pdf"
    record = json.loads(sent_record_path(bundle).read_text())
    assert sent_record_path(bundle) == bundle.parent / "v1.sent.json"
    assert [s["message_id"] for s in record["sends"]] == [first.message_id, again.message_id]
    assert verify_bundle(bundle).ok  # the record lives next to the bundle, not inside it


def test_dry_run_writes_eml_and_sends_nothing(tmp_path: Path) -> None:
    bundle = make_bundle(tmp_path)
    handler = Handler()
    with smtp_server(handler) as port:
        outcome = send(bundle, port, dry_run=True, cfg=settings(port, enabled=False))
        assert outcome.status == "dry-run" and handler.messages == []
        written = parse(eml_path(bundle).read_bytes())
        assert written["Message-ID"] == outcome.message_id
        assert pdf_parts(written) == [PDF]
        assert b"\r\n" in eml_path(bundle).read_bytes()
        assert not sent_record_path(bundle).exists()
        real = send(bundle, port)  # a dry run does not count as sent
    assert real.status == "sent" and real.message_id == outcome.message_id
    assert verify_bundle(bundle).ok


def test_blocked_validation_sends_nothing(tmp_path: Path) -> None:
    bundle = make_bundle(tmp_path, blocked=True)
    handler = Handler()
    with smtp_server(handler) as port:
        with pytest.raises(DeliveryError, match="blocked"):
            send(bundle, port)
        with pytest.raises(DeliveryError, match="blocked"):
            send(bundle, port, dry_run=True)
    assert handler.messages == [] and handler.sessions == 0


def test_tampered_bundle_is_not_sent(tmp_path: Path) -> None:
    bundle = make_bundle(tmp_path)
    pdf = bundle / "report.pdf"
    pdf.chmod(0o644)
    pdf.write_bytes(PDF + b"tampered")
    handler = Handler()
    with smtp_server(handler) as port, pytest.raises(DeliveryError, match="fails verification"):
        send(bundle, port)
    assert handler.sessions == 0


def test_failed_send_may_be_repeated_unknown_may_not(tmp_path: Path) -> None:
    bundle = make_bundle(tmp_path)
    dead_port = free_port()
    failed = send(bundle, dead_port, cfg=settings(dead_port, retries=0))
    assert failed.status == "failed"
    handler = Handler(drop_after_data=True)
    with smtp_server(handler) as port:
        unknown = send(bundle, port)  # allowed: nothing went out before
        assert unknown.status == "unknown"
        with pytest.raises(DeliveryError, match="unknown"):
            send(bundle, port)
    assert len(handler.messages) == 1
    statuses = [s["status"] for s in json.loads(sent_record_path(bundle).read_text())["sends"]]
    assert statuses == ["failed", "unknown"]


def test_bundle_send_guards(tmp_path: Path) -> None:
    bundle = make_bundle(tmp_path)
    handler = Handler()
    with smtp_server(handler) as port:
        with pytest.raises(DeliveryError, match="disabled"):
            send(bundle, port, cfg=settings(port, enabled=False))
        with pytest.raises(DeliveryError, match="line break"):
            send_bundle(
                bundle,
                settings(port),
                subject="Week 47\r\nBcc: x@evil.example",
                body="b",
                now=NOW,
                sleep=no_sleep,
            )
        lock = bundle.with_name(bundle.name + ".send.lock")
        lock.write_text("")
        with pytest.raises(DeliveryError, match="lock file"):
            send(bundle, port)
        lock.unlink()
    assert handler.sessions == 0
