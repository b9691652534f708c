"""The EPICS adapters against a soft IOC this test starts (caproto's server tools) on localhost
with an ephemeral port; skipped when the epics extra (caproto) is not installed."""

from __future__ import annotations

import os
import select
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest
from scipy import stats

pytest.importorskip("caproto")

from aligner.errors import DeviceError, DeviceRefused, Disconnected
from aligner_drivers.open import check_spec, open_counter, open_mount
from aligner_drivers.protocols import Counter, Identifies, RotationMount

IOC = Path(__file__).with_name("epics_soft_ioc.py")
PREFIX = "TEST:bench:"
MOUNT = "py:aligner_drivers.adapters.epics:MotorRecordMount"
COUNTER = "py:aligner_drivers.adapters.epics:ScalerRecordCounter"


def _free_port() -> int:
    """A port free for both UDP and TCP on localhost (Channel Access uses both)."""
    for _ in range(20):
        with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as udp:
            udp.bind(("127.0.0.1", 0))
            port = udp.getsockname()[1]
            with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as tcp:
                try:
                    tcp.bind(("127.0.0.1", port))
                except OSError:
                    continue
            return port
    raise RuntimeError("no free port")


@pytest.fixture(scope="module")
def ioc():
    port = _free_port()
    env = {
        "EPICS_CA_SERVER_PORT": str(port),
        "EPICS_CAS_SERVER_PORT": str(port),
        "EPICS_CA_ADDR_LIST": "127.0.0.1",
        "EPICS_CA_AUTO_ADDR_LIST": "NO",
        "EPICS_CAS_INTF_ADDR_LIST": "127.0.0.1",
        "EPICS_CAS_BEACON_ADDR_LIST": "127.0.0.1",
        "EPICS_CAS_AUTO_BEACON_ADDR_LIST": "NO",
    }
    process = subprocess.Popen(
        [sys.executable, str(IOC), PREFIX],
        env={**os.environ, **env},
        stdout=subprocess.PIPE,
        stderr=subprocess.DEVNULL,
        text=True,
    )
    patch = pytest.MonkeyPatch()
    try:
        ready, _, _ = select.select([process.stdout], [], [], 20.0)
        assert ready and process.stdout.readline().strip() == "READY", "the soft IOC did not start"
        for key, value in env.items():  # the client side of this process
            patch.setenv(key, value)
        yield process
    finally:
        patch.undo()
        process.terminate()
        try:
            process.wait(timeout=5)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()


@pytest.fixture
def mount(ioc):
    m = open_mount(f"{MOUNT}?record={PREFIX}rot1&timeout_s=2", name="analyzer")
    m.home()
    yield m
    m.close()


def test_moves_with_read_back(mount):
    assert isinstance(mount, RotationMount) and isinstance(mount, Identifies)
    assert mount.identify() == f"motor record {PREFIX}rot1: bench rotator (deg)"
    for target in (10.0, 45.12345, -30.5):
        mount.move_to(target)
        assert mount.position() == pytest.approx(target, abs=1e-9)
        assert not mount.is_moving()
    mount.home()
    assert mount.position() == 0.0


def test_soft_limit_refusal(mount):
    with pytest.raises(DeviceRefused, match="outside its soft limits -170 to 170 deg"):
        mount.move_to(200.0)
    assert mount.position() == 0.0
    mount.move_to(5.0)  # the record moves again after a refusal


def test_stop_from_another_thread(mount):
    threading.Timer(0.1, mount.stop).start()
    t0 = time.monotonic()
    with pytest.raises(DeviceError, match="was stopped by stop\\(\\) at"):
        mount.move_to(160.0)  # 0.8 s at 200 deg/s
    assert time.monotonic() - t0 < 0.7
    assert 5.0 < mount.position() < 150.0 and not mount.is_moving()


def test_scaler_counts(ioc):
    counter = open_counter(f"{COUNTER}?record={PREFIX}sc1&post=2&ref=3")
    try:
        assert isinstance(counter, Counter) and counter.channels == 2
        totals = [0, 0]
        for _ in range(4):
            post, ref = counter.count(0.1)
            totals = [totals[0] + post, totals[1] + ref]
        # the IOC draws Poisson counts at 2000/s and 5000/s (scipy.stats.poisson)
        for total, rate in zip(totals, (2000.0, 5000.0), strict=True):
            low, high = stats.poisson.interval(0.999, rate * 0.4)
            assert low <= total <= high
    finally:
        counter.close()


def test_unreachable_record_and_closed_device(ioc):
    assert check_spec(f"{MOUNT}?record={PREFIX}rot1") == "py"  # opens nothing
    with pytest.raises(Disconnected, match=r"cannot reach TEST:bench:nosuch\.VAL within 0\.3 s"):
        open_mount(f"{MOUNT}?record={PREFIX}nosuch&timeout_s=0.3")
    counter = open_counter(f"{COUNTER}?record={PREFIX}sc1")
    counter.close()
    with pytest.raises(Disconnected, match="closed"):
        counter.count(0.1)
