"""Shared fixtures: a minimal bench (an invented scenario) written to a temporary file."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pytest

#: The smallest complete bench: H source, a half-wave plate on a mount, HV coupling, an analyzer
#: on a mount. Every required table is present, so a test can break one key at a time.
MINIMAL_BENCH = """\
# minimal test bench
wavelength_nm = 800.0
imbalance_mount = "ana"

[source]
angle_deg = 0.0
extinction_ratio = 1e5
photon_rate = 1.0e6

[[pre]]
type = "hwp"
mount = "hwp"

[coupling]
observable = "HV"
readout = "position"
pointer_sigma = 100.0
strength = 1.0
units = "um"

[analyzer]
mount = "ana"              # crossed with D at 135 deg
extinction_ratio = 1e4
transmission = 0.9

[detector]
efficiency = 0.5
dark_rate = 10.0
dead_time_ns = 20.0
safe_rate = 1.0e6

[mounts.hwp]
reading_deg = 22.5

[mounts.ana]
reading_deg = 136.0        # 1 deg past crossed
travel_deg = [-10.0, 350.0]
"""


@pytest.fixture
def bench_text() -> str:
    """Text of the minimal bench."""
    return MINIMAL_BENCH


@pytest.fixture
def write_bench(tmp_path: Path) -> Callable[[str], Path]:
    """Write bench text to ``tmp_path/bench.toml`` and return the path."""

    def write(text: str, name: str = "bench.toml") -> Path:
        path = tmp_path / name
        path.write_text(text, encoding="utf-8")
        return path

    return write


@pytest.fixture
def bench_file(write_bench: Callable[[str], Path], bench_text: str) -> Path:
    """The minimal bench as a file."""
    return write_bench(bench_text)


@pytest.fixture(autouse=True)
def _private_data_folder(
    tmp_path_factory: pytest.TempPathFactory, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Keep the default run log (platformdirs user data folder) out of the user's home, for
    this process and the subprocesses the tests start."""
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path_factory.mktemp("data")))
