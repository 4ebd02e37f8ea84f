"""Data flows one way: a stage imports only stages to its left and the shared leaves."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ORDER = ["ingest", "analysis", "render", "deliver"]
SHARED = ["model", "errors", "config", "weeks"]
PACKAGE = Path(__file__).resolve().parent.parent / "sitrep"


def sitrep_imports(path: Path) -> set[str]:
    """First component after ``sitrep.`` of every import in the file (absolute imports only)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                raise AssertionError(f"{path}: relative import")
            names = [node.module or ""]
        else:
            continue
        for name in names:
            parts = name.split(".")
            if parts[0] == "sitrep" and len(parts) > 1:
                found.add(parts[1])
    return found


@pytest.mark.parametrize("stage", ORDER)
def test_stage_imports_only_leftwards(stage: str) -> None:
    allowed = set(ORDER[: ORDER.index(stage) + 1] + SHARED)
    for path in sorted((PACKAGE / stage).rglob("*.py")):  # subpackages such as render/wording too
        bad = sitrep_imports(path) - allowed
        assert not bad, f"{path.name} in {stage} imports {sorted(bad)}"


@pytest.mark.parametrize("leaf", SHARED)
def test_shared_leaves_import_no_stage(leaf: str) -> None:
    bad = sitrep_imports(PACKAGE / f"{leaf}.py") & set(ORDER + ["pipeline", "cli"])
    assert not bad, f"{leaf}.py imports {sorted(bad)}"


# Every module outside the four stage packages, with the sitrep modules it may import. A new
# top-level module must be added here (the test below fails until it is), so nothing sits
# outside the layering. Composers sit above the stages: pipeline runs them in order, batch runs
# pipeline many times, delivery_jobs sends what deliver archived, cli fronts them all.
TOP_LEVEL: dict[str, set[str]] = {
    "__init__": set(SHARED),
    "versions": set(),
    "model": {"weeks", "errors"},
    "errors": {"model"},  # for a type annotation only (TYPE_CHECKING)
    "config": {"errors", "model", "weeks"},
    "weeks": set(),
    "cache": {"analysis", *SHARED},
    "progress": set(),
    "pipeline": {*ORDER, *SHARED, "cache", "versions", "progress", "past_extracts"},
    "past_extracts": {"ingest", "analysis", "deliver", *SHARED},
    "batch": {"pipeline", "deliver", *SHARED},
    "delivery_jobs": {*ORDER, *SHARED, "pipeline"},
    "starter": {"ingest", "starter_config", *SHARED},
    "starter_config": {"starter", *SHARED},  # Proposal, for a type annotation only
    "cli": {
        *ORDER,
        *SHARED,
        "pipeline",
        "batch",
        "delivery_jobs",
        "cache",
        "versions",
        "starter",
        "progress",
    },
}


def test_every_top_level_module_has_a_floor() -> None:
    modules = {p.stem for p in PACKAGE.glob("*.py")}
    missing = sorted(modules - set(TOP_LEVEL))
    assert not missing, (
        f"add {missing} to TOP_LEVEL in tests/test_layering.py with what they may import"
    )
    packages = {p.name for p in PACKAGE.iterdir() if (p / "__init__.py").exists()}
    assert packages - set(ORDER) <= {"assets", *TOP_LEVEL}, sorted(packages - set(ORDER))


def top_level_files(module: str) -> list[Path]:
    """The file of a top-level module, or every file of a top-level package (such as cli/)."""
    if (PACKAGE / module).is_dir():
        return sorted((PACKAGE / module).rglob("*.py"))
    path = PACKAGE / f"{module}.py"
    return [path] if path.exists() else []


@pytest.mark.parametrize("module", sorted(TOP_LEVEL))
def test_top_level_module_imports_only_what_its_floor_allows(module: str) -> None:
    files = top_level_files(module)
    if not files:
        pytest.skip(f"{module} is not in this tree")
    for path in files:
        bad = sitrep_imports(path) - TOP_LEVEL[module] - {module}
        assert not bad, f"{path.relative_to(PACKAGE)} imports {sorted(bad)}"


def test_the_cli_package_is_checked() -> None:
    files = top_level_files("cli")
    assert PACKAGE / "cli" / "__init__.py" in files and len(files) > 1


def test_nothing_imports_the_cli() -> None:
    for path in sorted(PACKAGE.rglob("*.py")):
        if PACKAGE / "cli" not in path.parents:
            assert "cli" not in sitrep_imports(path), path


def test_the_checker_catches_a_planted_violation(tmp_path: Path) -> None:
    planted = tmp_path / "bad.py"
    planted.write_text("from sitrep.render.html import render_html\n", encoding="utf-8")
    assert sitrep_imports(planted) == {"render"}


def test_no_pyplot_and_no_module_level_weasyprint() -> None:
    for path in sorted(PACKAGE.rglob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in tree.body:
            if isinstance(node, (ast.Import, ast.ImportFrom)):
                names = (
                    [a.name for a in node.names]
                    if isinstance(node, ast.Import)
                    else [node.module or ""]
                )
                assert not any(n.startswith("weasyprint") for n in names), path
        text = path.read_text(encoding="utf-8")
        assert "matplotlib.pyplot" not in text, path
