"""The registry of validation rules (sitrep.ingest.rules) against the code that raises them.

The registry is the only list of rule ids: these tests fail when a reader
raises an id it does not hold or with another severity, when a value rule's
function and id disagree, and when docs/rules.md is not generated from it.
"""

from __future__ import annotations

import ast
import importlib.util
import re
from pathlib import Path

from sitrep.ingest import geometry, read, validate
from sitrep.ingest.rules import REGISTRY, Stage, by_code, rules_of
from sitrep.model import Severity

ROOT = Path(__file__).resolve().parent.parent
INGEST = ROOT / "sitrep" / "ingest"
CODE = re.compile(r"^[a-z]+(-[a-z0-9]+)+$")


def raised_by(path: Path) -> dict[str, set[Severity]]:
    """Rule ids a reader module raises, with the severities it gives them.

    Found in ``out.error("id", ...)``, ``out.add(Severity.X, "id", ...)``,
    ``cell_error("id", ...)`` and ``BadWeek("id", message)`` (a week cell's
    error, raised with ``out.error``).
    """
    found: dict[str, set[Severity]] = {}

    def note(node: ast.expr, severity: Severity) -> None:
        if isinstance(node, ast.Constant) and isinstance(node.value, str):
            assert CODE.match(node.value), f"{path.name}: {node.value!r} is not a rule id"
            found.setdefault(node.value, set()).add(severity)

    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Call) and node.args:
            name = getattr(node.func, "attr", getattr(node.func, "id", ""))
            first = node.args[0]
            if name in ("error", "cell_error", "BadWeek"):
                note(first, Severity.ERROR)
            elif name == "add" and isinstance(first, ast.Attribute) and len(node.args) > 1:
                note(node.args[1], Severity[first.attr])
    return found


def reader_modules(stage: Stage) -> list[Path]:
    if stage is Stage.BOUNDARY_FILE:
        return sorted(INGEST.glob("geometry*.py"))
    return sorted(p for p in INGEST.glob("*.py") if p.name in READ_MODULES)


READ_MODULES = {"read.py", "raw_table.py", "week_cells.py", "id_cells.py", "count_cells.py"}


def test_ids_are_unique_kebab_case_and_described_in_one_line() -> None:
    codes = [r.code for r in REGISTRY]
    assert len(codes) == len(set(codes))
    for r in REGISTRY:
        assert CODE.match(r.code), r.code
        assert r.description and "\n" not in r.description and r.stages, r.code
        assert not r.description.endswith(("(error)", "(warning)", "(info)")), r.code


def test_count_not_integer_is_one_rule_of_the_reader_and_the_value_stage() -> None:
    rule = by_code("count-not-integer")
    assert rule.severity is Severity.ERROR
    assert set(rule.stages) == {Stage.TABLE_FILE, Stage.TABLE}


def test_value_rules_have_a_check_named_after_their_id_and_reader_rules_none() -> None:
    for r in REGISTRY:
        value_stage = bool({Stage.TABLE, Stage.PRIOR} & set(r.stages))
        assert (r.check is not None) == value_stage, r.code
        if r.check is not None:
            assert r.check.__name__ == r.code.replace("-", "_"), r.code
            assert r.check.__doc__, r.code  # the detail on docs/rules.md
    assert [r.code for r in REGISTRY if r.stops] == ["week-system-differs"]


def test_every_id_the_readers_raise_is_registered_with_its_severity() -> None:
    for stage in (Stage.TABLE_FILE, Stage.BOUNDARY_FILE):
        raised: dict[str, set[Severity]] = {}
        for path in reader_modules(stage):
            for code, severities in raised_by(path).items():
                raised.setdefault(code, set()).update(severities)
        registered = {r.code: r.severity for r in rules_of(stage)}
        assert set(raised) == set(registered), stage
        for code, severities in raised.items():
            assert severities == {registered[code]}, code


def test_module_listings_are_views_of_the_registry() -> None:
    assert read.RULES == tuple((r.code, r.description) for r in rules_of(Stage.TABLE_FILE))
    assert geometry.RULES == tuple((r.code, r.description) for r in rules_of(Stage.BOUNDARY_FILE))
    value = [r for r in REGISTRY if {Stage.TABLE, Stage.PRIOR} & set(r.stages)]
    assert validate.RULES == tuple((r.code, r.description) for r in value)


def test_docs_rules_page_is_generated_from_the_registry() -> None:
    spec = importlib.util.spec_from_file_location("make_doc", ROOT / "tools" / "make_rules_doc.py")
    assert spec is not None and spec.loader is not None
    tool = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(tool)
    page = (ROOT / "docs" / "rules.md").read_text(encoding="utf-8")
    assert page == tool.page(), "run python tools/make_rules_doc.py"
    for r in REGISTRY:
        assert f"| `{r.code}` | {r.severity.value} | {r.description}" in page
        if r.check is not None:
            assert f"### `{r.code}` ({r.severity.value})" in page
