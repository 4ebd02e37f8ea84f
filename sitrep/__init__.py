"""sitrep: the weekly influenza-like-illness situation report, from raw table to e-mailed PDF.

The public API is small on purpose; everything else is internal and may change.
"""

from __future__ import annotations

from contextlib import suppress
from importlib.metadata import PackageNotFoundError, version

from sitrep.config import Config, load_config
from sitrep.errors import (
    ConfigError,
    DeliveryError,
    InputError,
    SitrepError,
    ValidationFailed,
)

__version__ = "0+unknown"
with suppress(PackageNotFoundError):
    __version__ = version("sitrep")

__all__ = [
    "Config",
    "ConfigError",
    "DeliveryError",
    "InputError",
    "SitrepError",
    "ValidationFailed",
    "__version__",
    "load_config",
]
