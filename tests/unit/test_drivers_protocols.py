"""Every driver satisfies its protocol, by isinstance and by signature; exports are sorted."""

from __future__ import annotations

import inspect
import subprocess
import sys

import pytest

import aligner_drivers as drivers
from aligner_drivers import (
    SHUTTER_CAPABILITIES,
    Counter,
    FunctionCounter,
    Identifies,
    LineChannel,
    LineCounter,
    LineMount,
    LinePointer,
    LineShutter,
    ManualCounter,
    ManualPointer,
    PointerReader,
    RotationMount,
    Shutter,
    SimMount,
    SimPointer,
    SimShutter,
    load_profile,
)
from aligner_drivers.dialogue import DialoguePort, Pair
from aligner_drivers.lineproto import Bus


def channel(profile: str, *pairs: Pair) -> LineChannel:
    loaded = load_profile(profile)
    return LineChannel(Bus(DialoguePort(loaded, pairs), loaded.link), loaded)


def implementations() -> list[tuple[type, object]]:
    return [
        (RotationMount, SimMount()),
        (RotationMount, LineMount(channel("example-mount"))),
        (Counter, FunctionCounter(lambda d: (1,))),
        (Counter, LineCounter(channel("example-counter"))),
        (Counter, ManualCounter()),
        (Shutter, SimShutter()),
        (Shutter, LineShutter(channel("example-counter", *SHUT))),
        (PointerReader, SimPointer(lambda d: (0.0, 0.0))),
        (PointerReader, LinePointer(channel("query-pointer"))),
        (PointerReader, ManualPointer()),
    ]


#: what the example shutter says when the driver shuts it on creation
SHUT: tuple[Pair, ...] = (("BEAM OFF", "BEAM OFF"), ("BEAM?", "BEAM OFF"))


@pytest.mark.parametrize(("protocol", "device"), implementations(), ids=lambda v: type(v).__name__)
def test_device_satisfies_its_protocol(protocol, device):
    assert isinstance(device, protocol)
    for name, member in vars(protocol).items():
        if name.startswith("_") or not callable(member):
            continue
        wanted = list(inspect.signature(member).parameters)
        got = ["self", *inspect.signature(getattr(device, name)).parameters]
        assert got == wanted, f"{type(device).__name__}.{name}{got} != {wanted}"
    if protocol is RotationMount:
        assert device.capabilities <= drivers.MOUNT_CAPABILITIES
        assert isinstance(device.name, str)
    if protocol is Counter:
        assert device.channels in (1, 2)
    if protocol is Shutter:
        assert device.capabilities <= SHUTTER_CAPABILITIES


@pytest.mark.parametrize(
    "device",
    [LineMount(channel("example-mount")), LineShutter(channel("example-counter", *SHUT))],
    ids=type,
)
def test_line_devices_identify_themselves(device):
    assert isinstance(device, Identifies)
    device.channel.bus.framer.port.pairs = [("WHO?", "basic\x1b[2J controller")]
    assert device.identify() == "basic [2J controller"  # control characters never pass


def test_a_counter_is_not_a_mount():
    assert not isinstance(FunctionCounter(lambda d: (1,)), RotationMount)
    assert not isinstance(SimMount(), Counter)


def test_all_is_sorted_and_complete():
    assert sorted(drivers.__all__) == drivers.__all__
    assert len(set(drivers.__all__)) == len(drivers.__all__)
    for name in drivers.__all__:
        assert getattr(drivers, name) is not None
    assert set(dir(drivers)) == set(drivers.__all__)


def test_importing_the_protocols_imports_no_driver():
    code = (
        "import sys, aligner_drivers.protocols; "
        "print(sorted(m for m in sys.modules if m.startswith(('aligner_drivers.', 'serial'))))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "['aligner_drivers.protocols']"


def test_drivers_import_no_other_aligner_module_and_no_ui():
    code = (
        "import sys, aligner_drivers.open, aligner_drivers.emulator; "
        "bad = sorted(m for m in sys.modules if (m.split('.')[0] == 'aligner' and m not in "
        "('aligner', 'aligner.errors')) or m.split('.')[0] in ('textual', 'sympy', 'scipy'));"
        "print(bad)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"
