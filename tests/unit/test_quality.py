"""Lint, format and type checks run with the suite, so CI's test command runs them too (ruff
and mypy are test extras, pinned in pyproject.toml; common practice, no source)."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def _run(argv: list[str], env: dict[str, str] | None = None) -> None:
    done = subprocess.run(argv, cwd=ROOT, capture_output=True, text=True, env=env, timeout=600)
    assert done.returncode == 0, done.stdout + done.stderr


def test_ruff_finds_nothing() -> None:
    _run([sys.executable, "-m", "ruff", "check", "--no-cache", "."])
    _run([sys.executable, "-m", "ruff", "format", "--check", "--no-cache", "."])


def test_mypy_finds_nothing(tmp_path: Path) -> None:
    """mypy on the installed package names: the repository keeps drivers/ and recipes/ beside
    the package (installed as aligner_drivers and aligner_recipes), so the check runs on a
    folder of links with those names."""
    for name, folder in (
        ("aligner", "aligner"),
        ("aligner_drivers", "drivers"),
        ("aligner_recipes", "recipes"),
    ):
        (tmp_path / name).symlink_to(ROOT / folder, target_is_directory=True)
    env = {**os.environ, "MYPYPATH": str(tmp_path)}
    cache = str(tmp_path / ".mypy_cache")
    _run(
        [
            sys.executable,
            "-m",
            "mypy",
            "-p",
            "aligner",
            "-p",
            "aligner_drivers",
            "--cache-dir",
            cache,
        ],
        env=env,
    )
