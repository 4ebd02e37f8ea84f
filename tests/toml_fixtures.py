"""A minimal TOML writer and the demo configuration rewritten for a test folder."""

from __future__ import annotations

import json
import tomllib
from pathlib import Path
from typing import Any

from mail_fixtures import free_port

DEMO = Path(__file__).resolve().parent.parent / "demo_inputs"


def toml_value(value: Any, *, ensure_ascii: bool = True) -> str:
    """One TOML value: booleans, numbers (numpy floats too), strings, lists and tuples."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(int(value))
    if isinstance(value, float):
        return repr(float(value))  # also for numpy floats, whose repr is not TOML
    if isinstance(value, str):
        # JSON string escapes are valid TOML basic strings
        return json.dumps(value, ensure_ascii=ensure_ascii)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v, ensure_ascii=ensure_ascii) for v in value) + "]"
    raise TypeError(f"cannot write {value!r} as TOML")


def dump_toml(doc: dict[str, Any], prefix: str = "") -> str:
    """Minimal TOML writer for the configuration tables used here."""
    lines = [f"[{prefix}]"] if prefix else []
    lines += [f"{k} = {toml_value(v)}" for k, v in doc.items() if not isinstance(v, dict)]
    for k, v in doc.items():
        if isinstance(v, dict):
            lines += ["", dump_toml(v, f"{prefix}.{k}" if prefix else k)]
    return "\n".join(lines)


def demo_config_file(folder: Path, **changes: Any) -> Path:
    """Write the demo configuration to ``folder/sitrep.toml`` and return its path.

    Input paths are made absolute, outputs go to ``folder/out`` and ``folder/archive``, e-mail
    goes to 127.0.0.1 (a free port unless ``email__port`` is given) without TLS, login or
    retries. ``changes`` are ``section__key=value``, applied last and in order; a value of None
    removes the key.
    """
    doc = tomllib.loads((DEMO / "sitrep.toml").read_text(encoding="utf-8"))
    for key in ("table", "prior_table", "history", "boundaries", "inbox"):
        doc["input"][key] = str(DEMO / doc["input"][key])
    doc["output"].update(folder=str(folder / "out"), archive=str(folder / "archive"))
    for key in ("username_env", "password_env"):
        doc["email"].pop(key)
    doc["email"].update(
        enabled=True,
        host="127.0.0.1",
        port=changes["email__port"] if "email__port" in changes else free_port(),
        security="none",
        timeout_s=5.0,
        retries=0,
        retry_backoff_s=0.0,
    )
    for dotted, value in changes.items():
        section, key = dotted.split("__")
        if value is None:
            doc[section].pop(key, None)
        else:
            doc[section][key] = value
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "sitrep.toml"
    path.write_text(dump_toml(doc) + "\n", encoding="utf-8")
    return path
