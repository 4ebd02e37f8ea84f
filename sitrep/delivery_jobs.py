"""Jobs around an archived bundle: send it, and the scheduled Monday run.

Like :mod:`sitrep.pipeline`, this module composes stages; nothing in the
stages imports it. Two jobs live here:

* :func:`send_archived` e-mails one archived bundle (``sitrep send``), after
  checking that the bundle is intact, was not blocked by validation, belongs
  to the configured jurisdiction and is not held for review
  (:mod:`sitrep.deliver.review`, ``[delivery] require_review``).
* :func:`scheduled_run` is the Monday job (``sitrep run``): newest extract in
  the inbox -> build -> archive -> send, idempotent per report week.

The send history of a bundle is kept next to it in ``<bundle>.sent.json``
(written by :mod:`sitrep.deliver.mail`); :func:`delivery_state` reads it. Its
approvals are kept beside it too, in ``<bundle>.review.jsonl``.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import json
import os
import re
import ssl
import time
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any, Literal

from sitrep.config import Config
from sitrep.deliver.archive import (
    MANIFEST_JSON,
    bundle_dir,
    jurisdiction_slug,
    next_version,
    verify_bundle,
)
from sitrep.deliver.mail import SendOutcome, send_bundle, sent_record_path
from sitrep.deliver.review import ReviewState, held_message, review_state
from sitrep.errors import ConfigError, DeliveryError, InputError, ReviewRequired, ValidationFailed
from sitrep.model import Finding, Severity, ValidationReport
from sitrep.render.wording.mail import email_subject_text
from sitrep.weeks import EpiWeek, WeekSystem

__all__ = [
    "DeliveryState",
    "Extract",
    "RunReport",
    "delivery_state",
    "email_subject",
    "find_extracts",
    "scheduled_run",
    "send_archived",
]

Log = Callable[[str], None]

_MONTHS = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec")
"""English month abbreviations (fixed, so the subject does not depend on the locale)."""
_WEEK_FOLDER = re.compile(r"^\d{4}-W\d{2}$")


def _quiet(_: str) -> None:
    """Default logger: say nothing."""


# --------------------------------------------------------------------------- subject


def _day(day: dt.date, *, year: bool) -> str:
    text = f"{day.day} {_MONTHS[day.month - 1]}"
    return f"{text} {day.year}" if year else text


def email_subject(
    config: Config, week: EpiWeek, *, version: int = 1, supersedes: str | None = None
) -> str:
    """Subject line of the report e-mail, without ``[email] subject_prefix``.

    The form is ``"<jurisdiction>: ILI situation report, week <w> <year>
    (<first day> to <last day>)"``; the first day carries its own year only
    when it differs from the last day's (a week spanning New Year). A
    reissued bundle adds ``", version <k>, supersedes <v>"``.

    Parameters
    ----------
    config : Config
        Gives ``[report] jurisdiction``.
    week : EpiWeek
        The report week (its system decides the dates).
    version : int, optional
        Bundle version.
    supersedes : str, optional
        The version a reissue replaces, e.g. ``"v1"``.

    Returns
    -------
    str
        One line of text.

    Notes
    -----
    The prefix is left out because :func:`sitrep.deliver.mail.send_bundle`
    puts ``subject_prefix`` in front of the subject it is given. Month names
    come from a fixed English table, not from the process locale.
    """
    return email_subject_text(
        jurisdiction=config.report.jurisdiction,
        week_number=week.week,
        week_year=week.year,
        start=week.start,
        end=week.end,
        version=version,
        supersedes=supersedes,
    )


# --------------------------------------------------------------------------- bundle state


@dataclasses.dataclass(frozen=True)
class DeliveryState:
    """What the send history next to a bundle says.

    ``status``: ``"unsent"`` (no record, or only dry runs, which record
    nothing), ``"failed"`` (every recorded send failed: sending again is
    safe), ``"sent"`` (at least one send reached every recipient),
    ``"partial"`` or ``"unknown"`` (a copy may have reached someone, none was
    fully confirmed: a new send needs ``--resend`` after checking).
    ``last`` is the record that decided the status (``None`` when unsent).
    """

    status: Literal["unsent", "failed", "sent", "partial", "unknown"]
    last: Mapping[str, Any] | None = None
    sends: int = 0


def delivery_state(bundle: Path) -> DeliveryState:
    """Summarise ``<bundle>.sent.json``.

    The rule, in order: any record with status ``sent`` makes the bundle
    ``sent`` (the latest such record is ``last``); else the latest
    ``unknown`` or ``partial`` record decides; else any record makes it
    ``failed``; no file means ``unsent``.

    Raises
    ------
    DeliveryError
        If the record exists but cannot be read as a sitrep send record (the
        state is then unknown, so nothing should be sent automatically).
    """
    path = sent_record_path(bundle)
    if not path.exists():
        return DeliveryState("unsent")
    try:
        record = json.loads(path.read_text(encoding="utf-8"))
        sends = [s for s in record["sends"] if isinstance(s, dict)]
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise DeliveryError(
            f"the send record {path} cannot be read ({exc}); whether the bundle was sent is "
            "unknown. Ask a recipient, then repair or move the file"
        ) from exc
    for wanted in (("sent",), ("unknown", "partial")):
        hits = [s for s in sends if s.get("status") in wanted]
        if hits:
            return DeliveryState(hits[-1]["status"], hits[-1], len(sends))
    if sends:
        return DeliveryState("failed", sends[-1], len(sends))
    return DeliveryState("unsent")


def _read_manifest(bundle: Path) -> dict[str, Any]:
    try:
        manifest = json.loads((bundle / MANIFEST_JSON).read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise DeliveryError(f"{bundle / MANIFEST_JSON} cannot be read: {exc}") from exc
    if not isinstance(manifest, dict):
        raise DeliveryError(f"{bundle / MANIFEST_JSON} is not a JSON object")
    return manifest


def _blocking_report(bundle: Path, manifest: Mapping[str, Any]) -> ValidationReport | None:
    """The validation findings when the archived run was blocked, else ``None``.

    Blocked means: ``validation.json`` is missing or unreadable, says
    ``"blocked": true``, lists an error-level finding, or the manifest
    counts validation errors. Fails closed on anything unexpected.
    """
    path = bundle / "validation.json"
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return ValidationReport(
            (Finding(Severity.ERROR, "validation-missing", f"{path} is missing or unreadable"),)
        )
    counted = manifest.get("validation", {})
    errors_in_manifest = counted.get("errors", 0) if isinstance(counted, dict) else 1
    findings = doc.get("findings", []) if isinstance(doc, dict) else None
    if not isinstance(findings, list):
        findings = None
    blocked = (
        not isinstance(doc, dict)
        or doc.get("blocked", False) is not False
        or findings is None
        or errors_in_manifest != 0
        or any(not isinstance(f, dict) or f.get("severity") == "error" for f in findings)
    )
    if not blocked:
        return None
    parsed: list[Finding] = []
    for f in findings or []:
        try:
            parsed.append(
                Finding(
                    severity=Severity(f["severity"]),
                    rule=str(f["rule"]),
                    message=str(f.get("message", "")),
                    file=str(f.get("file") or ""),
                    line=f.get("line"),
                    column=f.get("column"),
                    district_id=f.get("district_id"),
                    value=f.get("value"),
                )
            )
        except (KeyError, TypeError, ValueError):
            parsed.append(Finding(Severity.ERROR, "validation-unreadable", f"odd finding {f!r}"))
    return ValidationReport(tuple(parsed))


def _check_email_settings(config: Config, *, dry_run: bool) -> None:
    e = config.email
    if not dry_run and not e.enabled:
        raise ConfigError(
            f"email.enabled is false in {config.source or 'the configuration'}; set it to true "
            "to send, or use --dry-run to write the message as .eml"
        )
    if not e.sender:
        raise ConfigError("email.sender is empty; set the From address, e.g. sitrep@health.example")
    if not e.recipients:
        raise ConfigError("email.recipients is empty; list at least one address")


def send_archived(
    config: Config,
    bundle: Path,
    *,
    dry_run: bool = False,
    resend: bool = False,
    now: dt.datetime | None = None,
    env: Mapping[str, str] = os.environ,
    sleep: Callable[[float], None] = time.sleep,
    ssl_context: ssl.SSLContext | None = None,
) -> SendOutcome:
    """E-mail the PDF of an archived bundle, with its ``email.txt`` as the body.

    Checks, in order, before anything leaves the machine:

    1. ``bundle`` is a folder holding ``manifest.json`` (else a usage error);
    2. every checksum matches (:func:`~sitrep.deliver.archive.verify_bundle`);
    3. the archived run was not blocked by validation (see Notes);
    4. the bundle's jurisdiction is ``[report] jurisdiction`` of ``config``,
       so one jurisdiction's report never goes to another's recipients;
    5. ``[email]`` is enabled (unless ``dry_run``) and names a sender and
       recipients;
    6. the bundle is not held for review: under ``[delivery] require_review``
       it needs no sign-off, or ``<bundle>.review.jsonl`` holds a valid
       approval of this manifest (a dry run is allowed while held: it only
       writes the message to a file);
    7. ``email.txt`` (key messages and cautions, written by the build) exists.

    Then :func:`~sitrep.deliver.mail.send_bundle` sends it (or writes
    ``<bundle>.eml`` for a dry run), refusing a bundle already sent unless
    ``resend``. The subject is :func:`email_subject` for the bundle's week and
    version.

    Parameters
    ----------
    config : Config
        The jurisdiction's configuration (``[email]``, ``[report]``).
    bundle : Path
        ``ARCHIVE/<jurisdiction>/<year>-W<ww>/v<k>``.
    dry_run : bool
        Write the message to ``<bundle>.eml`` instead of sending.
    resend : bool
        Send although an earlier send ended ``sent``, ``partial`` or ``unknown``.
    now : datetime.datetime, optional
        Time zone-aware send time (default: now, UTC).
    env, sleep, ssl_context
        Passed to :func:`~sitrep.deliver.mail.send_message` (credentials,
        back-off wait, TLS context).

    Returns
    -------
    SendOutcome
        ``status`` is ``sent``, ``partial``, ``failed``, ``unknown`` or
        ``dry-run``; SMTP failures are returned, not raised.

    Raises
    ------
    ConfigError
        ``bundle`` is not a bundle folder, belongs to another jurisdiction,
        or ``[email]`` is incomplete (CLI exit 2).
    ValidationFailed
        The archived run was blocked by validation; ``report`` holds its
        findings (CLI exit 1).
    ReviewRequired
        The bundle is held for review and nobody approved it yet, or its
        review record is broken (CLI exit 4; nothing was sent).
    DeliveryError
        The bundle fails verification, ``email.txt`` or ``report.pdf`` is
        missing, the bundle was already sent and ``resend`` is false, or
        another send holds the lock (CLI exit 3).

    Notes
    -----
    The blocked test fails closed: a missing or unreadable
    ``validation.json``, ``"blocked": true``, any error-level finding, or a
    non-zero ``validation.errors`` in the manifest all block. A bundle from
    :func:`sitrep.pipeline.build` is never blocked (blocked runs are not
    archived), so this guards hand-made or foreign bundles.
    """
    bundle = Path(bundle)
    if not (bundle / MANIFEST_JSON).is_file():
        raise ConfigError(
            f"{bundle} is not a sitrep bundle (no {MANIFEST_JSON}); pass the folder "
            "ARCHIVE/<jurisdiction>/<year>-W<ww>/v<k>"
        )
    checked = verify_bundle(bundle)
    if not checked.ok:
        raise DeliveryError(
            f"bundle {bundle} fails verification ({'; '.join(checked.problems[:3])}); nothing was "
            "sent. Run `sitrep verify` for the full list"
        )
    manifest = _read_manifest(bundle)
    blocked = _blocking_report(bundle, manifest)
    if blocked is not None:
        raise ValidationFailed(
            f"the run archived in {bundle} was blocked by validation "
            f"({len(blocked.errors)} error(s)); nothing is sent for a blocked run. Fix the inputs "
            "and rebuild",
            blocked,
        )
    info = manifest.get("bundle", {})
    jurisdiction = str(info.get("jurisdiction", manifest.get("jurisdiction", "")))
    if jurisdiction != config.report.jurisdiction:
        raise ConfigError(
            f"{bundle} holds the report of {jurisdiction!r}, but the configuration is for "
            f"{config.report.jurisdiction!r}; use that jurisdiction's configuration file"
        )
    _check_email_settings(config, dry_run=dry_run)
    if not dry_run:
        review = review_state(bundle, config.delivery.require_review)
        if not review.may_send:
            message = held_message(
                review, bundle, reviewer=config.delivery.reviewer, config_path=config.source
            )
            raise ReviewRequired(f"{bundle} was not sent: {message}")
    body_path = bundle / "email.txt"
    if not body_path.is_file():
        raise DeliveryError(
            f"{body_path} is missing: the bundle has no e-mail text (key messages and cautions); "
            'rebuild the week with sitrep build --reissue "add e-mail text"'
        )
    try:
        system = WeekSystem(manifest.get("week_system", config.weeks.system))
        week = EpiWeek.parse(str(info.get("week", manifest.get("report_week", ""))), system)
    except ValueError as exc:
        raise DeliveryError(f"{bundle / MANIFEST_JSON} names no valid report week: {exc}") from exc
    reissue = manifest.get("reissue") if isinstance(manifest.get("reissue"), dict) else None
    version = info.get("version", 1)
    subject = email_subject(
        config,
        week,
        version=version if isinstance(version, int) else 1,
        supersedes=str(reissue.get("supersedes")) if reissue else None,
    )
    return send_bundle(
        bundle,
        config.email,
        subject=subject,
        body=body_path.read_text(encoding="utf-8"),
        dry_run=dry_run,
        resend=resend,
        now=now or dt.datetime.now(dt.UTC),
        env=env,
        sleep=sleep,
        ssl_context=ssl_context,
    )


# --------------------------------------------------------------------------- inbox


@dataclasses.dataclass(frozen=True)
class Extract:
    """One readable extract in the inbox: the latest week it holds, its path and checksum."""

    week: EpiWeek
    path: Path
    sha256: str


def find_extracts(config: Config) -> tuple[Extract, ...]:
    """Every file in ``input.inbox`` matching ``input.inbox_pattern``, oldest week first.

    Each file is read with the table settings of ``config`` (stage-1 parse
    only); its week is the latest epi week it holds. Ties in week are
    ordered by file name.

    Raises
    ------
    ConfigError
        ``input.inbox`` is unset or not a folder.
    ValidationFailed
        A matching file cannot be parsed (its findings are attached). The
        run stops rather than skip it: skipping the newest extract would
        silently report an older week.
    InputError
        A matching file cannot be opened.
    """
    from sitrep.ingest.read import read_count_table

    inbox = config.input.inbox
    if inbox is None:
        raise ConfigError(
            "input.inbox is not set; `sitrep run` needs the folder extracts arrive in"
        )
    if not inbox.is_dir():
        raise ConfigError(f"input.inbox {inbox} is not a folder; create it or fix the path")
    system = WeekSystem(config.weeks.system)
    found: list[Extract] = []
    for path in sorted(inbox.glob(config.input.inbox_pattern)):
        if not path.is_file():
            continue
        table, report = read_count_table(path, config.input, system, role="table")
        if table is None:
            raise ValidationFailed(
                f"the extract {path.name} in {inbox} cannot be read ({len(report.errors)} "
                "error(s)); fix it or move it out of the inbox, so that the newest week is not "
                "skipped",
                report,
            )
        found.append(Extract(table.latest_week, path, table.source.sha256))
    found.sort(key=lambda e: (e.week, e.path.name))
    return tuple(found)


def _only_one(extracts: list[Extract], week: EpiWeek, what: str) -> Extract:
    same = [e for e in extracts if e.week == week]
    if len(same) > 1:
        names = ", ".join(e.path.name for e in same)
        raise InputError(
            f"{len(same)} extracts in the inbox end in week {week} ({names}); sitrep run cannot "
            f"tell which is {what}. Move the superseded file(s) out of the inbox"
        )
    return same[0]


def _latest_archived_week(config: Config) -> str | None:
    """Label of the latest week folder that holds a bundle, for this jurisdiction."""
    assert config.output.archive is not None
    root = config.output.archive / jurisdiction_slug(config.report.jurisdiction)
    try:
        weeks = sorted(
            d.name
            for d in root.iterdir()
            if d.is_dir() and _WEEK_FOLDER.match(d.name) and any(d.glob("v[0-9]*/" + MANIFEST_JSON))
        )
    except FileNotFoundError:
        return None
    return weeks[-1] if weeks else None


# --------------------------------------------------------------------------- scheduled run

RunStatus = Literal["sent", "dry-run", "nothing-to-do", "held", "partial", "unknown", "failed"]


@dataclasses.dataclass(frozen=True)
class RunReport:
    """What one scheduled run did.

    ``status``: ``sent`` / ``dry-run`` (this run sent or wrote the .eml),
    ``nothing-to-do`` (the week was already archived and sent), ``held``
    (archived, waiting for ``sitrep approve``: ``message`` says who must
    review what; ``review`` holds the details), or the delivery problem
    ``partial`` / ``unknown`` / ``failed`` (of this run's send, or of an
    earlier one that needs a person: see ``message``). ``built`` says
    whether this run built and archived the bundle.
    """

    status: RunStatus
    week: EpiWeek
    extract: Path
    prior_extract: Path | None
    bundle: Path | None
    built: bool
    outcome: SendOutcome | None
    message: str
    review: ReviewState | None = None

    @property
    def ok(self) -> bool:
        """True when nothing needs a person (CLI exit 0; ``held`` exits 4, the rest 3)."""
        return self.status in ("sent", "dry-run", "nothing-to-do")


def _resend_hint(config: Config, bundle: Path) -> str:
    cfg = config.source or "FILE"
    return f"sitrep send {bundle} --config {cfg} --resend"


def _attention(state: DeliveryState, config: Config, bundle: Path) -> str:
    last = state.last or {}
    when = f"{last.get('time', '?')}, Message-ID {last.get('message_id', '?')}"
    if state.status == "unknown":
        return (
            f"the last send of {bundle} ({when}) lost the connection after the message was "
            "transmitted, so it may or may not have been delivered; it is not resent "
            "automatically. Check with a recipient whether it arrived; if it did not, run "
            f"`{_resend_hint(config, bundle)}`"
        )
    refused = ", ".join(sorted(last.get("refused", {}))) or "some recipients"
    return (
        f"the last send of {bundle} ({when}) was refused for {refused} and accepted for the "
        "others; fix the addresses in [email] recipients, then run "
        f"`{_resend_hint(config, bundle)}` (the accepted recipients get a second copy)"
    )


def scheduled_run(
    config: Config,
    *,
    dry_run: bool = False,
    today: dt.date | None = None,
    now: dt.datetime | None = None,
    log: Log = _quiet,
    env: Mapping[str, str] = os.environ,
    sleep: Callable[[float], None] = time.sleep,
    ssl_context: ssl.SSLContext | None = None,
) -> RunReport:
    """The Monday job: newest extract -> build -> archive -> send, once per week.

    Steps:

    1. Check ``[output] archive`` and ``[email]`` (before anything is built).
    2. Read every extract in the inbox (:func:`find_extracts`). The newest is
       the one whose latest week is highest: that week is the report week.
       Last week's table is the extract with the next lower latest week.
       Two extracts ending in the same week (either role) stop the run.
    3. Refuse when ``weeks.report_week`` is set to another week, or the
       archive already holds a later week than the newest extract (the inbox
       is then missing files).
    4. If the report week has an archived bundle, look at its latest version:
       sent -> do nothing and say so; ``unknown`` or ``partial`` -> do
       nothing, status says a person must check (nothing is resent
       automatically); unsent or failed -> send it. Otherwise build it with
       :func:`sitrep.pipeline.build` (validation errors raise and nothing is
       archived or sent), then send the new bundle.
    5. Before any real send, apply ``[delivery] require_review``: a bundle
       held for review and not approved is not sent; the status is ``held``
       and the message says who must review what. After ``sitrep approve``
       the next run sends it (once: step 4 then finds it sent).

    Parameters
    ----------
    config : Config
        The jurisdiction's configuration; ``input.table`` and
        ``input.prior_table`` are replaced by the extracts found.
    dry_run : bool
        Write ``<bundle>.eml`` instead of sending.
    today : datetime.date, optional
        The day the future-week rule compares with (default: today).
    now : datetime.datetime, optional
        Time zone-aware send time (default: now, UTC).
    log : callable
        Receives progress lines.
    env, sleep, ssl_context
        Passed on to the SMTP client (see :func:`send_archived`).

    Returns
    -------
    RunReport
        What was done; ``ok`` is False when a delivery needs a person.

    Raises
    ------
    ConfigError
        Archive or e-mail settings missing, no extract in the inbox, or
        ``weeks.report_week`` conflicting with the newest extract.
    ValidationFailed
        An extract cannot be parsed, or validation blocked the build; nothing
        was archived or sent.
    InputError
        Ambiguous extracts, or the archive is ahead of the inbox.
    DeliveryError
        Archive, PDF or send-record failure (for example a send already
        running for the bundle).

    Notes
    -----
    When the week is already archived but the newest extract's SHA-256
    differs from the archived table, the run still does nothing
    automatically (a published week changes only by an explicit
    ``sitrep build --reissue``) and says so in ``message``.
    """
    from sitrep import pipeline
    from sitrep.errors import ArchiveExists

    if config.output.archive is None:
        raise ConfigError("output.archive is not set; the scheduled run always archives")
    _check_email_settings(config, dry_run=dry_run)
    extracts = list(find_extracts(config))
    if not extracts:
        raise ConfigError(
            f"no extract matching {config.input.inbox_pattern!r} in {config.input.inbox}; "
            "check input.inbox and input.inbox_pattern"
        )
    week = extracts[-1].week
    if config.weeks.report_week is not None:
        pinned = EpiWeek.parse(config.weeks.report_week, week.system)
        if pinned != week:
            raise ConfigError(
                f"weeks.report_week = {config.weeks.report_week!r}, but the newest extract ends in "
                f"{week}; sitrep run reports the newest week. Remove weeks.report_week"
            )
    newest = _only_one(extracts, week, "this week's table")
    older = [e for e in extracts if e.week < week]
    prior = _only_one(older, older[-1].week, "last week's table") if older else None
    log(f"newest extract {newest.path.name} ends in week {week}")
    if prior is not None:
        log(f"last week's table: {prior.path.name} (ends in week {prior.week})")
    else:
        log("no older extract in the inbox: the revision checks against last week are skipped")
    latest = _latest_archived_week(config)
    if latest is not None and latest > str(week):
        raise InputError(
            f"the archive already holds week {latest}, later than the newest extract "
            f"{newest.path.name} ({week}); the inbox is missing newer extracts. Put them back "
            "or check input.inbox"
        )

    def report(
        status: RunStatus,
        bundle: Path | None,
        built: bool,
        outcome: SendOutcome | None,
        message: str,
        review: ReviewState | None = None,
    ) -> RunReport:
        return RunReport(
            status,
            week,
            newest.path,
            prior.path if prior else None,
            bundle,
            built,
            outcome,
            message,
            review,
        )

    archive = config.output.archive
    jurisdiction = config.report.jurisdiction
    existing = next_version(archive, jurisdiction, str(week)) - 1
    built = False
    if existing >= 1:
        bundle = bundle_dir(archive, jurisdiction, str(week), existing)
        note = _changed_extract_note(bundle, newest)
        state = delivery_state(bundle)
        if state.status == "sent":
            last = state.last or {}
            return report(
                "nothing-to-do",
                bundle,
                False,
                None,
                f"week {week} is already archived ({bundle}) and sent ({last.get('time', '?')}, "
                f"Message-ID {last.get('message_id', '?')}); nothing to do{note}",
            )
        if state.status in ("unknown", "partial"):
            return report(
                state.status, bundle, False, None, _attention(state, config, bundle) + note
            )
        log(f"week {week} is archived ({bundle}) but not sent{note}")
    else:
        run_config = dataclasses.replace(
            config,
            input=dataclasses.replace(
                config.input, table=newest.path, prior_table=prior.path if prior else None
            ),
        )
        try:
            result = pipeline.build(run_config, today=today, log=log)
        except ArchiveExists as exc:
            return report(
                "nothing-to-do",
                None,
                False,
                None,
                f"week {week} was archived by another run at the same time ({exc}); that run "
                "sends it; nothing to do",
            )
        if result.bundle is None:  # pragma: no cover - archive is set above
            raise DeliveryError("the build wrote no archive bundle")
        bundle = result.bundle.path
        built = True
    done = "archived" if built else "already archived"
    review = review_state(bundle, config.delivery.require_review)
    if not review.may_send and not dry_run:
        message = held_message(
            review, bundle, reviewer=config.delivery.reviewer, config_path=config.source
        )
        return report(
            "held", bundle, built, None, f"week {week}: {done} in {bundle}; {message}", review
        )
    outcome = send_archived(
        config, bundle, dry_run=dry_run, now=now, env=env, sleep=sleep, ssl_context=ssl_context
    )
    if outcome.status == "dry-run":
        held = (
            "; held for review: a real send waits for `sitrep approve`"
            if not review.may_send
            else ""
        )
        return report(
            "dry-run",
            bundle,
            built,
            outcome,
            f"week {week}: {done} in {bundle}; e-mail not sent (dry run), {outcome.detail}{held}",
            review,
        )
    if outcome.status == "sent":
        return report(
            "sent",
            bundle,
            built,
            outcome,
            f"week {week}: {done} in {bundle}; e-mail sent, Message-ID {outcome.message_id}"
            + (f" ({review.summary()})" if review.status == "approved" else ""),
            review,
        )
    state = delivery_state(bundle)
    if outcome.status in ("unknown", "partial"):
        return report(
            outcome.status,
            bundle,
            built,
            outcome,
            f"week {week}: {done} in {bundle}; " + _attention(state, config, bundle),
        )
    return report(
        "failed",
        bundle,
        built,
        outcome,
        f"week {week}: {done} in {bundle}; e-mail failed: {outcome.detail}. The next `sitrep run` "
        "tries again, or send it now with `sitrep send`",
    )


def _changed_extract_note(bundle: Path, newest: Extract) -> str:
    """A sentence when the newest extract differs from the table archived in ``bundle``."""
    try:
        inputs = _read_manifest(bundle).get("inputs", [])
        archived = {
            i.get("sha256") for i in inputs if isinstance(i, dict) and i.get("role") == "table"
        }
    except DeliveryError:
        return ""
    if not archived or newest.sha256 in archived:
        return ""
    return (
        f". Note: {newest.path.name} (SHA-256 {newest.sha256[:12]}...) differs from the table archived in "
        f"{bundle}; a published week is not changed automatically. To publish the new figures run "
        'sitrep build --reissue "<reason>" with this extract as input.table'
    )
