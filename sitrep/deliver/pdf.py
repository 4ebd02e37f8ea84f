"""HTML to PDF with WeasyPrint, confined to local assets and bounded in time.

WeasyPrint fetches every URL a document names (stylesheets, images, fonts,
``<link rel=attachment>``) with whatever protocol it names, including
``file://`` and ``http://``. sitrep's HTML contains district names from input
files, so the fetcher used here allows exactly two kinds of resource:

* ``data:`` URIs (figures are embedded this way), and
* regular files inside ``asset_dir`` (the package's fonts and CSS), checked
  after resolving symbolic links.

Everything else is refused without any network or file access. Redirects are
never followed (no HTTP is done at all).

The render runs in a child process, so a pathological document can be
stopped after ``timeout_s`` seconds (a thread cannot be stopped). Each
process that makes PDFs has one *render server*: a Python interpreter
started with the parent's ``sys.path`` (``python -P -c``: the current folder
is not searched first) that imports WeasyPrint once and then, for each
document it reads on its standard input, forks a fresh child that renders
that one document, answers through a pipe and exits; the server passes the
answer back on its standard output. So every document is rendered in a
clean copy of the same freshly started process (nothing carries over from
one report to the next), while the slow start (about 1.5-2 s on the
reference machine, most of it importing WeasyPrint) is paid once per
process instead of once per document, which matters in batches.
:func:`sitrep.pipeline.build` makes its :class:`PdfWorker` before it reads
the inputs, so a first start overlaps the analysis; the time bound counts
from the moment the document is handed over, and when it passes the server
and its child are killed (the next document starts a new server). Unlike
``multiprocessing``'s ``spawn`` and ``forkserver`` methods this never
re-imports the caller's main module (a script without an ``if __name__ ==
"__main__"`` guard would otherwise start itself again) and it works from
daemonic processes (process pool and cluster workers). The server keeps the
environment it was started with; ``SOURCE_DATE_EPOCH`` travels with each
document instead. The server needs ``os.fork`` and pipes that
``select`` can wait on (Linux, macOS). ``timeout_s=None`` renders in the calling process instead
(no bound; for callers that already run in a sandbox, and for tests).

WeasyPrint is imported inside functions only (it is heavy and optional for the
HTML-only path).
"""

from __future__ import annotations

import atexit
import contextlib
import json
import os
import pickle
import select
import signal
import struct
import subprocess
import sys
import threading
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from sitrep.deliver.pdf_render import (
    OnRefused,
    RefusedResource,
    make_url_fetcher,
    render,
    render_request,
)
from sitrep.deliver.reproducible import read_source_date_epoch
from sitrep.errors import ConfigError, DeliveryError

__all__ = [
    "PdfWorker",
    "RefusedResource",
    "html_to_pdf",
    "make_url_fetcher",
    "pdf_variants",
    "stop_render_server",
]


def pdf_variants() -> tuple[str, ...]:
    """The ``pdf_variant`` names the installed WeasyPrint accepts (e.g. ``pdf/a-3b``)."""
    from weasyprint.pdf import VARIANTS

    return tuple(sorted(VARIANTS))


def html_to_pdf(
    html: str,
    *,
    base_url: str | None = None,
    asset_dir: Path | None = None,
    pdf_variant: str | None = None,
    attachments: Sequence[tuple[str, bytes]] = (),
    timeout_s: float | None = 120,
    on_refused: OnRefused = "raise",
    worker: PdfWorker | None = None,
) -> bytes:
    """Render an HTML document to PDF bytes.

    WeasyPrint 70 renders ``html`` with the confined fetcher of
    :func:`make_url_fetcher` (only ``data:`` URIs and files inside
    ``asset_dir``). Embedded timestamps follow ``SOURCE_DATE_EPOCH``: when it
    is set (see :func:`sitrep.deliver.archive.reproducible_env`) the same
    input gives byte-identical PDFs; fontTools stamps the subset fonts with
    it and attachments get it as their creation and modification dates.

    Parameters
    ----------
    html : str
        The complete HTML document.
    base_url : str or None
        Base for relative URLs, e.g. ``asset_dir.as_uri() + "/"``.
    asset_dir : Path or None
        Folder whose files (fonts, CSS) may be read; None allows none.
    pdf_variant : str or None
        A WeasyPrint variant such as ``"pdf/a-3b"`` (:func:`pdf_variants`);
        a PDF identifier is then written. WeasyPrint does not check every
        PDF/A rule, so do not call the file PDF/A unless a validator (e.g.
        veraPDF) has checked it.
    attachments : sequence of (str, bytes)
        Files to embed (for example ``("results.csv", data)`` for PDF/A-3b),
        with AFRelationship ``Data``.
    timeout_s : float or None
        Wall-clock limit; the render runs in a child process
        (:class:`PdfWorker`) that is killed when the limit passes. None
        renders in this process with no limit.
    on_refused : {"raise", "skip"}
        What a refused URL does: stop the render with :class:`DeliveryError`
        (default, fail closed) or leave the resource out.
    worker : PdfWorker, optional
        A worker started earlier (its start-up then overlaps other work);
        used up by this call. Default: start one now. Ignored when
        ``timeout_s`` is None.

    Returns
    -------
    bytes
        The PDF file.

    Raises
    ------
    ConfigError
        If ``pdf_variant`` is not one WeasyPrint knows.
    DeliveryError
        If WeasyPrint fails, a resource is refused (``on_refused="raise"``),
        the time limit passes, the child process dies, or
        ``SOURCE_DATE_EPOCH`` is set to something that is not a whole number.
    """
    args = _request(html, base_url, asset_dir, pdf_variant, attachments, on_refused)
    if timeout_s is None:
        return render(*args)
    if isinstance(timeout_s, bool) or not isinstance(timeout_s, (int, float)) or not timeout_s > 0:
        raise DeliveryError(f"timeout_s must be positive or None, got {timeout_s!r}")
    used = worker if worker is not None else PdfWorker()
    try:
        used.submit(args, timeout_s)
        return used.result()
    finally:
        if worker is None:
            used.close()


def _request(
    html: str,
    base_url: str | None,
    asset_dir: Path | None,
    pdf_variant: str | None,
    attachments: Sequence[tuple[str, bytes]],
    on_refused: OnRefused,
) -> tuple[Any, ...]:
    """Check the arguments of :func:`html_to_pdf` and return those of :func:`~sitrep.deliver.pdf_render.render`."""
    if not isinstance(html, str):
        raise DeliveryError(f"html must be a str, got {type(html).__name__}")
    if pdf_variant is not None and pdf_variant not in pdf_variants():
        raise ConfigError(
            f"output.pdf_variant = {pdf_variant!r} is not known to WeasyPrint; choose one of "
            f"{', '.join(pdf_variants())} or leave it unset"
        )
    for item in attachments:
        if (
            not isinstance(item, tuple)
            or len(item) != 2
            or not isinstance(item[0], str)
            or not item[0]
            or not isinstance(item[1], (bytes, bytearray))
        ):
            raise DeliveryError(f"each attachment must be (name, bytes), got {item!r:.80}")
    epoch = read_source_date_epoch()
    return (
        html,
        base_url,
        str(asset_dir) if asset_dir is not None else None,
        pdf_variant,
        tuple((n, bytes(d)) for n, d in attachments),
        epoch,
        on_refused,
    )


_SERVER_CODE = (
    "import json, os, sys; sys.path[:] = json.loads(sys.argv[1]); "
    "from sitrep.deliver.pdf import _fork_server; code = _fork_server(); "
    "sys.stderr.flush(); os._exit(code)"
)
"""The render server process: :func:`_fork_server`, then exit without the slow teardown."""

_FRAME = struct.Struct(">Q")
"""Messages on the pipes are one 8-byte big-endian length, then that many bytes."""


class _RenderServer:
    """The render server of this process (see the module notes): pipes and process handle."""

    def __init__(self) -> None:
        try:
            self.proc = subprocess.Popen(
                [sys.executable, "-P", "-c", _SERVER_CODE, json.dumps(sys.path)],
                stdin=subprocess.PIPE,
                stdout=subprocess.PIPE,
                close_fds=True,
                start_new_session=True,  # its own process group: one kill stops it and its child
            )
        except OSError as exc:
            raise DeliveryError(f"could not start the PDF render process: {exc}") from exc
        self.owner = os.getpid()

    def usable(self) -> bool:
        return self.owner == os.getpid() and self.proc.poll() is None

    def send(self, payload: bytes) -> None:
        assert self.proc.stdin is not None
        self.proc.stdin.write(_FRAME.pack(len(payload)) + payload)
        self.proc.stdin.flush()

    def receive(self, deadline: float) -> bytes | None:
        """One message, or None when ``deadline`` (``time.monotonic``) passes first.

        Raises
        ------
        EOFError
            If the server closed its end (it died).
        """
        assert self.proc.stdout is not None
        fd = self.proc.stdout.fileno()
        head = _read_exact(fd, _FRAME.size, deadline)
        if head is None:
            return None
        return _read_exact(fd, _FRAME.unpack(head)[0], deadline)

    def kill(self) -> None:
        """Stop the server and any render it started (its whole process group)."""
        with contextlib.suppress(ProcessLookupError, PermissionError):
            os.killpg(self.proc.pid, signal.SIGKILL)
        self._reap()

    def close(self) -> None:
        """Ask the server to exit (end of its input); kill it if it does not within 2 s."""
        with contextlib.suppress(OSError, ValueError):
            if self.proc.stdin is not None:
                self.proc.stdin.close()
        try:
            self.proc.wait(timeout=2)
        except subprocess.TimeoutExpired:
            self.kill()
        self._reap()

    def _reap(self) -> None:
        with contextlib.suppress(subprocess.TimeoutExpired, OSError, ValueError):
            self.proc.communicate(timeout=5)


def _read_exact(fd: int, n: int, deadline: float) -> bytes | None:
    """``n`` bytes from ``fd``, or None if ``deadline`` passes; EOFError at end of file."""
    chunks: list[bytes] = []
    missing = n
    while missing:
        remaining = deadline - time.monotonic()
        if remaining <= 0:
            return None
        ready, _, _ = select.select([fd], [], [], remaining)
        if not ready:
            return None
        chunk = os.read(fd, min(missing, 1 << 20))
        if not chunk:
            raise EOFError("the PDF render process closed its output")
        chunks.append(chunk)
        missing -= len(chunk)
    return b"".join(chunks)


_SERVER: _RenderServer | None = None
_SERVER_LOCK = threading.Lock()
_RENDER_LOCK = threading.Lock()
"""One document at a time per server (held from :meth:`PdfWorker.start` to its result)."""


def _server() -> _RenderServer:
    """The running render server of this process, started when there is none."""
    global _SERVER
    with _SERVER_LOCK:
        if _SERVER is None or not _SERVER.usable():
            _SERVER = _RenderServer()
        return _SERVER


def _drop_server(server: _RenderServer, *, kill: bool) -> None:
    """Stop ``server`` and forget it, so that the next document starts a new one."""
    global _SERVER
    with _SERVER_LOCK:
        if _SERVER is server:
            _SERVER = None
    if kill:
        server.kill()
    else:
        server.close()


@atexit.register
def stop_render_server() -> None:
    """Stop this process's render server, if one runs (also done at exit).

    A later document starts a new one. Useful to free its memory, or to
    measure its resources (``resource.RUSAGE_CHILDREN``) once it has ended.
    """
    server = _SERVER
    if server is not None and server.owner == os.getpid():
        _drop_server(server, kill=False)


class PdfWorker:
    """A handle on this process's PDF render server, for one document.

    Making a worker starts the render server when none is running (``python
    -P -c ...`` with this process's ``sys.path``; it imports WeasyPrint, the
    slow part, and then waits for documents), so a caller that makes the
    worker early overlaps that start with its own work. :meth:`start` hands
    one document over and returns at once; the server forks a fresh child
    process that renders it and exits, so nothing carries over from one
    report to the next. :meth:`result` waits for the PDF until ``timeout_s``
    seconds after :meth:`start` at most; when the limit passes, the server
    and its child are killed (the next document starts a new server).
    :meth:`close` (or leaving a ``with`` block) gives up a document that was
    started but not collected. The server stays for later documents and ends
    with this process (or when its input closes).

    Raises
    ------
    DeliveryError
        If the server cannot be started.
    """

    def __init__(self) -> None:
        self._server: _RenderServer | None = _server()
        self._deadline: float | None = None
        self._timeout = 0.0
        self._pending = False

    def __enter__(self) -> PdfWorker:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    def __del__(self) -> None:
        with contextlib.suppress(Exception):
            self.close()

    def close(self) -> None:
        """Give the worker up; a document started and not collected is stopped."""
        server, self._server = self._server, None
        if self._pending and server is not None:
            self._pending = False
            _drop_server(server, kill=True)  # its answer must never reach another document
            _RENDER_LOCK.release()

    def start(
        self,
        html: str,
        *,
        base_url: str | None = None,
        asset_dir: Path | None = None,
        pdf_variant: str | None = None,
        attachments: Sequence[tuple[str, bytes]] = (),
        timeout_s: float = 120,
        on_refused: OnRefused = "raise",
    ) -> None:
        """Hand one document over and return at once; :meth:`result` collects the PDF.

        The arguments are those of :func:`html_to_pdf` and are checked the
        same way before anything is sent; the time limit counts from now.

        Raises
        ------
        ConfigError, DeliveryError
            As :func:`html_to_pdf` for bad arguments; DeliveryError if the
            worker was used or closed already.
        """
        self.submit(
            _request(html, base_url, asset_dir, pdf_variant, attachments, on_refused),
            timeout_s,
        )

    def submit(self, args: tuple[Any, ...], timeout_s: float) -> None:
        """Send checked arguments of ``pdf_render.render`` (see :meth:`start`)."""
        if (
            isinstance(timeout_s, bool)
            or not isinstance(timeout_s, (int, float))
            or not timeout_s > 0
        ):
            raise DeliveryError(f"timeout_s must be positive or None, got {timeout_s!r}")
        if self._server is None or self._deadline is not None:
            raise DeliveryError("this PDF worker was used or closed already; make a new one")
        payload = pickle.dumps(args, protocol=pickle.HIGHEST_PROTOCOL)
        if not _RENDER_LOCK.acquire(timeout=timeout_s):
            raise DeliveryError(
                f"another PDF of this process was still rendering after {timeout_s:g} s; "
                "collect or close each PdfWorker that was started"
            )
        self._pending = True
        if not self._server.usable():  # it died or was killed since this worker was made
            self._server = _server()
        self._timeout = float(timeout_s)
        self._deadline = time.monotonic() + self._timeout
        try:
            self._server.send(payload)
        except (BrokenPipeError, OSError, ValueError):
            pass  # the server is gone; result() reports it

    def result(self) -> bytes:
        """Wait (until the time limit of :meth:`start` at most) and return the PDF bytes.

        Raises
        ------
        DeliveryError
            If nothing was started, the time limit passes (the render is
            killed), the render process dies without a result, or the render
            failed (the child's message).
        """
        server = self._server
        if server is None or self._deadline is None or not self._pending:
            raise DeliveryError("no document was handed to this PDF worker (or it was closed)")
        try:
            answer = server.receive(self._deadline)
        except (EOFError, OSError):
            answer = b""
        if answer is None:
            self.close()
            raise DeliveryError(
                f"the PDF was not finished within {self._timeout:g} s and the render was "
                "stopped; look for a very long table or name in the report, or raise the time limit"
            )
        self._pending = False
        _RENDER_LOCK.release()
        self._server = None
        if not answer:
            code = server.proc.poll()
            _drop_server(server, kill=True)
            raise DeliveryError(
                f"the PDF render process ended without a result (exit code {code}); "
                "it may have run out of memory"
            )
        try:
            status, data = pickle.loads(answer)
        except Exception as exc:  # noqa: BLE001 - a garbled answer means a broken server
            _drop_server(server, kill=True)
            raise DeliveryError("the PDF render process sent an unreadable result") from exc
        if status != "ok":
            raise DeliveryError(data)
        return data


def _fork_server() -> int:
    """Entry point of the render server: one forked child per document, answers in order."""
    out = os.fdopen(os.dup(1), "wb")
    os.dup2(2, 1)  # stray prints go to stderr; stdout carries only the answers
    try:
        import weasyprint  # noqa: F401 - the slow part, done once for every document
    except Exception:  # noqa: BLE001, S110 - each render reports it
        pass
    requests = sys.stdin.buffer
    while True:
        head = requests.read(_FRAME.size)
        if len(head) < _FRAME.size:
            return 0  # input closed: the parent is done (or gone)
        request = requests.read(_FRAME.unpack(head)[0])
        reader, writer = os.pipe()
        pid = os.fork()
        if pid == 0:  # the child: render one document, answer through the pipe, exit
            os.close(reader)
            code = 0
            try:
                answer = pickle.dumps(render_request(request), protocol=pickle.HIGHEST_PROTOCOL)
                with os.fdopen(writer, "wb") as pipe:
                    pipe.write(answer)
            except BaseException:  # noqa: BLE001 - the server reports a child without answer
                code = 1
            finally:
                sys.stderr.flush()
                os._exit(code)
        os.close(writer)
        with os.fdopen(reader, "rb") as pipe:
            answer = pipe.read()
        _, status = os.waitpid(pid, 0)
        if not answer:
            why = f"exit code {os.waitstatus_to_exitcode(status)}"
            answer = pickle.dumps(
                ("error", f"the PDF render process ended without a result ({why})")
            )
        out.write(_FRAME.pack(len(answer)) + answer)
        out.flush()
