"""Open any device from one spec string.

Specs:

- a serial port path: ``/dev/ttyUSB0``, ``/dev/tty.usbserial-1``, ``COM3``;
- a pyserial URL: ``rfc2217://host:port``, ``socket://host:port``, ``loop://``, ``spy://PORT``;
- ``sim`` or ``sim:?key=value&...``: a simulated device (options below);
- ``manual`` or ``manual:?...``: the operator types the numbers (counters and pointers);
- ``py:package.module:factory?key=value&...`` or ``plugin:NAME?key=value&...``: a device made
  by a Python factory (``aligner_drivers.plugins`` describes both forms and their options).

Serial specs need ``profile=`` (a profile file, or a shipped profile by name such as
``"example-mount"``). Keyword options override options from the query string; an unknown
option or spec raises ``InputError`` that lists what is allowed.

Caution: opening a real mount or shutter and moving it can send light onto a detector or out
of the bench; follow your local laser-safety rules and your laser safety officer.

Options (query keys and keyword names are the same):

- serial, all kinds: ``name``, ``baud``, ``timeout`` (reply timeout, s), ``retries``,
  ``addr`` and ``axis`` (fill ``{addr}`` and ``{axis}`` of the profile's templates: several
  devices at different addresses share one open port); the keyword ``wire_log(direction,
  data)`` sees every byte sent (``"->"``) and received (``"<-"``) on the port;
- ``sim`` mount: ``name``, ``resolution`` (deg), ``backlash`` (deg), ``speed`` (deg/s),
  ``travel`` (``low,high`` deg), ``noise`` (rms deg), ``seed``, ``realtime``, ``start`` (deg);
- ``sim`` counter: ``name``, ``channels``, ``rate`` and ``ref_rate`` (counts/s, Poisson),
  ``seed``; or the keyword ``fn(dwell_s) -> tuple[int, ...]``;
- ``sim`` shutter: ``name``, ``open`` (start open);
- ``sim`` pointer: ``name``, ``value`` and ``sem`` (constant reading); or ``fn(dwell_s)``;
- ``manual`` counter: ``name``, ``channels``, keywords ``input_fn``, ``output_fn``;
  ``manual`` pointer: ``name``, keywords ``input_fn``, ``output_fn``.
"""

from __future__ import annotations

import difflib
import math
import re
import socket
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any
from urllib.parse import parse_qsl

import serial

from aligner.errors import Disconnected, InputError

from .lineproto import (
    PORT_ERRORS,
    PROFILE_DIR,
    DeviceProfile,
    LineChannel,
    load_profile,
    shipped_profiles,
)
from .lineproto.bus import attach
from .manual import ManualCounter, ManualPointer
from .protocols import Counter, PointerReader, RotationMount, Shutter
from .serial_counter import LineCounter
from .serial_mount import LineMount
from .serial_pointer import LinePointer
from .serial_shutter import LineShutter
from .sim import FunctionCounter, SimMount, SimPointer, SimShutter, poisson_counter

__all__ = [
    "check_spec",
    "open_counter",
    "open_mount",
    "open_pointer",
    "open_shutter",
    "profile_file",
    "profile_roles",
    "shipped_profile_list",
]

_URL_SCHEMES = ("loop", "rfc2217", "socket", "spy")
_ALLOWED_SPECS = (
    "a serial port path (/dev/ttyUSB0, COM3), "
    + ", ".join(f"{s}://..." for s in _URL_SCHEMES)
    + ", sim or sim:?key=value&..., py:package.module:factory?..., plugin:NAME?..."
)
Converter = Callable[[str, str, Any], Any]


def _text(spec: str, key: str, value: Any) -> str:
    if not isinstance(value, str) or not value:
        raise InputError(f"{spec}: option {key}={value!r}: expected a non-empty text")
    return value


def _number(spec: str, key: str, value: Any) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        number = math.nan
    if not math.isfinite(number):
        raise InputError(f"{spec}: option {key}={value!r}: expected a finite number")
    return number


def _whole(spec: str, key: str, value: Any) -> int:
    try:
        return int(value)
    except (TypeError, ValueError):
        raise InputError(f"{spec}: option {key}={value!r}: expected a whole number") from None


def _flag(spec: str, key: str, value: Any) -> bool:
    if isinstance(value, bool):
        return value
    words = {"1": True, "true": True, "yes": True, "0": False, "false": False, "no": False}
    if str(value).lower() not in words:
        raise InputError(f"{spec}: option {key}={value!r}: expected one of {', '.join(words)}")
    return words[str(value).lower()]


def _pair(spec: str, key: str, value: Any) -> tuple[float, float]:
    parts = value.split(",") if isinstance(value, str) else list(value)
    if len(parts) != 2:
        raise InputError(f"{spec}: option {key}={value!r}: expected two numbers, low,high")
    return _number(spec, key, parts[0]), _number(spec, key, parts[1])


def _function(spec: str, key: str, value: Any) -> Callable[..., Any]:
    if not callable(value):
        raise InputError(f"{spec}: option {key}: expected a function (keyword argument only)")
    return value


_SERIAL_OPTIONS: dict[str, tuple[str, Converter]] = {
    "name": ("name", _text),
    "baud": ("baud", _whole),
    "timeout": ("reply_timeout_s", _number),
    "retries": ("retries", _whole),
    "addr": ("address", _text),
    "axis": ("axis", _text),
    "wire_log": ("wire_log", _function),
}
_SIM_MOUNT: dict[str, tuple[str, Converter]] = {
    "name": ("name", _text),
    "resolution": ("resolution_deg", _number),
    "backlash": ("backlash_deg", _number),
    "speed": ("speed_deg_s", _number),
    "travel": ("travel_deg", _pair),
    "noise": ("noise_rms_deg", _number),
    "seed": ("seed", _whole),
    "realtime": ("realtime", _flag),
    "start": ("start_deg", _number),
}
_SIM_COUNTER: dict[str, tuple[str, Converter]] = {
    "name": ("name", _text),
    "channels": ("channels", _whole),
    "rate": ("rate", _number),
    "ref_rate": ("ref_rate", _number),
    "seed": ("seed", _whole),
    "fn": ("fn", _function),
}
_SIM_SHUTTER: dict[str, tuple[str, Converter]] = {
    "name": ("name", _text),
    "open": ("start_open", _flag),
}
_SIM_POINTER: dict[str, tuple[str, Converter]] = {
    "name": ("name", _text),
    "value": ("value", _number),
    "sem": ("sem", _number),
    "fn": ("fn", _function),
}
_MANUAL_POINTER: dict[str, tuple[str, Converter]] = {
    "name": ("name", _text),
    "input_fn": ("input_fn", _function),
    "output_fn": ("output_fn", _function),
}
_MANUAL_COUNTER = {**_MANUAL_POINTER, "channels": ("channels", _whole)}


def _parse(spec: str, *, manual: bool) -> tuple[str, dict[str, str]]:
    """Return (kind, query options); kind is ``sim``, ``manual``, ``serial``, or ``py`` or
    ``plugin`` (whose options ``aligner_drivers.plugins`` reads itself)."""
    if not isinstance(spec, str) or not spec.strip():
        raise InputError(f"device spec must be a non-empty text, got {spec!r}")
    if spec.startswith(("py:", "plugin:")):
        return spec.partition(":")[0], {}
    allowed = _ALLOWED_SPECS + (", manual or manual:?..." if manual else "")
    for kind in ("sim", "manual"):
        if spec == kind or spec.startswith(f"{kind}:"):
            if kind == "manual" and not manual:
                raise InputError(f"{spec}: manual devices exist only for counters and pointers")
            query = spec[len(kind) + 1 :].removeprefix("?")
            try:
                return kind, dict(
                    parse_qsl(query, keep_blank_values=True, strict_parsing=bool(query))
                )
            except ValueError:
                raise InputError(
                    f"{spec}: bad option list; write {kind}:?key=value&key=value"
                ) from None
    scheme = spec.split("://", 1)[0] if "://" in spec else None
    if scheme in _URL_SCHEMES or (
        scheme is None and (spec.startswith(("/", "\\\\.\\")) or re.fullmatch(r"(?i)COM\d+", spec))
    ):
        return "serial", {}
    raise InputError(f"unknown device spec {spec!r}; allowed: {allowed}")


def check_spec(spec: str, *, manual: bool = False) -> str:
    """Check a device spec without opening anything; return its kind (``sim``, ``manual``,
    ``serial``, ``py`` or ``plugin``) or raise ``InputError`` listing what is allowed (with a
    did-you-mean). A plug-in spec's module is imported to find its factory and check the
    options; nothing is called."""
    try:
        kind = _parse(spec, manual=manual)[0]
    except InputError as exc:
        close = difflib.get_close_matches(str(spec), ["sim", "manual"] if manual else ["sim"], n=1)
        if close and ":" not in str(spec):
            raise InputError(f"{exc}; did you mean {close[0]!r}?") from None
        raise
    if kind in ("py", "plugin"):
        from .plugins import check_plugin  # imported on first use (it imports this module)

        check_plugin(spec)
    return kind


def _plugin(spec: str, role: str, profile: Any, options: Mapping[str, Any]) -> Any:
    from .plugins import open_plugin

    return open_plugin(spec, role, options, profile=profile)


def profile_file(profile: str | Path, *, base: Path | None = None) -> Path | None:
    """The file a device profile refers to: a path as given, else relative to the folder
    ``base`` (a bench file's), else a shipped profile by name; None when none exists."""
    candidates = [Path(profile)]
    if base is not None and not Path(profile).is_absolute():
        candidates.append(base / profile)
    if not Path(profile).suffix:
        candidates.append(PROFILE_DIR / f"{Path(profile).name}.toml")
    return next((p for p in candidates if p.is_file()), None)


def _options(
    spec: str,
    schema: Mapping[str, tuple[str, Converter]],
    query: Mapping[str, Any],
    overrides: Mapping[str, Any],
) -> dict[str, Any]:
    merged = {**query, **overrides}
    unknown = sorted(set(merged) - set(schema))
    if unknown:
        raise InputError(
            f"{spec}: unknown option {unknown[0]!r}; allowed: {', '.join(sorted(schema))}"
        )
    return {schema[k][0]: schema[k][1](spec, k, v) for k, v in merged.items()}


def _open_channel(
    spec: str, profile: str | Path | DeviceProfile | None, overrides: Mapping[str, Any]
) -> tuple[LineChannel, str | None]:
    if profile is None:
        raise InputError(
            f"{spec}: a serial device needs profile= (a profile file, or a shipped profile: "
            f"{', '.join(shipped_profiles())})"
        )
    loaded = profile if isinstance(profile, DeviceProfile) else load_profile(profile)
    options = _options(spec, _SERIAL_OPTIONS, {}, overrides)
    name = options.pop("name", None)
    wire_log = options.pop("wire_log", None)
    loaded = loaded.with_options(**options)

    def open_port() -> Any:
        try:
            port = serial.serial_for_url(
                spec, baudrate=loaded.link.baud, timeout=0.005, write_timeout=2.0
            )
        except (*PORT_ERRORS, ValueError) as exc:  # type: ignore[misc]
            raise Disconnected(
                f"cannot open {spec} ({exc}); check that the device is plugged in and powered, "
                "the port name, and that you may use the port (on Linux: the dialout group)"
            ) from None
        # socket:// ports: short commands go out at once (no waiting for an earlier ACK)
        sock = getattr(port, "_socket", None)
        if isinstance(sock, socket.socket):
            sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        return port

    bus = attach(spec, loaded.link, open_port, who=loaded.where())
    if wire_log is not None:
        bus.set_wire_log(wire_log)
    return LineChannel(bus, loaded, name=name), name


def profile_roles(profile: str | Path) -> frozenset[str]:
    """Which devices a profile drives (``mount``, ``counter``, ``shutter``, ``pointer``)."""
    return load_profile(profile).roles


def shipped_profile_list() -> list[tuple[str, frozenset[str], str]]:
    """(name, roles, description) of every shipped example profile, by name."""
    out = []
    for name in shipped_profiles():
        loaded = load_profile(name)
        out.append((name, loaded.roles, loaded.description))
    return out


def _with_channel(
    spec: str,
    profile: str | Path | DeviceProfile | None,
    overrides: Mapping[str, Any],
    driver: Callable[..., Any],
) -> Any:
    channel, name = _open_channel(spec, profile, overrides)
    try:
        return driver(channel, name=name)
    except BaseException:
        channel.close()
        raise


def open_mount(
    spec: str, *, profile: str | Path | DeviceProfile | None = None, **options: Any
) -> RotationMount:
    """Open a rotation mount (see the module docstring for specs and options)."""
    kind, query = _parse(spec, manual=False)
    if kind in ("py", "plugin"):
        return _plugin(spec, "mount", profile, options)
    if kind == "sim":
        return SimMount(**_options(spec, _SIM_MOUNT, query, options))
    return _with_channel(spec, profile, options, LineMount)


def open_counter(
    spec: str, *, profile: str | Path | DeviceProfile | None = None, **options: Any
) -> Counter:
    """Open a counter (see the module docstring for specs and options)."""
    kind, query = _parse(spec, manual=True)
    if kind in ("py", "plugin"):
        return _plugin(spec, "counter", profile, options)
    if kind == "sim":
        opts = _options(spec, _SIM_COUNTER, query, options)
        channels = opts.get("channels", 1)
        name = opts.get("name", "sim-counter")
        if "fn" in opts:
            return FunctionCounter(opts["fn"], channels, name=name)
        rates = (opts.get("rate", 1000.0), opts.get("ref_rate", 1000.0))[:channels]
        return poisson_counter(rates, seed=opts.get("seed"), name=name)
    if kind == "manual":
        return ManualCounter(**_options(spec, _MANUAL_COUNTER, query, options))
    return _with_channel(spec, profile, options, LineCounter)


def open_shutter(
    spec: str, *, profile: str | Path | DeviceProfile | None = None, **options: Any
) -> Shutter:
    """Open a shutter (see the module docstring for specs and options)."""
    kind, query = _parse(spec, manual=False)
    if kind in ("py", "plugin"):
        return _plugin(spec, "shutter", profile, options)
    if kind == "sim":
        return SimShutter(**_options(spec, _SIM_SHUTTER, query, options))
    return _with_channel(spec, profile, options, LineShutter)


def open_pointer(
    spec: str, *, profile: str | Path | DeviceProfile | None = None, **options: Any
) -> PointerReader:
    """Open a pointer reader (see the module docstring for specs and options)."""
    kind, query = _parse(spec, manual=True)
    if kind in ("py", "plugin"):
        return _plugin(spec, "pointer", profile, options)
    if kind == "sim":
        opts = _options(spec, _SIM_POINTER, query, options)
        reading = (opts.get("value", 0.0), opts.get("sem", 0.0))
        return SimPointer(
            opts.get("fn", lambda _dwell_s: reading), name=opts.get("name", "sim-pointer")
        )
    if kind == "manual":
        return ManualPointer(**_options(spec, _MANUAL_POINTER, query, options))
    return _with_channel(spec, profile, options, LinePointer)
