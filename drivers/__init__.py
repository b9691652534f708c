"""Hardware adapters: device protocols, simulated, manual, line-protocol and plug-in devices.

Installed as ``aligner_drivers`` (the repository keeps it in the top-level ``drivers/`` folder).
No optics here. The engine talks to devices only through the protocols in
``aligner_drivers.protocols`` and opens them with ``open_mount`` / ``open_counter`` /
``open_shutter`` / ``open_pointer`` from ``aligner_drivers.open``. Every device error is an
``aligner.errors.DeviceError``. The names below are imported on first use, so importing the
protocols does not import every driver (or pyserial).
"""

from __future__ import annotations

import importlib
from typing import Any

# public name -> submodule that defines it
_LAZY = {
    "MOUNT_CAPABILITIES": "protocols",
    "SHUTTER_CAPABILITIES": "protocols",
    "Counter": "protocols",
    "Identifies": "protocols",
    "PointerReader": "protocols",
    "RotationMount": "protocols",
    "Shutter": "protocols",
    "PROFILE_DIR": "lineproto",
    "DeviceProfile": "lineproto",
    "LineChannel": "lineproto",
    "SerialLike": "lineproto",
    "load_profile": "lineproto",
    "ENTRY_POINT_GROUP": "plugins",
    "open_plugin": "plugins",
    "ManualCounter": "manual",
    "ManualPointer": "manual",
    "check_spec": "open",
    "open_counter": "open",
    "open_mount": "open",
    "open_pointer": "open",
    "open_shutter": "open",
    "LineCounter": "serial_counter",
    "LineMount": "serial_mount",
    "LinePointer": "serial_pointer",
    "LineShutter": "serial_shutter",
    "FunctionCounter": "sim",
    "MoveRecord": "sim",
    "SimMount": "sim",
    "SimPointer": "sim",
    "SimShutter": "sim",
    "poisson_counter": "sim",
}

__all__ = sorted(_LAZY)


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        return getattr(importlib.import_module(f"{__name__}.{_LAZY[name]}"), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__() -> list[str]:
    return __all__
