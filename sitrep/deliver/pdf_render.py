"""The WeasyPrint side of a PDF: the confined URL fetcher and the render itself.

This is what runs inside the render child (see :mod:`sitrep.deliver.pdf`, which
starts the child and bounds it in time): :func:`render_request` reads one
pickled request, sets ``SOURCE_DATE_EPOCH`` and calls :func:`render`.
WeasyPrint is imported inside functions only.
"""

from __future__ import annotations

import datetime as dt
import mimetypes
import os
import pickle
import urllib.parse
import urllib.request
import warnings
from collections.abc import Sequence
from pathlib import Path
from typing import Any, Literal

from sitrep.errors import DeliveryError

__all__ = [
    "OnRefused",
    "RefusedResource",
    "make_url_fetcher",
    "render",
    "render_request",
]

OnRefused = Literal["raise", "skip"]


class RefusedResource(ValueError):
    """Raised by the sitrep fetcher (in ``skip`` mode) for a URL it will not fetch."""


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

    class SitrepURLFetcher(URLFetcher):
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


def render(
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
            return document.write_pdf(
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


def render_request(request: bytes) -> tuple[str, Any]:
    """Render one pickled request in this (child) process: ("ok", pdf) or ("error", text)."""
    try:
        args = pickle.loads(request)
        epoch = args[5]
        if epoch is None:
            os.environ.pop("SOURCE_DATE_EPOCH", None)
        else:
            os.environ["SOURCE_DATE_EPOCH"] = str(epoch)
        return ("ok", render(*args))
    except DeliveryError as exc:
        return ("error", str(exc))
    except BaseException as exc:  # noqa: BLE001 - everything must reach the parent as text
        return ("error", f"PDF child process failed: {type(exc).__name__}: {exc}")
