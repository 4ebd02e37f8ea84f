"""Talking SMTP: one message to the recipients in its headers, with retries and honest outcomes.

:func:`send_message` uses STARTTLS or implicit TLS with a verifying context
(``ssl.create_default_context()``), login from environment variables, 4xx
replies retried with back-off, 5xx not, refused recipients reported, and a
connection lost after the message data was transmitted reported as
``"unknown"`` and never resent automatically (RFC 1047: the server may
already have accepted it). Credentials are read from the environment at send
time and never logged, stored or put into an outcome.
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime as dt
import email.utils
import os
import smtplib
import ssl
import time
from collections.abc import Callable, Mapping, Sequence
from email.message import EmailMessage
from types import MappingProxyType
from typing import Any, Literal

from sitrep.config import EmailSettings
from sitrep.errors import DeliveryError

__all__ = ["SendOutcome", "Status", "send_message"]

Status = Literal["sent", "failed", "unknown", "partial", "dry-run"]


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
    recipients = [
        a for _, a in email.utils.getaddresses(msg.get_all("To", []) + msg.get_all("Cc", []))
    ]
    attempts = 0
    tried = _Try()
    for attempt in range(settings.retries + 1):
        if attempt:
            sleep(settings.retry_backoff_s * 2 ** (attempt - 1))
        attempts += 1
        tried = _attempt(msg, settings, context, creds, recipients)
        if tried.status is not None or not tried.retry:
            break
    detail = tried.detail
    if tried.status is None and attempts > 1:
        detail = f"{detail} (after {attempts} attempts)"
    return SendOutcome(
        status=tried.status or "failed",
        message_id=str(msg.get("Message-ID", "")),
        accepted=tried.accepted,
        refused=tried.refused,
        attempts=attempts,
        detail=detail,
        time=dt.datetime.now(dt.UTC),
    )


@dataclasses.dataclass(frozen=True)
class _Try:
    """One SMTP session's result: a final ``status``, or None for a failure that may be retried."""

    status: Status | None = None
    detail: str = ""
    retry: bool = False
    accepted: tuple[str, ...] = ()
    refused: Mapping[str, tuple[int, str]] = dataclasses.field(default_factory=dict)


def _attempt(
    msg: EmailMessage,
    settings: EmailSettings,
    context: ssl.SSLContext,
    creds: tuple[str, str] | None,
    recipients: Sequence[str],
) -> _Try:
    """Open one session, (STARTTLS,) log in, hand the message over; never raises for SMTP."""
    client: _SMTP | _SMTPS | None = None
    try:
        if settings.security == "tls":
            client = _SMTPS(
                settings.host,
                settings.port,
                timeout=settings.timeout_s,
                context=context,
            )
        else:
            client = _SMTP(settings.host, settings.port, timeout=settings.timeout_s)
        client.ehlo()
        if settings.security == "starttls":
            if not client.has_extn("starttls"):
                return _Try(
                    "failed",
                    f"{settings.host}:{settings.port} does not offer STARTTLS; sitrep will not "
                    "send in clear. Use email.security = 'tls' or fix the server",
                )
            client.starttls(context=context)
            client.ehlo()
        if creds is not None:
            client.login(*creds)
        refused_raw = client.send_message(msg)
        refused = {k: (int(c), _text(t)) for k, (c, t) in refused_raw.items()}
        with contextlib.suppress(smtplib.SMTPException, OSError):
            client.quit()
        client = None
        return _handed_over(refused, recipients, settings)
    except (smtplib.SMTPException, OSError) as exc:
        return _failure(exc, client, settings)
    finally:
        if client is not None:
            with contextlib.suppress(Exception):
                client.close()


def _handed_over(
    refused: Mapping[str, tuple[int, str]],
    recipients: Sequence[str],
    settings: EmailSettings,
) -> _Try:
    """``sent``, or ``partial`` when the server refused some recipients."""
    accepted = tuple(r for r in recipients if r not in refused)
    if refused:
        detail = "refused: " + "; ".join(f"{k} ({c} {t})" for k, (c, t) in sorted(refused.items()))
        return _Try("partial", detail, accepted=accepted, refused=refused)
    return _Try("sent", f"accepted by {settings.host}:{settings.port}", accepted=accepted)


def _failure(exc: Exception, client: _SMTP | _SMTPS | None, settings: EmailSettings) -> _Try:
    """What a failed session means: its detail, and whether another attempt may help."""
    where = f"{settings.host}:{settings.port}"
    if isinstance(exc, smtplib.SMTPRecipientsRefused):
        refused = {k: (int(c), _text(t)) for k, (c, t) in exc.recipients.items()}
        detail = "every recipient was refused: " + "; ".join(
            f"{k} ({c} {t})" for k, (c, t) in sorted(refused.items())
        )
        retry = all(400 <= c < 500 for c, _ in refused.values())
        return _Try(None, detail, retry, refused=refused)
    if isinstance(exc, smtplib.SMTPNotSupportedError):
        return _Try(None, f"the server does not support a required feature: {exc}")
    if isinstance(exc, smtplib.SMTPAuthenticationError):
        detail = f"login refused ({exc.smtp_code} {_text(exc.smtp_error)}); check the credentials"
        return _Try(None, detail, 400 <= exc.smtp_code < 500)
    if isinstance(exc, smtplib.SMTPResponseException):
        detail = f"server replied {exc.smtp_code} {_text(exc.smtp_error)}"
        return _Try(None, detail, 400 <= exc.smtp_code < 500)
    if isinstance(exc, ssl.SSLError):
        return _Try(
            None,
            f"TLS with {where} failed ({exc}); the certificate must be "
            "valid for the host name and trusted by the system",
        )
    if client is not None and client.data_sent:
        return _Try(
            "unknown",
            f"the connection was lost after the message was transmitted ({type(exc).__name__}: "
            f"{exc}); the server may have accepted it. Not resent: ask a recipient, then use "
            "--resend if it did not arrive",
        )
    return _Try(None, f"could not talk to {where}: {type(exc).__name__}: {exc}", True)
