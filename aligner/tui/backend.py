"""What the desk works with: the bench, the engine calls and the devices, in one object.

The app is handed a :class:`DeskBackend`; tests build one with simulated time and a temporary
run log, the command line with real-time simulated (or real) devices. Every number the desk
shows comes from one of these calls; nothing here computes optics.
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

from ..bench import Bench
from ..errors import InputError
from ..run.log import LoggedPoint, RunLog
from ..run.station import Station

__all__ = ["DeskBackend", "PointHook", "SweepPreview"]

#: Called from the sweep thread after each committed point: (point, done, total, run log).
PointHook = Callable[[LoggedPoint, int, int, RunLog], None]


@dataclass(frozen=True)
class SweepPreview:
    """A sweep planned but not started: the bench at the desk's readings, the parsed schedule,
    the planned points and the mounts whose planned readings differ from the desk's by more
    than one resolution step (``moves``, bench order)."""

    bench: Bench
    schedule: Any
    points: tuple[Any, ...]
    moves: tuple[str, ...]


class DeskBackend:
    """The bench, its run log and its devices, and the engine calls the desk makes.

    ``db_path`` is the SQLite run log (default: the user data folder); ``station_factory``
    opens the station (the bench's declared devices) for a bench (default
    :meth:`aligner.run.station.Station.open` with ``realtime``). The station is opened at the
    first sweep and kept until :meth:`close`, which shuts the shutter.
    """

    def __init__(
        self,
        bench: Bench,
        *,
        db_path: str | Path | None = None,
        station_factory: Callable[[Bench], Station] | None = None,
        realtime: bool = False,
    ) -> None:
        from ..run.log import default_db_path

        self.bench = bench
        self.db_path = Path(db_path) if db_path is not None else default_db_path()
        self.realtime = realtime
        self._station_factory = station_factory
        self._station: Station | None = None
        self._idle = threading.Event()
        self._idle.set()
        #: True while :meth:`sweep` runs (in its worker thread).
        self.sweeping = False

    # -- bench and predictions ---------------------------------------------------------------

    def bench_at(self, readings: Mapping[str, float]) -> Bench:
        """The bench with its mounts' readings (deg) replaced by ``readings``."""
        unknown = sorted(set(readings) - set(self.bench.mounts))
        if unknown:
            raise InputError(
                f"unknown mount(s) {', '.join(unknown)}; the bench has "
                f"{', '.join(self.bench.mounts)}"
            )
        return self.bench.with_mounts(
            **{
                name: replace(self.bench.mounts[name], reading_deg=float(value))
                for name, value in readings.items()
            }
        )

    def predict(self, readings: Mapping[str, float]) -> Any:
        """:func:`aligner.prediction.predict` at ``readings`` (deg)."""
        from ..prediction import predict

        return predict(self.bench, dict(readings))

    def predict_curve(self, readings: Mapping[str, float], imbalance_readings: Any) -> Any:
        """The prediction along the imbalance mount (an array of its readings, deg), the other
        mounts at ``readings``."""
        from ..prediction import predict

        return predict(self.bench, {**readings, self.bench.imbalance_mount: imbalance_readings})

    def limits(self, readings: Mapping[str, float]) -> Any:
        """:func:`aligner.prediction.limits` at ``readings`` (deg)."""
        from ..prediction import limits

        return limits(self.bench, dict(readings))

    def find_null(self, readings: Mapping[str, float]) -> float:
        """Reading (deg) of the imbalance mount at the null nearest its reading."""
        from ..prediction import find_null

        return find_null(self.bench, dict(readings))

    def plan(self, readings: Mapping[str, float], **target: Any) -> Any:
        """:func:`aligner.planning.plan` for ``target`` on the bench at ``readings`` (deg)."""
        from ..planning import plan

        return plan(self.bench_at(readings), **target)

    # -- sweeps -------------------------------------------------------------------------------

    def station(self, readings: Mapping[str, float]) -> Station:
        """The bench's station (its declared devices), opened on first use with the mounts at
        ``readings``."""
        if self._station is None:
            bench = self.bench_at(readings)
            if self._station_factory is not None:
                self._station = self._station_factory(bench)
            else:
                self._station = Station.open(bench, realtime=self.realtime)
        return self._station

    def unmoved_differences(
        self, readings: Mapping[str, float], moved: set[str]
    ) -> dict[str, tuple[float, float]]:
        """Mounts a sweep will not move whose device reads other than ``readings`` by more
        than one resolution step: ``{mount: (device reading, desk reading)}`` (deg)."""
        station = self.station(readings)
        out = {}
        for name, mount in station.devices.mounts.items():
            if name in moved:
                continue
            here = float(mount.position())
            if abs(here - readings[name]) > self.bench.mounts[name].resolution_deg:
                out[name] = (here, float(readings[name]))
        return out

    def hardware_mounts(self) -> tuple[str, ...]:
        """Mounts whose driver is not a simulation (their moves are real), bench order."""
        return tuple(
            name for name, m in self.bench.mounts.items() if m.driver.partition(":")[0] != "sim"
        )

    def preview(self, spec: str, dwell_s: float, readings: Mapping[str, float]) -> SweepPreview:
        """Parse and plan a sweep without touching any device (bad input: ``InputError``)."""
        from ..run.schedule import parse_schedule, plan_points

        bench = self.bench_at(readings)
        schedule = parse_schedule(spec, dwell_s=dwell_s)
        points = tuple(plan_points(bench, schedule))
        moves = tuple(
            name
            for name, m in bench.mounts.items()
            if any(
                abs(p.readings[name] - m.reading_deg) > m.resolution_deg
                for p in points
                if name in p.readings
            )
        )
        return SweepPreview(bench, schedule, points, moves)

    def request_stop(self) -> None:
        """Ask a running sweep to pause after the point it is taking."""
        if self._station is not None:
            self._station.request_stop()

    def sweep(
        self,
        spec: str,
        dwell_s: float,
        readings: Mapping[str, float],
        *,
        on_point: PointHook,
        on_start: Callable[[int, Sequence[Any], RunLog], None] | None = None,
        resume_run: int | None = None,
        planned: SweepPreview | None = None,
    ) -> Any:
        """Plan and run a sweep (or resume run ``resume_run``); blocking, for a worker thread.

        ``spec`` is a one-word schedule (:func:`aligner.run.schedule.parse_schedule`),
        ``dwell_s`` the count time per point (s); other mounts stay at ``readings`` (deg).
        ``planned`` (from :meth:`preview`) runs exactly that plan instead of planning again.
        ``on_start(run_id, planned_points, run_log)`` is called once the run exists. Returns
        the engine's ``SweepResult``; a pause asked with :meth:`request_stop` ends it
        ``interrupted``.
        """
        self.sweeping = True
        self._idle.clear()
        try:
            return self._sweep(spec, dwell_s, readings, on_point, on_start, resume_run, planned)
        finally:
            self.sweeping = False
            self._idle.set()

    def _sweep(
        self,
        spec: str,
        dwell_s: float,
        readings: Mapping[str, float],
        on_point: PointHook,
        on_start: Callable[[int, Sequence[Any], RunLog], None] | None,
        resume_run: int | None,
        planned: SweepPreview | None,
    ) -> Any:
        station = self.station(readings)  # before the run exists: a device fault logs no run
        with RunLog(self.db_path, durable=station.provenance.kinds != {"simulated"}) as log:

            def started(run_id: int, points: Sequence[Any]) -> None:
                if on_start is not None:
                    on_start(run_id, points, log)

            def hook(point: LoggedPoint, done: int, total: int) -> None:
                on_point(point, done, total, log)

            if resume_run is not None:
                return station.resume_sweep(log, resume_run, on_start=started, on_point=hook)
            if planned is None:
                planned = self.preview(spec, dwell_s, readings)
            station.use_bench(planned.bench)
            return station.start_sweep(
                log, planned.schedule, plan=planned.points, on_start=started, on_point=hook
            )

    # -- recipes (the recipe screen) -----------------------------------------------------------

    def recipes(self) -> list[Any]:
        """Bundled and local recipes (:func:`aligner.recipe.catalog`), each with its error if
        it does not load."""
        from ..recipe import catalog

        return catalog()

    def run_recipe(
        self,
        recipe: Any,
        operator: Any,
        readings: Mapping[str, float],
        *,
        resume_run: int | None = None,
    ) -> Any:
        """Run ``recipe`` (or resume recipe run ``resume_run``) on the desk's station with
        ``operator`` (:class:`aligner.recipe.Operator`); blocking, for a worker thread.
        :meth:`request_stop` pauses it at its next safe point. Returns the engine's
        ``RecipeRunResult``."""
        from ..recipe import resume_recipe, run_recipe

        self.sweeping = True
        self._idle.clear()
        try:
            station = self.station(readings)
            if resume_run is not None:
                return resume_recipe(
                    resume_run, self.bench, operator, db=self.db_path, station=station
                )
            return run_recipe(recipe, self.bench, operator, db=self.db_path, station=station)
        finally:
            self.sweeping = False
            self._idle.set()

    # -- the run log --------------------------------------------------------------------------

    def run_log(self) -> RunLog:
        """A new connection to the run log (one per thread; close it after use)."""
        return RunLog(self.db_path)

    def shutdown(self, wait_s: float = 60.0) -> None:
        """However the desk ends (quit, a signal, an error): ask a running sweep to pause, wait
        up to ``wait_s`` s for it to secure the bench, then shut the shutter and close."""
        self.request_stop()
        self._idle.wait(wait_s)
        self.close()

    def close(self) -> None:
        """Shut the shutter and close the devices, if they were opened."""
        if self._station is not None:
            self._station.close()
            self._station = None
