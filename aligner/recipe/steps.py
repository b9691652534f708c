"""What each kind of recipe step does, on a station, with the results stored so far.

One function per step kind (:data:`STEP_FUNCTIONS`), each taking the run's :class:`Context`
and the step and returning its :class:`StepOutcome` (without timestamps: the runner adds
them). Steps that open the shutter shut it again before they return or raise
(:meth:`Station.secure`); every device operation goes through the station (guarded moves,
gated counts).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import replace
from typing import TYPE_CHECKING, Any

from ..errors import AlignerError, GuardTrip, InputError, RecipeError, StorageError
from .format import MOUNT_ROLES, PRIMARY, Recipe, Step
from .results import Quantity, Results, ScanData, StepOutcome, fmt_quantity

if TYPE_CHECKING:
    from ..bench import Bench
    from ..run.log import RunLog
    from ..run.station import Station

__all__ = [
    "STEP_FUNCTIONS",
    "Context",
    "Operator",
    "OperatorPause",
    "mount_of",
    "parse_answer",
    "polarizer_mounts",
]


class OperatorPause(Exception):
    """The operator asked the recipe to pause (it stops at a safe point, resumable)."""


class Operator:
    """How a recipe talks to the person at the bench; the terminal, the desk and the tests
    each give one. ``say`` shows a line, ``confirm`` asks yes/no (False stops the recipe),
    ``ask`` asks for a prompt step's value (None stops the recipe). ``automatic`` operators
    (``--yes``) take every prompt's default. The ``step_*`` hooks report progress."""

    automatic = False

    def say(self, text: str) -> None:
        raise NotImplementedError

    def confirm(self, text: str) -> bool:
        raise NotImplementedError

    def ask(self, step: Step) -> float | None:
        raise NotImplementedError

    def step_started(self, step: Step) -> None:
        """Called before a step runs."""

    def step_ended(self, outcome: StepOutcome) -> None:
        """Called after a step's outcome is logged."""


def parse_answer(step: Step, text: str) -> float | str:
    """An operator's typed answer to a prompt step: the value (Enter takes the default), or
    the sentence saying what is allowed."""
    a = step.args
    allowed = f"a number of {a['unit']} from {a['min']:g} to {a['max']:g}"
    text = text.strip()
    if not text and "default" in a:
        return float(a["default"])
    try:
        value = float(text)
    except ValueError:
        return f"{text[:40]!r} is not a number; type {allowed}"
    if not (math.isfinite(value) and a["min"] <= value <= a["max"]):
        return f"{value:g} is outside the allowed range; type {allowed}"
    return value


def mount_of(bench: Bench, ref: str) -> str:
    """The bench's mount for a recipe's mount reference (a role of :data:`MOUNT_ROLES`, else
    a mount name); ``RecipeError`` when the bench has none."""
    if ref in MOUNT_ROLES:
        name = _role(bench, ref)
        if name is None:
            raise RecipeError(f"role {ref!r} ({MOUNT_ROLES[ref]}): this bench has no such mount")
        return name
    if ref not in bench.mounts:
        raise RecipeError(
            f"the bench has no mount {ref!r} (its mounts: {', '.join(bench.mounts)}; roles: "
            f"{', '.join(MOUNT_ROLES)})"
        )
    return ref


def _role(bench: Bench, role: str) -> str | None:
    if role == "analyzer":
        return bench.analyzer.mount
    if role == "imbalance":
        return bench.imbalance_mount
    if role == "phase":
        return bench.phase_mount
    where, _, plate = role.partition("-")
    chain = bench.pre if where == "pre" else bench.post
    return next((e.mount for e in chain if e.type == plate and e.mount), None)


def polarizer_mounts(bench: Bench) -> set[str]:
    """Mounts that turn a polarizer or the analyzer (cautions are shown again before)."""
    names = {bench.analyzer.mount, bench.imbalance_mount}
    names |= {e.mount for e in (*bench.pre, *bench.post) if e.type == "polarizer"}
    return {n for n in names if n}


class Context:
    """One recipe run's state: the station, the operator, the run log, the results so far and
    the bench values set by ``set`` steps (``updates``, dotted bench keys)."""

    def __init__(
        self,
        recipe: Recipe,
        base: Bench,
        station: Station,
        operator: Operator,
        log: RunLog,
        run_id: int,
    ) -> None:
        self.recipe, self.base, self.station = recipe, base, station
        self.operator, self.log, self.run_id = operator, log, run_id
        self.results = Results()
        self.updates: dict[str, float] = {}
        #: outcomes of steps stopped in an earlier session (a sweep step resumes its run)
        self.stopped: dict[int, StepOutcome] = {}

    @property
    def bench(self) -> Bench:
        """The working bench: the bench at the start with the values set so far."""
        return apply_updates(self.base, self.updates)

    def here(self) -> Bench:
        """The working bench with the mounts' readings where the devices read now."""
        bench = self.bench
        now = self.station.readings(fresh=True)
        return bench.with_mounts(
            **{k: replace(m, reading_deg=now[k]) for k, m in bench.mounts.items() if k in now}
        )

    def mount(self, ref: str) -> str:
        return mount_of(self.bench, ref)

    def remember(self, step: Step, outcome: StepOutcome) -> None:
        """Store a step's result under its name (a recall stores what it found, or None)."""
        if not step.name:
            return
        if step.do == "recall":
            source = self.recipe.step_named(step.args["result"])
            primary = PRIMARY.get(source.produces, "") if source else ""
            found = outcome if outcome.state == "done" else None
            self.results.store(step.name, found, primary)
        else:
            self.results.store(step.name, outcome, PRIMARY.get(step.produces, ""))


_ALLOWED_UPDATES = ("offset_deg", "offset_err_deg")


def apply_updates(bench: Bench, updates: Mapping[str, float]) -> Bench:
    """``bench`` with fitted values set (in memory): ``mounts.NAME.offset_deg`` /
    ``offset_err_deg`` and ``analyzer.unexplained_leak``."""
    for key, value in updates.items():
        parts = key.split(".")
        if len(parts) == 3 and parts[0] == "mounts" and parts[2] in _ALLOWED_UPDATES:
            mount = bench.mounts[parts[1]]
            if parts[2] == "offset_deg":
                mount = replace(mount, offset_deg=float(value))
            else:
                mount = replace(mount, offset_err_deg=float(value))
            bench = bench.with_mounts(**{parts[1]: mount})
        elif key == "analyzer.unexplained_leak":
            bench = replace(bench, analyzer=replace(bench.analyzer, unexplained_leak=value))
        else:
            raise RecipeError(f"a recipe cannot set {key!r}")
    return bench


def _outcome(step: Step, message: str, state: str = "done", **fields: Any) -> StepOutcome:
    return StepOutcome(step.number, step.do, state, message, step.name, **fields)


# -- operator steps --------------------------------------------------------------------------


def note(ctx: Context, step: Step) -> StepOutcome:
    ctx.operator.say(step.args["text"])
    return _outcome(step, "read")


def confirm(ctx: Context, step: Step) -> StepOutcome:
    if ctx.operator.confirm(step.args["text"]):
        return _outcome(step, "confirmed", answer="yes")
    return _outcome(step, "not confirmed: the recipe stops here", "refused", answer="no")


def prompt(ctx: Context, step: Step) -> StepOutcome:
    value = ctx.operator.ask(step)
    if value is None:
        return _outcome(step, "no value given: the recipe stops here", "refused")
    checked = parse_answer(step, repr(value))
    if isinstance(checked, str):
        raise InputError(f"{step.label()}: {checked}")
    q = Quantity(checked, step.args["unit"])
    return _outcome(
        step, f"{step.name} = {fmt_quantity(q)}", quantities={"value": q}, answer=f"{checked:g}"
    )


# -- device steps ----------------------------------------------------------------------------


def _place(ctx: Context, mount: str, where: str) -> float:
    """A reading (deg) for a place word or a stored reading."""
    if where == "here":
        return ctx.station.position(mount)
    if where == "file-reading":
        return ctx.base.mounts[mount].reading_deg
    if where == "predicted-null":
        from ..fit.scanmodel import null_reading_deg

        here = ctx.here()
        return null_reading_deg(here, mount, here.mounts[mount].reading_deg, span_deg=10.0)
    q = ctx.results.quantity(where)
    if q is None or not math.isfinite(q.value):
        raise RecipeError(f"{where} holds no reading to go to")
    return q.value


def move(ctx: Context, step: Step) -> StepOutcome:
    a, st = step.args, ctx.station
    st.use_bench(ctx.bench)
    if "to_plan" in a:
        plan = ctx.results.outcome(a["to_plan"])
        targets = dict(plan.readings) if plan else {}
    else:
        mount = ctx.mount(a["mount"])
        if "to_deg" in a:
            targets = {mount: a["to_deg"]}
        elif "by_deg" in a:
            targets = {mount: st.position(mount) + a["by_deg"]}
        else:
            targets = {mount: _place(ctx, mount, a["to"])}
    moves = [st.move(name, float(t)) for name, t in targets.items()]
    words = [
        f"{m.mount} to {m.commanded_deg:.4f} deg (reads {m.readback_deg:.4f})"
        + (f"; {m.note}" if m.note else "")
        for m in moves
    ]
    return _outcome(
        step,
        "moved " + "; ".join(words),
        readings={m.mount: m.readback_deg for m in moves},
        devices=tuple(targets),
    )


def _count(ctx: Context, dwell_s: float) -> tuple[dict[str, float], int, int | None]:
    """Expose (where the prediction allows), count ``dwell_s`` s: (read-backs, counts,
    reference counts). The caller shuts the shutter."""
    st = ctx.station
    readings = st.readings(fresh=True)
    st.expose(readings)
    post, ref = st.count(dwell_s)
    return readings, post, ref


def _counting_devices(ctx: Context) -> tuple[str, ...]:
    return ("counter", "shutter") if ctx.station.devices.shutter else ("counter",)


def measure(ctx: Context, step: Step) -> StepOutcome:
    from ..prediction import predict
    from ..run.station import shutter_words
    from ..run.sweep import measured_leak

    dwell = step.args["dwell_s"]
    st = ctx.station
    st.use_bench(ctx.bench)
    try:
        readings, post, ref = _count(ctx, dwell)
    finally:
        shut = st.secure()
    bench = ctx.bench
    leak = measured_leak(bench, post, dwell, ref)
    pred = predict(bench, readings)
    quantities = {
        "counts": Quantity(post, "counts", math.sqrt(post)),
        "count_rate": Quantity(post / dwell, "counts/s", math.sqrt(post) / dwell),
        "predicted_leak_rate": Quantity(float(pred.leak_rate)),
        "imbalance_deg": Quantity(float(pred.imbalance_deg), "deg"),
    }
    if leak.leak is not None:
        quantities["leak_rate"] = Quantity(leak.leak, "1", None, leak.low, leak.high)
        said = f"leak rate {fmt_quantity(quantities['leak_rate'])}"
    else:
        said = f"no leak rate ({leak.flag})"
    return _outcome(
        step,
        f"{post} counts in {dwell:g} s: {said}; predicted {float(pred.leak_rate):.4g} at "
        f"imbalance {float(pred.imbalance_deg):+.4f} deg; {shutter_words(shut)}",
        quantities=quantities,
        readings=readings,
        devices=(*_counting_devices(ctx), *readings),
    )


def scan(ctx: Context, step: Step) -> StepOutcome:
    import numpy as np

    from ..run.station import shutter_words

    a, st = step.args, ctx.station
    mount = ctx.mount(a["mount"])
    st.use_bench(ctx.bench)
    centre = _place(ctx, mount, a.get("around", "here"))
    n = 2 * round(a["span_deg"] / a["step_deg"]) + 1
    targets = centre + np.linspace(-a["span_deg"], a["span_deg"], n)
    rows: list[tuple[float, int, int | None]] = []
    try:
        for target in targets:
            if st.stop_requested:
                raise OperatorPause(f"paused after {len(rows)} of {n} readings of the scan")
            st.move(mount, float(target))
            readings, post, ref = _count(ctx, a["dwell_s"])
            rows.append((readings[mount], post, ref))
    finally:
        shut = st.secure()
    refs = [r for _, _, r in rows]
    data = ScanData(
        mount,
        tuple(r for r, _, _ in rows),
        tuple(c for _, c, _ in rows),
        None if any(r is None for r in refs) else tuple(int(r) for r in refs),  # type: ignore[arg-type]
        (a["dwell_s"],) * len(rows),
    )
    low = int(np.argmin(data.counts))
    return _outcome(
        step,
        f"{n} readings of {mount} from {targets[0]:.4f} to {targets[-1]:.4f} deg; fewest "
        f"counts ({data.counts[low]}) at {data.reading_deg[low]:.4f} deg; {shutter_words(shut)}",
        quantities={"points": Quantity(n)},
        scan=data,
        devices=(*_counting_devices(ctx), mount),
    )


# -- calculation steps -----------------------------------------------------------------------


def fit(ctx: Context, step: Step) -> StepOutcome:
    a = step.args
    source = ctx.results.outcome(a["scan"])
    if source is None or source.scan is None:
        raise RecipeError(f"{step.label()}: {a['scan']!r} holds no scan")
    data = source.scan
    mount = ctx.mount(a["mount"]) if "mount" in a else data.mount
    counts = data.count_scan(f"{a['scan']} (step {source.number})")
    bench = ctx.here()
    result, quantities = _FITS[a["fit"]](bench, counts, mount)
    state = "done" if result.fit.success else "failed"
    text = ", ".join(f"{k} {fmt_quantity(q)}" for k, q in quantities.items())
    message = f"{a['fit']} fit of {mount}: {text}"
    if not result.fit.success:
        message = f"the {a['fit']} fit did not converge ({result.fit.message}): {message}"
    return _outcome(step, message, state, quantities=quantities, updates=result.bench_updates())


def _fit_null(bench: Bench, data: Any, mount: str) -> tuple[Any, dict[str, Quantity]]:
    from ..fit.null import fit_null

    f = fit_null(bench, data, mount)
    return f, {
        "null_reading_deg": Quantity(f.null_reading_deg, "deg", f.null_reading_err_deg),
        "null_reading_err_deg": Quantity(f.null_reading_err_deg, "deg"),
        "offset_deg": Quantity(f.offset_deg, "deg", f.null_reading_err_deg),
        "extinction_ratio": Quantity(f.extinction_ratio, "1", f.extinction_ratio_err),
    }


def _fit_waveplate(bench: Bench, data: Any, mount: str) -> tuple[Any, dict[str, Quantity]]:
    from ..fit.scanmodel import plate_element
    from ..fit.waveplate import fit_waveplate

    f = fit_waveplate(bench, data, mount)
    nominal = float(plate_element(bench, mount).retardance_waves)
    return f, {
        "fast_axis_reading_deg": Quantity(f.fast_axis_reading_deg, "deg", f.fast_axis_err_deg),
        "fast_axis_err_deg": Quantity(f.fast_axis_err_deg, "deg"),
        "retardance_waves": Quantity(f.retardance_waves, "waves", f.retardance_err_waves),
        "retardance_err_waves": Quantity(f.retardance_err_waves, "waves"),
        "nominal_retardance_waves": Quantity(nominal, "waves"),
    }


def _fit_leak(bench: Bench, data: Any, mount: str) -> tuple[Any, dict[str, Quantity]]:
    from ..fit.leakcurve import fit_leak_curve

    f = fit_leak_curve(bench, data, mount)
    return f, {
        "imbalance_offset_deg": Quantity(f.imbalance_offset_deg, "deg", f.imbalance_offset_err_deg),
        "imbalance_offset_err_deg": Quantity(f.imbalance_offset_err_deg, "deg"),
        "leak_floor": Quantity(f.leak_floor, "1", f.leak_floor_err),
        "implied_extinction": Quantity(f.implied_extinction),
    }


_FITS: dict[str, Callable[[Any, Any, str], tuple[Any, dict[str, Quantity]]]] = {
    "null": _fit_null,
    "waveplate": _fit_waveplate,
    "leak": _fit_leak,
}


def set_values(ctx: Context, step: Step) -> StepOutcome:
    from ..bench import write_values

    source = ctx.results.outcome(step.args["from"])
    updates = dict(source.updates) if source else {}
    if not updates:
        return _outcome(step, f"{step.args['from']} has no values to set", "failed")
    ctx.updates.update(updates)
    ctx.station.use_bench(ctx.bench)
    listed = ", ".join(f"{k} = {v:.6g}" for k, v in updates.items())
    message = f"set for the following steps: {listed}"
    path = ctx.base.path
    answer = "never"
    if step.args.get("file", "ask") == "ask":
        question = f"Write {listed} into the bench file {path}?"
        answer = "yes" if ctx.operator.confirm(question) else "no"
        if answer == "yes":
            try:
                write_values(path, updates)  # type: ignore[arg-type]
                message += f"; written into {path}"
            except InputError as exc:
                message += f"; the bench file was not written: {exc}"
        else:
            message += "; the bench file was left as it was"
    return _outcome(step, message, updates=updates, answer=answer)


def plan(ctx: Context, step: Step) -> StepOutcome:
    from ..planning import plan as make_plan
    from ..prediction import predict

    a = step.args
    bench = ctx.here()
    result = make_plan(
        bench,
        a.get("amplification"),
        axis=a.get("axis"),
        exact=bool(a.get("exact", False)),
        leak_rate=a.get("leak_rate"),
        samples=0,
        predict=False,
    )
    settings = {k: float(v) for k, v in result.quantized.settings.items()}
    p = predict(bench, settings)
    amp = p.amplification_exact if a.get("exact") else p.amplification_linear
    quantities = {
        "amplification": Quantity(float(amp)),
        "leak_rate": Quantity(float(p.leak_rate)),
        "imbalance_deg": Quantity(float(p.imbalance_deg), "deg"),
    }
    where = ", ".join(f"{k} {v:.4f} deg" for k, v in settings.items())
    side = result.branches[result.chosen].side
    return _outcome(
        step,
        f"planned (nothing moved): {where}; amplification {float(amp):.4g} (the "
        f"{side}-reading side of the null, the nearer one: the sign says which way the pointer "
        f"moves), leak rate {float(p.leak_rate):.4g}, imbalance {float(p.imbalance_deg):+.4f} deg",
        quantities=quantities,
        readings=settings,
    )


def null(ctx: Context, step: Step) -> StepOutcome:
    from ..run.station import shutter_words

    a, st = step.args, ctx.station
    st.use_bench(ctx.bench)
    mount = ctx.mount(a.get("mount", "analyzer"))
    r = st.null_search(
        mount,
        dwell_s=a["dwell_s"],
        span_deg=a.get("span_deg", 2.0),
        points=a.get("points", 21),
        max_rounds=a.get("rounds", 8),
    )
    f = r.last_fit
    quantities = {
        "null_reading_deg": Quantity(r.null_reading_deg, "deg", r.null_reading_err_deg),
        "null_reading_err_deg": Quantity(r.null_reading_err_deg, "deg"),
        "offset_deg": Quantity(f.offset_deg, "deg", r.null_reading_err_deg),
        "extinction_ratio": Quantity(f.extinction_ratio, "1", f.extinction_ratio_err),
        "final_reading_deg": Quantity(r.final_reading_deg, "deg"),
    }
    return _outcome(
        step,
        f"{r.message}; null of {mount} at {fmt_quantity(quantities['null_reading_deg'])}, "
        f"{r.counter_reads} readings in {r.rounds} rounds; {shutter_words(r.shutter)}",
        "done" if r.converged else "failed",
        quantities=quantities,
        updates=f.bench_updates() if r.converged else {},
        devices=(*_counting_devices(ctx), mount),
    )


def sweep(ctx: Context, step: Step) -> StepOutcome:
    from ..run.schedule import parse_schedule

    st = ctx.station
    st.use_bench(ctx.here())
    earlier = ctx.stopped.get(step.number)
    if earlier is not None and earlier.run is not None:
        result = st.resume_sweep(ctx.log, earlier.run)
    else:
        schedule = parse_schedule(step.args["schedule"], dwell_s=step.args["dwell_s"])

        def started(run_id: int, _plan: Any) -> None:
            ctx.stopped[step.number] = _outcome(step, "started", "stopped", run=run_id)

        result = st.start_sweep(ctx.log, schedule, on_start=started)
    if result.status != "complete":
        _raise_for(result)
    points = ctx.log.points(result.run_id)
    record = ctx.log.run(result.run_id)
    data = ScanData(
        record.imbalance_mount,
        tuple(p.reading_deg for p in points),
        tuple(p.counts for p in points),
        None if any(p.reference is None for p in points) else tuple(p.reference for p in points),  # type: ignore[misc]
        tuple(p.dwell_s for p in points),
    )
    from ..run.station import shutter_words

    return _outcome(
        step,
        f"sweep run {result.run_id} complete: {result.points_done} points logged; "
        f"{shutter_words(result.shutter)}",
        quantities={"points": Quantity(result.points_done), "run": Quantity(result.run_id)},
        scan=data,
        run=result.run_id,
        devices=(*_counting_devices(ctx), record.imbalance_mount),
    )


def _raise_for(result: Any) -> None:
    """Turn a paused sweep into the ending the recipe shares with it."""
    from ..errors import DeviceError, SignalInterrupt

    where = f"sweep run {result.run_id} paused ({result.message})"
    if result.reason == "interrupt":
        if result.signal and result.signal != 2:
            raise SignalInterrupt(result.signal)
        raise KeyboardInterrupt
    errors: dict[str, type[BaseException]] = {
        "operator": OperatorPause,
        "guard": GuardTrip,
        "device": DeviceError,
        "storage": StorageError,
    }
    raise errors.get(result.reason, AlignerError)(where)


# -- checking --------------------------------------------------------------------------------


def check(ctx: Context, step: Step) -> StepOutcome:
    a = step.args
    q = ctx.results.quantity(a["quantity"])
    near: Quantity | None = None
    if "near" in a:
        near = (
            ctx.results.quantity(a["near"])
            if isinstance(a["near"], str)
            else Quantity(float(a["near"]))
        )
    if q is None or ("near" in a and near is None):
        return _outcome(
            step,
            "not checked: an earlier value to compare with is missing (no earlier run of this "
            "recipe in the log stored it)",
            "skipped",
        )
    passed, relation = _verdict(a, q, near)
    said = a.get("pass_text" if passed else "fail_text", "")
    verdict = "PASSED" if passed else "FAILED"
    return _outcome(
        step,
        f"check {verdict}: {a['quantity']} = {fmt_quantity(q)} {relation}"
        + (f". {said}" if said else ""),
        "passed" if passed else "failed",
    )


def _verdict(a: Mapping[str, Any], q: Quantity, near: Quantity | None) -> tuple[bool, str]:
    """Whether ``q`` passes the check's rule, and the rule in words."""
    if not math.isfinite(q.value):
        return False, "has no value"
    if near is None:
        low, high = a.get("min", -math.inf), a.get("max", math.inf)
        wanted = " and ".join(
            part
            for part in (
                f"at least {low:g}" if "min" in a else "",
                f"at most {high:g}" if "max" in a else "",
            )
            if part
        )
        return low <= q.value <= high, f"(must be {wanted})"
    diff = q.value - near.value
    against = f"against {fmt_quantity(near)}: difference {diff:+.4g}"
    if "within" in a:
        return abs(diff) <= a["within"], f"{against} (allowed +/- {a['within']:g})"
    parts = [s for s in (q.sigma_towards(near.value), near.sigma_towards(q.value)) if s]
    if not parts:
        return False, f"{against}, but neither value has an uncertainty to compare in sigma"
    sigma = math.hypot(*parts)
    n = abs(diff) / sigma
    return n <= a["within_sigma"], (
        f"{against} = {n:.2f} standard deviations (allowed {a['within_sigma']:g})"
    )


def recall(ctx: Context, step: Step) -> StepOutcome:
    wanted = step.args["result"]
    for run_id in ctx.log.recipe_run_ids(ctx.recipe.name):
        if run_id == ctx.run_id:
            continue
        for row in ctx.log.recipe_steps(run_id):
            if row.outcome.get("name") == wanted and row.state == "done":
                found = StepOutcome.from_json(row.outcome)
                return _outcome(
                    step,
                    f"{wanted} of run {run_id} (ended {row.ended_utc[:19]} UTC): "
                    + ", ".join(f"{k} {fmt_quantity(q)}" for k, q in found.quantities.items()),
                    quantities=found.quantities,
                    run=run_id,
                )
    return _outcome(
        step,
        f"no earlier run of {ctx.recipe.name!r} in this run log has {wanted!r}: nothing to "
        "compare with yet",
        "skipped",
    )


STEP_FUNCTIONS: dict[str, Callable[[Context, Step], StepOutcome]] = {
    "note": note,
    "confirm": confirm,
    "prompt": prompt,
    "move": move,
    "measure": measure,
    "scan": scan,
    "fit": fit,
    "set": set_values,
    "plan": plan,
    "null": null,
    "sweep": sweep,
    "check": check,
    "recall": recall,
}
