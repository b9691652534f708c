"""docs/plugins.md: its worked example runs as written (adapter, bench declaration, test)."""

from __future__ import annotations

import os
import re
import subprocess
import sys
import tomllib
import types
from pathlib import Path

import pytest

from aligner.bench import DEMO_BENCH, parse_bench
from aligner.errors import BenchFileError

DOC = Path(__file__).resolve().parents[2] / "docs" / "plugins.md"
FENCE = re.compile(r"^```\w+ file=(?P<path>\S+)\n(?P<body>.*?)^```$", re.MULTILINE | re.DOTALL)


@pytest.fixture
def example(tmp_path):
    """The example's files, written where the document says."""
    files = {m["path"]: m["body"] for m in FENCE.finditer(DOC.read_text(encoding="utf-8"))}
    assert set(files) == {
        "ourlab_devices/rotator.py",
        "bench-excerpt.toml",
        "tests/test_rotator.py",
    }
    for name, body in files.items():
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / name).write_text(body, encoding="utf-8")
    (tmp_path / "ourlab_devices" / "__init__.py").write_text("")
    yield tmp_path
    for name in ("ourlab_devices", "ourlab_devices.rotator"):
        sys.modules.pop(name, None)


def test_the_documented_test_passes_against_the_documented_adapter(example):
    env = {**os.environ, "PYTHONPATH": str(example)}
    done = subprocess.run(
        [sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider", "tests/test_rotator.py"],
        cwd=example,
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stdout + done.stderr
    assert "4 passed" in done.stdout


def test_the_documented_bench_declaration_validates(example, monkeypatch):
    sdk = types.ModuleType("example_stage_sdk")
    sdk.StageError = type("StageError", (Exception,), {})
    sdk.LimitError = type("LimitError", (sdk.StageError,), {})
    monkeypatch.setitem(sys.modules, "example_stage_sdk", sdk)
    monkeypatch.syspath_prepend(str(example))
    for name in ("ourlab_devices", "ourlab_devices.rotator"):
        monkeypatch.delitem(sys.modules, name, raising=False)
    doc = tomllib.loads(DEMO_BENCH.read_text(encoding="utf-8"))
    excerpt = tomllib.loads((example / "bench-excerpt.toml").read_text(encoding="utf-8"))
    doc["mounts"]["analyzer"] = excerpt["mounts"]["analyzer"]
    bench = parse_bench(doc, "bench.toml")
    assert bench.mounts["analyzer"].driver.startswith("py:ourlab_devices.rotator:SdkRotator")
    doc["mounts"]["analyzer"]["driver"] += "&speed=3"
    with pytest.raises(BenchFileError, match=r"mounts\.analyzer\.driver: .*unknown option 'speed'"):
        parse_bench(doc, "bench.toml")
