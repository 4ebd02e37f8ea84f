"""Configuration loading: unknown keys, types, choices and control characters are refused."""

from __future__ import annotations

from pathlib import Path

import pytest

from sitrep.config import config_from_dict, load_config
from sitrep.errors import ConfigError

DEMO = Path(__file__).resolve().parent.parent / "demo_inputs" / "sitrep.toml"


def test_demo_config_loads_and_resolves_paths() -> None:
    config = load_config(DEMO)
    assert config.report.jurisdiction == "Province of Quillmarsh"
    assert config.input.table == DEMO.parent / "extract_2026-W47.csv"
    assert config.analysis.permutations == 9999
    assert config.source == DEMO.resolve()


@pytest.mark.parametrize(
    ("raw", "match"),
    [
        ({"analysis": {"permutation": 999}}, "unknown key 'permutation' in \\[analysis\\]"),
        ({"colour": 1}, "unknown key 'colour' in the top level"),
        (
            {"input": {"columns": {"distrcit": "x"}}},
            "unknown key 'distrcit' in \\[input.columns\\]",
        ),
        ({"analysis": {"permutations": "999"}}, "analysis.permutations must be a whole number"),
        ({"analysis": {"weights": "bishop"}}, "analysis.weights = 'bishop' is not allowed"),
        ({"analysis": {"alpha": 1.5}}, "analysis.alpha must be between 0 and 1"),
        ({"analysis": {"permutations": 10}}, "at least 99"),
        ({"email": {"sender": "a@b\r\nBcc: x@y"}}, "control character"),
        ({"email": {"recipients": ["ok@x", "bad@x\nBcc: y"]}}, "control character"),
        ({"email": {"port": 0}}, "email.port"),
        ({"weeks": {"report_week": "2026-W99"}}, "weeks.report_week"),
        ({"input": {"delimiter": ";;"}}, "one character"),
        ({"output": {"pdf": "yes"}}, "true or false"),
        ({"input": {"id_zero_pad": 0}}, "input.id_zero_pad must be 1..20"),
        (
            {"input": {"date_format": "%m/%Y"}},
            "input.date_format = '%m/%Y' does not give a full date",
        ),
        # two week sources: both keys are named
        (
            {"input": {"columns": {"week": "epi_week", "week_end": "week_ending"}}},
            "input.columns.week and input.columns.week_end both give the week",
        ),
        (
            {"input": {"columns": {"year": "yr", "week_number": "wk", "week_start": "monday"}}},
            "input.columns.year \\+ input.columns.week_number and input.columns.week_start",
        ),
    ],
)
def test_bad_values_are_named(raw: dict, match: str) -> None:
    with pytest.raises(ConfigError, match=match):
        config_from_dict(raw)


def test_missing_and_malformed_files(tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match="not found"):
        load_config(tmp_path / "nope.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text("[report\n", encoding="utf-8")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config(bad)


def test_manifest_parameters_are_json_ready() -> None:
    import json

    params = load_config(DEMO).as_dict()
    assert json.loads(json.dumps(params))["analysis"]["seed"] == 12345


def test_one_week_source_with_the_default_label_is_accepted() -> None:
    """Setting only week_end keeps working: the default week label is not 'set' by the user."""
    config = config_from_dict({"input": {"columns": {"week_end": "week_ending"}}})
    assert config.input.columns.week_end == "week_ending"
    config = config_from_dict({"input": {"columns": {"week": "", "week_end": "week_ending"}}})
    assert config.input.columns.week == ""


def _keys_of(cls: type, prefix: str) -> set[str]:
    import dataclasses

    keys = set()
    for f in dataclasses.fields(cls):
        if f.name == "source":
            continue
        if dataclasses.is_dataclass(f.default_factory if callable(f.default_factory) else None):
            keys |= _keys_of(f.default_factory, f"{prefix}{f.name}.")  # type: ignore[arg-type]
        else:
            keys.add(f"{prefix}{f.name}")
    return keys


def test_demo_config_shows_every_key() -> None:
    """Each setting appears in demo_inputs/sitrep.toml, set or commented out."""
    import re

    from sitrep.config import Config

    section = ""
    shown = set()
    for line in DEMO.read_text(encoding="utf-8").splitlines():
        head = re.match(r"^\s*#?\s*\[([a-z_.]+)\]", line)
        if head:
            section = head.group(1)
            continue
        key = re.match(r"^\s*#?\s*([a-z_]+)\s*=", line)
        if key:
            shown.add(f"{section}.{key.group(1)}")
    missing = sorted(_keys_of(Config, "") - shown)
    assert missing == [], f"keys missing from {DEMO.name}: {missing}"
