"""The public API is pinned: a change to it shows up as a diff here."""

from __future__ import annotations

import sitrep

EXPECTED = [
    "Config",
    "ConfigError",
    "DeliveryError",
    "InputError",
    "SitrepError",
    "ValidationFailed",
    "__version__",
    "load_config",
]


def test_exported_names() -> None:
    assert sorted(sitrep.__all__) == EXPECTED


def test_error_tree() -> None:
    from sitrep import errors

    for name in (
        "ConfigError",
        "InputError",
        "ValidationFailed",
        "AnalysisError",
        "RenderError",
        "DeliveryError",
    ):
        assert issubclass(getattr(errors, name), errors.SitrepError)
    assert issubclass(errors.ArchiveExists, errors.DeliveryError)
