"""The wheel holds every file the package reads at run time.

The wheel is built from a copy of the source (``pip wheel --no-deps
--no-build-isolation``, setuptools from the test extra) and its file list is
compared with the folders it must ship: every template, every font and
licence, and every demo input. A file added to one of those folders and
forgotten in ``[tool.setuptools.package-data]`` fails here. The wheel format
(a zip with ``<name>.dist-info/METADATA`` and ``RECORD``) is PEP 427; the
metadata fields are from the core metadata specification (``Requires-Python``,
``License-Expression`` for an SPDX string, PEP 639).
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import zipfile
from email.parser import Parser
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent

SHIPPED = {
    "templates": "sitrep/templates",
    "demo_inputs": "sitrep/demo_inputs",
    "sitrep/assets": "sitrep/assets",
}
"""Source folder -> its place inside the wheel."""


def _source_files(folder: str) -> set[str]:
    base = ROOT / folder
    return {
        p.relative_to(base).as_posix()
        for p in base.rglob("*")
        if p.is_file() and "__pycache__" not in p.parts and p.suffix != ".pyc"
    }


@pytest.fixture(scope="module")
def wheel(tmp_path_factory: pytest.TempPathFactory) -> Path:
    src = tmp_path_factory.mktemp("src")
    for name in ("pyproject.toml", "README.md"):
        shutil.copy2(ROOT / name, src / name)
    for folder in ("sitrep", "templates", "demo_inputs"):
        shutil.copytree(ROOT / folder, src / folder, ignore=shutil.ignore_patterns("__pycache__"))
    out = tmp_path_factory.mktemp("wheel")
    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "pip",
            "wheel",
            "--no-deps",
            "--no-build-isolation",
            "-q",
            "-w",
            str(out),
            str(src),
        ],
        capture_output=True,
        text=True,
        timeout=300,
        check=False,
    )
    assert done.returncode == 0, done.stderr
    [path] = out.glob("sitrep-*.whl")
    return path


@pytest.mark.slow
def test_wheel_ships_every_template_font_and_demo_input(wheel: Path) -> None:
    names = set(zipfile.ZipFile(wheel).namelist())
    for folder, inside in SHIPPED.items():
        expected = _source_files(folder)
        assert expected, folder
        missing = sorted(f"{inside}/{f}" for f in expected if f"{inside}/{f}" not in names)
        assert missing == [], f"not in the wheel: {missing}"
    # every Python module of the source tree, so a new subpackage cannot be left out of the list
    # in [tool.setuptools] packages
    modules = {f"sitrep/{f}" for f in _source_files("sitrep") if f.endswith(".py")}
    assert modules, "no modules found"
    missing = sorted(m for m in modules if m not in names)
    assert missing == [], f"modules not in the wheel: {missing}"
    # the files named in the brief by hand too, so an emptied folder cannot pass
    for name in (
        "sitrep/templates/sort_table.js",
        "sitrep/templates/report.html.j2",
        "sitrep/demo_inputs/sitrep.toml",
        "sitrep/demo_inputs/districts.gpkg",
        "sitrep/demo_inputs/extract_2026-W47.csv",
        "sitrep/demo_inputs/history.csv",
    ):
        assert name in names


@pytest.mark.slow
def test_wheel_metadata_states_pythons_and_an_spdx_licence(wheel: Path) -> None:
    archive = zipfile.ZipFile(wheel)
    [meta] = [n for n in archive.namelist() if n.endswith(".dist-info/METADATA")]
    fields = Parser().parsestr(archive.read(meta).decode("utf-8"))
    assert fields["Requires-Python"] == "<3.14,>=3.11"
    assert fields["License-Expression"] == "MIT"
    assert fields["License"] is None  # the deprecated free-text field is gone
