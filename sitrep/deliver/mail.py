"""E-mail delivery of an archived bundle's PDF over SMTP.

* :func:`build_message` makes an RFC 5322 message (``email.message.EmailMessage``
  with ``email.policy.default``); CR/LF in any header value is refused.
* :func:`send_message` talks SMTP: STARTTLS or implicit TLS with a verifying
  context (``ssl.create_default_context()``), login from environment
  variables, 4xx replies retried with back-off, 5xx not, refused recipients
  reported, and a connection lost after the message data was transmitted
  reported as ``"unknown"`` and never resent automatically (RFC 1047: the
  server may already have accepted it).
* :func:`send_bundle` sends one bundle's ``report.pdf``. A bundle is immutable
  and checksummed, so the send record is kept *next to* it:
  ``<bundle>.sent.json`` (every send attempt with Message-ID, time and outcome)
  and, for a dry run, ``<bundle>.eml``. For ``.../2026-W47/v1`` these are
  ``.../2026-W47/v1.sent.json`` and ``.../2026-W47/v1.eml``; ``verify_bundle``
  does not see them.

Credentials are read from the environment at send time and never logged,
stored or put into an outcome.
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime as dt
import email.policy
import email.utils
import hashlib
import json
import os
import smtplib
import ssl
import time
from collections.abc import Callable, Iterator, Mapping, Sequence
from email.message import EmailMessage
from pathlib import Path
from types import MappingProxyType
from typing import Any, Literal

from sitrep.config import EmailSettings
from sitrep.deliver.archive import MANIFEST_JSON, jurisdiction_slug, replace_file, verify_bundle
from sitrep.errors import DeliveryError

__all__ = [
    "INTERNAL_PREFIX",
    "SendOutcome",
    "build_message",
    "eml_path",
    "refuse_internal",
    "send_bundle",
    "send_message",
    "sent_record_path",
]

Status = Literal["sent", "failed", "unknown", "partial", "dry-run"]
_DELIVERED = frozenset({"sent", "partial", "unknown"})
"""Outcomes after which a copy may have reached someone: a new send needs --resend."""


@dataclasses.dataclass(frozen=True)
class SendOutcome:
    """What happened to one message.

    ``status``: ``"sent"`` (every recipient accepted), ``"partial"`` (some
    refused), ``"failed"`` (nothing accepted; see ``detail``), ``"unknown"``
    (the connection was lost after the message data was transmitted; it may
    or may not have been delivered, and it is not resent), ``"dry-run"``
    (written to a file, not sent). ``refused`` maps each refused recipient to
    ``(SMTP code, server text)``. ``attempts`` counts SMTP sessions opened.
    """

    status: Status
    message_id: str
    accepted: tuple[str, ...]
    refused: Mapping[str, tuple[int, str]]
    attempts: int
    detail: str
    time: dt.datetime

    def __post_init__(self) -> None:
        object.__setattr__(self, "refused", MappingProxyType(dict(self.refused)))

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready form (for ``<bundle>.sent.json``)."""
        return {
            "status": self.status,
            "message_id": self.message_id,
            "accepted": list(self.accepted),
            "refused": {k: [code, text] for k, (code, text) in sorted(self.refused.items())},
            "attempts": self.attempts,
            "detail": self.detail,
            "time": self.time.isoformat(),
        }


# --------------------------------------------------------------------------- message


def _no_newlines(field: str, value: str) -> str:
    if not isinstance(value, str):
        raise DeliveryError(f"e-mail {field} must be text, got {type(value).__name__}")
    if any(c in value for c in ("\r", "\n", "\x00")):
        raise DeliveryError(
            f"e-mail {field} {value[:80]!r} contains a line break or NUL, which could inject "
            "headers; remove it from the configuration or the report title"
        )
    return value


def _address(field: str, value: str) -> str:
    _no_newlines(field, value)
    _, addr = email.utils.parseaddr(value)
    if (
        not addr
        or addr.count("@") != 1
        or " " in addr
        or addr.startswith("@")
        or addr.endswith("@")
    ):
        raise DeliveryError(
            f"e-mail {field} {value!r} is not an address like 'ili-team@health.example'; "
            "fix it in [email]"
        )
    return value


INTERNAL_PREFIX = "internal-"
"""Bundle files for internal use only start with this; they are never attached."""


def refuse_internal(name: str) -> str:
    """Return ``name``, or refuse a file for internal use only as an attachment.

    A file whose name (any path component) starts with :data:`INTERNAL_PREFIX`
    or contains ``UNSUPPRESSED`` (any case) holds internal detail such as the
    true values of withheld districts (docs/methods.md §6.2).

    Raises
    ------
    DeliveryError
        For such a name.
    """
    parts = str(name).replace("\\", "/").split("/")
    if (
        any(p.lower().startswith(INTERNAL_PREFIX) for p in parts)
        or "UNSUPPRESSED" in str(name).upper()
    ):
        raise DeliveryError(
            f"refusing to attach {name!r}: files starting with {INTERNAL_PREFIX!r} or naming "
            "UNSUPPRESSED are for internal use only and are never e-mailed"
        )
    return name


def build_message(
    *,
    subject: str,
    body: str,
    sender: str,
    recipients: Sequence[str],
    reply_to: str | None,
    attachments: Sequence[tuple[str, bytes, str]],
    message_id_seed: str,
    date: dt.datetime,
) -> EmailMessage:
    """Build the report e-mail as an RFC 5322 message.

    Headers: ``From``, ``To`` (all recipients), ``Reply-To`` (when given),
    ``Subject``, ``Date`` (from ``date``), ``Message-ID`` and
    ``Auto-Submitted: auto-generated`` (RFC 3834, so auto-responders stay
    quiet). The body is ``text/plain`` UTF-8; each attachment is added with
    its MIME type and file name.

    The Message-ID is ``<`` + first 32 hex digits of SHA-256(``message_id_seed``)
    + ``@`` + the sender's domain + ``>``: deterministic, so a dry run shows the
    real ID, and unique as long as the seed names the week and the send
    (``send_bundle`` uses jurisdiction, week, version, manifest checksum and
    send number), so duplicates are detectable.

    Parameters
    ----------
    subject, body : str
        Subject line and plain-text body.
    sender : str
        ``From`` address.
    recipients : sequence of str
        ``To`` addresses (at least one).
    reply_to : str or None
        ``Reply-To`` address.
    attachments : sequence of (str, bytes, str)
        ``(file name, content, MIME type)``, e.g.
        ``("report.pdf", data, "application/pdf")``.
    message_id_seed : str
        Text from which the Message-ID is derived.
    date : datetime.datetime
        Time zone-aware ``Date``.

    Returns
    -------
    email.message.EmailMessage
        Using ``email.policy.default``.

    Raises
    ------
    DeliveryError
        If a header value contains CR, LF or NUL, an address is malformed,
        there is no recipient, ``date`` is naive, the seed is empty, or an
        attachment is an internal file (:func:`refuse_internal`).
    """
    _no_newlines("subject", subject)
    _address("sender", sender)
    if isinstance(recipients, str) or not recipients:
        raise DeliveryError(
            f"e-mail needs a list of recipients, got {recipients!r}; set [email] recipients"
        )
    for r in recipients:
        _address("recipient", r)
    if reply_to is not None:
        _address("reply-to", reply_to)
    if not isinstance(message_id_seed, str) or not message_id_seed:
        raise DeliveryError("message_id_seed must be a non-empty string")
    if not isinstance(date, dt.datetime) or date.tzinfo is None or date.utcoffset() is None:
        raise DeliveryError(f"e-mail date must be a time zone-aware datetime, got {date!r}")

    domain = email.utils.parseaddr(sender)[1].rsplit("@", 1)[1] or "sitrep.invalid"
    digest = hashlib.sha256(message_id_seed.encode("utf-8")).hexdigest()[:32]
    msg = EmailMessage(policy=email.policy.default)
    try:
        msg["From"] = sender
        msg["To"] = ", ".join(recipients)
        if reply_to:
            msg["Reply-To"] = reply_to
        msg["Subject"] = subject
        msg["Date"] = email.utils.format_datetime(date)
        msg["Message-ID"] = f"<{digest}@{domain}>"
        msg["Auto-Submitted"] = "auto-generated"
        msg.set_content(body)
        for name, data, mime in attachments:
            _no_newlines("attachment name", name)
            refuse_internal(name)
            maintype, _, subtype = mime.partition("/")
            if not maintype or not subtype:
                raise DeliveryError(
                    f"attachment {name!r}: MIME type must be like 'application/pdf', got {mime!r}"
                )
            msg.add_attachment(bytes(data), maintype=maintype, subtype=subtype, filename=name)
    except (ValueError, TypeError) as exc:
        raise DeliveryError(f"the e-mail could not be built: {exc}") from exc
    return msg


# --------------------------------------------------------------------------- SMTP


class _TrackingMixin:
    """Remember whether the message data (up to the final ``.``) was transmitted."""

    data_sent = False
    _in_data = False
    _sends_in_data = 0

    def data(self, msg: Any) -> Any:
        self._in_data, self._sends_in_data = True, 0
        try:
            return super().data(msg)  # type: ignore[misc]
        finally:
            self._in_data = False

    def send(self, s: Any) -> None:
        super().send(s)  # type: ignore[misc]
        if self._in_data:
            self._sends_in_data += 1
            if self._sends_in_data >= 2:  # 1st send is "DATA", 2nd the message and "."
                self.data_sent = True


class _SMTP(_TrackingMixin, smtplib.SMTP):
    pass


class _SMTPS(_TrackingMixin, smtplib.SMTP_SSL):
    pass


def _text(value: Any) -> str:
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    return str(value)


def _credentials(settings: EmailSettings, env: Mapping[str, str]) -> tuple[str, str] | None:
    names = (settings.username_env, settings.password_env)
    if not any(names):
        return None
    if not all(names):
        raise DeliveryError(
            "set both email.username_env and email.password_env (names of environment "
            "variables), or neither"
        )
    missing = [n for n in names if n and not env.get(n)]
    if missing:
        raise DeliveryError(
            f"environment variable(s) {', '.join(missing)} named in [email] are not set; export "
            "them in the service that runs sitrep"
        )
    if settings.security == "none":
        raise DeliveryError(
            "refusing to send an SMTP password over an unencrypted connection; set "
            "email.security = 'starttls' or 'tls'"
        )
    return env[settings.username_env or ""], env[settings.password_env or ""]


def send_message(
    msg: EmailMessage,
    settings: EmailSettings,
    *,
    env: Mapping[str, str] = os.environ,
    sleep: Callable[[float], None] = time.sleep,
    ssl_context: ssl.SSLContext | None = None,
) -> SendOutcome:
    """Send ``msg`` to the recipients in its headers over SMTP.

    Each attempt opens one SMTP session: connect (implicit TLS for
    ``security = "tls"``), EHLO, STARTTLS + EHLO for ``"starttls"`` (a server
    that does not offer STARTTLS is refused, not used in clear), login when
    credentials are configured, then ``smtplib.SMTP.send_message``.

    Retry rule (RFC 5321 reply classes): a 4yz reply (transient) or a
    connection failure *before* the message data was transmitted leads to
    another attempt after ``retry_backoff_s * 2**(n-1)`` seconds, up to
    ``settings.retries`` retries; a 5yz reply (permanent), a TLS or
    authentication failure is not retried. When the connection is lost
    *after* the message data including the final ``.`` was transmitted, the
    outcome is ``"unknown"`` and nothing is resent (RFC 1047). Recipients the
    server refuses are reported in ``refused``; if others were accepted the
    status is ``"partial"``.

    Parameters
    ----------
    msg : email.message.EmailMessage
        From :func:`build_message`.
    settings : EmailSettings
        Host, port, security, credential variable names, timeout, retries.
    env : Mapping[str, str]
        Where the credential variables are looked up.
    sleep : callable
        Back-off wait (injectable for tests).
    ssl_context : ssl.SSLContext or None
        TLS context; default ``ssl.create_default_context()`` (verifies the
        certificate and host name).

    Returns
    -------
    SendOutcome
        Never raises for SMTP or network failures; they become ``"failed"``
        or ``"unknown"`` with a ``detail``.

    Raises
    ------
    DeliveryError
        If the credentials are half configured or missing from ``env``, or a
        password would go over an unencrypted connection.
    """
    creds = _credentials(settings, env)
    context = ssl_context if ssl_context is not None else ssl.create_default_context()
    message_id = str(msg.get("Message-ID", ""))
    recipients = [
        a for _, a in email.utils.getaddresses(msg.get_all("To", []) + msg.get_all("Cc", []))
    ]
    attempts = 0
    detail = ""
    refused: dict[str, tuple[int, str]] = {}

    def outcome(status: Status, accepted: Sequence[str] = ()) -> SendOutcome:
        return SendOutcome(
            status=status,
            message_id=message_id,
            accepted=tuple(accepted),
            refused=refused,
            attempts=attempts,
            detail=detail,
            time=dt.datetime.now(dt.UTC),
        )

    for attempt in range(settings.retries + 1):
        if attempt:
            sleep(settings.retry_backoff_s * 2 ** (attempt - 1))
        attempts += 1
        refused = {}
        client: _SMTP | _SMTPS | None = None
        retry = False
        try:
            if settings.security == "tls":
                client = _SMTPS(
                    settings.host, settings.port, timeout=settings.timeout_s, context=context
                )
            else:
                client = _SMTP(settings.host, settings.port, timeout=settings.timeout_s)
            client.ehlo()
            if settings.security == "starttls":
                if not client.has_extn("starttls"):
                    detail = (
                        f"{settings.host}:{settings.port} does not offer STARTTLS; sitrep will not "
                        "send in clear. Use email.security = 'tls' or fix the server"
                    )
                    return outcome("failed")
                client.starttls(context=context)
                client.ehlo()
            if creds is not None:
                client.login(*creds)
            refused_raw = client.send_message(msg)
            refused = {k: (int(c), _text(t)) for k, (c, t) in refused_raw.items()}
            accepted = [r for r in recipients if r not in refused]
            with contextlib.suppress(smtplib.SMTPException, OSError):
                client.quit()
            client = None
            if refused:
                detail = "refused: " + "; ".join(
                    f"{k} ({c} {t})" for k, (c, t) in sorted(refused.items())
                )
                return outcome("partial", accepted)
            detail = f"accepted by {settings.host}:{settings.port}"
            return outcome("sent", accepted)
        except smtplib.SMTPRecipientsRefused as exc:
            refused = {k: (int(c), _text(t)) for k, (c, t) in exc.recipients.items()}
            detail = "every recipient was refused: " + "; ".join(
                f"{k} ({c} {t})" for k, (c, t) in sorted(refused.items())
            )
            retry = all(400 <= c < 500 for c, _ in refused.values())
        except smtplib.SMTPNotSupportedError as exc:
            detail = f"the server does not support a required feature: {exc}"
        except smtplib.SMTPAuthenticationError as exc:
            detail = (
                f"login refused ({exc.smtp_code} {_text(exc.smtp_error)}); check the credentials"
            )
            retry = 400 <= exc.smtp_code < 500
        except smtplib.SMTPResponseException as exc:
            detail = f"server replied {exc.smtp_code} {_text(exc.smtp_error)}"
            retry = 400 <= exc.smtp_code < 500
        except ssl.SSLError as exc:
            detail = (
                f"TLS with {settings.host}:{settings.port} failed ({exc}); the certificate must be "
                "valid for the host name and trusted by the system"
            )
        except (smtplib.SMTPException, OSError) as exc:
            if client is not None and client.data_sent:
                detail = (
                    f"the connection was lost after the message was transmitted ({type(exc).__name__}: "
                    f"{exc}); the server may have accepted it. Not resent: ask a recipient, then use "
                    "--resend if it did not arrive"
                )
                return outcome("unknown")
            detail = (
                f"could not talk to {settings.host}:{settings.port}: {type(exc).__name__}: {exc}"
            )
            retry = True
        finally:
            if client is not None:
                with contextlib.suppress(Exception):
                    client.close()
        if not retry:
            break
    if attempts > 1:
        detail = f"{detail} (after {attempts} attempts)"
    return outcome("failed")


# --------------------------------------------------------------------------- bundles


def sent_record_path(bundle_path: Path) -> Path:
    """``<bundle>.sent.json``: the send history kept next to the immutable bundle."""
    bundle_path = Path(bundle_path)
    return bundle_path.with_name(bundle_path.name + ".sent.json")


def eml_path(bundle_path: Path) -> Path:
    """``<bundle>.eml``: where a dry run writes the message."""
    bundle_path = Path(bundle_path)
    return bundle_path.with_name(bundle_path.name + ".eml")


@contextlib.contextmanager
def _send_lock(bundle_path: Path) -> Iterator[None]:
    lock = bundle_path.with_name(bundle_path.name + ".send.lock")
    try:
        fd = os.open(lock, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
    except FileExistsError:
        raise DeliveryError(
            f"another send of {bundle_path} seems to be running (lock file {lock}); if none is, "
            "delete the lock file and try again"
        ) from None
    os.close(fd)
    try:
        yield
    finally:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(lock)


def _load_json(path: Path, what: str) -> Any:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise DeliveryError(f"{what} {path} is missing") from None
    except (OSError, ValueError) as exc:
        raise DeliveryError(f"{what} {path} cannot be read: {exc}") from exc


def _blocked(validation: Any) -> bool:
    """True when validation.json says the run is blocked (fail closed on odd content)."""
    if not isinstance(validation, dict):
        return True
    if validation.get("blocked", False) is not False:
        return True
    findings = validation.get("findings", [])
    if not isinstance(findings, list):
        return True
    return any(not isinstance(f, dict) or f.get("severity") == "error" for f in findings)


def send_bundle(
    bundle_path: Path,
    settings: EmailSettings,
    *,
    subject: str,
    body: str,
    dry_run: bool = False,
    resend: bool = False,
    now: dt.datetime,
    env: Mapping[str, str] = os.environ,
    sleep: Callable[[float], None] = time.sleep,
    ssl_context: ssl.SSLContext | None = None,
) -> SendOutcome:
    """E-mail the PDF of an archived bundle (or write it to ``<bundle>.eml``).

    Checks, in order, before anything is sent: the bundle passes
    :func:`~sitrep.deliver.archive.verify_bundle`; its ``validation.json``
    does not block the run (``"blocked": true`` or any finding with
    ``"severity": "error"``; a missing or unreadable file also blocks);
    ``report.pdf`` exists; e-mail is enabled (unless ``dry_run``); no earlier
    send of this bundle ended ``sent``, ``partial`` or ``unknown`` (unless
    ``resend``). Earlier ``failed`` sends do not need ``resend``.

    The subject is ``settings.subject_prefix`` + ``" "`` + ``subject`` (when a
    prefix is set). The PDF is attached as ``<jurisdiction slug>-<week>-v<k>.pdf``.
    The Message-ID seed is ``jurisdiction|week|v<k>|<manifest.json sha256>|send-<n>``
    with ``n`` the number of earlier send records plus one.

    Every real send appends its outcome (with Message-ID and time) to
    ``<bundle>.sent.json`` (replaced atomically); a dry run writes the
    message (CRLF line ends) to ``<bundle>.eml`` and records nothing.
    A lock file ``<bundle>.send.lock`` (exclusive create) stops two sends of
    the same bundle running at once.

    Parameters
    ----------
    bundle_path : Path
        The bundle folder ``.../v<k>``.
    settings : EmailSettings
        ``[email]``.
    subject, body : str
        Subject (without prefix) and plain-text body (key messages, cautions).
    dry_run : bool
        Write the ``.eml`` instead of sending.
    resend : bool
        Allow sending a bundle that was (or may have been) sent before.
    now : datetime.datetime
        Time zone-aware time for the ``Date`` header and the record.
    env, sleep, ssl_context
        Passed to :func:`send_message`.

    Returns
    -------
    SendOutcome
        ``status`` ``"dry-run"`` for a dry run. SMTP failures are returned,
        not raised; the caller maps the status to an exit code.

    Raises
    ------
    DeliveryError
        If any check above fails, or the record cannot be written.
    """
    bundle_path = Path(bundle_path)
    result = verify_bundle(bundle_path)
    if not result.ok:
        raise DeliveryError(
            f"bundle {bundle_path} fails verification ({'; '.join(result.problems[:3])}); nothing "
            "was sent. Run sitrep verify for the full list"
        )
    validation = _load_json(bundle_path / "validation.json", "validation result")
    if _blocked(validation):
        raise DeliveryError(
            f"validation blocked the run archived in {bundle_path}; nothing is sent for a blocked "
            "run. Fix the input errors and rebuild"
        )
    manifest = _load_json(bundle_path / MANIFEST_JSON, "manifest")
    info = manifest.get("bundle", {}) if isinstance(manifest, dict) else {}
    jurisdiction = str(info.get("jurisdiction", ""))
    week = str(info.get("week", ""))
    version = info.get("version")
    pdf_file = bundle_path / "report.pdf"
    if not pdf_file.is_file():
        raise DeliveryError(f"{pdf_file} is missing; build the bundle with [output] pdf = true")
    if not dry_run and not settings.enabled:
        raise DeliveryError("e-mail is disabled; set [email] enabled = true, or use --dry-run")
    if not settings.sender or not settings.recipients:
        raise DeliveryError("set [email] sender and recipients before sending")
    if isinstance(now, dt.datetime) and now.tzinfo is None:
        raise DeliveryError(f"now must be time zone-aware, got {now!r}")

    record_path = sent_record_path(bundle_path)
    with _send_lock(bundle_path):
        history: list[dict[str, Any]] = []
        if record_path.exists():
            loaded = _load_json(record_path, "send record")
            history = list(loaded.get("sends", [])) if isinstance(loaded, dict) else []
            delivered = [
                h for h in history if isinstance(h, dict) and h.get("status") in _DELIVERED
            ]
            if delivered and not resend:
                last = delivered[-1]
                raise DeliveryError(
                    f"{bundle_path} was already sent ({last.get('status')} at {last.get('time')}, "
                    f"Message-ID {last.get('message_id')}); use sitrep send --resend to send it again"
                )
        manifest_sha = hashlib.sha256((bundle_path / MANIFEST_JSON).read_bytes()).hexdigest()
        seed = f"{jurisdiction}|{week}|v{version}|{manifest_sha}|send-{len(history) + 1}"
        full_subject = (
            f"{settings.subject_prefix} {subject}" if settings.subject_prefix else subject
        )
        msg = build_message(
            subject=full_subject,
            body=body,
            sender=settings.sender,
            recipients=settings.recipients,
            reply_to=settings.reply_to,
            attachments=[
                (
                    f"{jurisdiction_slug(jurisdiction)}-{week}-v{version}.pdf",
                    pdf_file.read_bytes(),
                    "application/pdf",
                )
            ],
            message_id_seed=seed,
            date=now,
        )
        if dry_run:
            target = eml_path(bundle_path)
            replace_file(target, msg.as_bytes(policy=email.policy.SMTP))
            return SendOutcome(
                status="dry-run",
                message_id=str(msg["Message-ID"]),
                accepted=(),
                refused={},
                attempts=0,
                detail=f"written to {target}",
                time=now,
            )
        outcome = send_message(msg, settings, env=env, sleep=sleep, ssl_context=ssl_context)
        entry = outcome.as_dict() | {
            "date_header": now.isoformat(),
            "manifest_sha256": manifest_sha,
        }
        history.append(entry)
        record = {"bundle": bundle_path.name, "sends": history}
        text = json.dumps(record, sort_keys=True, indent=2, ensure_ascii=False) + "\n"
        try:
            replace_file(record_path, text.encode("utf-8"))
        except OSError as exc:
            raise DeliveryError(
                f"the message was handed to SMTP ({outcome.status}) but {record_path} could not be "
                f"written: {exc}; do not resend before checking with a recipient"
            ) from exc
    return outcome
