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

The render runs in a child process started with the ``spawn`` method, so a
pathological document can be stopped after ``timeout_s`` seconds (a thread
cannot be stopped). Starting the child costs about a second; that is the price
of a hard bound. ``timeout_s=None`` renders in the calling process instead (no
bound; for callers that already run in a sandbox, and for tests).

WeasyPrint is imported inside functions only (it is heavy and optional for the
HTML-only path).
"""

from __future__ import annotations

import datetime as dt
import mimetypes
import multiprocessing
import os
import urllib.parse
import urllib.request
import warnings
from collections.abc import Sequence
from pathlib import Path
from typing import Any, Literal

from sitrep.deliver.archive import read_source_date_epoch
from sitrep.errors import ConfigError, DeliveryError

__all__ = ["RefusedResource", "html_to_pdf", "make_url_fetcher", "pdf_variants"]

OnRefused = Literal["raise", "skip"]


class RefusedResource(ValueError):
    """Raised by the sitrep fetcher (in ``skip`` mode) for a URL it will not fetch."""


def pdf_variants() -> tuple[str, ...]:
    """The ``pdf_variant`` names the installed WeasyPrint accepts (e.g. ``pdf/a-3b``)."""
    from weasyprint.pdf import VARIANTS

    return tuple(sorted(VARIANTS))


def make_url_fetcher(asset_dir: Path | None, *, on_refused: OnRefused = "raise") -> Any:
    """Build the URL fetcher sitrep gives WeasyPrint.

    The fetcher is a subclass of ``weasyprint.urls.URLFetcher`` (WeasyPrint
    70 calls ``fetch(url, headers)`` and reads its ``_fail_on_errors``). It
    answers:

    * ``data:`` URIs, decoded by urllib's ``DataHandler`` (no I/O);
    * ``file:`` URLs with an empty or ``localhost`` host whose path, after
      ``Path.resolve()`` (symbolic links followed), is a regular file inside
      ``asset_dir.resolve()``; the file is read directly and its MIME type
      guessed from the extension;
    * nothing else: other schemes (``http``, ``https``, ``ftp``, ...), other
      files, folders, devices, and every ``file:`` URL when ``asset_dir`` is
      None are refused before any access is made.

    Parameters
    ----------
    asset_dir : Path or None
        The only folder whose files may be read.
    on_refused : {"raise", "skip"}
        ``"raise"`` (fail closed): a refused URL raises
        ``weasyprint.urls.FatalURLFetchingError``, which WeasyPrint does not
        catch, so the render stops. ``"skip"``: raise :class:`RefusedResource`
        (an ordinary exception), which WeasyPrint logs and then leaves the
        resource out.

    Returns
    -------
    weasyprint.urls.URLFetcher
        A fresh fetcher instance.
    """
    from weasyprint.urls import FatalURLFetchingError, URLFetcher, URLFetcherResponse

    if on_refused not in ("raise", "skip"):
        raise ValueError(f"on_refused must be 'raise' or 'skip', got {on_refused!r}")
    root = Path(asset_dir).resolve() if asset_dir is not None else None

    class SitrepURLFetcher(URLFetcher):  # type: ignore[misc]
        """data: URIs and files inside the asset folder; everything else refused."""

        def __init__(self) -> None:
            super().__init__(
                timeout=5,
                allowed_protocols={"data"},
                allow_redirects=False,
                fail_on_errors=False,
            )
            self.refused: list[str] = []

        def _refuse(self, url: str, why: str) -> None:
            self.refused.append(url)
            message = f"sitrep does not fetch {url[:200]!r}: {why}"
            if on_refused == "raise":
                raise FatalURLFetchingError(message)
            raise RefusedResource(message)

        def fetch(self, url: str, headers: Any = None) -> Any:
            scheme = urllib.parse.urlsplit(url).scheme.lower()
            if scheme == "data":
                return super().fetch(url, headers)
            if scheme != "file":
                return self._refuse(
                    url,
                    f"the {scheme or 'relative'!r} scheme is not allowed "
                    "(only data: URIs and the package's asset files)",
                )
            if root is None:
                return self._refuse(url, "no asset folder is configured for file: URLs")
            parts = urllib.parse.urlsplit(url)
            if parts.netloc not in ("", "localhost"):
                return self._refuse(url, f"file: URLs on host {parts.netloc!r} are not allowed")
            try:
                local = Path(urllib.request.url2pathname(parts.path)).resolve(strict=True)
            except (OSError, ValueError, RuntimeError):
                return self._refuse(url, "the file does not exist")
            if not local.is_relative_to(root) or not local.is_file():
                return self._refuse(url, f"only files inside {root} may be read")
            data = local.read_bytes()
            mime = mimetypes.guess_type(local.name, strict=False)[0] or "application/octet-stream"
            return URLFetcherResponse(local.as_uri(), body=data, headers={"Content-Type": mime})

    return SitrepURLFetcher()


def _render(
    html: str,
    base_url: str | None,
    asset_dir: str | None,
    pdf_variant: str | None,
    attachments: Sequence[tuple[str, bytes]],
    epoch: int | None,
    on_refused: OnRefused,
) -> bytes:
    """Render in this process (called directly or inside the child)."""
    import weasyprint
    from weasyprint.urls import FatalURLFetchingError

    if epoch is None:
        stamp = dt.datetime.now(dt.UTC).replace(microsecond=0, tzinfo=None)
    else:
        stamp = dt.datetime.fromtimestamp(epoch, dt.UTC).replace(tzinfo=None)
    fetcher = make_url_fetcher(Path(asset_dir) if asset_dir else None, on_refused=on_refused)
    try:
        extra = [
            weasyprint.Attachment(
                string=bytes(data),
                name=name,
                url_fetcher=fetcher,
                created=stamp,
                modified=stamp,
                relationship="Data",
            )
            for name, data in attachments
        ]
        document = weasyprint.HTML(string=html, base_url=base_url, url_fetcher=fetcher)
        with warnings.catch_warnings():
            # WeasyPrint 70 opens its sRGB profile for PDF/A output and never closes it
            # (weasyprint/pdf/__init__.py, generate_pdf); the file is a read-only package
            # resource, so only that one ResourceWarning is silenced.
            warnings.filterwarnings(
                "ignore",
                message=r"unclosed file .*sRGB2014\.icc",
                category=ResourceWarning,
            )
            return document.write_pdf(  # type: ignore[no-any-return]
                pdf_variant=pdf_variant,
                attachments=extra or None,
                pdf_identifier=None if pdf_variant is None else True,
            )
    except FatalURLFetchingError as exc:
        raise DeliveryError(
            f"the report refers to a resource outside the allowed assets ({exc}); embed figures "
            "as data: URIs and keep fonts and CSS in the asset folder"
        ) from None
    except Exception as exc:
        raise DeliveryError(
            f"WeasyPrint could not make the PDF: {type(exc).__name__}: {exc}"
        ) from exc


def _child(conn: Any, args: tuple[Any, ...]) -> None:
    """Entry point of the spawned render process: send ("ok", bytes) or ("error", text)."""
    epoch = args[5]
    if epoch is None:
        os.environ.pop("SOURCE_DATE_EPOCH", None)
    else:
        os.environ["SOURCE_DATE_EPOCH"] = str(epoch)
    try:
        result: tuple[str, Any] = ("ok", _render(*args))
    except DeliveryError as exc:
        result = ("error", str(exc))
    except BaseException as exc:  # noqa: BLE001 - everything must reach the parent as text
        result = ("error", f"PDF child process failed: {type(exc).__name__}: {exc}")
    try:
        conn.send(result)
    finally:
        conn.close()


def html_to_pdf(
    html: str,
    *,
    base_url: str | None = None,
    asset_dir: Path | None = None,
    pdf_variant: str | None = None,
    attachments: Sequence[tuple[str, bytes]] = (),
    timeout_s: float | None = 120,
    on_refused: OnRefused = "raise",
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
        Wall-clock limit; the render runs in a child process (``spawn``) that
        is killed when the limit passes. None renders in this process with no
        limit.
    on_refused : {"raise", "skip"}
        What a refused URL does: stop the render with :class:`DeliveryError`
        (default, fail closed) or leave the resource out.

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
    args = (
        html,
        base_url,
        str(asset_dir) if asset_dir is not None else None,
        pdf_variant,
        tuple((n, bytes(d)) for n, d in attachments),
        epoch,
        on_refused,
    )
    if timeout_s is None:
        return _render(*args)
    if not timeout_s > 0:
        raise DeliveryError(f"timeout_s must be positive or None, got {timeout_s!r}")
    return _render_in_child(args, float(timeout_s))


def _render_in_child(args: tuple[Any, ...], timeout_s: float) -> bytes:
    ctx = multiprocessing.get_context("spawn")
    receiver, sender = ctx.Pipe(duplex=False)
    proc = ctx.Process(target=_child, args=(sender, args), name="sitrep-pdf", daemon=True)
    try:
        proc.start()
        sender.close()
        if not receiver.poll(timeout_s):
            raise DeliveryError(
                f"the PDF was not finished within {timeout_s:g} s and the render was stopped; "
                "look for a very long table or name in the report, or raise the time limit"
            )
        try:
            status, payload = receiver.recv()
        except EOFError:
            proc.join(5)
            raise DeliveryError(
                f"the PDF child process ended without a result (exit code {proc.exitcode}); "
                "it may have run out of memory"
            ) from None
    finally:
        receiver.close()
        if proc.is_alive():
            proc.join(0.5 if proc.exitcode is None else 0)
        if proc.is_alive():
            proc.kill()
            proc.join(5)
        if proc.exitcode is not None:
            proc.close()
    if status != "ok":
        raise DeliveryError(payload)
    return payload  # type: ignore[no-any-return]
