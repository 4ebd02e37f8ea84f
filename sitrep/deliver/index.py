"""A static, self-contained audit index of an archive, and a comparison page per reissue.

``sitrep index ARCHIVE`` (and every archiving build) writes::

    ARCHIVE/index.html                                   every jurisdiction, week and version
    ARCHIVE/_compare/<jurisdiction>-<year>-W<ww>-v<j>-v<k>.html   what a reissue changed

Both pages are plain HTML with their style and a small sorting script inline:
no external asset, no network, they open from a USB stick. The index reads
only what the archive already holds: each bundle's ``manifest.json`` (week,
version, build time, reissue reason), a fresh :func:`verify_bundle` (checksums
and signature), the jurisdiction's hash chain (:func:`verify_chain`), the send
history beside the bundle (``v<k>.sent.json``) and the review record
(``v<k>.review.jsonl``) when there is one. The index is the one file in the
archive that is rewritten (atomically, by rename); bundles are never touched.

A comparison page lists, between two versions of a week: the jurisdiction's
and each district's published figures that differ (``results.json``), the
sentences of the report and of the draft that were removed or added, and the
figure files whose bytes changed.
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime as dt
import difflib
import html.parser
import json
import re
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

from sitrep.deliver.archive import MANIFEST_JSON, bundle_folders, replace_file, verify_bundle
from sitrep.deliver.chain import verify_chain
from sitrep.deliver.review import read_approvals
from sitrep.errors import DeliveryError

__all__ = [
    "COMPARE_FOLDER",
    "INDEX_FILE",
    "BundleEntry",
    "Comparison",
    "compare_versions",
    "refresh_index",
    "scan_archive",
    "write_index",
]

INDEX_FILE = "index.html"
COMPARE_FOLDER = "_compare"
_SLUG = re.compile(r"^[a-z0-9][a-z0-9-]*$")
_COMPARED_FIELDS = (
    ("ili_visits", "ILI visits"),
    ("total_visits", "all visits"),
    ("ili_percent", "ILI %"),
    ("prior_ili_percent", "last week's ILI %"),
    ("change_class", "change"),
    ("tercile", "tercile"),
    ("cluster_label", "cluster"),
    ("suppressed", "withheld"),
)


@dataclasses.dataclass(frozen=True)
class BundleEntry:
    """One row of the index."""

    jurisdiction: str
    slug: str
    week: str
    version: int
    build_time: str
    reissue_reason: str
    checksums: str
    """``ok`` or ``FAILED (n problems)``."""
    signature: str
    chain: str
    delivery: str
    review: str
    warnings: str
    html_link: str
    pdf_link: str
    compare_link: str
    """Link to the comparison with the version before, for a reissue."""


@dataclasses.dataclass(frozen=True)
class Comparison:
    """What changed between two versions of one week."""

    jurisdiction: str
    week: str
    old: int
    new: int
    reason: str
    figures: tuple[tuple[str, str, str, str], ...]
    """(district or "jurisdiction", field, old value, new value)."""
    sentences: tuple[tuple[str, str], ...]
    """("removed" or "added", sentence) of the report and the draft, in reading order."""
    files: tuple[tuple[str, str], ...]
    """(figure file, "changed" / "added" / "removed")."""


# --------------------------------------------------------------------------- reading the archive


def _load(path: Path) -> Any:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def _build_time(manifest: Mapping[str, Any]) -> str:
    epoch = manifest.get("source_date_epoch")
    if isinstance(epoch, int) and not isinstance(epoch, bool):
        return dt.datetime.fromtimestamp(epoch, dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    return ""


def _delivery(bundle: Path) -> str:
    record = _load(bundle.with_name(bundle.name + ".sent.json"))
    sends = record.get("sends") if isinstance(record, dict) else None
    if not isinstance(sends, list) or not sends:
        return "not sent"
    last = sends[-1] if isinstance(sends[-1], dict) else {}
    when = str(last.get("time", ""))[:16].replace("T", " ")
    accepted = last.get("accepted") or []
    status = str(last.get("status", "?"))
    count = f", {len(accepted)} recipient(s)" if isinstance(accepted, list) and accepted else ""
    return f"{status} {when}{count}" + (f" ({len(sends)} attempts)" if len(sends) > 1 else "")


def _review(bundle: Path) -> str:
    """The review state as :mod:`sitrep.deliver.review` reads it (an altered record approves nothing)."""
    try:
        approvals, problem = read_approvals(bundle)
    except DeliveryError as exc:
        return f"review record unreadable ({exc})"
    if problem:
        return f"review record altered: {problem}"
    if not approvals:
        return "no review record"
    last = approvals[-1]
    return f"approved by {last.by} {last.time[:16].replace('T', ' ')}".strip()


def scan_archive(archive: Path) -> list[BundleEntry]:
    """Every bundle of every jurisdiction in ``archive``, newest week first.

    Raises
    ------
    DeliveryError
        ``archive`` is not a folder.
    """
    archive = Path(archive)
    if not archive.is_dir():
        raise DeliveryError(f"{archive} is not an archive folder ([output] archive)")
    entries: list[BundleEntry] = []
    for folder in sorted(p for p in archive.iterdir() if p.is_dir() and _SLUG.match(p.name)):
        bundles = bundle_folders(folder)
        if not bundles:
            continue
        try:
            walked = verify_chain(folder)
            chain = {r.bundle_id: r for r in walked.links}
            verified = dict(walked.bundles)
        except DeliveryError:
            chain, verified = {}, {}
        versions: dict[str, list[int]] = {}
        for bundle_id, _ in bundles:
            week_label, number = bundle_id.split("/v")
            versions.setdefault(week_label, []).append(int(number))
        for bundle_id, path in bundles:
            manifest = _load(path / MANIFEST_JSON)
            manifest = manifest if isinstance(manifest, dict) else {}
            week, version_text = bundle_id.split("/v")
            version = int(version_text)
            checked = verified.get(bundle_id) or verify_bundle(path)  # the walk hashed it already
            link = chain.get(bundle_id)
            reissue = _section(manifest, "reissue")
            validation = _section(manifest, "validation")
            earlier = [v for v in versions[week] if v < version]
            rel = f"{folder.name}/{week}/v{version}"
            entries.append(
                BundleEntry(
                    jurisdiction=str(
                        _section(manifest, "bundle").get("jurisdiction") or folder.name
                    ),
                    slug=folder.name,
                    week=week,
                    version=version,
                    build_time=_build_time(manifest),
                    reissue_reason=str(reissue.get("reason", "")),
                    checksums="ok"
                    if checked.ok
                    else f"FAILED ({len(checked.problems)} problem(s))",
                    signature=checked.signature.replace("-", " "),
                    chain=(
                        "not checked"
                        if link is None
                        else f"link {link.sequence}: {link.status}"
                        if link.sequence is not None
                        else link.status.replace("-", " ")
                    ),
                    delivery=_delivery(path),
                    review=_review(path),
                    warnings=str(validation.get("warnings", "")),
                    html_link=f"{rel}/report.html" if (path / "report.html").is_file() else "",
                    pdf_link=f"{rel}/report.pdf" if (path / "report.pdf").is_file() else "",
                    compare_link=(
                        f"{COMPARE_FOLDER}/{_compare_name(folder.name, week, earlier[-1], version)}"
                        if earlier
                        else ""
                    ),
                )
            )
    entries.sort(key=lambda e: (e.jurisdiction, e.week, e.version), reverse=True)
    return entries


def _section(manifest: Mapping[str, Any], key: str) -> Mapping[str, Any]:
    value = manifest.get(key)
    return value if isinstance(value, dict) else {}


def _compare_name(slug: str, week: str, old: int, new: int) -> str:
    return f"{slug}-{week}-v{old}-v{new}.html"


# --------------------------------------------------------------------------- comparing versions


class _Text(html.parser.HTMLParser):
    """Visible text of the report's paragraphs, list items, headings and captions."""

    _BLOCKS = frozenset({"p", "li", "h1", "h2", "h3", "h4", "figcaption", "caption"})
    _SKIP = frozenset({"script", "style"})

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.blocks: list[str] = []
        self._depth = 0
        self._skip = 0
        self._buffer: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag in self._SKIP:
            self._skip += 1
        elif tag in self._BLOCKS:
            self._flush()
            self._depth += 1

    def handle_endtag(self, tag: str) -> None:
        if tag in self._SKIP:
            self._skip = max(0, self._skip - 1)
        elif tag in self._BLOCKS:
            self._flush()
            self._depth = max(0, self._depth - 1)

    def handle_data(self, data: str) -> None:
        if self._depth and not self._skip:
            self._buffer.append(data)

    def _flush(self) -> None:
        text = " ".join("".join(self._buffer).split())
        if text:
            self.blocks.append(text)
        self._buffer = []


def _sentences(bundle: Path) -> list[str]:
    out: list[str] = []
    with contextlib.suppress(OSError, UnicodeDecodeError):
        parser = _Text()
        parser.feed((bundle / "report.html").read_text(encoding="utf-8"))
        parser.close()
        out.extend(parser.blocks)
    with contextlib.suppress(OSError, UnicodeDecodeError):
        for line in (bundle / "draft.md").read_text(encoding="utf-8").split("\n\n"):
            text = " ".join(line.replace("#", " ").split())
            if text:
                out.append(text)
    seen: set[str] = set()
    unique = []
    for s in out:
        for sentence in re.split(r"(?<=[.!?])\s+(?=[A-Z])", s):
            if sentence not in seen:
                seen.add(sentence)
                unique.append(sentence)
    return unique


def _shown(value: Any) -> str:
    if value is None or value == "":
        return "\u2014"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:.2f}"
    return str(value)


def _figures(old: Any, new: Any) -> list[tuple[str, str, str, str]]:
    rows: list[tuple[str, str, str, str]] = []
    if not isinstance(old, dict) or not isinstance(new, dict):
        return rows
    oj, nj = old.get("jurisdiction") or {}, new.get("jurisdiction") or {}
    for key in sorted(set(oj) | set(nj)):
        if key in ("districts",) or _shown(oj.get(key)) == _shown(nj.get(key)):
            continue
        rows.append(
            ("jurisdiction", key.replace("_", " "), _shown(oj.get(key)), _shown(nj.get(key)))
        )

    def by_id(results: Mapping[str, Any]) -> dict[str, Mapping[str, Any]]:
        return {
            str(r.get("district_id")): r
            for r in results.get("districts") or []
            if isinstance(r, dict)
        }

    od, nd = by_id(old), by_id(new)
    for did in sorted(set(od) | set(nd), key=lambda s: (len(s), s)):
        a, b = od.get(did, {}), nd.get(did, {})
        name = f"{did} {b.get('district_name') or a.get('district_name') or ''}".strip()
        for key, label in _COMPARED_FIELDS:
            if _shown(a.get(key)) != _shown(b.get(key)):
                rows.append((name, label, _shown(a.get(key)), _shown(b.get(key))))
    return rows


def compare_versions(old_bundle: Path, new_bundle: Path) -> Comparison:
    """What changed from ``old_bundle`` to ``new_bundle`` (two versions of one week)."""
    om = _load(old_bundle / MANIFEST_JSON) or {}
    nm = _load(new_bundle / MANIFEST_JSON) or {}
    old_sentences, new_sentences = _sentences(old_bundle), _sentences(new_bundle)
    sentences: list[tuple[str, str]] = []
    matcher = difflib.SequenceMatcher(None, old_sentences, new_sentences, autojunk=False)
    for tag, i1, i2, j1, j2 in matcher.get_opcodes():
        if tag in ("replace", "delete"):
            sentences.extend(("removed", s) for s in old_sentences[i1:i2])
        if tag in ("replace", "insert"):
            sentences.extend(("added", s) for s in new_sentences[j1:j2])
    of, nf = om.get("files") or {}, nm.get("files") or {}
    files = []
    for name in sorted(n for n in set(of) | set(nf) if n.startswith("figures/")):
        if name not in of:
            files.append((name, "added"))
        elif name not in nf:
            files.append((name, "removed"))
        elif of[name].get("sha256") != nf[name].get("sha256"):
            files.append((name, "changed"))
    bundle = nm.get("bundle") or {}
    return Comparison(
        jurisdiction=str(bundle.get("jurisdiction", "")),
        week=str(bundle.get("week", "")),
        old=int(om.get("bundle", {}).get("version", 0)),
        new=int(bundle.get("version", 0)),
        reason=str((nm.get("reissue") or {}).get("reason", "")),
        figures=tuple(
            _figures(_load(old_bundle / "results.json"), _load(new_bundle / "results.json"))
        ),
        sentences=tuple(sentences),
        files=tuple(files),
    )


# --------------------------------------------------------------------------- writing


def _render(template: str, **values: Any) -> bytes:
    from sitrep.render.html import environment

    return environment().get_template(template).render(**values).encode("utf-8")


def write_index(
    archive: Path, *, generated: dt.datetime | None = None
) -> tuple[list[Path], list[BundleEntry]]:
    """Write ``index.html`` and one comparison page per reissue.

    Returns the paths written (the index last) and the index's rows.

    Raises
    ------
    DeliveryError
        ``archive`` is not a folder, or a page cannot be written.
    """
    archive = Path(archive)
    entries = scan_archive(archive)
    written: list[Path] = []
    when = (generated or dt.datetime.now(dt.UTC)).strftime("%Y-%m-%d %H:%M UTC")
    try:
        for e in entries:
            if not e.compare_link:
                continue
            week_dir = archive / e.slug / e.week
            old = int(Path(e.compare_link).stem.rsplit("-v", 2)[1])
            comparison = compare_versions(week_dir / f"v{old}", week_dir / f"v{e.version}")
            target = archive / e.compare_link
            target.parent.mkdir(parents=True, exist_ok=True)
            replace_file(
                target, _render("archive_compare.html.j2", comparison=comparison, generated=when)
            )
            written.append(target)
        jurisdictions = sorted({e.jurisdiction for e in entries})
        target = archive / INDEX_FILE
        replace_file(
            target,
            _render(
                "archive_index.html.j2",
                entries=entries,
                jurisdictions=jurisdictions,
                generated=when,
                problems=sum(1 for e in entries if e.checksums != "ok" or "broken" in e.chain),
            ),
        )
        written.append(target)
    except OSError as exc:
        raise DeliveryError(f"cannot write the archive index in {archive}: {exc}") from exc
    return written, entries


def refresh_index(archive: Path, log: Callable[[str], None]) -> Path | None:
    """:func:`write_index` after a build or a send; a failure is reported, never raised.

    The bundle is archived (or the message sent) by then: an index that cannot
    be written must not turn a good run into a failed one.
    """
    try:
        written, _ = write_index(archive)
    except (DeliveryError, OSError) as exc:
        log(f"note: the archive index was not updated ({exc}); run `sitrep index {archive}`")
        return None
    return written[-1]
