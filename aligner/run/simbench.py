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
* channel 2, when the bench has a reference channel (``[reference] kind = "monitor"``): a
  pick-off of the source ahead of the interferometer, Poisson of mean ``t`` times the
  dead-time-limited rate of ``fraction * photon_rate + dark_rate`` (the reference's own
  ``fraction`` and ``dark_rate``).

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
from dataclasses import replace
from typing import Any

import numpy as np

from aligner_drivers.open import open_counter, open_mount, open_pointer, open_shutter
from aligner_drivers.protocols import RotationMount, Shutter

from ..bench import Bench, Element

__all__ = ["SimBench", "true_bench"]


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
    """Simulated mounts, shutter, counter and pointer driven by the physics model.

    ``mounts`` may be replaced by other ``RotationMount`` objects (e.g. serial drivers through
    the emulator); then their read-back stands in for the true reading. The counter has a
    second (reference) channel when the bench has one. ``seed`` defaults to
    ``bench.simulation.seed`` (None: unpredictable draws).
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
        channels = 1 if bench.reference.kind == "none" else 2
        self.counter = open_counter(
            "sim", fn=self.draw_counts, channels=channels, name="sim-counter"
        )
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
        """Mean measured rate of the reference channel (counts/s; 0 without one)."""
        from ..physics.detection import expected_rates

        ref = self.truth.reference
        if ref.fraction is None:
            return 0.0
        rates = expected_rates(
            self.truth.source.photon_rate,
            ref.fraction,
            1.0,
            ref.dark_rate,
            self.truth.detector.dead_time_s,
        )
        return float(rates.measured_rate)

    def draw_counts(
        self,
        dwell_s: float,
        readings: Mapping[str, float] | None = None,
        exposed: bool | None = None,
    ) -> tuple[int, ...]:
        """One gate of ``dwell_s`` s: the post-selected counts (and the reference's, when the
        bench has a reference channel) at ``readings`` (default: the mounts' true readings),
        the detector ``exposed`` (default: the shutter is open)."""
        from ..physics.detection import measured_rate

        d = self.truth.detector
        if self.shutter.is_open() if exposed is None else exposed:
            rate = float(self.expected(readings).measured_rate)
        else:
            rate = float(measured_rate(d.dark_rate, d.dead_time_s))
        means = np.array([rate, self.reference_rate()][: self.counter.channels]) * dwell_s
        counts = tuple(int(c) for c in self.rng.poisson(means))
        self._pass_time(dwell_s)
        return counts

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
