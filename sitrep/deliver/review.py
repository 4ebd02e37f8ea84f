"""The sign-off gate: whether a bundle may be e-mailed, and the record of who approved it.

A build archives a bundle as a *draft*. Whether a draft may be sent without a
person's sign-off is the policy ``[delivery] require_review``:

* ``"never"``: send as soon as it is built;
* ``"always"``: every bundle waits for ``sitrep approve``;
* ``"on-warnings"`` (the default): a bundle waits when a data-quality warning
  names a district that page 1 names (the top third and the high-value groups,
  listed in the manifest as ``page_one_districts``), when a warning on the
  jurisdiction's own totals changes what page 1 means (``completeness-drop``),
  or when validation lists an error-level finding. sitrep has no way to
  override an error, so a bundle listing one is refused before this gate
  (nothing is sent for a blocked run); the rule is here so that the gate is
  complete on its own.

Approvals are kept next to the immutable bundle, never inside it::

    ARCHIVE/<jurisdiction>/<year>-W<ww>/v<k>/              the bundle (unchanged)
    ARCHIVE/<jurisdiction>/<year>-W<ww>/v<k>.review.jsonl  one JSON line per approval

Each line records the reviewer, the time (UTC), the note, what was held, the
SHA-256 of the bundle's ``manifest.json`` and the SHA-256 of the line before
it (64 zeros for the first), so a line that is edited, removed or moved to
another bundle breaks the chain and no approval is read from the file.
Lines are only ever appended (``O_APPEND`` under an exclusive ``flock``).
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime as dt
import fcntl
import hashlib
import json
import os
from collections.abc import Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any, Literal

from sitrep.deliver.archive import MANIFEST_JSON, verify_bundle
from sitrep.errors import ConfigError, DeliveryError, ValidationFailed

__all__ = [
    "JURISDICTION_RULES",
    "Approval",
    "HoldReason",
    "ReviewState",
    "approve_bundle",
    "held_message",
    "hold_reasons",
    "page_one_districts",
    "read_approvals",
    "review_record_path",
    "review_state",
]

Policy = Literal["always", "on-warnings", "never"]

JURISDICTION_RULES = frozenset({"completeness-drop"})
"""Warnings that name no district but change what the page-1 figures mean (on-warnings holds)."""

_GENESIS = "0" * 64
_RECORD_KIND = "sitrep-approval"


@dataclasses.dataclass(frozen=True)
class HoldReason:
    """Findings of one rule that hold a bundle: the rule, the districts and a message."""

    severity: str
    rule: str
    district_ids: tuple[str, ...]
    district_names: tuple[str, ...]
    message: str

    def describe(self) -> str:
        """``'revision-large (warning) for 002 Abbotsmere, 021 Brindlecombe'``."""
        where = ", ".join(
            f"{i} {n}".strip() for i, n in zip(self.district_ids, self.district_names, strict=True)
        )
        return f"{self.rule} ({self.severity})" + (
            f" for {where}" if where else " (jurisdiction totals)"
        )

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready form (kept in each approval line)."""
        return {
            "severity": self.severity,
            "rule": self.rule,
            "district_ids": list(self.district_ids),
            "district_names": list(self.district_names),
        }


@dataclasses.dataclass(frozen=True)
class Approval:
    """One approval line of ``<bundle>.review.jsonl``."""

    by: str
    time: str
    note: str
    manifest_sha256: str
    line_sha256: str


@dataclasses.dataclass(frozen=True)
class ReviewState:
    """Where a bundle stands with respect to sign-off.

    ``status``: ``"approved"`` (at least one valid approval of this very
    manifest), ``"held"`` (the policy asks for review and nobody approved
    yet), ``"not-required"`` (the policy lets it go unreviewed), or
    ``"broken"`` (the review record cannot be trusted: ``problem`` says why;
    nothing is sent). ``reasons`` are what holds it under ``on-warnings``
    (empty under ``always`` when the week is clean).
    """

    status: Literal["approved", "held", "not-required", "broken"]
    policy: Policy
    reasons: tuple[HoldReason, ...]
    approvals: tuple[Approval, ...]
    record: Path
    problem: str = ""

    @property
    def may_send(self) -> bool:
        """True when a real send is allowed."""
        return self.status in ("approved", "not-required")

    def summary(self) -> str:
        """One line for ``sitrep verify`` and the logs."""
        if self.status == "approved":
            last = self.approvals[-1]
            more = f" ({len(self.approvals)} approvals)" if len(self.approvals) > 1 else ""
            note = f": {last.note}" if last.note else ""
            return f"approved by {last.by} at {last.time}{note}{more}"
        if self.status == "broken":
            return f"review record cannot be trusted: {self.problem}"
        if self.status == "held":
            return f"draft, held for review (delivery.require_review = {self.policy!r})"
        return f"draft, no review required (delivery.require_review = {self.policy!r})"


def review_record_path(bundle: Path) -> Path:
    """``<bundle>.review.jsonl``: the approvals, kept next to the immutable bundle."""
    bundle = Path(bundle)
    return bundle.with_name(bundle.name + ".review.jsonl")


def _manifest_sha(bundle: Path) -> str:
    try:
        return hashlib.sha256((bundle / MANIFEST_JSON).read_bytes()).hexdigest()
    except OSError as exc:
        raise DeliveryError(f"{bundle / MANIFEST_JSON} cannot be read: {exc}") from exc


def _load(path: Path) -> Any:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def hold_reasons(bundle: Path) -> tuple[HoldReason, ...]:
    """What would hold ``bundle`` under ``on-warnings`` (see the module docstring).

    Reads ``manifest.json`` (``page_one_districts``) and ``validation.json``.
    Fails closed: when the manifest lists no ``page_one_districts`` (a bundle
    from an older sitrep) every warning naming a district holds, and an
    unreadable ``validation.json`` holds as one error.
    """
    manifest = _load(bundle / MANIFEST_JSON)
    page_one = manifest.get("page_one_districts") if isinstance(manifest, dict) else None
    named: dict[str, str] | None = None
    if isinstance(page_one, list):
        named = {
            str(d.get("id")): str(d.get("name", ""))
            for d in page_one
            if isinstance(d, dict) and d.get("id") is not None
        }
    validation = _load(bundle / "validation.json")
    findings = validation.get("findings") if isinstance(validation, dict) else None
    if not isinstance(findings, list):
        return (
            HoldReason("error", "validation-unreadable", (), (), "validation.json cannot be read"),
        )
    grouped: dict[tuple[str, str], dict[str, str]] = {}
    messages: dict[tuple[str, str], str] = {}
    for f in findings:
        if not isinstance(f, dict):
            continue
        severity, rule = str(f.get("severity", "error")), str(f.get("rule", "?"))
        district = f.get("district_id")
        if severity == "error":
            hold = True
        elif severity != "warning":
            hold = False
        elif district is None or district == "":
            hold = rule in JURISDICTION_RULES
        else:
            hold = named is None or str(district) in named
        if not hold:
            continue
        key = (severity, rule)
        members = grouped.setdefault(key, {})
        messages.setdefault(key, str(f.get("message", "")))
        if district not in (None, ""):
            members[str(district)] = (named or {}).get(str(district), "")
    order = {"error": 0, "warning": 1}
    return tuple(
        HoldReason(
            severity,
            rule,
            tuple(sorted(members)),
            tuple(members[i] for i in sorted(members)),
            messages[(severity, rule)],
        )
        for (severity, rule), members in sorted(
            grouped.items(), key=lambda kv: (order.get(kv[0][0], 2), kv[0][1])
        )
    )


def read_approvals(bundle: Path) -> tuple[tuple[Approval, ...], str]:
    """The valid approvals of ``bundle`` and a problem ('' when the record is sound).

    Every line must parse, name this bundle's folder, link to the line before
    (``prev_sha256``) and carry the SHA-256 of the current ``manifest.json``;
    otherwise no approval is returned and the problem names the line.
    """
    path = review_record_path(bundle)
    if not path.exists():
        return (), ""
    try:
        raw = path.read_bytes()
    except OSError as exc:
        return (), f"{path} cannot be read: {exc}"
    manifest_sha = _manifest_sha(bundle)
    approvals: list[Approval] = []
    prev = _GENESIS
    for number, line in enumerate(raw.splitlines(), start=1):
        where = f"{path.name} line {number}"
        try:
            entry = json.loads(line)
        except ValueError:
            return (), f"{where} is not JSON"
        if not isinstance(entry, dict) or entry.get("kind") != _RECORD_KIND:
            return (), f"{where} is not a sitrep approval"
        if entry.get("prev_sha256") != prev:
            return (), f"{where} does not follow the line before it (edited, removed or reordered)"
        if entry.get("manifest_sha256") != manifest_sha:
            return (), f"{where} approves another manifest.json than the one in {bundle}"
        if entry.get("bundle") != Path(bundle).name:
            return (), f"{where} names bundle {entry.get('bundle')!r}, not {Path(bundle).name!r}"
        prev = hashlib.sha256(line).hexdigest()
        approvals.append(
            Approval(
                by=str(entry.get("by", "")),
                time=str(entry.get("time", "")),
                note=str(entry.get("note", "")),
                manifest_sha256=manifest_sha,
                line_sha256=prev,
            )
        )
    if not raw.endswith(b"\n") and raw:
        return (), f"{path.name} ends in an incomplete line"
    return tuple(approvals), ""


def review_state(bundle: Path, policy: Policy) -> ReviewState:
    """Whether ``bundle`` may be sent under ``policy`` (does not verify the checksums)."""
    if policy not in ("always", "on-warnings", "never"):
        raise ConfigError(
            f"delivery.require_review = {policy!r} is not allowed; choose 'always', "
            "'on-warnings' or 'never'"
        )
    bundle = Path(bundle)
    reasons = hold_reasons(bundle)
    approvals, problem = read_approvals(bundle)
    record = review_record_path(bundle)
    if problem:
        return ReviewState("broken", policy, reasons, (), record, problem)
    if approvals:
        return ReviewState("approved", policy, reasons, approvals, record)
    held = policy == "always" or (policy == "on-warnings" and bool(reasons))
    return ReviewState("held" if held else "not-required", policy, reasons, (), record)


def held_message(
    state: ReviewState, bundle: Path, *, reviewer: str = "", config_path: Path | str | None = None
) -> str:
    """Who must review what, and the command that releases the bundle (one paragraph)."""
    if state.status == "broken":
        return (
            f"its review record cannot be trusted ({state.problem}). Check who approved what, "
            f"move {state.record} aside, then approve again"
        )
    who = reviewer or "the person who signs off the report (set delivery.reviewer to name them)"
    if state.reasons:
        what = (
            "; ".join(r.describe() for r in state.reasons)
            + ": findings on what page 1 shows. Check them against the district returns "
            "(validation.json and internal-data-quality.csv in the bundle list each finding with "
            "its file, line and column)"
        )
    else:
        what = "the report as a whole (this policy holds every week, with or without warnings)"
    cfg = f" --config {config_path}" if config_path else ""
    return (
        f"held for review (delivery.require_review = {state.policy!r}). Reviewer: {who}. "
        f'To review: {what}. Then: sitrep approve {bundle} --by "Name" [--note "..."]; the next '
        f"sitrep run (or sitrep send {bundle}{cfg}) sends it"
    )


@contextlib.contextmanager
def _locked_append(path: Path) -> Iterator[int]:
    flags = os.O_RDWR | os.O_CREAT | os.O_APPEND | getattr(os, "O_NOFOLLOW", 0)
    try:
        fd = os.open(path, flags, 0o644)
    except OSError as exc:
        raise DeliveryError(f"cannot open the review record {path}: {exc}") from exc
    try:
        fcntl.flock(fd, fcntl.LOCK_EX)
        yield fd
    finally:
        os.close(fd)


def approve_bundle(
    bundle: Path,
    *,
    by: str,
    note: str = "",
    now: dt.datetime | None = None,
) -> tuple[Approval, tuple[HoldReason, ...]]:
    """Append one approval of ``bundle`` to ``<bundle>.review.jsonl``.

    Refused (nothing written) when ``bundle`` is not a bundle folder, fails
    :func:`~sitrep.deliver.archive.verify_bundle`, its run was blocked by
    validation, ``by`` is empty, or the existing review record is broken.

    Returns
    -------
    (Approval, tuple of HoldReason)
        The line written and what it approved (the findings that held it).

    Raises
    ------
    ConfigError
        ``bundle`` is not a bundle folder, or ``by`` / ``note`` is empty or
        holds a line break.
    ValidationFailed
        The archived run was blocked by validation (a blocked run is never sent).
    DeliveryError
        The bundle fails verification or its review record is broken.
    """
    bundle = Path(bundle)
    if not (bundle / MANIFEST_JSON).is_file():
        raise ConfigError(
            f"{bundle} is not a sitrep bundle (no {MANIFEST_JSON}); pass the folder "
            "ARCHIVE/<jurisdiction>/<year>-W<ww>/v<k>"
        )
    by = by.strip()
    if not by:
        raise ConfigError('sitrep approve needs --by "Name" (who reviewed the report)')
    for label, text in (("--by", by), ("--note", note)):
        if any(c in text for c in ("\r", "\n", "\x00")):
            raise ConfigError(f"{label} contains a line break or NUL; give one line of text")
    checked = verify_bundle(bundle)
    if not checked.ok:
        raise DeliveryError(
            f"bundle {bundle} fails verification ({'; '.join(checked.problems[:3])}); an altered "
            "bundle cannot be approved. Run `sitrep verify` for the full list and rebuild"
        )
    reasons = hold_reasons(bundle)
    if any(r.severity == "error" for r in reasons):
        raise ValidationFailed(
            f"the run archived in {bundle} was blocked by validation; a blocked run is never sent, "
            "so it cannot be approved. Fix the inputs and rebuild"
        )
    manifest_sha = _manifest_sha(bundle)
    when = (now or dt.datetime.now(dt.UTC)).astimezone(dt.UTC).replace(microsecond=0)
    path = review_record_path(bundle)
    with _locked_append(path) as fd:
        _, problem = read_approvals(bundle)
        if problem:
            raise DeliveryError(
                f"the review record of {bundle} cannot be trusted ({problem}); nothing was "
                f"appended. Move {path.name} aside after checking it, then approve again"
            )
        existing = path.read_bytes().splitlines()
        prev = hashlib.sha256(existing[-1]).hexdigest() if existing else _GENESIS
        entry = {
            "kind": _RECORD_KIND,
            "bundle": bundle.name,
            "by": by,
            "time": when.isoformat().replace("+00:00", "Z"),
            "note": note,
            "approved": [r.as_dict() for r in reasons],
            "manifest_sha256": manifest_sha,
            "prev_sha256": prev,
        }
        line = json.dumps(entry, sort_keys=True, ensure_ascii=False).encode("utf-8")
        try:
            view = memoryview(line + b"\n")
            while view:
                view = view[os.write(fd, view) :]
            os.fsync(fd)
        except OSError as exc:
            raise DeliveryError(f"writing the review record {path} failed: {exc}") from exc
    approval = Approval(
        by, str(entry["time"]), note, manifest_sha, hashlib.sha256(line).hexdigest()
    )
    return approval, reasons


def page_one_districts(ids: Sequence[str], names: Mapping[str, str]) -> list[dict[str, str]]:
    """The manifest's ``page_one_districts``: ``[{"id": ..., "name": ...}]`` sorted by id."""
    return [{"id": i, "name": names.get(i, "")} for i in sorted(set(ids))]
