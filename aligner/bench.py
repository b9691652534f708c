"""Bench files (TOML) -> a validated, typed, frozen model. The one place for units and conventions.

Units and conventions of a bench file:

* Angles in degrees; an element angle is measured from H towards V looking into the beam.
* A mount's element angle is ``sense * (reading_deg - offset_deg)``.
* Wavelengths in nm, rates in counts (or photons) per second, dead time in ns; pointer width and
  coupling strength in the bench's ``coupling.units``.
* Retardance in waves (1 wave = 360 deg of phase).

Loading keeps the parsed tomlkit document so that :func:`write_values` can store new readings,
offsets or fitted values back into the file with its comments and layout preserved.
"""

from __future__ import annotations

import difflib
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import tomlkit
import tomlkit.exceptions

from .errors import BenchFileError, InputError

if TYPE_CHECKING:
    from numpy.typing import ArrayLike

    from .physics.detection import DetectorRates

__all__ = [
    "DEMO_BENCH",
    "Analyzer",
    "Bench",
    "Coupling",
    "Detector",
    "Device",
    "Element",
    "Mount",
    "Plate",
    "Reference",
    "Simulation",
    "Source",
    "ensure_writable",
    "load_bench",
    "resolve_bench_path",
    "snapshot_text",
    "with_values",
    "write_values",
]

#: The bundled demo bench (an invented scenario) used by the quick start.
DEMO_BENCH = Path(__file__).parent / "data" / "demo-bench.toml"

ELEMENT_TYPES = ("hwp", "qwp", "retarder", "polarizer", "rotator")
NOMINAL_WAVES = {"hwp": 0.5, "qwp": 0.25}
READOUTS = ("position", "momentum", "phase")
DETECTOR_MODES = ("cw", "pulsed")
#: Largest size of any number in a bench file (angles: :data:`LARGEST_ANGLE`); anything bigger
#: is a typo, and the physics would lose all precision on it.
LARGEST = 1e12
#: Largest size of an angle or a reading (deg): ten turns.
LARGEST_ANGLE = 3600.0
#: Most bytes a bench file may have, and most elements per arm and mounts.
MAX_FILE_BYTES = 1_000_000
MAX_ITEMS = 64
#: Devices besides the mounts that a bench file declares under ``[devices.<role>]``.
DEVICE_ROLES = ("counter", "shutter", "pointer")
#: What the counter's second channel sees (``[reference] kind``).
REFERENCE_KINDS = ("none", "monitor")
INF = math.inf


@dataclass(frozen=True)
class Plate:
    """How a waveplate was made, to compute its retardance at the working wavelength."""

    material: str
    kind: str
    design_nm: float
    order: int = 0
    thickness_um: float | None = None


@dataclass(frozen=True)
class Element:
    """One optical element in the pre- or post-selection arm.

    ``angle_deg`` is the fixed element angle when ``mount`` is None. For a rotator the "angle"
    is its rotation (deg). ``retardance_waves`` is already resolved at the bench wavelength.
    """

    type: str
    key: str
    mount: str | None = None
    angle_deg: float = 0.0
    retardance_waves: float = 0.0
    retardance_tol_waves: float = 0.0
    plate: Plate | None = None
    extinction_ratio: float = INF
    transmission: float = 1.0


@dataclass(frozen=True)
class Source:
    """The source polarizer and the photon rate leaving it (photons/s)."""

    photon_rate: float
    angle_deg: float = 0.0
    mount: str | None = None
    extinction_ratio: float = INF


@dataclass(frozen=True)
class Reference:
    """What the counter's second channel (the reference) sees.

    ``kind``: ``"none"`` (no reference channel: measured leak rates are normalised by the
    nominal ``photon_rate`` times the detector efficiency) or ``"monitor"`` (a pick-off of the
    source ahead of the interferometer: ``fraction`` counts per source photon, so source drift
    cancels). ``dark_rate`` (counts/s) is the reference detector's own dark rate.
    """

    kind: str = "none"
    fraction: float | None = None
    dark_rate: float = 0.0


@dataclass(frozen=True)
class Coupling:
    """The weak interaction ``exp(-i g A p)`` and its pointer.

    ``observable`` is a name (HV, DA, RL, H, V, D, A, R, L) or ``"axis"`` with ``axis``
    (a Stokes direction) and ``eigenvalues``. ``pointer_sigma`` is the rms width of the pointer
    intensity, ``strength`` the shift per unit eigenvalue (both in ``units``). For the
    ``phase`` readout the pointer is a coherent probe of ``probe_photons`` photons whose phase
    spread is ``1/(2 sqrt(N))`` rad, and ``strength`` is in rad. ``jitter_rms`` is technical
    pointer noise (not amplified): the rms of a reading averaged for 1 s, in the readout's units
    (``units``; 1/``units`` for a momentum readout); white, so it falls as 1/sqrt(time).
    """

    observable: str
    readout: str
    pointer_sigma: float
    strength: float
    units: str
    axis: tuple[float, float, float] | None = None
    eigenvalues: tuple[float, float] = (1.0, -1.0)
    jitter_rms: float = 0.0
    probe_photons: float | None = None


@dataclass(frozen=True)
class Analyzer:
    """The final polarizer before the detector."""

    angle_deg: float = 0.0
    mount: str | None = None
    extinction_ratio: float = INF
    transmission: float = 1.0


@dataclass(frozen=True)
class Detector:
    """Single-photon detector. Rates in counts/s, dead time in ns, efficiency in (0, 1].

    ``safe_rate`` is infinite when the file does not state it: predictions work, but every
    command that can expose the detector refuses to run (:meth:`require_safe_rate`).
    """

    efficiency: float = 1.0
    dark_rate: float = 0.0
    dead_time_ns: float = 0.0
    safe_rate: float = INF
    mode: str = "cw"
    rep_rate_hz: float | None = None
    gate_dark_probability: float = 0.0
    saturation_rate: float | None = None

    @property
    def dead_time_s(self) -> float:
        """Dead time in seconds (the file gives nanoseconds)."""
        return self.dead_time_ns * 1e-9

    @property
    def pulse_rate_hz(self) -> float | None:
        """Repetition rate (Hz) in pulsed mode; None when counting continuously."""
        return self.rep_rate_hz if self.mode == "pulsed" else None

    def expected_rates(
        self,
        photon_rate: ArrayLike,
        leak_rate: ArrayLike,
        *,
        dark_rate: ArrayLike | None = None,
    ) -> DetectorRates:
        """Rates this detector shows for ``photon_rate`` photons/s of which the share
        ``leak_rate`` reaches it (:func:`aligner.physics.detection.expected_rates` with this
        detector's efficiency, dark counts, dead time and mode); ``dark_rate`` (counts/s)
        replaces the file's."""
        from .physics.detection import expected_rates

        return expected_rates(
            photon_rate,
            leak_rate,
            self.efficiency,
            self.dark_rate if dark_rate is None else dark_rate,
            self.dead_time_s,
            rep_rate_hz=self.pulse_rate_hz,
            dark_probability=self.gate_dark_probability,
        )

    def require_safe_rate(self, path: Path | str | None) -> float:
        """``safe_rate`` (counts/s), or :class:`BenchFileError` when the file does not state it:
        no command may expose the detector without a limit."""
        if math.isfinite(self.safe_rate):
            return self.safe_rate
        raise BenchFileError(
            str(path or "<bench>"),
            "detector.safe_rate",
            "is required before anything can expose the detector (sweeps, null searches, "
            "recipes, moves from the desk): the count rate in counts/s the detector must never "
            "see, from its data sheet, e.g. safe_rate = 1.5e6; predict and plan work without it",
        )


@dataclass(frozen=True)
class Device:
    """A device the bench opens besides its mounts (``[devices.<role>]``): the ``driver`` spec
    (``sim``, ``manual``, a serial port or URL, a plug-in spec, or ``none``), its device
    ``profile``, and whether the file ``declared`` it (an undeclared device is ``sim``)."""

    role: str
    driver: str = "sim"
    profile: str | None = None
    declared: bool = False

    @property
    def key(self) -> str:
        """The bench-file key that declares it."""
        return f"devices.{self.role}.driver"


@dataclass(frozen=True)
class Mount:
    """A rotation mount: how its reading maps to the element angle, and what it can do."""

    name: str
    driver: str = "sim"
    reading_deg: float = 0.0
    offset_deg: float = 0.0
    sense: int = 1
    resolution_deg: float = 0.001
    backlash_deg: float = 0.0
    travel_deg: tuple[float, float] = (-360.0, 360.0)
    repeatability_deg: float = 0.0
    offset_err_deg: float = 0.0
    speed_deg_s: float = 20.0
    profile: str | None = None
    declared: bool = False
    readback_tol_deg: float | None = None

    @property
    def key(self) -> str:
        """The bench-file key that declares its driver."""
        return f"mounts.{self.name}.driver"

    @property
    def readback_tolerance_deg(self) -> float:
        """Largest |read-back - commanded| (deg) a move may end with: ``readback_tol_deg`` when
        the file states it, else resolution + backlash + repeatability."""
        if self.readback_tol_deg is not None:
            return self.readback_tol_deg
        return self.resolution_deg + self.backlash_deg + self.repeatability_deg

    def element_angle_deg(self, reading_deg: Any) -> Any:
        """Element angle (deg) at a mount reading (deg); broadcasts over arrays."""
        return self.sense * (reading_deg - self.offset_deg)

    def reading_for_angle_deg(self, angle_deg: Any) -> Any:
        """Mount reading (deg) that puts the element at ``angle_deg``."""
        return angle_deg * self.sense + self.offset_deg


@dataclass(frozen=True)
class Simulation:
    """The simulated bench's hidden truth, in absolute terms so that writing a calibration into
    the file never moves it.

    ``true_offset_deg``: the true offset of each named mount (others: the file's offset);
    ``true_extinction``: true extinction ratio of the ``analyzer`` and/or ``source``;
    ``retardance_error_waves``: added to each plate's nominal or dispersion retardance (a
    calibrated ``retardance_waves`` in the file does not change the truth); ``seed`` for the
    random draws (None: a fresh seed for every run, recorded with it).
    """

    seed: int | None = None
    true_offset_deg: Mapping[str, float] = field(default_factory=dict)
    true_extinction: Mapping[str, float] = field(default_factory=dict)
    retardance_error_waves: float = 0.0


@dataclass(frozen=True)
class Bench:
    """A whole interferometer: source, pre-selection optics, coupling, post-selection, analyzer,
    detector and mounts."""

    path: Path | None
    wavelength_nm: float
    imbalance_mount: str
    source: Source
    pre: tuple[Element, ...]
    coupling: Coupling
    post: tuple[Element, ...]
    analyzer: Analyzer
    detector: Detector
    mounts: Mapping[str, Mount]
    phase_mount: str | None = None
    simulation: Simulation = field(default_factory=Simulation)
    name: str = ""
    devices: Mapping[str, Device] = field(
        default_factory=lambda: {role: Device(role) for role in DEVICE_ROLES}
    )
    reference: Reference = field(default_factory=Reference)

    def readings(self) -> dict[str, float]:
        """Current reading (deg) of every mount, as stored in the file."""
        return {name: m.reading_deg for name, m in self.mounts.items()}

    def with_mounts(self, **changes: Mount) -> Bench:
        """A copy with some mounts replaced (used by fits and the tolerance budget)."""
        from dataclasses import replace

        return replace(self, mounts={**self.mounts, **changes})


# --------------------------------------------------------------------------------------------
# Validation


class _Reader:
    """Reads one table of the document, remembering which keys were used."""

    def __init__(self, path: str, prefix: str, table: Mapping[str, Any], allowed: tuple[str, ...]):
        self.path, self.prefix, self.table = path, prefix, table
        for key in table:
            if key not in allowed:
                close = difflib.get_close_matches(key, allowed, n=1)
                hint = f"; did you mean {close[0]!r}?" if close else ""
                raise self.error(key, f"unknown key (allowed: {', '.join(allowed)}){hint}")

    def key(self, name: str) -> str:
        return f"{self.prefix}.{name}" if self.prefix else name

    def error(self, name: str, problem: str) -> BenchFileError:
        return BenchFileError(self.path, self.key(name), problem)

    def has(self, name: str) -> bool:
        return name in self.table

    def number(
        self,
        name: str,
        default: float | None = None,
        *,
        minimum: float | None = None,
        above: float | None = None,
        maximum: float | None = None,
        allow_inf: bool = False,
        limit: float = LARGEST,
    ) -> float:
        if name not in self.table:
            if default is None:
                raise self.error(name, "is required (a number)")
            return default
        value = self.table[name]
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.error(name, f"must be a number, got {value!r}")
        value = float(value)
        if math.isnan(value) or (math.isinf(value) and not allow_inf):
            raise self.error(name, f"must be a finite number, got {value}")
        if minimum is not None and value < minimum:
            raise self.error(name, f"must be at least {minimum:g}, got {value:g}")
        if above is not None and value <= above:
            raise self.error(name, f"must be greater than {above:g}, got {value:g}")
        if maximum is not None and value > maximum:
            raise self.error(name, f"must be at most {maximum:g}, got {value:g}")
        if math.isfinite(value) and abs(value) > limit:
            raise self.error(name, f"must be between {-limit:g} and {limit:g}, got {value:g}")
        return value

    def angle(
        self,
        name: str,
        default: float | None = None,
        *,
        minimum: float | None = None,
        above: float | None = None,
        maximum: float | None = None,
    ) -> float:
        """A number of degrees, at most :data:`LARGEST_ANGLE` in size."""
        return self.number(
            name, default, minimum=minimum, above=above, maximum=maximum, limit=LARGEST_ANGLE
        )

    def integer(self, name: str, default: int, *, minimum: int = 0, maximum: int = 10**6) -> int:
        if name not in self.table:
            return default
        value = self.table[name]
        whole = isinstance(value, int) or (isinstance(value, float) and value.is_integer())
        if isinstance(value, bool) or not whole:
            raise self.error(name, f"must be a whole number, got {value!r}")
        if not minimum <= int(value) <= maximum:
            raise self.error(
                name, f"must be a whole number from {minimum} to {maximum}, got {value}"
            )
        return int(value)

    def text(self, name: str, default: str | None = None, choices: tuple[str, ...] = ()) -> str:
        if name not in self.table:
            if default is None:
                raise self.error(name, "is required (a string)")
            return default
        value = self.table[name]
        if not isinstance(value, str):
            raise self.error(name, f"must be a string, got {value!r}")
        value = str(value)
        if choices and value not in choices:
            close = difflib.get_close_matches(value, choices, n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            raise self.error(name, f"must be one of {', '.join(choices)}, got {value!r}{hint}")
        return value

    def table_of(self, name: str) -> Mapping[str, Any]:
        value = self.table.get(name, {})
        if not isinstance(value, Mapping):
            raise self.error(name, "must be a table")
        return value

    def numbers(self, name: str, length: int) -> tuple[float, ...]:
        value = self.table[name]
        if not isinstance(value, list) or len(value) != length:
            raise self.error(name, f"must be a list of {length} numbers, got {value!r}")
        out = []
        for item in value:
            bad = isinstance(item, bool) or not isinstance(item, int | float)
            if bad or not math.isfinite(item):
                raise self.error(name, f"must be a list of {length} finite numbers, got {value!r}")
            out.append(float(item))
        return tuple(out)


def _extinction(r: _Reader) -> float:
    er = r.number("extinction_ratio", INF, allow_inf=True)
    if er <= 1:
        raise r.error(
            "extinction_ratio",
            f"must be above 1 (1 would pass both polarizations alike; 1e5 for a good prism), "
            f"got {er:g}",
        )
    return er


def _angle_or_mount(r: _Reader, mounts: Mapping[str, Any]) -> tuple[float, str | None]:
    if r.has("mount"):
        if r.has("angle_deg"):
            raise r.error("angle_deg", "give either angle_deg or mount, not both")
        name = r.text("mount")
        if name not in mounts:
            close = difflib.get_close_matches(name, list(mounts), n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            known = ", ".join(mounts) or "none"
            raise r.error("mount", f"unknown mount {name!r} (mounts defined: {known}){hint}")
        return 0.0, name
    return r.angle("angle_deg", 0.0), None


def _plate(r: _Reader, element_type: str, wavelength_nm: float) -> tuple[float, Plate | None]:
    from .physics.materials import MATERIALS, PLATE_KINDS, plate_retardance_waves

    override = r.number("retardance_waves", minimum=0.0) if r.has("retardance_waves") else None
    if element_type == "retarder":
        if override is None:
            raise r.error("retardance_waves", "is required for a retarder (in waves)")
        if r.has("plate"):
            raise r.error("plate", "applies to hwp and qwp only; give a retarder retardance_waves")
        return override, None
    nominal = NOMINAL_WAVES[element_type]
    if not r.has("plate"):
        return (nominal if override is None else override), None
    pr = _Reader(
        r.path,
        r.key("plate"),
        r.table_of("plate"),
        ("material", "kind", "design_nm", "order", "thickness_um"),
    )
    material = pr.text("material", "quartz", tuple(MATERIALS))
    kind = pr.text("kind", "zero-order", PLATE_KINDS)
    design = pr.number("design_nm", wavelength_nm, above=0.0)
    order = pr.integer("order", 0)
    thickness = pr.number("thickness_um", above=0.0) if pr.has("thickness_um") else None
    lo, hi = (1000 * x for x in MATERIALS[material][0].valid_um)
    for key, lam in ((pr.key("design_nm"), design), ("wavelength_nm", wavelength_nm)):
        if not lo <= lam <= hi:
            raise BenchFileError(
                r.path,
                key,
                f"{lam:g} nm is outside the {material} dispersion "
                f"fit ({lo:g}-{hi:g} nm) used by {r.key('plate')}",
            )
    plate = Plate(material, kind, design, order, thickness)
    if override is not None:  # a measured value (e.g. from a waveplate fit) beats the dispersion
        return override, plate
    waves = float(
        plate_retardance_waves(
            nominal, material, kind, design, wavelength_nm, order=order, thickness_um=thickness
        )
    )
    return waves, plate


def _element(
    path: str, key: str, table: Any, mounts: Mapping[str, Any], wavelength_nm: float
) -> Element:
    if not isinstance(table, Mapping):
        raise BenchFileError(path, key, "must be a table with a 'type' key")
    allowed = (
        "type",
        "mount",
        "angle_deg",
        "retardance_waves",
        "retardance_tol_waves",
        "plate",
        "extinction_ratio",
        "transmission",
        "label",
    )
    r = _Reader(path, key, table, allowed)
    kind = r.text("type", choices=ELEMENT_TYPES)
    if kind == "rotator" and r.has("mount"):
        raise r.error(
            "mount",
            "a rotator (optical activity) turns light the same however it "
            "is turned about the beam; give its rotation as angle_deg",
        )
    angle, mount = _angle_or_mount(r, mounts)
    waves, plate, tol, er, t = 0.0, None, 0.0, INF, 1.0
    if kind in ("hwp", "qwp", "retarder"):
        waves, plate = _plate(r, kind, wavelength_nm)
        tol = r.number("retardance_tol_waves", 0.0, minimum=0.0)
    if kind == "polarizer":
        er = _extinction(r)
        t = r.number("transmission", 1.0, above=0.0, maximum=1.0)
    for name in ("retardance_waves", "plate", "retardance_tol_waves"):
        if kind in ("polarizer", "rotator") and r.has(name):
            raise r.error(name, f"does not apply to a {kind}")
    for name in ("extinction_ratio", "transmission"):
        if kind != "polarizer" and r.has(name):
            raise r.error(name, f"applies only to a polarizer, not a {kind}")
    return Element(kind, key, mount, angle, waves, tol, plate, er, t)


def _mount(path: str, name: str, table: Any) -> Mount:
    key = f"mounts.{name}"
    if not isinstance(table, Mapping):
        raise BenchFileError(path, key, "must be a table")
    allowed = (
        "driver",
        "reading_deg",
        "offset_deg",
        "sense",
        "resolution_deg",
        "backlash_deg",
        "travel_deg",
        "repeatability_deg",
        "offset_err_deg",
        "speed_deg_s",
        "profile",
        "readback_tol_deg",
    )
    r = _Reader(path, key, table, allowed)
    sense = r.number("sense", 1.0, limit=1.0)
    if sense not in (1.0, -1.0):
        raise r.error("sense", f"must be +1 or -1, got {sense:g}")
    travel = r.numbers("travel_deg", 2) if r.has("travel_deg") else (-360.0, 360.0)
    if travel[0] >= travel[1]:
        raise r.error("travel_deg", f"must be [low, high] with low < high, got {list(travel)}")
    if max(abs(travel[0]), abs(travel[1])) > LARGEST_ANGLE:
        raise r.error("travel_deg", f"must lie within +/-{LARGEST_ANGLE:g} deg, got {list(travel)}")
    span = travel[1] - travel[0]
    reading = r.angle("reading_deg", 0.0)
    if not travel[0] <= reading <= travel[1]:
        raise r.error("reading_deg", f"{reading:g} is outside travel_deg {list(travel)}")
    driver = _driver(r, manual=False, absent=False)
    return Mount(
        name=name,
        driver=driver,
        reading_deg=reading,
        offset_deg=r.angle("offset_deg", 0.0),
        sense=int(sense),
        resolution_deg=r.angle("resolution_deg", 0.001, above=0.0, maximum=span / 10),
        backlash_deg=r.angle("backlash_deg", 0.0, minimum=0.0, maximum=span / 10),
        travel_deg=(travel[0], travel[1]),
        repeatability_deg=r.angle("repeatability_deg", 0.0, minimum=0.0, maximum=span / 10),
        offset_err_deg=r.angle("offset_err_deg", 0.0, minimum=0.0, maximum=90.0),
        speed_deg_s=r.number("speed_deg_s", 20.0, above=0.0),
        profile=r.text("profile") if r.has("profile") else None,
        declared=r.has("driver"),
        readback_tol_deg=(
            r.angle("readback_tol_deg", above=0.0, maximum=span)
            if r.has("readback_tol_deg")
            else None
        ),
    )


def _driver(r: _Reader, *, manual: bool, absent: bool) -> str:
    """The ``driver`` spec of a table, checked without opening anything: ``sim`` (default),
    ``manual`` (when ``manual``), ``none`` (when ``absent``) or any spec the drivers accept."""
    from aligner_drivers.open import check_spec

    driver = r.text("driver", "sim")
    if driver == "none" and absent:
        return driver
    try:
        check_spec(driver, manual=manual)
    except InputError as exc:
        extra = "; or none for no device" if absent else ""
        raise r.error("driver", f"{exc}{extra}") from None
    return driver


def _devices(path: str, table: Mapping[str, Any]) -> dict[str, Device]:
    """``[devices.counter]``, ``[devices.shutter]``, ``[devices.pointer]``: driver and profile."""
    top = _Reader(path, "devices", table, DEVICE_ROLES)
    out = {}
    for role in DEVICE_ROLES:
        r = _Reader(path, f"devices.{role}", top.table_of(role), ("driver", "profile"))
        driver = _driver(r, manual=role != "shutter", absent=role != "counter")
        profile = r.text("profile") if r.has("profile") else None
        out[role] = Device(role, driver, profile, declared=r.has("driver"))
    return out


def _reference(path: str, table: Mapping[str, Any]) -> Reference:
    r = _Reader(path, "reference", table, ("kind", "fraction", "dark_rate"))
    kind = r.text("kind", "monitor" if r.has("fraction") else "none", REFERENCE_KINDS)
    if kind == "monitor" and not r.has("fraction"):
        raise r.error(
            "fraction",
            "is required with kind = 'monitor': reference-channel counts per source photon "
            "(pick-off share x monitor efficiency), e.g. 6e-4",
        )
    if kind == "none" and (r.has("fraction") or r.has("dark_rate")):
        raise r.error(
            "fraction" if r.has("fraction") else "dark_rate",
            "applies only to a reference channel; set kind = 'monitor' or remove it",
        )
    return Reference(
        kind=kind,
        fraction=r.number("fraction", above=0.0, maximum=1.0) if kind == "monitor" else None,
        dark_rate=r.number("dark_rate", 0.0, minimum=0.0),
    )


def _coupling(path: str, table: Mapping[str, Any]) -> Coupling:
    from .physics.weak import OBSERVABLE_NAMES

    allowed = (
        "observable",
        "axis",
        "eigenvalues",
        "readout",
        "pointer_sigma",
        "strength",
        "units",
        "jitter_rms",
        "probe_photons",
    )
    r = _Reader(path, "coupling", table, allowed)
    observable = r.text("observable", "HV", (*OBSERVABLE_NAMES, "axis"))
    axis = None
    eigenvalues = (1.0, 0.0) if observable in OBSERVABLE_NAMES[3:] else (1.0, -1.0)
    if observable == "axis":
        if not r.has("axis"):
            raise r.error(
                "axis", "is required when observable = 'axis' (a Stokes direction [S1, S2, S3])"
            )
        axis = r.numbers("axis", 3)
        if math.hypot(*axis) < 1e-6 or max(map(abs, axis)) > LARGEST:
            raise r.error(
                "axis", f"must be a direction of length 1e-6 to 1e12 (e.g. [1, 0, 0]), got {axis}"
            )
        if r.has("eigenvalues"):
            low, high = r.numbers("eigenvalues", 2)
            eigenvalues = (low, high)
        if max(map(abs, eigenvalues)) > 1e6:
            raise r.error("eigenvalues", f"must be between -1e6 and 1e6, got {eigenvalues}")
        if abs(eigenvalues[0] - eigenvalues[1]) < 1e-9 * max(map(abs, eigenvalues)):
            raise r.error("eigenvalues", "must differ (equal eigenvalues couple nothing)")
    elif r.has("axis") or r.has("eigenvalues"):
        raise r.error(
            "axis" if r.has("axis") else "eigenvalues", "applies only when observable = 'axis'"
        )
    readout = r.text("readout", "position", READOUTS)
    probe = None
    if readout == "phase":
        probe = r.number("probe_photons", above=0.0)
        sigma = 1.0 / (2.0 * math.sqrt(probe))
        if r.has("pointer_sigma"):
            raise r.error(
                "pointer_sigma",
                "is set by probe_photons for the phase readout (spread 1/(2 sqrt N)); remove it",
            )
        units = r.text("units", "rad")
    else:
        sigma = r.number("pointer_sigma", above=0.0)
        units = r.text("units", "um")
    return Coupling(
        observable=observable,
        readout=readout,
        pointer_sigma=sigma,
        strength=r.number("strength", above=0.0),
        units=units,
        axis=(axis[0], axis[1], axis[2]) if axis else None,
        eigenvalues=(eigenvalues[0], eigenvalues[1]),
        jitter_rms=r.number("jitter_rms", 0.0, minimum=0.0),
        probe_photons=probe,
    )


def _detector(path: str, table: Mapping[str, Any]) -> Detector:
    allowed = (
        "efficiency",
        "dark_rate",
        "dead_time_ns",
        "safe_rate",
        "mode",
        "rep_rate_hz",
        "gate_dark_probability",
        "saturation_rate",
    )
    r = _Reader(path, "detector", table, allowed)
    mode = r.text("mode", "cw", DETECTOR_MODES)
    rep = r.number("rep_rate_hz", above=0.0) if (mode == "pulsed" or r.has("rep_rate_hz")) else None
    return Detector(
        efficiency=r.number("efficiency", 1.0, above=0.0, maximum=1.0),
        dark_rate=r.number("dark_rate", 0.0, minimum=0.0),
        dead_time_ns=r.number("dead_time_ns", 0.0, minimum=0.0),
        safe_rate=r.number("safe_rate", INF, above=0.0, allow_inf=True),
        mode=mode,
        rep_rate_hz=rep,
        gate_dark_probability=r.number("gate_dark_probability", 0.0, minimum=0.0, maximum=0.5),
        saturation_rate=(
            r.number("saturation_rate", above=0.0) if r.has("saturation_rate") else None
        ),
    )


def _simulation(path: str, table: Mapping[str, Any], mounts: Mapping[str, Any]) -> Simulation:
    r = _Reader(
        path,
        "simulation",
        table,
        ("seed", "true_offset_deg", "true_extinction", "retardance_error_waves"),
    )
    offsets_table = r.table_of("true_offset_deg")
    offsets = _Reader(path, "simulation.true_offset_deg", offsets_table, tuple(mounts))
    extinction_table = r.table_of("true_extinction")
    extinction = _Reader(
        path, "simulation.true_extinction", extinction_table, ("analyzer", "source")
    )
    return Simulation(
        seed=r.integer("seed", 0, maximum=2**63 - 1) if r.has("seed") else None,
        true_offset_deg={name: offsets.angle(name) for name in offsets_table},
        true_extinction={
            name: extinction.number(name, above=1.0, allow_inf=True) for name in extinction_table
        },
        retardance_error_waves=r.number("retardance_error_waves", 0.0),
    )


_TOP_KEYS = (
    "name",
    "wavelength_nm",
    "imbalance_mount",
    "phase_mount",
    "source",
    "pre",
    "coupling",
    "post",
    "analyzer",
    "detector",
    "mounts",
    "devices",
    "reference",
    "simulation",
)


def parse_bench(doc: Mapping[str, Any], path: str = "<bench>") -> Bench:
    """Validate a parsed bench document; every error names ``path`` and the key."""
    top = _Reader(path, "", doc, _TOP_KEYS)
    mounts_table = top.table_of("mounts")
    if len(mounts_table) > MAX_ITEMS:
        raise top.error(
            "mounts", f"has {len(mounts_table)} mounts; at most {MAX_ITEMS} are allowed"
        )
    mounts = {name: _mount(path, name, t) for name, t in mounts_table.items()}
    wavelength = top.number("wavelength_nm", minimum=100.0, maximum=20000.0)
    for table_name in ("source", "coupling", "analyzer", "detector"):
        if table_name not in doc:
            raise BenchFileError(path, f"[{table_name}]", "table is required")

    def mount_name(key: str, required: bool) -> str | None:
        if not top.has(key):
            if required:
                raise top.error(key, "is required (the name of a mount under [mounts])")
            return None
        name = top.text(key)
        if name not in mounts:
            close = difflib.get_close_matches(name, list(mounts), n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            raise top.error(
                key, f"unknown mount {name!r} (mounts defined: {', '.join(mounts) or 'none'}){hint}"
            )
        return name

    source_table = top.table_of("source")
    if "monitor_fraction" in source_table:
        raise BenchFileError(
            path,
            "source.monitor_fraction",
            "has moved: write it as [reference] kind = 'monitor', fraction = ... (with the "
            "reference detector's dark_rate)",
        )
    sr = _Reader(
        path, "source", source_table, ("angle_deg", "mount", "extinction_ratio", "photon_rate")
    )
    s_angle, s_mount = _angle_or_mount(sr, mounts)
    source = Source(sr.number("photon_rate", above=0.0), s_angle, s_mount, _extinction(sr))

    ar = _Reader(
        path,
        "analyzer",
        top.table_of("analyzer"),
        ("angle_deg", "mount", "extinction_ratio", "transmission"),
    )
    a_angle, a_mount = _angle_or_mount(ar, mounts)
    analyzer = Analyzer(
        a_angle, a_mount, _extinction(ar), ar.number("transmission", 1.0, above=0.0, maximum=1.0)
    )

    def chain(name: str) -> tuple[Element, ...]:
        items = doc.get(name, [])
        if not isinstance(items, list):
            raise top.error(name, "must be an array of tables ([[pre]] / [[post]])")
        if len(items) > MAX_ITEMS:
            raise top.error(name, f"has {len(items)} elements; at most {MAX_ITEMS} are allowed")
        return tuple(
            _element(path, f"{name}[{i}]", t, mounts, wavelength) for i, t in enumerate(items)
        )

    bench = Bench(
        path=None if path == "<bench>" else Path(path),
        wavelength_nm=wavelength,
        imbalance_mount=mount_name("imbalance_mount", True) or "",
        phase_mount=mount_name("phase_mount", False),
        source=source,
        pre=chain("pre"),
        coupling=_coupling(path, top.table_of("coupling")),
        post=chain("post"),
        analyzer=analyzer,
        detector=_detector(path, top.table_of("detector")),
        mounts=mounts,
        simulation=_simulation(path, top.table_of("simulation"), mounts),
        name=top.text("name", ""),
        devices=_devices(path, top.table_of("devices")),
        reference=_reference(path, top.table_of("reference")),
    )
    used = {e.mount for e in (*bench.pre, *bench.post)} | {source.mount, analyzer.mount}
    for key in ("imbalance_mount", "phase_mount"):
        name = getattr(bench, key)
        if name and name not in used:
            raise top.error(
                key,
                f"mount {name!r} holds no element (give it to the source, an "
                "element or the analyzer with mount = ...)",
            )
    return bench


def resolve_bench_path(path: str | Path) -> Path:
    """``demo`` (when no such file exists) names the bundled demo bench."""
    p = Path(path)
    if str(path) == "demo" and not p.exists():
        return DEMO_BENCH
    return p


def _read_document(path: Path) -> tomlkit.TOMLDocument:
    try:
        size = path.stat().st_size if path.is_file() else 0
        if size > MAX_FILE_BYTES:
            raise BenchFileError(
                str(path),
                None,
                f"is {size:,} bytes; a bench file may have at most {MAX_FILE_BYTES:,} "
                "(is this the right file?)",
            )
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise BenchFileError(
            str(path),
            None,
            "file not found (give the path of a bench .toml "
            "file, or 'demo' for the bundled demo bench)",
        ) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise BenchFileError(str(path), None, f"cannot be read ({exc})") from None
    try:
        return tomlkit.parse(text)
    except tomlkit.exceptions.TOMLKitError as exc:  # syntax errors and duplicate keys
        raise BenchFileError(str(path), None, f"is not valid TOML ({exc})") from None


def load_bench(path: str | Path) -> Bench:
    """Read and validate a bench file (``demo`` = the bundled demo bench)."""
    p = resolve_bench_path(path)
    return parse_bench(_read_document(p).unwrap(), str(p))


_INDEXED = re.compile(r"^(?P<name>\w+)\[(?P<index>\d+)\]$")


def _apply_updates(p: Path, updates: Mapping[str, float | int | str]) -> tomlkit.TOMLDocument:
    """The document of ``p`` with ``updates`` applied (dotted keys, ``pre[1].key`` indexing)."""
    doc = _read_document(p)
    for dotted, value in updates.items():
        *tables, leaf = dotted.split(".")
        node: Any = doc
        for name in tables:
            indexed = _INDEXED.match(name)
            if indexed:
                items = node.get(indexed["name"])
                index = int(indexed["index"])
                if not isinstance(items, list) or index >= len(items):
                    raise BenchFileError(str(p), dotted, "no such element in the file")
                node = items[index]
                continue
            if name not in node:
                node[name] = tomlkit.table()
            node = node[name]
        node[leaf] = value.item() if hasattr(value, "item") else value  # numpy scalars
    return doc


def with_values(bench: Bench, updates: Mapping[str, float | int | str]) -> Bench:
    """The bench with ``updates`` (keys as in :func:`write_values`) applied in memory only,
    e.g. a fitted offset for the next steps of a recipe. The file is not touched."""
    if bench.path is None:
        raise BenchFileError("<bench>", None, "this bench was not read from a file")
    return parse_bench(_apply_updates(bench.path, updates).unwrap(), str(bench.path))


def snapshot_text(bench: Bench) -> str:
    """The bench file's text with the in-memory mount readings and offsets written in (what a
    run log keeps, so a resumed run sees the bench as it was, not as the file says)."""
    if bench.path is None:
        raise BenchFileError("<bench>", None, "this bench was not read from a file")
    on_file = load_bench(bench.path)
    updates: dict[str, float] = {}
    for name, mount in bench.mounts.items():
        for key in ("reading_deg", "offset_deg", "offset_err_deg"):
            value = getattr(mount, key)
            if name not in on_file.mounts or getattr(on_file.mounts[name], key) != value:
                updates[f"mounts.{name}.{key}"] = value
    return tomlkit.dumps(_apply_updates(bench.path, updates))


def ensure_writable(path: str | Path | None) -> Path:
    """The bench file to write, or :class:`BenchFileError` for the bundled demo bench (it is
    shared by every user of the installation) or a bench without a file."""
    if path is None:
        raise BenchFileError("<bench>", None, "this bench was not read from a file")
    p = resolve_bench_path(path)
    if p.resolve() == DEMO_BENCH.resolve():
        raise BenchFileError(
            str(p),
            None,
            "the bundled demo bench is not written to; copy it to "
            "a file of your own (e.g. my-bench.toml) and use that",
        )
    return p


def write_values(path: str | Path, updates: Mapping[str, float | int | str]) -> None:
    """Store values into a bench file by dotted key, keeping comments and layout.

    Keys as in error messages: ``mounts.analyzer.offset_deg``, ``pre[1].retardance_waves``.
    The result is validated before the file is replaced, and the file is replaced in one step
    (written beside it first), so a bad update or a full disk never leaves a broken file or a
    stray temporary one behind."""
    p = ensure_writable(path)
    doc = _apply_updates(p, updates)
    parse_bench(doc.unwrap(), str(p))
    tmp = p.with_suffix(p.suffix + ".tmp")
    try:
        tmp.write_text(tomlkit.dumps(doc), encoding="utf-8")
        tmp.replace(p)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise BenchFileError(
            str(p), None, f"cannot be written ({exc}); the file is unchanged"
        ) from None
