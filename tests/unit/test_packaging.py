"""Packaging: every package folder is installed, under a name that cannot collide."""

from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
#: repository folder -> installed package name (pyproject's package-dir)
FOLDERS = {"aligner": "aligner", "drivers": "aligner_drivers", "recipes": "aligner_recipes"}


def _installed_name(init: Path) -> str:
    parts = init.parent.relative_to(ROOT).parts
    return ".".join((FOLDERS[parts[0]], *parts[1:]))


def test_every_package_folder_is_listed_and_nothing_else():
    """A new subpackage missing from pyproject would be left out of the wheel (common
    practice, no source: setuptools installs only the packages it is told about)."""
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    setuptools = config["tool"]["setuptools"]
    listed = set(setuptools["packages"])
    on_disk = {
        _installed_name(p) for folder in FOLDERS for p in (ROOT / folder).rglob("__init__.py")
    }
    assert listed == on_disk
    assert setuptools["package-dir"] == {v: k for k, v in FOLDERS.items() if k != v}
    assert all(name.split(".")[0].startswith("aligner") for name in listed)
