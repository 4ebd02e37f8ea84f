"""E-mail delivery of an archived bundle's PDF.

* :func:`build_message` makes an RFC 5322 message (``email.message.EmailMessage``
  with ``email.policy.default``); CR/LF in any header value is refused.
* :func:`send_message` (in :mod:`sitrep.deliver.smtp`, importable from here)
  talks SMTP: TLS, login, retries and the ``"unknown"`` outcome of a
  connection lost after the message data was transmitted.
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
import ssl
import time
from collections.abc import Callable, Iterator, Mapping, Sequence
from email.message import EmailMessage
from pathlib import Path
from typing import Any

from sitrep.config import EmailSettings
from sitrep.deliver.archive import (
    MANIFEST_JSON,
    jurisdiction_slug,
    replace_file,
    verify_bundle,
)
from sitrep.deliver.smtp import SendOutcome, send_message
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

_DELIVERED = frozenset({"sent", "partial", "unknown"})
"""Outcomes after which a copy may have reached someone: a new send needs --resend."""


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
    place = _check_sendable(bundle_path, settings, dry_run=dry_run, now=now)
    record_path = sent_record_path(bundle_path)
    with _send_lock(bundle_path):
        history = _send_history(bundle_path, record_path, resend=resend)
        manifest_sha = hashlib.sha256((bundle_path / MANIFEST_JSON).read_bytes()).hexdigest()
        seed = f"{place.seed}|{manifest_sha}|send-{len(history) + 1}"
        full_subject = (
            f"{settings.subject_prefix} {subject}" if settings.subject_prefix else subject
        )
        msg = build_message(
            subject=full_subject,
            body=body,
            sender=settings.sender,
            recipients=settings.recipients,
            reply_to=settings.reply_to,
            attachments=[(place.attachment, place.pdf.read_bytes(), "application/pdf")],
            message_id_seed=seed,
            date=now,
        )
        if dry_run:
            return _write_eml(bundle_path, msg, now)
        outcome = send_message(msg, settings, env=env, sleep=sleep, ssl_context=ssl_context)
        history.append(
            outcome.as_dict() | {"date_header": now.isoformat(), "manifest_sha256": manifest_sha}
        )
        _write_record(record_path, bundle_path, history, outcome)
    return outcome


@dataclasses.dataclass(frozen=True)
class _Sendable:
    """What a bundle that may be sent contributes to its message."""

    seed: str
    """``jurisdiction|week|v<k>``: the start of the Message-ID seed."""
    attachment: str
    """``<jurisdiction slug>-<week>-v<k>.pdf``."""
    pdf: Path


def _check_sendable(
    bundle_path: Path, settings: EmailSettings, *, dry_run: bool, now: dt.datetime
) -> _Sendable:
    """Refuse a bundle that fails verification or validation, has no PDF, or cannot be sent."""
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
    return _Sendable(
        seed=f"{jurisdiction}|{week}|v{version}",
        attachment=f"{jurisdiction_slug(jurisdiction)}-{week}-v{version}.pdf",
        pdf=pdf_file,
    )


def _send_history(bundle_path: Path, record_path: Path, *, resend: bool) -> list[dict[str, Any]]:
    """Earlier sends of the bundle; refuses a second delivery unless ``resend``."""
    if not record_path.exists():
        return []
    loaded = _load_json(record_path, "send record")
    history = list(loaded.get("sends", [])) if isinstance(loaded, dict) else []
    delivered = [h for h in history if isinstance(h, dict) and h.get("status") in _DELIVERED]
    if delivered and not resend:
        last = delivered[-1]
        raise DeliveryError(
            f"{bundle_path} was already sent ({last.get('status')} at {last.get('time')}, "
            f"Message-ID {last.get('message_id')}); use sitrep send --resend to send it again"
        )
    return history


def _write_eml(bundle_path: Path, msg: EmailMessage, now: dt.datetime) -> SendOutcome:
    """A dry run: the message (CRLF line ends) into ``<bundle>.eml``; nothing is recorded."""
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


def _write_record(
    record_path: Path,
    bundle_path: Path,
    history: list[dict[str, Any]],
    outcome: SendOutcome,
) -> None:
    """Replace ``<bundle>.sent.json`` with the history including this send."""
    record = {"bundle": bundle_path.name, "sends": history}
    text = json.dumps(record, sort_keys=True, indent=2, ensure_ascii=False) + "\n"
    try:
        replace_file(record_path, text.encode("utf-8"))
    except OSError as exc:
        raise DeliveryError(
            f"the message was handed to SMTP ({outcome.status}) but {record_path} could not be "
            f"written: {exc}; do not resend before checking with a recipient"
        ) from exc
