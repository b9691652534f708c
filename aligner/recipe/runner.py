"""Running a recipe: check it against the bench, walk its steps on one station, log every
step's outcome as a run of kind ``recipe``, and resume a stopped run where it stopped.

Before step 1 every mount the recipe names (``needs`` and every step's ``mount``) must exist
on the bench, and an automatic operator (``--yes``) needs a default for every prompt; the
cautions are shown before step 1 and again before every step that opens the shutter or turns
a polarizer. Each step's outcome is written in one transaction with the events raised while
taking it; a resumed run (:func:`resume_recipe`) rebuilds the stored results from the log and
goes on at the first step not finished (or ``from_step``), never repeating a finished one.

Every ending -- done, a failed check that stops, a refusal, a device fault, a guard trip,
Ctrl-C, SIGTERM/SIGHUP, a pause asked for, a full disk, bad input met while running, an
internal error -- secures the station (mounts stopped, shutter shut), logs the step that
stopped and why, and leaves the run resumable (:class:`RecipeRunResult` ``reason``).
"""

from __future__ import annotations

import sqlite3
from collections.abc import Mapping
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..errors import (
    AlignerError,
    DeviceError,
    GuardTrip,
    InputError,
    RecipeError,
    SignalInterrupt,
    StopRequested,
    StorageError,
    exit_status,
)
from .format import EXPOSING, TURNING, Recipe, Step, parse_recipe
from .results import StepOutcome
from .steps import STEP_FUNCTIONS, Context, Operator, OperatorPause, mount_of, polarizer_mounts

if TYPE_CHECKING:
    from ..bench import Bench
    from ..run.log import RunRecord
    from ..run.station import Station

__all__ = ["RecipeRunResult", "check_bench", "resume_recipe", "run_recipe"]

#: Step states after which the run goes on to the next step.
_FINISHED = ("done", "passed", "skipped")


@dataclass(frozen=True)
class RecipeRunResult:
    """How a recipe run ended. ``reason``: ``""`` every step done; ``refused`` the operator
    said no; ``check`` a check (or a fit, null search or set) failed and stopped the recipe;
    ``operator`` a pause asked for; ``interrupt`` Ctrl-C or a signal (``signal``);
    ``guard``, ``device``, ``storage``, ``input``, ``error`` as for sweeps. ``failed`` lists
    the numbers of the steps that failed; ``shutter`` the shutter's state at the end
    (:data:`aligner.run.station.SHUTTER_STATES`)."""

    run_id: int
    recipe: str
    status: str
    reason: str
    message: str
    steps_done: int
    steps_total: int
    failed: tuple[int, ...] = ()
    shutter: str = "none"
    signal: int = 0

    @property
    def exit_code(self) -> int:
        """The command's exit status for this ending."""
        return exit_status(self.reason, self.signal)

    def to_json(self) -> dict[str, Any]:
        """The result as plain data."""
        return {
            "run": self.run_id,
            "recipe": self.recipe,
            "status": self.status,
            "reason": self.reason,
            "message": self.message,
            "steps_done": self.steps_done,
            "steps_total": self.steps_total,
            "failed_steps": list(self.failed),
            "shutter": self.shutter,
        }


def check_bench(recipe: Recipe, bench: Bench) -> None:
    """Refuse, before anything moves, a recipe that names a mount the bench lacks."""
    for i, ref in enumerate(recipe.needs, 1):
        try:
            mount_of(bench, ref)
        except RecipeError as exc:
            raise RecipeError(f"{recipe.path}: recipe.needs[{i}]: {exc}") from None
    for step in recipe.steps:
        if "mount" in step.args:
            try:
                mount_of(bench, step.args["mount"])
            except RecipeError as exc:
                raise RecipeError(f"{recipe.path}: step {step.number}.mount: {exc}") from None
        if step.do == "null" and "mount" not in step.args and bench.analyzer.mount is None:
            raise RecipeError(
                f"{recipe.path}: step {step.number}.mount: the bench's analyzer has no mount; "
                "say which mount to null"
            )


def _check_automatic(recipe: Recipe, operator: Operator) -> None:
    if not operator.automatic:
        return
    for step in recipe.steps:
        if step.do == "prompt" and "default" not in step.args:
            raise RecipeError(
                f"{recipe.path}: step {step.number}.default: answering for the operator needs "
                "a default for every prompt; run without --yes and type the value"
            )


def run_recipe(
    recipe: Recipe,
    bench: Bench,
    operator: Operator,
    *,
    db: str | Path | None = None,
    seed: int | None = None,
    overrides: Mapping[str, tuple[str, str | None]] | None = None,
    realtime: bool = False,
    station: Station | None = None,
) -> RecipeRunResult:
    """Run ``recipe`` on ``bench`` from step 1 (see the module docstring), logging it in the
    run log ``db``. The station is opened from the bench's declared devices (``overrides``,
    ``seed``, ``realtime`` as for :meth:`Station.open`) unless one is given (it is then left
    open, secured)."""
    from ..bench import snapshot_text
    from ..run.log import RunLog

    check_bench(recipe, bench)
    _check_automatic(recipe, operator)
    _say_cautions(recipe, operator, "before you start")
    with (
        _Opened(bench, station, overrides, seed, realtime) as st,
        RunLog(db, durable=st.provenance.kinds != {"simulated"}) as log,
    ):
        run_id = log.create_recipe_run(
            recipe={
                "name": recipe.name,
                "path": str(recipe.path),
                "text": recipe.text,
                "steps": [s.to_json() for s in recipe.steps],
            },
            bench_name=bench.name,
            bench_path=str(bench.path),
            bench_toml=snapshot_text(bench),
            imbalance_mount=bench.imbalance_mount,
            software_version=st.provenance.software_version,
            provenance=st.provenance.to_json(),
        )
        ctx = Context(recipe, bench, st, operator, log, run_id)
        return _walk(ctx, 0)


def resume_recipe(
    run_id: int,
    bench: Bench,
    operator: Operator,
    *,
    db: str | Path | None = None,
    from_step: int | None = None,
    seed: int | None = None,
    overrides: Mapping[str, tuple[str, str | None]] | None = None,
    realtime: bool = False,
    station: Station | None = None,
) -> RecipeRunResult:
    """Go on with recipe run ``run_id`` at the first step not finished (or at step
    ``from_step``, doing it and every later step again), with the recipe and the bench as
    logged at its start (the lower ``safe_rate`` of that bench and ``bench``) and the
    results stored so far."""
    import tomllib

    from ..run.log import Event, RunLog
    from ..run.sweep import resume_bench

    with RunLog(db, create=False) as log:
        record = log.run(run_id)
        row = log.recipe_run(run_id)
        if record.status == "complete":
            raise InputError(f"recipe run {run_id} is already complete")
        recipe = parse_recipe(tomllib.loads(row.text), Path(row.path), row.text)
        logged, note = resume_bench(_logged_bench(record), bench, record)
        outcomes = {r.number: StepOutcome.from_json(r.outcome) for r in log.recipe_steps(run_id)}
        start = _resume_index(recipe, outcomes, from_step)
        check_bench(recipe, logged)
        _check_automatic(recipe, operator)
        _say_cautions(recipe, operator, "before you go on")
        with _Opened(logged, station, overrides, seed, realtime) as st, log.claim(run_id):
            log.add_session(run_id, st.provenance.to_json())
            ctx = Context(recipe, logged, st, operator, log, run_id)
            for step in recipe.steps[:start]:
                ctx.remember(step, outcomes[step.number])
                ctx.updates.update(outcomes[step.number].updates if step.do == "set" else {})
            ctx.stopped = {n: o for n, o in outcomes.items() if o.state == "stopped"}
            events = [Event("resume", f"resumed at step {start + 1} of {len(recipe.steps)}")]
            if note:
                events.append(Event("note", note))
            log.add_events(run_id, events)
            operator.say(f"recipe run {run_id}: going on at step {start + 1}")
            return _walk(ctx, start, claimed=True)


def _logged_bench(record: RunRecord) -> Bench:
    """The bench a run was logged with (its snapshot)."""
    import tomlkit

    from ..bench import parse_bench

    where = record.bench_path or f"run {record.id}"
    return parse_bench(tomlkit.parse(record.bench_toml).unwrap(), where)


def _resume_index(
    recipe: Recipe, outcomes: Mapping[int, StepOutcome], from_step: int | None
) -> int:
    """Index of the step a resumed run starts at."""
    n = len(recipe.steps)
    if from_step is not None:
        if not 1 <= from_step <= n:
            raise InputError(f"--from-step must be a step number from 1 to {n}, got {from_step}")
        first_open = _resume_index(recipe, outcomes, None)
        if from_step - 1 > first_open:
            raise InputError(
                f"--from-step {from_step}: step {first_open + 1} is not finished yet; a run "
                f"goes on at step {first_open + 1} or earlier"
            )
        return from_step - 1
    for i, step in enumerate(recipe.steps):
        o = outcomes.get(step.number)
        if o is None or not _goes_on(step, o):
            return i
    return n


def _goes_on(step: Step, outcome: StepOutcome) -> bool:
    """Whether the run goes on after ``step`` ended with ``outcome``."""
    if outcome.state in _FINISHED:
        return True
    return outcome.state == "failed" and step.args.get("on_fail") == "continue"


def _say_cautions(recipe: Recipe, operator: Operator, when: str) -> None:
    operator.say(f"{recipe.title} -- cautions {when}:")
    for caution in recipe.cautions:
        operator.say(f"caution: {caution}")


class _Opened:
    """The station for a run: the one given (left open), or one opened from the bench's
    declared devices and closed (secured) at the end."""

    def __init__(
        self,
        bench: Bench,
        station: Station | None,
        overrides: Mapping[str, tuple[str, str | None]] | None,
        seed: int | None,
        realtime: bool,
    ) -> None:
        self.given = station
        self.args = (bench, overrides, seed, realtime)
        self.station: Station | None = None

    def __enter__(self) -> Station:
        from ..run.station import Station

        bench, overrides, seed, realtime = self.args
        if self.given is not None:
            self.given.use_bench(bench)
            self.station = self.given
        else:
            self.station = Station.open(bench, overrides=overrides, seed=seed, realtime=realtime)
        return self.station

    def __exit__(self, *exc: object) -> None:
        assert self.station is not None
        if self.given is None:
            self.station.close()
        else:
            self.station.secure()


def _walk(ctx: Context, start: int, *, claimed: bool = False) -> RecipeRunResult:
    """Do the steps from index ``start``, holding the run for this process."""
    if claimed:
        return _Walk(ctx).run(start)
    with ctx.log.claim(ctx.run_id):
        return _Walk(ctx).run(start)


class _Walk:
    """One session of a recipe run (see :func:`_walk`)."""

    def __init__(self, ctx: Context) -> None:
        self.ctx = ctx
        self.steps = ctx.recipe.steps
        self.turning = polarizer_mounts(ctx.base)

    def cautions_again(self, step: Step) -> bool:
        """Whether ``step`` opens the shutter or may turn a polarizer."""
        if step.do in EXPOSING:
            return True
        if step.do not in TURNING:
            return False
        if "to_plan" in step.args:
            return True
        return mount_of(self.ctx.base, step.args["mount"]) in self.turning

    def run(self, start: int) -> RecipeRunResult:
        ctx, st = self.ctx, self.ctx.station
        ctx.log.set_status(ctx.run_id, "running")
        failed: list[int] = []
        current: Step | None = None
        try:
            for step in self.steps[start:]:
                current = step
                try:
                    st.check_stop()  # a signal's request raises SignalInterrupt
                except StopRequested:
                    raise OperatorPause(f"paused before step {step.number}") from None
                outcome = self.step(step)
                if outcome.state == "failed":
                    failed.append(step.number)
                if not _goes_on(step, outcome):
                    return self.end(step, outcome, failed)
            current = None
            shut = st.secure()
        except StopRequested:
            return self.stop(current, "paused as asked (while counting)", "operator")
        except SignalInterrupt as exc:
            return self.stop(current, f"stopped by signal {exc.signum}", "interrupt", exc.signum)
        except KeyboardInterrupt:
            return self.stop(current, "interrupted by the operator (Ctrl-C)", "interrupt", 2)
        except OperatorPause as exc:
            return self.stop(current, f"paused as asked ({exc})", "operator")
        except GuardTrip as exc:
            return self.stop(current, str(exc), "guard")
        except DeviceError as exc:
            return self.stop(current, str(exc), "device")
        except StorageError as exc:
            return self.stop(current, str(exc), "storage")
        except AlignerError as exc:
            return self.stop(current, f"stopped by bad input while running: {exc}", "input")
        except BaseException as exc:
            self.stop(current, f"internal error: {type(exc).__name__}: {exc}", "error")
            raise
        from ..run.station import shutter_words

        message = "all steps done" + (
            f"; checks failed at step(s) {', '.join(map(str, failed))}" if failed else ""
        )
        self.finish("complete", f"{message}; {shutter_words(shut)}")
        return self.result("complete", "", message, failed, shut)

    def step(self, step: Step) -> StepOutcome:
        from ..run.log import utc_now

        ctx = self.ctx
        ctx.operator.step_started(step)
        if self.cautions_again(step):
            for caution in ctx.recipe.cautions:
                ctx.operator.say(f"caution: {caution}")
        started = utc_now()
        outcome = STEP_FUNCTIONS[step.do](ctx, step)
        outcome = replace(outcome, started_utc=started, ended_utc=utc_now())
        self.write(outcome)
        ctx.remember(step, outcome)
        ctx.operator.say(f"  {outcome.state}: {outcome.message}")
        ctx.operator.step_ended(outcome)
        return outcome

    def write(self, outcome: StepOutcome) -> None:
        ctx = self.ctx
        try:
            ctx.log.put_step(ctx.run_id, outcome.to_json(), ctx.station.take_events())
        except (sqlite3.Error, OSError) as exc:
            raise StorageError(
                f"step {outcome.number} could not be written to {ctx.log.path} ({exc}); free "
                "disk space (or fix the file's permissions), then resume the run"
            ) from None

    def end(self, step: Step, outcome: StepOutcome, failed: list[int]) -> RecipeRunResult:
        """The run stops after ``step``: refused, or failed where that stops the recipe."""
        from ..run.station import shutter_words

        shut = self.ctx.station.secure()
        reason = "refused" if outcome.state == "refused" else "check"
        message = f"stopped at step {step.number}: {outcome.message}"
        self.finish("interrupted", f"{message}; {shutter_words(shut)}")
        return self.result("interrupted", reason, message, failed, shut)

    def stop(
        self, step: Step | None, message: str, reason: str, signal: int = 0
    ) -> RecipeRunResult:
        """Secure the bench, log the step that stopped and why (best effort: a run log that
        cannot be written does not stop the securing)."""
        from ..run.log import Event, utc_now
        from ..run.station import shutter_words

        ctx = self.ctx
        shut = ctx.station.secure()
        ctx.station.clear_stop()  # the request, if one stopped the recipe, is answered
        where = f"step {step.number}: " if step else ""
        text = f"{where}{message}; {shutter_words(shut)}"
        kind = "guard" if reason == "guard" else "pause"
        try:
            if step is not None:
                earlier = ctx.stopped.get(step.number)
                outcome = StepOutcome(
                    step.number,
                    step.do,
                    "stopped",
                    message,
                    step.name,
                    run=earlier.run if earlier else None,
                    started_utc=utc_now(),
                    ended_utc=utc_now(),
                )
                ctx.log.put_step(ctx.run_id, outcome.to_json(), ctx.station.take_events())
                ctx.operator.step_ended(outcome)
            ctx.log.add_events(ctx.run_id, [*ctx.station.take_events(), Event(kind, text)])
            ctx.log.set_status(ctx.run_id, "interrupted", text)
        except (sqlite3.Error, OSError) as exc:
            text += f" (the run log could not record this: {exc})"
        ctx.operator.say(f"recipe run {ctx.run_id} stopped at {where or 'the start: '}{message}")
        return self.result("interrupted", reason, text, [], shut, signal)

    def finish(self, status: str, message: str) -> None:
        ctx = self.ctx
        ctx.log.add_events(ctx.run_id, ctx.station.take_events())
        ctx.log.set_status(ctx.run_id, status, message)

    def result(
        self,
        status: str,
        reason: str,
        message: str,
        failed: list[int],
        shutter: str,
        signal: int = 0,
    ) -> RecipeRunResult:
        ctx = self.ctx
        done = sum(
            1
            for row in ctx.log.recipe_steps(ctx.run_id)
            if row.state in _FINISHED or row.state == "failed"
        )
        return RecipeRunResult(
            ctx.run_id,
            ctx.recipe.name,
            status,
            reason,
            message,
            done,
            len(self.steps),
            tuple(failed),
            shutter,
            signal,
        )
