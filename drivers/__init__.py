"""Hardware adapters: device protocols, simulated, manual and line-protocol devices.

No optics here. The engine talks to devices only through the protocols in
``drivers.protocols`` and opens them with ``open_mount`` / ``open_counter`` /
``open_shutter`` / ``open_pointer``. Every device error is an ``aligner.errors.DeviceError``.
The pty emulator (POSIX only) is imported on its own: ``from drivers.emulator import Emulator``.
"""

from __future__ import annotations

from .lineproto import PROFILE_DIR, DeviceProfile, LineChannel, SerialLike, load_profile
from .manual import ManualCounter, ManualPointer
from .open import check_spec, open_counter, open_mount, open_pointer, open_shutter
from .protocols import MOUNT_CAPABILITIES, Counter, PointerReader, RotationMount, Shutter
from .serial_counter import LineCounter
from .serial_mount import LineMount
from .serial_pointer import LinePointer
from .serial_shutter import LineShutter
from .sim import (
    FunctionCounter,
    MoveRecord,
    SimMount,
    SimPointer,
    SimShutter,
    poisson_counter,
)

__all__ = [
    "MOUNT_CAPABILITIES",
    "PROFILE_DIR",
    "Counter",
    "DeviceProfile",
    "FunctionCounter",
    "LineChannel",
    "LineCounter",
    "LineMount",
    "LinePointer",
    "LineShutter",
    "ManualCounter",
    "ManualPointer",
    "MoveRecord",
    "PointerReader",
    "RotationMount",
    "SerialLike",
    "Shutter",
    "SimMount",
    "SimPointer",
    "SimShutter",
    "check_spec",
    "load_profile",
    "open_counter",
    "open_mount",
    "open_pointer",
    "open_shutter",
    "poisson_counter",
]
