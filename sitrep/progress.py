"""Progress of a build as it runs: one line per stage with its time, a bar for the long stages.

:func:`sitrep.pipeline.build` reports to a :class:`Progress` (by default one
that says nothing): :meth:`~Progress.start` and :meth:`~Progress.finish` around
each stage of :data:`sitrep.pipeline.STAGES`, and :meth:`~Progress.step` inside
the stages that do a known number of pieces of work (the permutation tests,
the maps and charts). :class:`TextProgress` writes them for a person:

* a terminal: a bar with the pieces done and the seconds so far, drawn once a
  stage with steps has run for more than ``bar_after`` seconds (1 s) and
  redrawn in place; then the stage's line;
* anything else (a log file, a pipe): only the stage lines, no control characters.

Progress is written to its own stream (the CLI uses stderr) and never into an
output or archived file: a bundle is byte-identical with or without it.
"""

from __future__ import annotations

import threading
import time
from typing import TextIO

__all__ = ["STAGE_LABELS", "Progress", "TextProgress"]

STAGE_LABELS = {
    "read": "reading the table and the boundaries",
    "validate": "checking the data",
    "imports": "loading the statistics and drawing modules",
    "weights": "finding each district's neighbours",
    "analysis": "statistics and permutation tests",
    "thresholds": "seasonal thresholds",
    "maps": "maps and charts",
    "html": "HTML report",
    "pdf": "PDF",
    "drafts": "drafts and e-mail text",
    "results": "results tables",
    "archive": "writing the files and the archive bundle",
}
"""What each stage of a build does, in words for the progress lines."""


class Progress:
    """Receives a build's progress; this base class ignores it (``--quiet``)."""

    def start(self, stage: str, detail: str = "") -> None:
        """A stage begins; ``detail`` adds to its label (e.g. the number of permutations)."""

    def step(self, stage: str, done: int, total: int) -> None:
        """``done`` of ``total`` pieces of the running stage are finished."""

    def finish(self, stage: str, seconds: float) -> None:
        """The stage ended after ``seconds`` (its whole time, summed when it ran in parts)."""

    def close(self) -> None:
        """The build ended (also on an error): stop drawing."""


class TextProgress(Progress):
    """Progress as text on ``stream``: stage lines, and a bar on a terminal.

    Parameters
    ----------
    stream : text stream
        Where to write (the CLI passes ``sys.stderr``).
    terminal : bool, optional
        Draw the bar in place; default ``stream.isatty()``.
    bar_after : float
        Seconds a stage with steps runs before its bar appears.
    width : int
        Characters of the bar itself.
    """

    def __init__(
        self,
        stream: TextIO,
        *,
        terminal: bool | None = None,
        bar_after: float = 1.0,
        width: int = 24,
        tick: float = 0.25,
    ) -> None:
        self._stream = stream
        self._terminal = _isatty(stream) if terminal is None else terminal
        self._bar_after = bar_after
        self._width = width
        self._tick = tick
        self._lock = threading.Lock()
        self._stage: str | None = None
        self._label = ""
        self._started = 0.0
        self._done = 0
        self._total = 0
        self._drawn = 0  # characters of the bar line on screen
        self._stop = threading.Event()
        self._ticker: threading.Thread | None = None

    # ------------------------------------------------------------------ events

    def start(self, stage: str, detail: str = "") -> None:
        with self._lock:
            self._stage = stage
            self._label = STAGE_LABELS.get(stage, stage) + (f" ({detail})" if detail else "")
            self._started = time.perf_counter()
            self._done = self._total = 0

    def step(self, stage: str, done: int, total: int) -> None:
        with self._lock:
            if stage != self._stage:
                return
            self._done, self._total = done, total
            if self._terminal:
                self._ensure_ticker()
                self._draw_bar()

    def finish(self, stage: str, seconds: float) -> None:
        with self._lock:
            self._clear_bar()
            label = self._label if stage == self._stage else STAGE_LABELS.get(stage, stage)
            self._stream.write(f"  {label:<56} {_seconds(seconds)}\n")
            self._stream.flush()
            self._stage = None

    def close(self) -> None:
        self._stop.set()
        if self._ticker is not None:
            self._ticker.join()
            self._ticker = None
        with self._lock:
            self._clear_bar()
            self._stage = None

    # ------------------------------------------------------------------ drawing

    def _ensure_ticker(self) -> None:
        """Redraw the bar's seconds while the stage runs (terminal only)."""
        if self._ticker is None:
            self._ticker = threading.Thread(
                target=self._run_ticker, name="sitrep-progress", daemon=True
            )
            self._ticker.start()

    def _run_ticker(self) -> None:
        while not self._stop.wait(self._tick):
            with self._lock:
                if self._stage is not None and self._total:
                    self._draw_bar()

    def _draw_bar(self) -> None:
        elapsed = time.perf_counter() - self._started
        if elapsed < self._bar_after or not self._total:
            return
        filled = round(self._width * self._done / self._total)
        bar = "#" * filled + "-" * (self._width - filled)
        text = f"  {self._label} [{bar}] {self._done}/{self._total} {_seconds(elapsed)}"
        pad = " " * max(self._drawn - len(text), 0)
        self._stream.write("\r" + text + pad)
        self._stream.flush()
        self._drawn = len(text)

    def _clear_bar(self) -> None:
        if self._drawn:
            self._stream.write("\r" + " " * self._drawn + "\r")
            self._drawn = 0


def _seconds(value: float) -> str:
    return f"{value:6.1f} s"


def _isatty(stream: TextIO) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):  # a closed or unusual stream
        return False
