"""Packaging metadata: what `pip install` needs to install every file without warnings."""

from __future__ import annotations

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


def _project() -> dict[str, object]:
    tomllib = pytest.importorskip("tomllib")  # Python 3.11+
    data: dict[str, object] = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    return data


def test_licence_is_an_spdx_expression() -> None:
    # PEP 639: `project.license` is an SPDX expression string; the table form is deprecated
    # and setuptools warns about it on every install.
    project = _project()["project"]
    assert isinstance(project, dict) and project["license"] == "MIT"


def test_every_folder_of_the_package_is_listed() -> None:
    # setuptools warns when a folder it would import as a package (data or page assets
    # included) is missing from `packages`; listing each one also ships its files.
    tool = _project()["tool"]
    assert isinstance(tool, dict)
    listed = set(tool["setuptools"]["packages"])
    folders = {
        ".".join(path.relative_to(ROOT).parts)
        for path in (ROOT / "captioner").rglob("*")
        if path.is_dir() and path.name != "__pycache__"
    }
    assert folders | {"captioner"} <= listed
    data = tool["setuptools"]["package-data"]
    # every data file (vocabulary, manifest, head file, negative pool) matches a pattern, so it ships
    patterns = data["captioner.data"]
    shipped = [p for p in (ROOT / "captioner" / "data").iterdir() if p.is_file() and p.name != "__init__.py"]
    assert shipped and all(any(p.match(pattern) for pattern in patterns) for p in shipped)
    assert "*.js" in data["captioner.review_page"]
