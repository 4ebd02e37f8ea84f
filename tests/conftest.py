"""Shared fixtures: the demo week built once per test session."""

from __future__ import annotations

import dataclasses
import datetime as dt
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_inputs"
TODAY = dt.date(2026, 11, 30)
"""The Monday the demo week is reported (the future-week rule compares with it)."""


def pytest_addoption(parser: pytest.Parser) -> None:
    parser.addoption(
        "--regen-golden",
        action="store_true",
        default=False,
        help="rewrite tests/golden/* from the current outputs (review the diff before committing)",
    )


@pytest.fixture(scope="session")
def regen_golden(request: pytest.FixtureRequest) -> bool:
    return bool(request.config.getoption("--regen-golden"))


def demo_config(out: Path):  # type: ignore[no-untyped-def]
    """The demo configuration writing into ``out`` (output folder and archive)."""
    from sitrep.config import load_config

    config = load_config(DEMO / "sitrep.toml")
    return dataclasses.replace(
        config,
        output=dataclasses.replace(config.output, folder=out / "out", archive=out / "archive"),
    )


@pytest.fixture(scope="session")
def demo_build(tmp_path_factory: pytest.TempPathFactory):  # type: ignore[no-untyped-def]
    """Build the demo week once; returns (config, RunResult, folder)."""
    from sitrep import pipeline

    folder = tmp_path_factory.mktemp("demo")
    config = demo_config(folder)
    result = pipeline.build(config, today=TODAY)
    return config, result, folder
