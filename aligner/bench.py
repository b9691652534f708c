"""Bench files (TOML) -> a validated, typed, frozen model. The one place for units and conventions.

Units and conventions of a bench file:

* Angles in degrees; an element angle is measured from H towards V looking into the beam.
* A mount's element angle is ``sense * (reading_deg - offset_deg)``.
* Wavelengths in nm, rates in counts (or photons) per second, dead time in ns; pointer width,
  coupling strength and jitter in the bench's ``coupling.units`` (a length unit, nm/um/mm/m, for
  a position or momentum readout; an angle unit, nrad/urad/mrad/rad, for a phase readout; any
  other name is refused), except a kick's strength (the beam tilt per unit eigenvalue, urad);
  distances of the readout geometry in mm, a split detector's gap in um.
* Retardance in waves (1 wave = 360 deg of phase).
* Circular handedness: R = (H + iV)/sqrt 2 (Stokes S3 = +1). Fields are ``Re[E exp(i(kz - wt))]``
  (a retarder's slow axis is the delayed one, as in the retarder matrix), so the field of R turns
  from H towards V, counterclockwise as seen looking into the beam: the same sense as element
  angles; right-handed (positive helicity) in the IEEE convention, left-circular in that of Born
  & Wolf and Hecht (from memory).
* A ``rotator`` of ``angle_deg`` > 0 turns linear polarization from H towards V,
  counterclockwise looking into the beam. A dextrorotatory sample turns it clockwise as seen by
  an observer looking towards the source, so its rotator angle is negative: a sample of
  specific rotation +[alpha] is ``angle_deg = -[alpha] l c``.

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
    "Herald",
    "Mount",
    "Plate",
    "Readout",
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
#: The weak interaction: a transverse displacement of the pointer or a momentum kick.
COUPLING_KINDS = ("shift", "kick")
#: What reads the pointer: the single-photon counter's own events, or a separate sensor.
SENSORS = ("counter", "camera")
#: How a position is formed from the spot: its centroid, or a split or quadrant detector.
READ_METHODS = ("centroid", "split", "quadrant")
DETECTOR_MODES = ("cw", "pulsed")
DEAD_TIME_MODELS = ("non-paralyzable", "paralyzable")
SOURCE_TYPES = ("beam", "heralded")
#: Largest size of any number in a bench file (angles: :data:`LARGEST_ANGLE`); anything bigger
#: is a typo, and the physics would lose all precision on it.
LARGEST = 1e12
#: Smallest size of a nonzero number in a bench file: below it a number is a typo too (a
#: subnormal width would overflow every ratio the physics forms with it).
SMALLEST = 1e-12
#: Largest size of an angle or a reading (deg): ten turns.
LARGEST_ANGLE = 3600.0
#: Most bytes a bench file may have, and most elements per arm and mounts.
MAX_FILE_BYTES = 1_000_000
MAX_ITEMS = 64
#: Devices besides the mounts that a bench file declares under ``[devices.<role>]``.
DEVICE_ROLES = ("counter", "shutter", "pointer")
#: What the counter's second channel sees (``[reference] kind``).
REFERENCE_KINDS = ("none", "monitor", "port")
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
class Herald:
    """A pair source whose partner photons are counted as heralds (``[source] type =
    "heralded"``): ``pair_rate`` (pairs/s), ``herald_efficiency`` (heralds counted per pair),
    ``signal_efficiency`` (signal photons leaving the source polarizer per pair),
    ``window_s`` (total width of the coincidence window), ``dark_rate`` (the herald detector's
    dark counts/s)."""

    pair_rate: float
    herald_efficiency: float
    signal_efficiency: float
    window_s: float
    dark_rate: float = 0.0


@dataclass(frozen=True)
class Source:
    """The source polarizer and the photon rate leaving it (photons/s); for a heralded source
    ``herald`` holds the pair source and ``photon_rate`` is ``pair_rate x signal_efficiency``."""

    photon_rate: float
    angle_deg: float = 0.0
    mount: str | None = None
    extinction_ratio: float = INF
    herald: Herald | None = None


@dataclass(frozen=True)
class Reference:
    """What the counter's second channel (the reference) sees.

    ``kind``: ``"none"`` (no reference channel: measured leak rates are normalised by the
    nominal ``photon_rate`` times the detector efficiency); ``"monitor"`` (a pick-off of the
    source ahead of the interferometer: ``fraction`` counts per source photon, the monitor
    detector's efficiency included, so source drift cancels); ``"port"`` (the analyzer's other
    port, on a detector of its own ``efficiency``: the leak is ``S / (S + R)`` of the two
    ports' photon rates, so drift cancels and no fraction needs calibrating). ``dark_rate``
    (counts/s) and ``dead_time_ns`` (non-paralyzable) belong to the reference detector, not
    to the post-selected one. ``safe_rate`` (counts/s) is the rate the reference detector must
    never see: required to run a bench whose reference is the other port (that detector sees
    nearly the whole beam), optional for a monitor; infinite when not stated.
    """

    kind: str = "none"
    fraction: float | None = None
    dark_rate: float = 0.0
    efficiency: float | None = None
    dead_time_ns: float = 0.0
    safe_rate: float = INF

    @property
    def dead_time_s(self) -> float:
        """The reference detector's dead time in seconds (the file gives nanoseconds)."""
        return self.dead_time_ns * 1e-9


@dataclass(frozen=True)
class Coupling:
    """The weak interaction and its pointer.

    ``kind`` ``"shift"``: ``exp(-i g A p)``, a displacement of ``strength`` (``units``) per unit
    eigenvalue; ``"kick"``: ``exp(+i k A x)``, a beam tilt of ``strength`` (urad) per unit
    eigenvalue, ``k = 2 pi tilt / lambda``. ``observable`` is a name (HV, DA, RL, H, V, D, A,
    R, L) or ``"axis"`` with ``axis`` (a Stokes direction) and ``eigenvalues``.
    ``pointer_sigma`` is the rms width of the pointer intensity at the beam waist (``units``),
    ``waist_to_coupling_mm`` the distance from the waist to the coupling plane (negative: the
    waist lies after it). For the ``phase`` readout the pointer is a coherent probe of
    ``probe_photons`` photons whose phase spread ``1/(2 sqrt(N))`` rad is stored in ``units``
    (an angle unit), like ``strength``. ``units`` is checked against
    :data:`aligner.physics.units.UNITS`; :attr:`unit_size` is one unit in m or rad.

    Technical noise, not amplified, at the reading (``units``; 1/``units`` for a momentum
    readout): ``jitter_rms`` is the rms of a reading averaged for 1 s of its white part,
    ``jitter_corner_hz`` the corner below which 1/f noise dominates (0: white).
    ``pointing_rms_urad`` (1-s rms of the beam's angle at the coupling plane, urad) and
    ``pointing_corner_hz``: beam-pointing noise, carried to the reading by the lever arm of the
    readout geometry (a momentum readout reads it as ``k0`` times the angle).
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
    kind: str = "shift"
    jitter_corner_hz: float = 0.0
    pointing_rms_urad: float = 0.0
    pointing_corner_hz: float = 0.0
    waist_to_coupling_mm: float = 0.0

    @property
    def unit_size(self) -> float:
        """One ``units`` in the base unit of the readout's quantity (m, or rad for a phase)."""
        from .physics.units import READOUT_QUANTITY, unit_factor

        return unit_factor(self.units, READOUT_QUANTITY[self.readout])

    def from_mm(self, value_mm: float) -> float:
        """A length in mm expressed in ``units`` (position and momentum readouts)."""
        return value_mm * 1e-3 / self.unit_size


@dataclass(frozen=True)
class Readout:
    """How the pointer is read (``[readout]``; every key optional).

    ``sensor``: ``"counter"`` (default), the pointer is read from the events the single-photon
    counter counts, so its efficiency, dead time and dark counts apply (dark counts carry no
    shift and dilute it); ``"camera"``, a separate position-sensitive sensor sees the
    post-selected beam with its own ``sensor_efficiency`` and reading noise
    ``sensor_noise_rms`` (1-s rms, white, in the reading's units), no dark-count dilution.
    ``method``: ``"centroid"`` (the mean position of the detected photons), ``"split"`` or
    ``"quadrant"`` (difference over sum of two halves, or per axis of four quadrants, with a
    dead gap ``split_gap_um``), calibrated to a position with the slope at the centre.
    Geometry after the coupling plane (position readout only; mm): a lens at
    ``lens_distance_mm`` of focal length ``lens_focal_mm``, and the detector
    ``detector_distance_mm`` after the lens (default: its focal plane) or, without a lens,
    after the coupling plane (default 0: the coupling plane itself). ``dwell_s`` and
    ``measure_s``: the dwell of each coupling-on and coupling-off reading and the whole
    measurement time for the SNR under 1/f noise.
    """

    sensor: str = "counter"
    method: str = "centroid"
    sensor_efficiency: float = 1.0
    sensor_noise_rms: float = 0.0
    split_gap_um: float = 0.0
    lens_distance_mm: float | None = None
    lens_focal_mm: float | None = None
    detector_distance_mm: float = 0.0
    dwell_s: float = 1.0
    measure_s: float = 60.0

    @property
    def has_geometry(self) -> bool:
        """True when the detector is not at the coupling plane (a lens or a distance)."""
        return self.lens_focal_mm is not None or self.detector_distance_mm != 0.0


@dataclass(frozen=True)
class Analyzer:
    """The final polarizer before the detector.

    ``unexplained_leak``: light at the null that the file's optics do not explain, found by a
    null search (its cause unknown: the analyzer, the source polarizer and a plate's retardance
    error fill the null alike), modelled as unpolarized light passing the post-selection: the
    analyzer's POVM element gains ``unexplained_leak x 1``. 0 unless written.
    """

    angle_deg: float = 0.0
    mount: str | None = None
    extinction_ratio: float = INF
    transmission: float = 1.0
    unexplained_leak: float = 0.0


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
    dead_time_model: str = "non-paralyzable"
    afterpulse_probability: float = 0.0
    background_rate: float = 0.0

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
        replaces the file's. With a paralyzable dead time, afterpulsing or background light
        (continuous counting only) the rates are :func:`aligner.physics.detectors.count_budget`'s:
        ``true_rate`` and ``linear_rate`` the signal, background and dark events before dead
        time, ``measured_rate`` the counts with afterpulses, ``signal_fraction`` the share of
        the counts that hold a signal photon."""
        from .physics.detection import DetectorRates, expected_rates

        dark = self.dark_rate if dark_rate is None else dark_rate
        if not self.extended:
            return expected_rates(
                photon_rate,
                leak_rate,
                self.efficiency,
                dark,
                self.dead_time_s,
                rep_rate_hz=self.pulse_rate_hz,
                dark_probability=self.gate_dark_probability,
            )
        import numpy as np

        from .physics.detectors import count_budget

        budget = count_budget(
            np.asarray(photon_rate, float) * np.asarray(leak_rate, float),
            self.background_rate,
            self.efficiency,
            dark,
            self.afterpulse_probability,
            self.dead_time_s,
            self.dead_time_model,
        )
        primary = budget.primary
        return DetectorRates(primary, budget.counted, primary, budget.signal_fraction)

    @property
    def extended(self) -> bool:
        """True when a paralyzable dead time, afterpulsing or background light is set."""
        return (
            self.dead_time_model != "non-paralyzable"
            or self.afterpulse_probability > 0
            or self.background_rate > 0
        )

    def primary_rate(self, counted_rate: ArrayLike) -> Any:
        """Signal, background and dark events per second behind a continuous-wave counter's
        reading (counts/s): afterpulses removed, then the dead time of this detector's model
        undone (the low branch of a paralyzable counter; NaN above its peak reading)."""
        import numpy as np

        from .physics.detectors import rate_from_counts

        primary_counts = np.asarray(counted_rate, float) * (1 - self.afterpulse_probability)
        return rate_from_counts(primary_counts, self.dead_time_s, self.dead_time_model)

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
    readout: Readout = field(default_factory=Readout)

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
        if value != 0.0 and abs(value) < SMALLEST:
            raise self.error(name, f"must be 0 or of size {SMALLEST:g} to {limit:g}, got {value:g}")
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
    driver = _driver(r, manual=False, absent=False)
    if driver != "sim" and not r.has("reading_deg"):
        raise r.error(
            "reading_deg",
            "is required for a motorized mount: the reading predict, plan and the guard start "
            "from until the mount reports its own (e.g. reading_deg = 0.0; a simulated mount "
            "starts at 0)",
        )
    reading = r.angle("reading_deg", 0.0)
    if not travel[0] <= reading <= travel[1]:
        raise r.error("reading_deg", f"{reading:g} is outside travel_deg {list(travel)}")
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


#: The [reference] keys each kind takes besides ``kind``; the first ones listed are required.
_REFERENCE_KEYS = {
    "none": ((), ()),
    "monitor": (("fraction",), ("dark_rate", "dead_time_ns", "safe_rate")),
    "port": (("efficiency", "dead_time_ns"), ("dark_rate", "safe_rate")),
}
_REFERENCE_HELP = {
    "fraction": "reference-channel counts per source photon (pick-off share x monitor "
    "efficiency), e.g. 6e-4",
    "efficiency": "the other port's detector efficiency, e.g. 0.6",
    "dead_time_ns": "the other port's detector dead time in ns (it sees nearly the whole "
    "beam, so its dead time matters; 0 for a linear detector)",
}


def _reference(path: str, table: Mapping[str, Any]) -> Reference:
    every = ("kind", "fraction", "dark_rate", "efficiency", "dead_time_ns", "safe_rate")
    r = _Reader(path, "reference", table, every)
    kind = r.text("kind", "monitor" if r.has("fraction") else "none", REFERENCE_KINDS)
    required, optional = _REFERENCE_KEYS[kind]
    for key in required:
        if not r.has(key):
            raise r.error(key, f"is required with kind = {kind!r}: {_REFERENCE_HELP[key]}")
    for key in every[1:]:
        if r.has(key) and key not in required + optional:
            takes = [k for k, (need, extra) in _REFERENCE_KEYS.items() if key in need + extra]
            raise r.error(
                key,
                f"does not apply to kind = {kind!r} (it belongs to kind = "
                f"{' or '.join(map(repr, takes))}); remove it or change the kind",
            )
    return Reference(
        kind=kind,
        fraction=r.number("fraction", above=0.0, maximum=1.0) if kind == "monitor" else None,
        dark_rate=r.number("dark_rate", 0.0, minimum=0.0),
        efficiency=r.number("efficiency", above=0.0, maximum=1.0) if kind == "port" else None,
        dead_time_ns=r.number("dead_time_ns", 0.0, minimum=0.0, maximum=1e9),
        safe_rate=r.number("safe_rate", INF, above=0.0, allow_inf=True),
    )


def _units(r: _Reader, readout: str) -> tuple[str, float]:
    """``units`` of the readout's quantity (length, or angle for a phase) and one unit's size
    in m or rad; any other name is an error naming ``coupling.units``."""
    from .physics.units import READOUT_QUANTITY, unit_factor

    quantity = READOUT_QUANTITY[readout]
    units = r.text("units", "rad" if quantity == "angle" else "um")
    try:
        return units, unit_factor(units, quantity)
    except ValueError as exc:
        raise r.error("units", f"{exc} (a {readout} readout reads {quantity}s)") from None


def _coupling(path: str, table: Mapping[str, Any]) -> Coupling:
    from .physics.weak import OBSERVABLE_NAMES

    allowed = (
        "observable",
        "axis",
        "eigenvalues",
        "kind",
        "readout",
        "pointer_sigma",
        "strength",
        "units",
        "jitter_rms",
        "jitter_corner_hz",
        "pointing_rms_urad",
        "pointing_corner_hz",
        "waist_to_coupling_mm",
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
    kind = r.text("kind", "shift", COUPLING_KINDS)
    if kind == "kick" and readout != "position":
        raise r.error(
            "kind",
            f"a kick is read as a position (after free space or a lens: [readout]); with "
            f"readout = {readout!r} use kind = 'shift'",
        )
    units, size = _units(r, readout)
    probe = None
    if readout == "phase":
        probe = r.number("probe_photons", above=0.0)
        sigma = 1.0 / (2.0 * math.sqrt(probe)) / size  # the shot-noise spread, in units
        for name in (
            "pointer_sigma",
            "pointing_rms_urad",
            "pointing_corner_hz",
            "waist_to_coupling_mm",
        ):
            if r.has(name):
                raise r.error(
                    name,
                    "does not apply to the phase readout (its pointer is the probe's phase, "
                    "spread 1/(2 sqrt N) from probe_photons); remove it",
                )
    else:
        if r.has("probe_photons"):
            raise r.error("probe_photons", "applies only to readout = 'phase'")
        sigma = r.number("pointer_sigma", above=0.0)
    strength = r.number("strength", above=0.0)
    if strength / sigma > LARGEST:
        raise r.error(
            "strength",
            f"must be at most {LARGEST:g} pointer widths ({LARGEST * sigma:g} {units}), "
            f"got {strength:g}",
        )
    return Coupling(
        observable=observable,
        readout=readout,
        pointer_sigma=sigma,
        strength=strength,
        units=units,
        axis=(axis[0], axis[1], axis[2]) if axis else None,
        eigenvalues=(eigenvalues[0], eigenvalues[1]),
        jitter_rms=r.number("jitter_rms", 0.0, minimum=0.0),
        probe_photons=probe,
        kind=kind,
        jitter_corner_hz=r.number("jitter_corner_hz", 0.0, minimum=0.0),
        pointing_rms_urad=r.number("pointing_rms_urad", 0.0, minimum=0.0),
        pointing_corner_hz=r.number("pointing_corner_hz", 0.0, minimum=0.0),
        waist_to_coupling_mm=r.number("waist_to_coupling_mm", 0.0),
    )


def _readout(path: str, table: Mapping[str, Any], coupling: Coupling) -> Readout:
    allowed = (
        "sensor",
        "method",
        "sensor_efficiency",
        "sensor_noise_rms",
        "split_gap_um",
        "lens_distance_mm",
        "lens_focal_mm",
        "detector_distance_mm",
        "dwell_s",
        "measure_s",
    )
    r = _Reader(path, "readout", table, allowed)
    sensor = r.text("sensor", "counter", SENSORS)
    method = r.text("method", "centroid", READ_METHODS)
    if sensor != "camera":
        for name in ("sensor_efficiency", "sensor_noise_rms"):
            if r.has(name):
                raise r.error(name, "applies only to sensor = 'camera'")
    if method == "centroid" and r.has("split_gap_um"):
        raise r.error("split_gap_um", "applies only to method = 'split' or 'quadrant'")
    if coupling.readout != "position":
        split = ("method",) if method != "centroid" else ()
        for name in ("lens_distance_mm", "lens_focal_mm", "detector_distance_mm", *split):
            if r.has(name):
                raise r.error(
                    name,
                    f"applies only to coupling.readout = 'position' (this bench reads "
                    f"{coupling.readout!r})",
                )
    if r.has("lens_distance_mm") != r.has("lens_focal_mm"):
        missing = "lens_focal_mm" if r.has("lens_distance_mm") else "lens_distance_mm"
        raise r.error(missing, "is required with a lens (lens_distance_mm and lens_focal_mm)")
    focal = None
    if r.has("lens_focal_mm"):
        focal = r.number("lens_focal_mm")
        if abs(focal) < 1e-6:
            raise r.error("lens_focal_mm", "must not be 0 (mm; negative for a diverging lens)")
    dwell = r.number("dwell_s", 1.0, above=0.0, maximum=1e6)
    measure = r.number("measure_s", 60.0, above=0.0, maximum=1e9)
    if measure < 2 * dwell:
        raise r.error(
            "measure_s",
            f"must hold at least one coupling-on and one coupling-off dwell (2 x dwell_s = "
            f"{2 * dwell:g} s), got {measure:g}",
        )
    return Readout(
        sensor=sensor,
        method=method,
        sensor_efficiency=r.number("sensor_efficiency", 1.0, above=0.0, maximum=1.0),
        sensor_noise_rms=r.number("sensor_noise_rms", 0.0, minimum=0.0),
        split_gap_um=r.number("split_gap_um", 0.0, minimum=0.0),
        lens_distance_mm=r.number("lens_distance_mm", minimum=0.0) if focal is not None else None,
        lens_focal_mm=focal,
        detector_distance_mm=r.number(
            "detector_distance_mm", focal if focal is not None else 0.0, minimum=0.0
        ),
        dwell_s=dwell,
        measure_s=measure,
    )


def _detector(path: str, table: Mapping[str, Any]) -> Detector:
    allowed = (
        "efficiency",
        "dark_rate",
        "dead_time_ns",
        "dead_time_model",
        "afterpulse_probability",
        "background_rate",
        "safe_rate",
        "mode",
        "rep_rate_hz",
        "gate_dark_probability",
        "saturation_rate",
    )
    r = _Reader(path, "detector", table, allowed)
    mode = r.text("mode", "cw", DETECTOR_MODES)
    rep = r.number("rep_rate_hz", above=0.0) if (mode == "pulsed" or r.has("rep_rate_hz")) else None
    if mode == "pulsed":
        for name in ("dead_time_model", "afterpulse_probability", "background_rate"):
            if r.has(name):
                raise r.error(
                    name,
                    "applies to continuous counting (mode = 'cw'); in pulsed mode the "
                    "per-gate gate_dark_probability holds dark and background clicks",
                )
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
        dead_time_model=r.text("dead_time_model", "non-paralyzable", DEAD_TIME_MODELS),
        afterpulse_probability=r.number("afterpulse_probability", 0.0, minimum=0.0, maximum=0.5),
        background_rate=r.number("background_rate", 0.0, minimum=0.0),
    )


def _source(path: str, table: Mapping[str, Any], mounts: Mapping[str, Any]) -> Source:
    if "monitor_fraction" in table:
        raise BenchFileError(
            path,
            "source.monitor_fraction",
            "has moved: write it as [reference] kind = 'monitor', fraction = ... (with the "
            "reference detector's dark_rate)",
        )
    heralded = (
        "pair_rate",
        "herald_efficiency",
        "signal_efficiency",
        "coincidence_window_ns",
        "herald_dark_rate",
    )
    r = _Reader(
        path,
        "source",
        table,
        ("type", "angle_deg", "mount", "extinction_ratio", "photon_rate", *heralded),
    )
    kind = r.text("type", "beam", SOURCE_TYPES)
    angle, mount = _angle_or_mount(r, mounts)
    if kind == "beam":
        for name in heralded:
            if r.has(name):
                raise r.error(name, "applies only to type = 'heralded'")
        return Source(r.number("photon_rate", above=0.0), angle, mount, _extinction(r))
    if r.has("photon_rate"):
        raise r.error(
            "photon_rate",
            "is set by pair_rate x signal_efficiency for a heralded source; remove it",
        )
    herald = Herald(
        pair_rate=r.number("pair_rate", above=0.0),
        herald_efficiency=r.number("herald_efficiency", above=0.0, maximum=1.0),
        signal_efficiency=r.number("signal_efficiency", above=0.0, maximum=1.0),
        window_s=r.number("coincidence_window_ns", above=0.0, maximum=1e9) * 1e-9,
        dark_rate=r.number("herald_dark_rate", 0.0, minimum=0.0),
    )
    photon_rate = herald.pair_rate * herald.signal_efficiency
    return Source(photon_rate, angle, mount, _extinction(r), herald)


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
    "readout",
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

    source = _source(path, top.table_of("source"), mounts)

    ar = _Reader(
        path,
        "analyzer",
        top.table_of("analyzer"),
        ("angle_deg", "mount", "extinction_ratio", "transmission", "unexplained_leak"),
    )
    a_angle, a_mount = _angle_or_mount(ar, mounts)
    analyzer = Analyzer(
        a_angle,
        a_mount,
        _extinction(ar),
        ar.number("transmission", 1.0, above=0.0, maximum=1.0),
        ar.number("unexplained_leak", 0.0, minimum=0.0, maximum=0.5),
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

    coupling = _coupling(path, top.table_of("coupling"))
    bench = Bench(
        path=None if path == "<bench>" else Path(path),
        wavelength_nm=wavelength,
        imbalance_mount=mount_name("imbalance_mount", True) or "",
        phase_mount=mount_name("phase_mount", False),
        source=source,
        pre=chain("pre"),
        coupling=coupling,
        post=chain("post"),
        analyzer=analyzer,
        detector=_detector(path, top.table_of("detector")),
        mounts=mounts,
        simulation=_simulation(path, top.table_of("simulation"), mounts),
        name=top.text("name", ""),
        devices=_devices(path, top.table_of("devices")),
        reference=_reference(path, top.table_of("reference")),
        readout=_readout(path, top.table_of("readout"), coupling),
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
