"""The one exception tree of sitrep.

Every error sitrep raises on purpose derives from :class:`SitrepError`; the CLI
maps each branch to an exit code (see ``sitrep.cli``)::

    SitrepError
    ├── ConfigError          bad or unknown configuration key, bad CLI usage  -> exit 2
    ├── InputError           a file cannot be read or parsed at all           -> exit 1
    ├── ValidationFailed     validation found error-level findings            -> exit 1
    ├── AnalysisError        the statistics cannot be computed as asked       -> exit 1
    ├── RenderError          a template or figure could not be produced       -> exit 1
    ├── DeliveryError        archive, PDF engine or e-mail failed             -> exit 3
    │   └── ArchiveExists    the week is already archived; nothing was built  -> exit 5
    └── ReviewRequired       archived, but held until `sitrep approve`        -> exit 4

Third-party errors are converted at the boundary with ``raise ... from exc`` so
that a traceback never reaches the user.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from sitrep.model import ValidationReport

__all__ = [
    "AnalysisError",
    "ArchiveExists",
    "ConfigError",
    "DeliveryError",
    "InputError",
    "RenderError",
    "ReviewRequired",
    "SitrepError",
    "ValidationFailed",
]


class SitrepError(Exception):
    """Root of every error sitrep raises on purpose."""


class ConfigError(SitrepError):
    """The configuration file or the command line is wrong."""


class InputError(SitrepError):
    """An input file is missing, unreadable or cannot be parsed."""


class ValidationFailed(SitrepError):
    """Validation found at least one error-level finding; the run is blocked."""

    def __init__(self, message: str, report: ValidationReport | None = None) -> None:
        super().__init__(message)
        self.report = report


class AnalysisError(SitrepError):
    """The weekly statistics cannot be computed with the given data and settings."""


class RenderError(SitrepError):
    """A template, sentence or figure could not be produced."""


class DeliveryError(SitrepError):
    """Writing the archive, making the PDF or sending e-mail failed."""


class ArchiveExists(DeliveryError):
    """The report week is already archived; a reissue must be asked for explicitly.

    Not a failure of delivery: nothing was to be delivered. The CLI says
    "already archived" and exits 5; ``week`` and ``bundle`` (the latest
    archived version) are set when known.
    """

    def __init__(self, message: str, *, week: str | None = None, bundle: str | None = None) -> None:
        super().__init__(message)
        self.week = week
        self.bundle = bundle


class ReviewRequired(SitrepError):
    """The bundle is archived but held: the review policy asks for ``sitrep approve`` first.

    Not a failure: nothing was sent, on purpose. The message says who must
    review what and the command that releases the bundle.
    """
