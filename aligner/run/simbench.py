"""The simulated bench: devices whose counts come from the physics model, and the device factory.

:class:`SimBench` builds a *true* bench from the bench file and its ``[simulation]`` table
(:func:`true_bench`: offset errors added to the mount offsets, analyzer and source extinction
scaled, every waveplate's retardance shifted) and simulated mounts (opened as ``sim`` devices)
with the file's resolution, backlash, speed, travel and repeatability. Its counter draws, for a
dwell ``t``:

* channel 1 (post-selected port): Poisson counts of mean ``m t``, where ``m`` is the measured
  (dead-time-limited) rate that :func:`aligner.prediction.predict` gives for the true bench at the
  mounts' *true* element readings (``SimMount.true_angle_deg()``: backlash play and
  repeatability included), dark counts included; with the shutter shut only dark counts;
* channel 2 (reference port): a monitor pick-off of the source ahead of the interferometer,
  Poisson of mean ``t`` times the dead-time-limited rate of
  ``monitor_fraction * photon_rate + dark_rate`` (``[source] monitor_fraction``, counts per
  source photon; without it :data:`REFERENCE_FRACTION` times the detector efficiency).

Poisson draws at the dead-time-limited mean slightly overstate the spread of a real
non-paralyzable counter (its counts are sub-Poisson); the sweep's interval is then
conservative. The pointer reader returns the predicted pointer shift at the true readings plus
Gaussian noise of standard error ``sqrt(sigma^2 / N + jitter^2)`` for ``N`` expected
post-selected photons (shot noise of the centroid, common practice, no source).

Time is simulated: counting adds the dwell to :attr:`SimBench.clock_s` and sleeps only when
``realtime`` is set (moves likewise, through ``SimMount(realtime=...)``).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from aligner_drivers.open import open_counter, open_mount, open_pointer, open_shutter
from aligner_drivers.protocols import Counter, PointerReader, RotationMount, Shutter

from ..bench import Bench, Element
from ..errors import DeviceError, InputError

__all__ = ["DeviceSet", "SimBench", "open_devices", "true_bench"]

#: Share of the source's photons the reference monitor sees when the bench gives no
#: ``monitor_fraction`` (an invented demo value).
REFERENCE_FRACTION = 1e-3


def _true_plate(element: Element, error_waves: float, wavelength_nm: float) -> Element:
    """The element with its true retardance: the plate's nominal or dispersion value plus the
    simulated error (a calibrated ``retardance_waves`` in the file does not move the truth)."""
    from ..bench import NOMINAL_WAVES
    from ..physics.materials import plate_retardance_waves

    if element.type not in NOMINAL_WAVES:  # retarders have no nominal value: keep the file's
        base = element.retardance_waves
    elif element.plate is None:
        base = NOMINAL_WAVES[element.type]
    else:
        pl = element.plate
        base = float(
            plate_retardance_waves(
                NOMINAL_WAVES[element.type],
                pl.material,
                pl.kind,
                pl.design_nm,
                wavelength_nm,
                order=pl.order,
                thickness_um=pl.thickness_um,
            )
        )
    if element.type in ("hwp", "qwp", "retarder"):
        return replace(element, retardance_waves=base + error_waves)
    return element


def true_bench(bench: Bench) -> Bench:
    """The bench as the simulation really is: the file with the ``[simulation]`` truth put in
    (absolute true offsets and extinction ratios, plate retardance errors)."""
    sim = bench.simulation
    mounts = {
        name: replace(m, offset_deg=sim.true_offset_deg.get(name, m.offset_deg))
        for name, m in bench.mounts.items()
    }
    true_er = sim.true_extinction
    lam = bench.wavelength_nm
    return replace(
        bench,
        mounts=mounts,
        source=replace(
            bench.source, extinction_ratio=true_er.get("source", bench.source.extinction_ratio)
        ),
        analyzer=replace(
            bench.analyzer,
            extinction_ratio=true_er.get("analyzer", bench.analyzer.extinction_ratio),
        ),
        pre=tuple(_true_plate(e, sim.retardance_error_waves, lam) for e in bench.pre),
        post=tuple(_true_plate(e, sim.retardance_error_waves, lam) for e in bench.post),
    )


def _true_reading(mount: RotationMount) -> float:
    """A simulated mount's true element reading; a real one's read-back stands in for it."""
    getter: Callable[[], float] = getattr(mount, "true_angle_deg", mount.position)
    return float(getter())


class SimBench:
    """Simulated mounts, shutter, two-channel counter and pointer driven by the physics model.

    ``mounts`` may be replaced by other ``RotationMount`` objects (e.g. serial drivers through
    the emulator); then their read-back stands in for the true reading. ``seed`` defaults to
    ``bench.simulation.seed``.
    """

    def __init__(
        self,
        bench: Bench,
        *,
        seed: int | None = None,
        realtime: bool = False,
    ) -> None:
        self.bench = bench
        self.truth = true_bench(bench)
        self.realtime = realtime
        monitor = bench.source.monitor_fraction
        #: reference-channel counts per source photon
        self.monitor_fraction = (
            REFERENCE_FRACTION * bench.detector.efficiency if monitor is None else monitor
        )
        self.clock_s = 0.0
        seeds = np.random.SeedSequence(bench.simulation.seed if seed is None else seed)
        mount_seeds = seeds.spawn(len(bench.mounts) + 1)
        self.rng = np.random.default_rng(mount_seeds[-1])
        self.mounts: dict[str, RotationMount] = {
            name: open_mount(
                "sim",
                name=name,
                resolution=m.resolution_deg,
                backlash=m.backlash_deg,
                speed=m.speed_deg_s,
                travel=m.travel_deg,
                noise=m.repeatability_deg,
                seed=int(s.generate_state(1)[0]),
                realtime=realtime,
                start=m.reading_deg,
            )
            for (name, m), s in zip(bench.mounts.items(), mount_seeds, strict=False)
        }
        self.shutter: Shutter = open_shutter("sim", name="sim-shutter")
        self.counter = open_counter("sim", fn=self.draw_counts, channels=2, name="sim-counter")
        self.pointer = open_pointer("sim", fn=self.draw_pointer, name="sim-pointer")

    def true_readings(self) -> dict[str, float]:
        """Every mount's true element reading (deg)."""
        return {name: _true_reading(m) for name, m in self.mounts.items()}

    def expected(self, readings: Mapping[str, float] | None = None) -> Any:
        """The prediction for the true bench at ``readings`` (default: the true readings)."""
        from ..prediction import predict

        return predict(self.truth, self.true_readings() if readings is None else readings)

    def _pass_time(self, dwell_s: float) -> None:
        self.clock_s += dwell_s
        if self.realtime:
            time.sleep(dwell_s)

    def reference_rate(self) -> float:
        """Mean measured rate of the reference port (counts/s)."""
        from ..physics.detection import expected_rates

        d = self.truth.detector
        rates = expected_rates(
            self.truth.source.photon_rate,
            self.monitor_fraction,
            1.0,
            d.dark_rate,
            d.dead_time_ns * 1e-9,
        )
        return float(rates.measured_rate)

    def draw_counts(
        self,
        dwell_s: float,
        readings: Mapping[str, float] | None = None,
        exposed: bool | None = None,
    ) -> tuple[int, int]:
        """One gate of ``dwell_s`` s: (post-selected, reference) counts at ``readings`` (default:
        the mounts' true readings), the detector ``exposed`` (default: the shutter is open)."""
        from ..physics.detection import measured_rate

        d = self.truth.detector
        if self.shutter.is_open() if exposed is None else exposed:
            rate = float(self.expected(readings).measured_rate)
        else:
            rate = float(measured_rate(d.dark_rate, d.dead_time_ns * 1e-9))
        post, ref = self.rng.poisson(np.array([rate, self.reference_rate()]) * dwell_s)
        self._pass_time(dwell_s)
        return int(post), int(ref)

    def draw_pointer(self, dwell_s: float) -> tuple[float, float]:
        """Pointer reading (mean, standard error) in the readout's units: the shot noise of the
        counted photons (spread sigma, or 1/(2 sigma) for a momentum readout) and the technical
        jitter, ``jitter_rms`` after 1 s, falling as 1/sqrt(dwell)."""
        p = self.expected()
        c = self.truth.coupling
        photons = max(float(p.measured_rate) * dwell_s, 1.0)
        spread = 1 / (2 * c.pointer_sigma) if c.readout == "momentum" else c.pointer_sigma
        sem = math.sqrt(spread**2 / photons + c.jitter_rms**2 / dwell_s)
        return float(p.pointer_shift) + float(self.rng.normal(0.0, sem)), sem


@dataclass
class DeviceSet:
    """The devices of one sweep. ``sim`` is the simulated bench when one is in use."""

    mounts: dict[str, RotationMount]
    counter: Counter
    shutter: Shutter | None = None
    pointer: PointerReader | None = None
    sim: SimBench | None = None
    simulated_time: bool = True

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


def open_devices(
    bench: Bench,
    *,
    counter: str = "sim",
    counter_profile: str | None = None,
    shutter: str = "sim",
    shutter_profile: str | None = None,
    pointer: str = "sim",
    pointer_profile: str | None = None,
    realtime: bool = False,
    seed: int | None = None,
) -> DeviceSet:
    """Open every mount from its bench entry (``driver`` spec and ``profile``) and the counter,
    shutter and pointer from their specs.

    Mounts with ``driver = "sim"`` and the ``sim`` counter, shutter and pointer come from one
    :class:`SimBench`, so the counts follow the physics at the simulated mounts' true angles
    (with real mounts, at their read-back). ``"none"`` leaves the shutter or the pointer out
    (without a shutter the guard refuses moves it cannot keep dark). Every other spec goes
    through ``drivers.open`` (``sim:?...`` specs give plain simulated devices).
    """
    sim = SimBench(bench, seed=seed, realtime=realtime)
    opened: list[Any] = []

    def keep(device: Any) -> Any:
        opened.append(device)
        return device

    def optional(spec: str, simulated: Any, opener: Callable[..., Any], profile: str | None) -> Any:
        """``none`` -> no device, ``sim`` -> the simulated bench's, else opened from ``spec``."""
        if spec == "none":
            return None
        return simulated if spec == "sim" else keep(opener(spec, profile=profile))

    try:
        for name, m in bench.mounts.items():
            if m.driver != "sim":
                try:
                    mount = open_mount(m.driver, profile=m.profile, name=name)
                except InputError as exc:  # name the bench key that led here
                    raise InputError(f"{bench.path}: mounts.{name}: {exc}") from None
                sim.mounts[name] = keep(mount)
        chosen_counter = (
            sim.counter
            if counter == "sim"
            else keep(open_counter(counter, profile=counter_profile))
        )
        chosen_shutter = optional(shutter, sim.shutter, open_shutter, shutter_profile)
        chosen_pointer = optional(pointer, sim.pointer, open_pointer, pointer_profile)
    except BaseException:
        for device in opened:
            device.close()
        raise
    if chosen_shutter is not None:
        sim.shutter = chosen_shutter
    # mounts opened from "sim:?..." specs are simulated too (no real time passes for them)
    all_sim = all(m.driver.startswith("sim") for m in bench.mounts.values())
    return DeviceSet(
        dict(sim.mounts),
        chosen_counter,
        chosen_shutter,
        chosen_pointer,
        sim if chosen_counter is sim.counter else None,
        simulated_time=not realtime and all_sim and counter == "sim",
    )
