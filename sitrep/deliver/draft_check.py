"""Check a draft that communications staff edited against the bundle it came from.

The bundle holds the draft as sitrep wrote it (``draft.md``) and the numbers
behind it (``results.json``). An edited copy (Markdown, plain text or DOCX) is
split into paragraphs; each is matched to the most similar paragraph of the
original, and these rules run on it:

``figure-changed``
    A number (a percentage, a count, a number of weeks...) that is neither in
    the matched original paragraph nor a correct rounding of one there, nor of
    a value of the district it stands next to.
``district-figure``
    A percentage next to a district name that is not that district's ILI
    percentage (rounded as printed): a swapped or mistyped district.
``rounding-reverses``
    Two district figures in one sentence whose printed order is the opposite
    of their true order (e.g. 3.9% before 3.92% for 3.95% and 3.92%), or that
    print as equal while a comparison word sets them apart.
``district-not-named``
    A district the original draft does not name: the report does not support
    a statement about it.
``withheld-figure``
    A figure next to a district whose counts are withheld for disclosure
    control: a suppressed value that reappears.
``week-or-date``
    A week number, ``<year>-W<ww>`` label or calendar date that the original
    draft does not give.
``trend-reversed``
    A word of direction (rise, fall, no clear change...) that contradicts the
    matched original paragraph.
``caution-removed``
    A caution of the original draft with no close match left in the edit.

Every finding would mislead a reader; a re-worded sentence that keeps its
figures, districts, weeks and direction passes. Numbers are compared after
removing thousands separators; a printed value ``p`` with ``d`` decimals is a
correct rounding of ``v`` when ``|v - p| <= 0.5 * 10**-d`` (both half-up and
half-even roundings pass).
"""

from __future__ import annotations

import dataclasses
import difflib
import itertools
import json
import re
import unicodedata
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

from sitrep.errors import ConfigError, InputError

__all__ = ["DraftFinding", "as_json", "check_draft", "read_edited_draft"]

_MONTHS = "January|February|March|April|May|June|July|August|September|October|November|December"
_DATE = re.compile(rf"\b(\d{{1,2}})(?:\s*[–-]\s*(\d{{1,2}}))?\s+({_MONTHS})(?:\s+(\d{{4}}))?\b")
_WEEK_WORD = re.compile(r"\bweek\s+(\d{1,2})\b", re.IGNORECASE)
_WEEK_LABEL = re.compile(r"\b(\d{4})-W(\d{2})\b")
_NUMBER = re.compile(
    r"(?<![\w.,])[-−]?\d{1,3}(?:,\d{3})+(?:\.\d+)?(?![\w])|(?<![\w.,])[-−]?\d+(?:\.\d+)?(?![\w])"
)
_SENTENCE = re.compile(r"(?<=[.!?])\s+(?=[A-Z0-9])")
_COMPARISON = re.compile(
    r"\b(above|below|higher|lower|more than|less than|exceed\w*|over|under|greater|smaller)\b",
    re.IGNORECASE,
)
_DIRECTIONS = {
    "up": r"rise|rises|rose|risen|rising|increase|increases|increased|increasing|grew|grown|"
    r"growing|gone up|went up|going up|climb\w*|upward",
    "down": r"fall|falls|fell|fallen|falling|decrease|decreases|decreased|decreasing|declin\w*|"
    r"drop|drops|dropped|dropping|gone down|went down|going down|downward",
    "flat": r"no clear change|unchanged|stable|steady|flat|no change",
}
_DIRECTION_RE = {k: re.compile(rf"\b({v})\b", re.IGNORECASE) for k, v in _DIRECTIONS.items()}
_NAME_WINDOW = 24
"""Characters after a district name in which its figure is looked for (``Name (3.95%)``)."""


@dataclasses.dataclass(frozen=True)
class DraftFinding:
    """One place in the edited draft that would mislead."""

    rule: str
    paragraph: int
    """1-based, counting the edited draft's non-empty paragraphs (headings and bullets included)."""
    text: str
    """The words of the edit at fault (a short excerpt)."""
    bundle_says: str

    def line(self) -> str:
        return f"paragraph {self.paragraph}: {self.rule}: \u201c{self.text}\u201d \u2014 {self.bundle_says}"


@dataclasses.dataclass(frozen=True)
class _District:
    name: str
    ili_percent: float | None
    withheld: bool


@dataclasses.dataclass(frozen=True)
class _Printed:
    text: str
    value: float
    decimals: int
    start: int
    end: int


# --------------------------------------------------------------------------- reading


def read_edited_draft(path: Path) -> list[str]:
    """The paragraphs of an edited draft: ``.docx`` (python-docx) or Markdown/plain text.

    Raises
    ------
    InputError
        The file cannot be read or is not a Word document / UTF-8 text.
    """
    path = Path(path)
    if path.suffix.lower() == ".docx":
        import zipfile

        import docx
        from docx.opc.exceptions import PackageNotFoundError

        if not path.is_file():
            raise InputError(f"edited draft {path} not found")
        try:
            document = docx.Document(str(path))
        except (OSError, KeyError, ValueError, zipfile.BadZipFile, PackageNotFoundError) as exc:
            raise InputError(f"{path} cannot be read as a Word document: {exc}") from exc
        return [p.text.strip() for p in document.paragraphs if p.text.strip()]
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError(f"edited draft {path} not found") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(
            f"{path} cannot be read as UTF-8 text ({exc}); save it as .md, .txt or .docx"
        ) from exc
    return _markdown_paragraphs(text)


def _markdown_paragraphs(text: str) -> list[str]:
    paragraphs: list[str] = []
    current: list[str] = []
    for raw in text.splitlines():
        line = raw.strip()
        block = line.startswith(("#", "- ", "* ")) or re.match(r"^\d+\.\s", line)
        if not line or block:
            if current:
                paragraphs.append(" ".join(current))
                current = []
            if line:
                paragraphs.append(re.sub(r"^(#+|[-*]|\d+\.)\s*", "", line))
            continue
        current.append(line)
    if current:
        paragraphs.append(" ".join(current))
    return [_plain(p) for p in paragraphs if p.strip()]


def _plain(text: str) -> str:
    """Markdown emphasis and escapes removed, Unicode NFC."""
    text = re.sub(r"\\([\\`*_{}\[\]()#+\-.!>])", r"\1", text)
    text = re.sub(r"(\*\*|__|\*|_)(?=\S)(.+?)(?<=\S)\1", r"\2", text)
    return unicodedata.normalize("NFC", text.strip())


# --------------------------------------------------------------------------- numbers


def _numbers(text: str) -> list[_Printed]:
    found: list[_Printed] = []
    for m in _NUMBER.finditer(text):
        raw = m.group(0)
        digits = raw.replace(",", "").replace("−", "-")
        decimals = len(digits.split(".")[1]) if "." in digits else 0
        found.append(_Printed(raw, float(digits), decimals, m.start(), m.end()))
    return found


def _rounds_to(value: float, printed: _Printed) -> bool:
    return abs(value - printed.value) <= 0.5 * 10 ** (-printed.decimals) + 1e-9


def _mask(text: str, patterns: Iterable[re.Pattern[str]]) -> str:
    """Blank out dates and week labels so their digits are not read as figures."""
    for pattern in patterns:
        text = pattern.sub(lambda m: " " * len(m.group(0)), text)
    return text


# --------------------------------------------------------------------------- the check


def check_draft(bundle: Path, edited: Sequence[str]) -> list[DraftFinding]:
    """Compare the paragraphs of an edited draft with the bundle's draft and results.

    Raises
    ------
    ConfigError
        ``bundle`` has no ``draft.md`` or ``results.json`` that can be read.
    """
    original, districts = _bundle_facts(Path(bundle))
    names = sorted(districts, key=len, reverse=True)
    named_in_original = {n for n in names if any(_has_name(p, n) for p in original)}
    original_dates = {_date_key(m) for p in original for m in _DATE.finditer(p)}
    original_weeks = {m.group(1).lstrip("0") for p in original for m in _WEEK_WORD.finditer(p)}
    original_labels = {m.group(0) for p in original for m in _WEEK_LABEL.finditer(p)}
    original_numbers = [
        n for p in original for n in _numbers(_mask(p, (_DATE, _WEEK_LABEL, _WEEK_WORD)))
    ]

    findings: list[DraftFinding] = []
    for index, paragraph in enumerate(edited, start=1):
        match, similarity = _best_match(paragraph, original)
        found = [
            *_check_weeks(index, paragraph, original_dates, original_weeks, original_labels),
            *_check_districts(index, paragraph, districts, names, named_in_original),
            *_check_figures(
                index,
                paragraph,
                match if similarity >= 0.35 else None,
                original_numbers,
                districts,
                names,
            ),
            *_check_direction(index, paragraph, match if similarity >= 0.45 else None),
        ]
        findings.extend(found)
    findings.extend(_check_cautions(original, edited))
    return findings


def _bundle_facts(bundle: Path) -> tuple[list[str], dict[str, _District]]:
    try:
        original = _markdown_paragraphs((bundle / "draft.md").read_text(encoding="utf-8"))
        results = json.loads((bundle / "results.json").read_text(encoding="utf-8"))
        rows = results["districts"]
    except FileNotFoundError as exc:
        raise ConfigError(
            f"{bundle} has no {Path(str(exc.filename)).name}; pass a bundle folder "
            "ARCHIVE/<jurisdiction>/<year>-W<ww>/v<k> (or a build's output folder)"
        ) from None
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise ConfigError(f"{bundle}: draft.md or results.json cannot be read ({exc})") from None
    districts: dict[str, _District] = {}
    for row in rows:
        name = unicodedata.normalize("NFC", str(row.get("district_name") or "")).strip()
        if not name:
            continue
        value = row.get("ili_percent")
        districts[name] = _District(
            name,
            float(value) if isinstance(value, (int, float)) else None,
            bool(row.get("suppressed")) or value is None,
        )
    return original, districts


def _has_name(text: str, name: str) -> bool:
    return re.search(rf"(?<!\w){re.escape(name)}(?!\w)", text) is not None


def _name_spans(text: str, names: Sequence[str]) -> list[tuple[str, int, int]]:
    """Non-overlapping occurrences of district names, longest names first."""
    taken: list[tuple[int, int]] = []
    spans: list[tuple[str, int, int]] = []
    for name in names:
        for m in re.finditer(rf"(?<!\w){re.escape(name)}(?!\w)", text):
            if any(m.start() < b and a < m.end() for a, b in taken):
                continue
            taken.append((m.start(), m.end()))
            spans.append((name, m.start(), m.end()))
    return sorted(spans, key=lambda s: s[1])


def _best_match(paragraph: str, original: Sequence[str]) -> tuple[str, float]:
    words = paragraph.lower().split()
    best, score = "", 0.0
    for candidate in original:
        ratio = difflib.SequenceMatcher(None, words, candidate.lower().split()).ratio()
        if ratio > score:
            best, score = candidate, ratio
    return best, score


def _excerpt(text: str, start: int, end: int, pad: int = 30) -> str:
    a, b = max(0, start - pad), min(len(text), end + pad)
    return ("\u2026" if a else "") + text[a:b].strip() + ("\u2026" if b < len(text) else "")


def _date_key(m: re.Match[str]) -> str:
    return " ".join(x for x in (m.group(1), m.group(2), m.group(3), m.group(4)) if x)


def _check_weeks(
    index: int, paragraph: str, dates: set[str], weeks: set[str], labels: set[str]
) -> list[DraftFinding]:
    out: list[DraftFinding] = []
    said = ", ".join(sorted(f"week {w}" for w in weeks)) or "no week number"
    for m in _WEEK_WORD.finditer(paragraph):
        if m.group(1).lstrip("0") not in weeks:
            out.append(
                DraftFinding(
                    "week-or-date",
                    index,
                    _excerpt(paragraph, m.start(), m.end()),
                    f"the report is about {said}",
                )
            )
    for m in _WEEK_LABEL.finditer(paragraph):
        if m.group(0) not in labels and m.group(2).lstrip("0") not in weeks:
            out.append(
                DraftFinding("week-or-date", index, m.group(0), f"the report is about {said}")
            )
    for m in _DATE.finditer(paragraph):
        if _date_key(m) not in dates:
            out.append(
                DraftFinding(
                    "week-or-date",
                    index,
                    m.group(0),
                    "the report gives the dates " + "; ".join(sorted(dates)),
                )
            )
    return out


def _check_districts(
    index: int,
    paragraph: str,
    districts: dict[str, _District],
    names: Sequence[str],
    named_in_original: set[str],
) -> list[DraftFinding]:
    out: list[DraftFinding] = []
    for name, start, end in _name_spans(paragraph, names):
        if name not in named_in_original:
            out.append(
                DraftFinding(
                    "district-not-named",
                    index,
                    _excerpt(paragraph, start, end),
                    f"the report's draft does not name {name}; its figures do not support a "
                    "statement about it here",
                )
            )
    return out


def _district_figures(
    paragraph: str, masked: str, names: Sequence[str]
) -> list[tuple[str, _Printed, int]]:
    """(district, the percentage printed right after its name, name start)."""
    pairs: list[tuple[str, _Printed, int]] = []
    numbers = _numbers(masked)
    for name, start, end in _name_spans(paragraph, names):
        for n in numbers:
            if end <= n.start <= end + _NAME_WINDOW and masked[
                n.end : n.end + 2
            ].lstrip().startswith("%"):
                between = masked[end : n.start]
                if not re.search(
                    r"[A-Za-z]{4,}", between
                ):  # "Name (3.95%)", "Name: 3.95%", "Name, 3.95%"
                    pairs.append((name, n, start))
                break
    return pairs


def _check_figures(
    index: int,
    paragraph: str,
    match: str | None,
    original_numbers: Sequence[_Printed],
    districts: dict[str, _District],
    names: Sequence[str],
) -> list[DraftFinding]:
    out: list[DraftFinding] = []
    masked = _mask(paragraph, (_DATE, _WEEK_LABEL, _WEEK_WORD))
    pairs = _district_figures(paragraph, masked, names)
    paired = {p.start for _, p, _ in pairs}
    for name, printed, start in pairs:
        d = districts[name]
        where = _excerpt(paragraph, start, printed.end)
        if d.withheld:
            out.append(
                DraftFinding(
                    "withheld-figure",
                    index,
                    where,
                    f"{name}'s counts are withheld to protect small numbers; give no figure for it",
                )
            )
        elif d.ili_percent is not None and not _rounds_to(d.ili_percent, printed):
            out.append(
                DraftFinding(
                    "district-figure",
                    index,
                    where,
                    f"{name}: the report gives {d.ili_percent:.2f}% (ILI percentage)",
                )
            )
    out.extend(_check_order(index, paragraph, pairs, districts))

    local = _numbers(_mask(match, (_DATE, _WEEK_LABEL, _WEEK_WORD))) if match else []
    pool = local if match else list(original_numbers)
    for printed in _numbers(masked):
        if printed.start in paired:
            continue
        if any(_rounds_to(o.value, printed) and o.decimals >= printed.decimals for o in pool):
            continue
        nearest = min(pool, key=lambda o: abs(o.value - printed.value), default=None)
        says = (
            f"the matching sentence of the report gives {nearest.text}"
            if nearest and match
            else "the report's draft has no such figure"
        )
        out.append(
            DraftFinding(
                "figure-changed", index, _excerpt(paragraph, printed.start, printed.end), says
            )
        )
    return out


def _check_order(
    index: int,
    paragraph: str,
    pairs: Sequence[tuple[str, _Printed, int]],
    districts: dict[str, _District],
) -> list[DraftFinding]:
    out: list[DraftFinding] = []
    for sentence_start, sentence in _sentences(paragraph):
        inside = [
            (n, p)
            for n, p, s in pairs
            if sentence_start <= s < sentence_start + len(sentence)
            and districts[n].ili_percent is not None
        ]
        for (a, pa), (b, pb) in itertools.pairwise(inside):
            va, vb = districts[a].ili_percent, districts[b].ili_percent
            assert va is not None and vb is not None
            reversed_order = (pa.value - pb.value) * (va - vb) < 0
            hidden = pa.value == pb.value and va != vb and _COMPARISON.search(sentence)
            if reversed_order or hidden:
                out.append(
                    DraftFinding(
                        "rounding-reverses",
                        index,
                        f"{a} ({pa.text}%) \u2026 {b} ({pb.text}%)",
                        f"{a} is {va:.2f}% and {b} is {vb:.2f}%: printed this way the order "
                        f"{'is reversed' if reversed_order else 'is hidden'}; print both with "
                        f"{max(pa.decimals, pb.decimals, 2)} decimals",
                    )
                )
    return out


def _sentences(paragraph: str) -> list[tuple[int, str]]:
    out: list[tuple[int, str]] = []
    start = 0
    for m in _SENTENCE.finditer(paragraph):
        out.append((start, paragraph[start : m.start()]))
        start = m.end()
    out.append((start, paragraph[start:]))
    return out


def _directions(text: str) -> dict[str, re.Match[str]]:
    return {k: m for k, pattern in _DIRECTION_RE.items() if (m := pattern.search(text))}


def _check_direction(index: int, paragraph: str, match: str | None) -> list[DraftFinding]:
    if match is None:
        return []
    said = _directions(match)
    if not said:
        return []
    out: list[DraftFinding] = []
    for direction, m in _directions(paragraph).items():
        if direction not in said:
            first = next(iter(said.values()))
            out.append(
                DraftFinding(
                    "trend-reversed",
                    index,
                    _excerpt(paragraph, m.start(), m.end()),
                    f"the report says \u201c{first.group(0)}\u201d here",
                )
            )
    return out


def _check_cautions(original: Sequence[str], edited: Sequence[str]) -> list[DraftFinding]:
    try:
        start = next(i for i, p in enumerate(original) if p.strip().lower() == "cautions")
    except StopIteration:
        return []
    cautions: list[str] = []
    for p in original[start + 1 :]:
        if p.strip().lower() in ("contact",):
            break
        cautions.append(p)
    out: list[DraftFinding] = []
    for caution in cautions:
        _, score = _best_match(caution, edited)
        if score < 0.6:
            out.append(
                DraftFinding(
                    "caution-removed",
                    len(edited),
                    caution[:90] + ("\u2026" if len(caution) > 90 else ""),
                    "this caution of the report is missing from the edit; keep it (it may be re-worded)",
                )
            )
    return out


def as_json(findings: Sequence[DraftFinding]) -> list[dict[str, Any]]:
    return [dataclasses.asdict(f) for f in findings]
