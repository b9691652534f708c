"""The bench's devices: which are declared, what kind each is, opening them, and their record.

Every device comes from a ``driver`` spec: each mount's ``[mounts.<name>] driver`` and the
counter, shutter and pointer reader of ``[devices.<role>] driver`` in the bench file; the
command line may override the last three (``--counter SPEC`` ...). A spec's *kind*:

* ``real``: a serial port, a pyserial URL or a plug-in: the hardware answers;
* ``simulated``: ``sim`` (counts from the physics model at the simulated mounts' true angles)
  or ``sim:?...`` (plain simulated devices);
* ``typed``: ``manual``: the operator types the numbers read off another instrument;
* ``absent``: ``none`` (a shutter or pointer reader the bench does not have).

Nothing is simulated by default on a real bench: when any device is real, every other device
must be declared (in the file or on the command line), or opening refuses before anything
moves and names the undeclared device. A fully simulated bench needs no declarations.

A run keeps :class:`Provenance`: per device its spec, kind, where it was chosen, its profile
file and that file's SHA-256, and the identity string it reports; the software version, the
bench file's SHA-256 and the simulation's random seed.

Caution: opening real mounts and shutters moves hardware that can send light onto a detector;
follow your local laser-safety rules and your laser safety officer.
"""

from __future__ import annotations

import hashlib
import secrets
import time
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from aligner_drivers.open import (
    check_spec,
    open_counter,
    open_mount,
    open_pointer,
    open_shutter,
    profile_file,
)
from aligner_drivers.protocols import Counter, Identifies, PointerReader, RotationMount, Shutter

from ..bench import DEVICE_ROLES, Bench
from ..errors import DeviceError, InputError
from .simbench import SimBench

__all__ = [
    "DEVICE_KINDS",
    "DeviceChoice",
    "DeviceRecord",
    "DeviceSet",
    "Provenance",
    "choose_devices",
    "open_devices",
    "spec_kind",
]

DEVICE_KINDS = ("real", "simulated", "typed", "absent")
#: A seed drawn for a run fits SQLite's signed 64-bit integers.
_SEED_BITS = 63


def spec_kind(spec: str) -> str:
    """The kind (:data:`DEVICE_KINDS`) of a device opened from ``spec``."""
    if spec == "none":
        return "absent"
    kind = check_spec(spec, manual=True)
    return {"sim": "simulated", "manual": "typed"}.get(kind, "real")


@dataclass(frozen=True)
class DeviceChoice:
    """One device to open: its ``role`` (``mount``, ``counter``, ``shutter``, ``pointer``),
    ``name`` (the mount's name, else the role), ``spec`` and ``profile``, where it was chosen
    (``source``: the bench key or the command-line option) and whether it was ``declared``."""

    role: str
    name: str
    spec: str
    profile: str | None
    source: str
    declared: bool

    @property
    def kind(self) -> str:
        """``real``, ``simulated``, ``typed`` or ``absent``."""
        return spec_kind(self.spec)


def choose_devices(
    bench: Bench, overrides: Mapping[str, tuple[str, str | None]] | None = None
) -> tuple[DeviceChoice, ...]:
    """Every device of ``bench`` (mounts first, bench order), with ``overrides``
    (``{"counter": (spec, profile), ...}`` from the command line) applied; refuses a bench with
    a real device and an undeclared one (see the module docstring)."""
    overrides = dict(overrides or {})
    unknown = sorted(set(overrides) - set(DEVICE_ROLES))
    if unknown:
        raise InputError(f"no device role {unknown[0]!r}; allowed: {', '.join(DEVICE_ROLES)}")
    choices = [
        DeviceChoice("mount", name, m.driver, m.profile, m.key, m.declared)
        for name, m in bench.mounts.items()
    ]
    for role in DEVICE_ROLES:
        device = bench.devices[role]
        if role in overrides:
            spec, profile = overrides[role]
            choices.append(DeviceChoice(role, role, spec, profile, f"--{role}", True))
        else:
            choices.append(
                DeviceChoice(role, role, device.driver, device.profile, device.key, device.declared)
            )
    for choice in choices:
        if choice.spec == "none" and choice.role in ("mount", "counter"):
            raise InputError(f"{choice.source}: a {choice.role} cannot be 'none'")
        if choice.spec.startswith("manual") and choice.role in ("mount", "shutter"):
            raise InputError(
                f"{choice.source}: manual devices exist only for counters and pointers"
            )
    real = [c for c in choices if c.kind == "real"]
    missing = [c for c in choices if not c.declared]
    if real and missing:
        where = bench.path or "the bench file"
        first = missing[0]
        table = f"[mounts.{first.name}]" if first.role == "mount" else f"[devices.{first.role}]"
        absent = (
            ', or driver = "none" if the bench has none'
            if first.role in ("shutter", "pointer")
            else ""
        )
        raise InputError(
            f"{where}: {first.source} is not declared, but this bench has real devices "
            f"({real[0].source} = {real[0].spec!r}), so nothing may be simulated by default: "
            f"declare it in {table} with driver = the port or URL (and profile = its device "
            f'profile), or driver = "sim" to simulate it on purpose{absent}'
        )
    return tuple(choices)


@dataclass(frozen=True)
class DeviceRecord:
    """What one device of a run was (see the module docstring)."""

    role: str
    name: str
    spec: str
    kind: str
    source: str
    profile: str | None = None
    profile_sha256: str | None = None
    identity: str = ""

    def to_json(self) -> dict[str, Any]:
        """The record as a JSON object (the run log stores it)."""
        return {
            "role": self.role,
            "name": self.name,
            "spec": self.spec,
            "kind": self.kind,
            "source": self.source,
            "profile": self.profile,
            "profile_sha256": self.profile_sha256,
            "identity": self.identity,
        }


@dataclass(frozen=True)
class Provenance:
    """What a run was made with: every device, the software, the bench file and the seed."""

    devices: tuple[DeviceRecord, ...]
    software_version: str
    bench_sha256: str | None
    seed: int | None

    @property
    def kinds(self) -> frozenset[str]:
        """Kinds of the devices present (``real``, ``simulated``, ``typed``)."""
        return frozenset(d.kind for d in self.devices) - {"absent"}

    def to_json(self) -> dict[str, Any]:
        """The document the run log keeps (``runs.provenance_json``)."""
        return {
            "devices": [d.to_json() for d in self.devices],
            "software_version": self.software_version,
            "bench_sha256": self.bench_sha256,
            "seed": self.seed,
        }


@dataclass
class DeviceSet:
    """The opened devices of one bench. ``sim`` is the simulated bench when its counter is in
    use (then simulated time may pass without waiting); ``records`` say what each device is."""

    mounts: dict[str, RotationMount]
    counter: Counter
    shutter: Shutter | None = None
    pointer: PointerReader | None = None
    sim: SimBench | None = None
    simulated_time: bool = True
    records: tuple[DeviceRecord, ...] = ()
    seed: int | None = None

    def wait(self, seconds: float) -> None:
        """Let ``seconds`` pass: really, or on the simulated clock."""
        if seconds <= 0:
            return
        if self.simulated_time and self.sim is not None:
            self.sim.clock_s += seconds
        else:
            time.sleep(seconds)

    def close(self) -> None:
        """Release every device (errors while closing are ignored: the link may be gone)."""
        for device in {
            id(d): d
            for d in (*self.mounts.values(), self.counter, self.shutter, self.pointer)
            if d is not None
        }.values():
            try:
                device.close()
            except DeviceError:
                continue


def _profile_file(bench: Bench, profile: str | None) -> Path | None:
    """The profile file a device uses (a path, relative to the bench file's folder too, or a
    shipped profile's name); None when there is none to hash."""
    if profile is None:
        return None
    return profile_file(profile, base=bench.path.parent if bench.path is not None else None)


def _sha256(path: Path | None) -> str | None:
    if path is None:
        return None
    try:
        return hashlib.sha256(path.read_bytes()).hexdigest()
    except OSError:
        return None


def _identity(device: Any, kind: str, seed: int | None) -> str:
    if device is None:
        return ""
    if isinstance(device, Identifies):
        try:
            return device.identify()
        except DeviceError as exc:
            return f"(no identity: {exc})"
    if kind == "simulated":
        return f"simulated, seed {seed}" if seed is not None else "simulated"
    return ""


_OPENERS = {"mount": open_mount, "counter": open_counter, "shutter": open_shutter}


def open_devices(
    bench: Bench,
    *,
    overrides: Mapping[str, tuple[str, str | None]] | None = None,
    realtime: bool = False,
    seed: int | None = None,
) -> DeviceSet:
    """Open every device of ``bench`` (:func:`choose_devices` first, so an undeclared device on
    a real bench is refused before anything opens).

    ``sim`` devices come from one :class:`SimBench`, whose counts follow the physics at the
    simulated mounts' true angles (a real mount's read-back stands in for its true angle).
    ``seed`` (default: the file's ``[simulation] seed``, else a fresh one) seeds it and is
    recorded. Any device that fails to open closes the ones already opened.
    """
    choices = choose_devices(bench, overrides)
    if seed is None:
        seed = bench.simulation.seed
    if seed is None:
        seed = secrets.randbits(_SEED_BITS)
    if not 0 <= seed < 2**_SEED_BITS:
        raise InputError(f"the seed must be a whole number from 0 to 2^63 - 1, got {seed}")
    sim = SimBench(bench, seed=seed, realtime=realtime)
    simulated = {
        "counter": sim.counter,
        "shutter": sim.shutter,
        "pointer": sim.pointer,
    }
    opened: list[Any] = []
    chosen: dict[str, Any] = {}
    records = []
    try:
        for c in choices:
            device = _open_one(bench, c, sim, simulated)
            if device is not None and c.spec != "sim":
                opened.append(device)
            chosen[c.name if c.role == "mount" else c.role] = device
            path = _profile_file(bench, c.profile)
            records.append(
                DeviceRecord(
                    c.role,
                    c.name,
                    c.spec,
                    c.kind,
                    c.source,
                    str(path) if path is not None else c.profile,
                    _sha256(path),
                    _identity(device, c.kind, seed if c.spec == "sim" else None),
                )
            )
    except BaseException:
        for device in opened:
            try:
                device.close()
            except DeviceError:
                continue
        raise
    counter = chosen["counter"]
    _check_channels(bench, counter, next(c for c in choices if c.role == "counter"))
    mounts = {name: chosen[name] for name in bench.mounts}
    sim.mounts.update(mounts)
    if chosen["shutter"] is not None:
        sim.shutter = chosen["shutter"]
    uses_sim = any(c.spec == "sim" for c in choices)
    all_simulated = all(c.kind in ("simulated", "absent") for c in choices)
    return DeviceSet(
        mounts,
        counter,
        chosen["shutter"],
        chosen["pointer"],
        sim if counter is sim.counter else None,
        simulated_time=not realtime and all_simulated,
        records=tuple(records),
        seed=seed if uses_sim else None,
    )


def _open_one(bench: Bench, c: DeviceChoice, sim: SimBench, simulated: Mapping[str, Any]) -> Any:
    """Open one chosen device (``none`` -> None; ``sim`` -> the simulated bench's)."""
    if c.spec == "none":
        return None
    if c.spec == "sim":
        return sim.mounts[c.name] if c.role == "mount" else simulated[c.role]
    path = _profile_file(bench, c.profile)
    profile = str(path) if path is not None else c.profile
    options: dict[str, Any] = {"name": c.name}
    if c.spec.startswith("manual") and c.role == "counter":
        options["channels"] = 1 if bench.reference.kind == "none" else 2
    opener = _OPENERS.get(c.role, open_pointer)
    try:
        return opener(c.spec, profile=profile, **options)
    except InputError as exc:  # name the bench key (or option) that led here
        where = bench.path if c.source.startswith(("mounts.", "devices.")) else None
        prefix = f"{where}: {c.source}" if where else c.source
        raise InputError(f"{prefix}: {exc}") from None


def _check_channels(bench: Bench, counter: Counter, choice: DeviceChoice) -> None:
    if bench.reference.kind != "none" and counter.channels < 2:
        raise InputError(
            f"{choice.source}: the counter has {counter.channels} channel, but the bench's "
            f"[reference] kind = {bench.reference.kind!r} needs a second channel for the "
            "reference; use a two-channel counter or set kind = 'none'"
        )
