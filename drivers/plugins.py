"""Plug-in devices: a device opened by a Python factory named in its spec.

Two spec forms (the query string is optional in both)::

    py:package.module:factory?key=value&key=value
    plugin:NAME?key=value&key=value

``py:`` imports ``package.module`` and takes ``factory`` from it (a class, a function, or a
dotted path such as ``Controller.open``). ``plugin:NAME`` looks ``NAME`` up among the entry
points of the group :data:`ENTRY_POINT_GROUP` (``aligner.devices``) that installed packages
declare, e.g. in their ``pyproject.toml``::

    [project.entry-points."aligner.devices"]
    bench-rotator = "ourlab_devices.rotator:open_rotator"

Entry-point names are read from the installed packages' metadata without importing anything;
a plug-in's module is imported the first time a spec names it. An unknown name and a plug-in
that is found but fails to import are different errors; the second names the package that
provides it and chains the original exception.

Options. Every ``key=value`` becomes a keyword argument of the factory; keyword options given
to ``open_*`` in Python override the query. Text values (the query's, and text keywords) are
converted by the factory's annotation of that parameter; other values are passed unchanged.
Conversions: ``int``, ``float``, ``bool`` (``1/0``, ``true/false``, ``yes/no``),
``pathlib.Path``, ``Literal[...]`` (one of its values), ``tuple[...]`` (comma-separated, each
part converted), and ``X | None`` as ``X``; a parameter with any other annotation, or none,
gets the text as it is. A key the factory has no parameter
for is refused (unless it takes ``**kwargs``), as is a missing required parameter. Two keys are
special: ``name`` (the engine passes the bench's mount name) is given to the factory only when
it has a ``name`` parameter or ``**kwargs``, and is otherwise dropped; ``profile=``, when given
to ``open_*``, is passed as the option ``profile``.

What a factory must return: an object that implements the protocol of the role it is opened
for (:mod:`aligner_drivers.protocols`: ``RotationMount``, ``Counter``, ``Shutter``,
``PointerReader``), with ``capabilities`` inside the allowed set and ``channels`` 1 or 2. The
object is wrapped so that any exception other than an ``aligner.errors.AlignerError`` that it
(or the factory) raises reaches the engine as a ``DeviceError`` naming the spec and chaining the
original: a sweep then pauses with the shutter shut instead of crashing. ``TimeoutError``
becomes ``DeviceTimeout``; ``ConnectionError``, ``EOFError`` and other ``OSError`` become
``Disconnected``.

Checking without opening: :func:`check_plugin` (used by ``check_spec``) imports the module and
finds the factory, then checks the option names and converts the values, but calls nothing.
Importing a module may run its top-level code; a well-behaved driver module opens no device
at import.
"""

from __future__ import annotations

import difflib
import functools
import importlib
import importlib.metadata
import inspect
import re
import types
import typing
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path, PurePath
from typing import Any, Literal, Union
from urllib.parse import parse_qsl

from aligner.errors import (
    AlignerError,
    DeviceError,
    DeviceTimeout,
    Disconnected,
    InputError,
)

from .open import _flag, _number, _whole
from .protocols import (
    MOUNT_CAPABILITIES,
    SHUTTER_CAPABILITIES,
    Counter,
    PointerReader,
    RotationMount,
    Shutter,
)

__all__ = [
    "ENTRY_POINT_GROUP",
    "PREFIXES",
    "ROLES",
    "PluginSpec",
    "Registered",
    "check_plugin",
    "foreign_error",
    "guarded_call",
    "open_plugin",
    "parse_plugin_spec",
    "registered",
]

#: The entry-point group an installed package registers its device factories in.
ENTRY_POINT_GROUP = "aligner.devices"
#: Spec prefixes handled here.
PREFIXES = ("py:", "plugin:")
#: Role name -> the protocol a device of that role implements.
ROLES: dict[str, type] = {
    "mount": RotationMount,
    "counter": Counter,
    "shutter": Shutter,
    "pointer": PointerReader,
}

_DOTTED = r"[A-Za-z_]\w*(?:\.[A-Za-z_]\w*)*"
_PY_TARGET = re.compile(rf"(?P<module>{_DOTTED}):(?P<attr>{_DOTTED})")
_NAME = re.compile(r"[A-Za-z0-9][\w.\-]*")


@dataclass(frozen=True)
class PluginSpec:
    """A parsed plug-in spec: ``form`` is ``py`` or ``plugin``; ``target`` is
    ``module:attribute`` or the registered name; ``query`` the options as text."""

    spec: str
    form: str
    target: str
    query: Mapping[str, str]


@dataclass(frozen=True)
class Registered:
    """One entry point of :data:`ENTRY_POINT_GROUP`: its name, ``module:attribute`` value and
    the distribution (package) that declares it."""

    name: str
    value: str
    package: str


def parse_plugin_spec(spec: str) -> PluginSpec:
    """Split a ``py:`` or ``plugin:`` spec; raise ``InputError`` saying the allowed shape."""
    form, _, rest = spec.partition(":")
    target, _, query = rest.partition("?")
    if form == "py" and not _PY_TARGET.fullmatch(target):
        raise InputError(
            f"{spec}: write py:package.module:factory?key=value&... (a module path, a colon, "
            "then the name of a class or function in it)"
        )
    if form == "plugin" and not _NAME.fullmatch(target):
        raise InputError(
            f"{spec}: write plugin:NAME?key=value&... with NAME as registered in the "
            f"entry-point group {ENTRY_POINT_GROUP!r}"
        )
    if form not in ("py", "plugin"):
        raise InputError(f"{spec}: a plug-in spec starts with py: or plugin:")
    try:
        options = dict(parse_qsl(query, keep_blank_values=True, strict_parsing=bool(query)))
    except ValueError:
        raise InputError(f"{spec}: bad option list; write ?key=value&key=value") from None
    return PluginSpec(spec, form, target, options)


@functools.cache
def registered() -> dict[str, tuple[Registered, ...]]:
    """Every name in :data:`ENTRY_POINT_GROUP` -> the entry points that declare it (more than
    one when two packages use the same name). Read from package metadata, nothing imported;
    cached (``registered.cache_clear()`` after installing a package into a running process)."""
    found: dict[str, tuple[Registered, ...]] = {}
    for ep in importlib.metadata.entry_points(group=ENTRY_POINT_GROUP):
        package = ep.dist.name if ep.dist is not None else "an unnamed package"
        found[ep.name] = (*found.get(ep.name, ()), Registered(ep.name, ep.value, package))
    return found


def _entry_point(spec: str, name: str) -> Registered:
    entries = registered().get(name, ())
    if not entries:
        names = sorted(registered())
        close = difflib.get_close_matches(name, names, n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        listed = ", ".join(names) if names else "none are installed"
        raise InputError(
            f"{spec}: no installed package registers a device named {name!r} in the "
            f"entry-point group {ENTRY_POINT_GROUP!r} (registered: {listed}){hint}"
        )
    if len(entries) > 1:
        packages = ", ".join(e.package for e in entries)
        raise InputError(
            f"{spec}: the device name {name!r} is registered by more than one package "
            f"({packages}); uninstall one, or open it with its py: spec ({entries[0].value})"
        )
    return entries[0]


def _import(spec: str, module: str, provider: str) -> types.ModuleType:
    """Import ``module``; a missing module and a module that fails to load are told apart."""
    try:
        return importlib.import_module(module)
    except ModuleNotFoundError as exc:
        missing = exc.name or ""
        if module == missing or module.startswith(f"{missing}."):
            raise InputError(
                f"{spec}: no module named {module!r}{provider}; check the spelling and that "
                "its package is installed in the Python environment aligner runs in"
            ) from exc
        raise InputError(
            f"{spec}: module {module!r}{provider} was found but failed to load: it needs "
            f"{missing!r}, which is not installed ({exc})"
        ) from exc
    except Exception as exc:
        raise InputError(
            f"{spec}: module {module!r}{provider} was found but failed to load "
            f"({type(exc).__name__}: {exc})"
        ) from exc


def _resolve(plug: PluginSpec) -> Callable[..., Any]:
    """Import the module of a plug-in spec and return its factory (called by nobody here)."""
    if plug.form == "py":
        module_name, attr = plug.target.split(":")
        provider = ""
    else:
        entry = _entry_point(plug.spec, plug.target)
        module_name, _, attr = entry.value.partition(":")
        module_name = module_name.strip()
        attr = attr.split("[")[0].strip()  # an entry point may carry [extras]
        provider = f" (entry point {entry.name!r} = {entry.value!r} of package {entry.package})"
        if not attr:
            raise InputError(
                f"{plug.spec}: entry point{provider} names a module but no factory; "
                "its value must be 'module:factory'"
            )
    found: Any = _import(plug.spec, module_name, provider)
    for part in attr.split("."):
        if not hasattr(found, part):
            public = sorted(
                n for n, v in vars(found).items() if callable(v) and not n.startswith("_")
            )
            close = difflib.get_close_matches(part, public, n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            raise InputError(
                f"{plug.spec}: {module_name!r}{provider} has no attribute {attr!r}{hint}"
            )
        found = getattr(found, part)
    if not callable(found):
        raise InputError(
            f"{plug.spec}: {module_name}:{attr}{provider} is a {type(found).__name__}, not a "
            "class or function that opens a device"
        )
    return typing.cast(Callable[..., Any], found)


# -- options -----------------------------------------------------------------------------------


def _signature(factory: Callable[..., Any]) -> inspect.Signature | None:
    """The factory's signature, its annotations evaluated when they can be (otherwise left as
    text, read by name for int, float, bool, str and Path); None if it has none."""
    try:
        return inspect.signature(factory, eval_str=True)
    except Exception:  # an annotation that does not evaluate, or no signature at all
        try:
            return inspect.signature(factory)
        except (TypeError, ValueError):
            return None


_BY_NAME: dict[str, Any] = {"int": int, "float": float, "bool": bool, "str": str, "Path": Path}


def _convert(spec: str, key: str, text: str, hint: Any) -> Any:
    """Convert the text of one option by the parameter's annotation (module docstring)."""
    hint = _BY_NAME.get(hint, hint) if isinstance(hint, str) else hint
    origin, args = typing.get_origin(hint), typing.get_args(hint)
    if origin in (Union, types.UnionType):
        kinds = [a for a in args if a is not type(None)]
        return _convert(spec, key, text, kinds[0]) if len(kinds) == 1 else text
    if origin is Literal:
        for choice in args:
            if str(choice) == text:
                return choice
        allowed = ", ".join(str(a) for a in args)
        raise InputError(f"{spec}: option {key}={text!r}: expected one of {allowed}")
    if origin is tuple:
        parts = text.split(",")
        if len(args) == 2 and args[1] is Ellipsis:
            return tuple(_convert(spec, key, p.strip(), args[0]) for p in parts)
        if args and len(parts) != len(args):
            raise InputError(
                f"{spec}: option {key}={text!r}: expected {len(args)} comma-separated values"
            )
        return tuple(_convert(spec, key, p.strip(), a) for p, a in zip(parts, args, strict=False))
    if hint is bool:
        return _flag(spec, key, text)
    if hint is int:
        return _whole(spec, key, text)
    if hint is float:
        return _number(spec, key, text)
    if isinstance(hint, type) and issubclass(hint, PurePath):
        return hint(text)
    return text


def _bind(spec: str, factory: Callable[..., Any], options: Mapping[str, Any]) -> dict[str, Any]:
    """Check option names against the factory's parameters; convert text values."""
    sig = _signature(factory)
    if sig is None:  # a builtin or extension without a signature: pass everything on
        return dict(options)
    params = {
        n: p
        for n, p in sig.parameters.items()
        if p.kind in (p.POSITIONAL_OR_KEYWORD, p.KEYWORD_ONLY)
    }
    takes_any = any(p.kind is p.VAR_KEYWORD for p in sig.parameters.values())
    bound: dict[str, Any] = {}
    for key, value in options.items():
        param = params.get(key)
        if param is None and not takes_any:
            if key == "name":
                continue  # the bench's name for a factory that names its own devices
            allowed = ", ".join(params) or "no options"
            raise InputError(f"{spec}: unknown option {key!r}; the factory takes: {allowed}")
        hint = param.annotation if param is not None else inspect.Parameter.empty
        bound[key] = _convert(spec, key, value, hint) if isinstance(value, str) else value
    missing = [
        n
        for n, p in sig.parameters.items()
        if p.default is p.empty
        and p.kind not in (p.VAR_POSITIONAL, p.VAR_KEYWORD)
        and n not in bound
    ]
    if missing:
        raise InputError(
            f"{spec}: missing option {missing[0]!r} (required by the factory; write "
            f"?{missing[0]}=...)"
        )
    return bound


def _prepare(
    spec: str, overrides: Mapping[str, Any], profile: Any
) -> tuple[Callable[..., Any], dict[str, Any]]:
    plug = parse_plugin_spec(spec)
    factory = _resolve(plug)
    options: dict[str, Any] = {**plug.query, **overrides}
    if profile is not None:
        options["profile"] = profile
    return factory, _bind(spec, factory, options)


def check_plugin(spec: str) -> str:
    """Check a plug-in spec without opening a device: parse it, import the module, find the
    factory, check and convert the options. Return the form (``py`` or ``plugin``)."""
    _prepare(spec, {}, None)
    return parse_plugin_spec(spec).form


# -- the result --------------------------------------------------------------------------------


def _members(protocol: type) -> list[str]:
    methods = [n for n, v in vars(protocol).items() if callable(v) and not n.startswith("_")]
    return sorted({*methods, *protocol.__annotations__})


def _check_shape(spec: str, role: str, device: Any) -> None:
    protocol = ROLES[role]
    missing = [m for m in _members(protocol) if not hasattr(device, m)]
    if missing:
        raise InputError(
            f"{spec}: the factory returned a {type(device).__name__}, which lacks "
            f"{', '.join(missing)} of the {protocol.__name__} protocol "
            "(aligner_drivers.protocols) needed for a " + role
        )
    allowed = {"mount": MOUNT_CAPABILITIES, "shutter": SHUTTER_CAPABILITIES}.get(role)
    if allowed is not None:
        caps = getattr(device, "capabilities", None)
        if not isinstance(caps, frozenset | set) or not caps <= allowed:
            raise InputError(
                f"{spec}: capabilities must be a frozenset of {', '.join(sorted(allowed))}; "
                f"the device has {caps!r}"
            )
    if role == "counter" and getattr(device, "channels", None) not in (1, 2):
        raise InputError(f"{spec}: counter channels must be 1 or 2, got {device.channels!r}")


def foreign_error(label: str, what: str, exc: Exception) -> DeviceError:
    """The ``DeviceError`` a foreign (library or OS) exception becomes at a driver boundary:
    ``TimeoutError`` -> ``DeviceTimeout``, ``OSError`` and ``EOFError`` -> ``Disconnected``,
    anything else ``DeviceError``; ``label`` names the device, ``what`` the operation."""
    text = f"{label}: {what} failed ({type(exc).__name__}: {str(exc)!r})"
    if isinstance(exc, TimeoutError):
        return DeviceTimeout(f"{text}; check that the device is on and answering")
    if isinstance(exc, OSError | EOFError):
        return Disconnected(f"{text}; check the cable, the power and the connection")
    return DeviceError(f"{text}; this is an error of the plug-in driver or its device library")


def guarded_call(label: str, what: str, fn: Callable[..., Any], *args: Any) -> Any:
    """``fn(*args)``, with any exception but an ``AlignerError`` raised as
    :func:`foreign_error` (the original chained)."""
    try:
        return fn(*args)
    except AlignerError:
        raise
    except Exception as exc:
        raise foreign_error(label, what, exc) from exc


class _Guarded:
    """Forwards to a plug-in device; foreign exceptions become ``DeviceError`` (module doc)."""

    def __init__(self, device: Any, spec: str) -> None:
        self.device = device
        self.spec = spec
        self.name = str(getattr(device, "name", "") or spec)
        #: how messages name the device
        self.label = spec if self.name == spec else f"{self.name} ({spec})"

    def _call(self, method: str, *args: Any) -> Any:
        return guarded_call(self.label, f"{method}()", getattr(self.device, method), *args)

    def __getattr__(self, attr: str) -> Any:
        if attr == "device":  # not set yet (e.g. during copying): no recursion
            raise AttributeError(attr)
        value = getattr(self.device, attr)
        if not callable(value):
            return value
        return functools.partial(guarded_call, self.label, f"{attr}()", value)

    def identify(self) -> str:
        """The device's own identity string, or "" when it has no ``identify()``."""
        if not hasattr(self.device, "identify"):
            return ""
        return str(self._call("identify"))

    def close(self) -> None:
        """Release the device."""
        self._call("close")


class _GuardedMount(_Guarded):
    def __init__(self, device: Any, spec: str) -> None:
        super().__init__(device, spec)
        self.capabilities: frozenset[str] = frozenset(device.capabilities)

    def move_to(self, reading_deg: float) -> None:
        self._call("move_to", reading_deg)

    def position(self) -> float:
        return float(self._call("position"))

    def home(self) -> None:
        self._call("home")

    def stop(self) -> None:
        self._call("stop")

    def is_moving(self) -> bool:
        return bool(self._call("is_moving"))


class _GuardedCounter(_Guarded):
    def __init__(self, device: Any, spec: str) -> None:
        super().__init__(device, spec)
        self.channels: int = int(device.channels)

    def count(self, dwell_s: float) -> tuple[int, ...]:
        return tuple(self._call("count", dwell_s))


class _GuardedShutter(_Guarded):
    def __init__(self, device: Any, spec: str) -> None:
        super().__init__(device, spec)
        self.capabilities: frozenset[str] = frozenset(device.capabilities)

    def open(self) -> None:
        self._call("open")

    def shut(self) -> None:
        self._call("shut")

    def is_open(self) -> bool:
        return bool(self._call("is_open"))


class _GuardedPointer(_Guarded):
    def read(self, dwell_s: float) -> tuple[float, float]:
        mean, sem = self._call("read", dwell_s)
        return float(mean), float(sem)


_WRAPPERS: dict[str, type[_Guarded]] = {
    "mount": _GuardedMount,
    "counter": _GuardedCounter,
    "shutter": _GuardedShutter,
    "pointer": _GuardedPointer,
}


def open_plugin(
    spec: str, role: str, overrides: Mapping[str, Any] | None = None, *, profile: Any = None
) -> Any:
    """Open the device of a plug-in spec for ``role`` (``mount``, ``counter``, ``shutter`` or
    ``pointer``): resolve and call the factory, check the result against the role's protocol
    and return it wrapped (see the module docstring)."""
    if role not in ROLES:
        raise InputError(f"{spec}: unknown device role {role!r}; allowed: {', '.join(ROLES)}")
    factory, options = _prepare(spec, overrides or {}, profile)
    device = guarded_call(spec, "opening the device", functools.partial(factory, **options))
    try:
        _check_shape(spec, role, device)
    except InputError:
        if callable(getattr(device, "close", None)):
            guarded_call(spec, "close()", device.close)
        raise
    return _WRAPPERS[role](device, spec)
