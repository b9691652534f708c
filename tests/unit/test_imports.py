"""Import contract (foundation issue): ``import aligner`` and ``aligner --help`` stay light.

Each check runs in a fresh interpreter and inspects ``sys.modules`` there.
"""

from __future__ import annotations

import importlib.util
import json
import shutil
import subprocess
import sys

import pytest

from aligner.cli import COMMANDS

HEAVY = ("textual", "sympy", "scipy")
PROBE = ("numpy", *HEAVY)
COMMANDS_PRESENT = [c for c in COMMANDS if importlib.util.find_spec(f"aligner.cli.{c}")]

_REPORT = f"""
import json, sys
print(json.dumps(sorted({{m.split('.')[0] for m in sys.modules}} & set({PROBE!r}))))
"""

_HELP = (
    """
import contextlib, io, sys
from aligner.cli import main
with contextlib.redirect_stdout(io.StringIO()):
    try:
        main(sys.argv[1:])
    except SystemExit:
        pass
"""
    + _REPORT
)


def _loaded(code: str, *args: str) -> set[str]:
    done = subprocess.run(
        [sys.executable, "-c", code, *args], capture_output=True, text=True, timeout=60, check=True
    )
    return set(json.loads(done.stdout.strip().splitlines()[-1]))


def test_import_aligner_is_light():
    # Contract of aligner/__init__.py: no numpy, scipy, sympy or textual until a function is used.
    loaded = _loaded("import aligner\n" + _REPORT)
    assert not loaded & set(HEAVY)
    assert "numpy" not in loaded


def test_help_is_light():
    # Contract of aligner/cli/__init__.py: heavy imports happen inside run(), not for --help.
    loaded = _loaded(_HELP, "--help")
    assert not loaded & set(HEAVY)
    assert "numpy" not in loaded


@pytest.mark.parametrize("command", COMMANDS_PRESENT)
def test_command_help_does_not_import_heavy_modules(command):
    assert not _loaded(_HELP, command, "--help") & set(HEAVY)


def test_lazy_attributes_resolve():
    import aligner

    assert aligner.load_bench("demo").imbalance_mount
    with pytest.raises(AttributeError, match="nosuch"):
        aligner.nosuch  # noqa: B018


@pytest.mark.skipif(shutil.which("aligner") is None, reason="console script not installed")
def test_console_script_lists_every_command():
    done = subprocess.run(["aligner", "--help"], capture_output=True, text=True, timeout=60)
    assert done.returncode == 0 and not done.stderr
    for command in COMMANDS_PRESENT:
        assert f"\n    {command} " in done.stdout
    assert "laser safety officer" in " ".join(done.stdout.split())


def _imports(path, root):
    """Every module ``path`` imports, relative imports resolved against its package (``from
    ..bench import X`` in aligner/run/x.py gives ``aligner.bench``, ``from . import y`` gives
    ``aligner.run.y``)."""
    import ast

    parts = path.relative_to(root.parent).with_suffix("").parts
    package = parts[:-1]  # a module's package; for __init__.py the package itself
    tree = ast.parse(path.read_text(encoding="utf-8"))
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            yield from (alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            yield node.module
        elif isinstance(node, ast.ImportFrom):
            base = ".".join([*package[: len(package) - node.level + 1], node.module or ""])
            base = base.rstrip(".")
            yield base
            if node.module is None:
                yield from (f"{base}.{alias.name}" for alias in node.names)


def test_dependencies_point_one_way():
    """physics imports only numpy/scipy and itself; the engine (everything but tui/ and cli/)
    imports neither tui nor cli, and reaches drivers only through their protocols and the
    opening functions; the desk does not import the command line; nothing outside tui/ and
    cli/ imports textual. Relative imports count (common practice, no source)."""
    from pathlib import Path

    root = Path(__file__).resolve().parents[2] / "aligner"
    stdlib_ok = {"__future__", "collections", "dataclasses", "math", "typing", "functools"}
    checked = 0
    for path in root.rglob("*.py"):
        part = path.relative_to(root).parts[0]
        for name in _imports(path, root):
            checked += 1
            top, _, rest = name.partition(".")
            layer = rest.split(".")[0] if top == "aligner" else ""
            if part == "physics":
                allowed = top in {"numpy", "scipy"} | stdlib_ok or layer == "physics"
                assert allowed, f"{path} imports {name}"
            if part not in ("tui", "cli", "__main__.py", "__init__.py"):
                assert layer not in ("tui", "cli"), f"{path} (engine) imports {name}"
            if part == "tui":
                assert layer != "cli", f"{path} (desk) imports {name}"
            if name.startswith("aligner_drivers"):
                assert name in ("aligner_drivers.open", "aligner_drivers.protocols"), (
                    f"{path} imports {name}"
                )
            if top == "textual":
                assert part in ("tui", "cli"), f"{path} imports {name}"
    assert checked > 500  # the walk saw the package


def test_relative_imports_resolve():
    """The resolver above, on one file of known imports (the check must see relative ones)."""
    from pathlib import Path

    root = Path(__file__).resolve().parents[2] / "aligner"
    names = set(_imports(root / "tui" / "backend.py", root))
    assert {"aligner.bench", "aligner.errors", "aligner.run.station"} <= names


def test_predict_json_needs_no_scipy_or_sympy():
    # The prediction, the null and the limits are numpy only on a bench whose nulls are
    # reachable (the demo): scipy.optimize alone costs a quarter of a second to import.
    loaded = _loaded(_HELP, "predict", "demo", "--json")
    assert "numpy" in loaded
    assert not loaded & set(HEAVY)
