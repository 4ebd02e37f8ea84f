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
        ({"input": {"columns": {"distrcit": "x"}}}, "unknown key 'distrcit' in \\[input.columns\\]"),
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
