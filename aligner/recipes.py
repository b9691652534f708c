"""Alignment recipes: written procedures as TOML files, validated and stepped through.

A recipe file holds a ``[recipe]`` table (``title``, ``about``, ``cautions``: safety notes shown
before the first step) and an ordered ``[[step]]`` array. Each step has a ``do`` key:

* ``say``: an instruction for the operator (``text``); nothing is checked.
* ``confirm``: a check the operator must confirm before the recipe goes on (``text``).
* ``predict``: print the prediction at the current readings.
* ``plan``: plan readings for a target (``amplification`` with optional ``axis`` and ``exact``,
  or ``leak_rate``); ``apply = true`` makes them the readings for the following steps.
* ``null``: closed-loop null search on a mount (``mount``, default the bench's imbalance mount).
* ``sweep``: an imbalance sweep (``schedule``, optional ``dwell_s``), logged to the run log.

Recipes never hold code; values are plain TOML numbers and strings checked here. Bundled recipes
live in the top-level ``recipes/`` folder; ``aligner recipe list`` shows them.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .errors import RecipeError

if TYPE_CHECKING:
    from .bench import Bench
    from .run.station import Station

__all__ = [
    "Recipe",
    "RecipeResult",
    "Step",
    "StepOutcome",
    "bundled_recipes",
    "find_recipe",
    "load_recipe",
    "run_recipe",
]

#: Step kinds and the keys each accepts (``do`` and ``label`` are accepted by all).
STEP_KEYS: dict[str, tuple[str, ...]] = {
    "say": ("text",),
    "confirm": ("text",),
    "predict": (),
    "plan": ("amplification", "axis", "exact", "leak_rate", "apply"),
    "null": ("mount", "dwell_s"),
    "sweep": ("schedule", "dwell_s"),
}
REQUIRED: dict[str, tuple[str, ...]] = {
    "say": ("text",),
    "confirm": ("text",),
    "sweep": ("schedule",),
}


@dataclass(frozen=True)
class Step:
    """One recipe step: its kind (``do``), its arguments and an optional label."""

    do: str
    args: Mapping[str, Any]
    label: str = ""


@dataclass(frozen=True)
class Recipe:
    """A validated recipe."""

    path: Path
    title: str
    about: str
    cautions: tuple[str, ...]
    steps: tuple[Step, ...]

    @property
    def name(self) -> str:
        """The file stem, which ``aligner recipe run NAME`` accepts for bundled recipes."""
        return self.path.stem


def bundled_dir() -> Path:
    """The folder of bundled recipes (the top-level ``recipes`` package)."""
    import aligner_recipes as recipes

    return Path(recipes.__file__).parent


def bundled_recipes() -> list[Recipe]:
    """Every bundled recipe, sorted by file name."""
    return [load_recipe(p) for p in sorted(bundled_dir().glob("*.toml"))]


def find_recipe(name_or_path: str) -> Recipe:
    """A recipe by file path, or by the name of a bundled recipe."""
    p = Path(name_or_path)
    if p.suffix == ".toml" or p.exists():
        return load_recipe(p)
    candidate = bundled_dir() / f"{name_or_path}.toml"
    if candidate.exists():
        return load_recipe(candidate)
    names = [q.stem for q in sorted(bundled_dir().glob("*.toml"))]
    close = difflib.get_close_matches(name_or_path, names, n=1)
    hint = f"; did you mean {close[0]!r}?" if close else ""
    raise RecipeError(
        f"no recipe file or bundled recipe named {name_or_path!r} (bundled: "
        f"{', '.join(names)}){hint}"
    )


def _fail(path: Path, key: str, problem: str) -> RecipeError:
    return RecipeError(f"{path}: {key}: {problem}")


def _check_value(path: Path, key: str, name: str, value: Any) -> None:
    numeric = {"amplification", "leak_rate", "dwell_s"}
    text = {"text", "axis", "mount", "schedule", "label"}
    if name in numeric:
        ok = isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value)
        if not ok or value <= 0:
            raise _fail(path, key, f"must be a positive number, got {value!r}")
    elif name in text and not isinstance(value, str):
        raise _fail(path, key, f"must be a string, got {value!r}")
    elif name in ("exact", "apply") and not isinstance(value, bool):
        raise _fail(path, key, f"must be true or false, got {value!r}")
    if name == "axis" and value not in ("re", "im"):
        raise _fail(path, key, f"must be 're' or 'im', got {value!r}")


def _step(path: Path, index: int, table: Any) -> Step:
    where = f"step[{index}]"
    if not isinstance(table, Mapping):
        raise _fail(path, where, "must be a table with a 'do' key")
    kind = table.get("do")
    if kind not in STEP_KEYS:
        close = difflib.get_close_matches(str(kind), list(STEP_KEYS), n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise _fail(
            path, f"{where}.do", f"must be one of {', '.join(STEP_KEYS)}, got {kind!r}{hint}"
        )
    allowed = (*STEP_KEYS[kind], "do", "label")
    for name, value in table.items():
        if name not in allowed:
            close = difflib.get_close_matches(name, allowed, n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            raise _fail(
                path,
                f"{where}.{name}",
                f"not a key of a {kind!r} step (allowed: {', '.join(allowed)}){hint}",
            )
        _check_value(path, f"{where}.{name}", name, value)
    for name in REQUIRED.get(kind, ()):
        if name not in table:
            raise _fail(path, f"{where}.{name}", f"is required for a {kind!r} step")
    if kind == "plan" and ("amplification" in table) == ("leak_rate" in table):
        raise _fail(path, where, "a 'plan' step needs exactly one of amplification or leak_rate")
    args = {k: v for k, v in table.items() if k not in ("do", "label")}
    return Step(kind, args, str(table.get("label", "")))


def load_recipe(path: str | Path) -> Recipe:
    """Read and validate a recipe file; errors name the file and the key."""
    import tomllib

    p = Path(path)
    try:
        doc = tomllib.loads(p.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise RecipeError(f"{p}: file not found") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise RecipeError(f"{p}: cannot be read ({exc})") from None
    except tomllib.TOMLDecodeError as exc:
        raise RecipeError(f"{p}: is not valid TOML ({exc})") from None
    for key in doc:
        if key not in ("recipe", "step"):
            raise _fail(p, key, "unknown top-level key (allowed: [recipe], [[step]])")
    head = doc.get("recipe")
    if not isinstance(head, Mapping) or not isinstance(head.get("title"), str):
        raise _fail(p, "recipe.title", "a [recipe] table with a title is required")
    for key in head:
        if key not in ("title", "about", "cautions"):
            raise _fail(p, f"recipe.{key}", "unknown key (allowed: title, about, cautions)")
    cautions = head.get("cautions", [])
    if not isinstance(cautions, list) or not all(isinstance(c, str) for c in cautions):
        raise _fail(p, "recipe.cautions", "must be a list of strings")
    steps = doc.get("step", [])
    if not isinstance(steps, list) or not steps:
        raise _fail(p, "step", "at least one [[step]] is required")
    return Recipe(
        p,
        head["title"],
        str(head.get("about", "")),
        tuple(cautions),
        tuple(_step(p, i, t) for i, t in enumerate(steps)),
    )


@dataclass(frozen=True)
class StepOutcome:
    """What one step did: its index, kind, a plain message and any numbers it produced."""

    index: int
    do: str
    message: str
    values: Mapping[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class RecipeResult:
    """A recipe run: every step's outcome, whether all steps ran, and why it stopped if not."""

    recipe: str
    outcomes: tuple[StepOutcome, ...]
    completed: bool
    message: str


Confirm = Callable[[str], bool]
Report = Callable[[str], None]


class _Runner:
    """Steps through one recipe on one bench, keeping the devices open between steps."""

    def __init__(
        self,
        bench: Bench,
        confirm: Confirm,
        report: Report,
        *,
        db: str | None,
        seed: int | None,
        overrides: Mapping[str, tuple[str, str | None]],
    ) -> None:
        self.bench, self.confirm, self.report = bench, confirm, report
        self.db, self.seed, self.overrides = db, seed, overrides
        self.station: Station | None = None

    def station_open(self) -> Station:
        from .run.station import Station

        if self.station is None:
            self.station = Station.open(self.bench, overrides=self.overrides, seed=self.seed)
        else:
            self.station.use_bench(self.bench)
        return self.station

    def close(self) -> None:
        if self.station is not None:
            self.station.close()

    def apply(self, updates: Mapping[str, float]) -> None:
        from .bench import with_values

        self.bench = with_values(self.bench, updates)

    # one method per step kind ------------------------------------------------------------

    def say(self, step: Step) -> tuple[str, dict[str, Any]]:
        self.report(step.args["text"])
        return "told", {}

    def predict(self, step: Step) -> tuple[str, dict[str, Any]]:
        from .prediction import prediction_block

        block = prediction_block(self.bench, self.bench.readings())
        amp = block["amplification"]
        text = (
            f"imbalance {block['imbalance_deg']:+.4f} deg, leak rate "
            f"{block['leak_rate']:.3e}, amplification {amp['exact']:.2f} (linear "
            f"{amp['linear']:.2f}), detector {block['detector']['rate']:.4g} counts/s"
        )
        self.report(text)
        return text, block

    def plan(self, step: Step) -> tuple[str, dict[str, Any]]:
        from .planning import plan

        a = step.args
        result = plan(
            self.bench,
            a.get("amplification"),
            axis=a.get("axis"),
            exact=bool(a.get("exact", False)),
            leak_rate=a.get("leak_rate"),
            samples=0,
        )
        settings = {k: float(v) for k, v in result.quantized.settings.items()}
        text = result.message or ", ".join(f"{k} {v:.4f} deg" for k, v in settings.items())
        if a.get("apply", False):
            self.apply({f"mounts.{k}.reading_deg": v for k, v in settings.items()})
            text += " (applied for the next steps)"
        self.report(text)
        return text, {"settings": settings}

    def null(self, step: Step) -> tuple[str, dict[str, Any]]:
        from .run.station import shutter_words

        name = step.args.get("mount", self.bench.imbalance_mount)
        if name not in self.bench.mounts:
            raise RecipeError(
                f"null step: the bench has no mount {name!r} (it has "
                f"{', '.join(self.bench.mounts)})"
            )
        station = self.station_open()
        result = station.null_search(name, dwell_s=float(step.args.get("dwell_s", 0.2)))
        if result.converged:
            self.apply(result.last_fit.bench_updates())
        text = (
            f"{result.message}; null of {name} at {result.null_reading_deg:.4f} +/- "
            f"{result.null_reading_err_deg:.4f} deg; {shutter_words(result.shutter)}"
        )
        self.report(text)
        return text, result.to_json()

    def sweep(self, step: Step) -> tuple[str, dict[str, Any]]:
        from .run.log import RunLog
        from .run.schedule import parse_schedule

        schedule = parse_schedule(
            step.args["schedule"], dwell_s=float(step.args.get("dwell_s", 1.0))
        )
        station = self.station_open()
        with RunLog(self.db) as log:
            result = station.start_sweep(log, schedule)
        text = (
            f"run {result.run_id}: {result.status}, {result.points_done} of "
            f"{result.points_total} points. {result.message}".strip()
        )
        self.report(text)
        if result.status != "complete":
            raise RecipeError(
                f"sweep step paused: {result.message} (resume it with aligner "
                f"sweep BENCH --resume {result.run_id})"
            )
        return text, {"run": result.run_id, "status": result.status}


def run_recipe(
    recipe: Recipe,
    bench: Bench,
    *,
    confirm: Confirm,
    report: Report,
    db: str | None = None,
    seed: int | None = None,
    overrides: Mapping[str, tuple[str, str | None]] | None = None,
) -> RecipeResult:
    """Run ``recipe`` on ``bench``: show its cautions, then each step in order.

    ``confirm(text)`` asks the operator (False stops the recipe); ``report(text)`` shows a
    line. Engine steps use the bench's declared devices through one station (``overrides``
    replace the counter, shutter or pointer: ``{"counter": (spec, profile)}``); a
    ``plan`` step with ``apply`` and a converged ``null`` step change the readings and offsets
    the following steps use, never the bench file. An engine error stops the recipe and is
    raised after the devices are closed and the steps so far are reported.
    """
    for caution in recipe.cautions:
        report(f"caution: {caution}")
    runner = _Runner(bench, confirm, report, db=db, seed=seed, overrides=overrides or {})
    outcomes: list[StepOutcome] = []
    try:
        for index, step in enumerate(recipe.steps):
            report(
                f"step {index + 1}/{len(recipe.steps)} ({step.do})"
                + (f": {step.label}" if step.label else "")
            )
            if step.do == "confirm":
                if not confirm(step.args["text"]):
                    return RecipeResult(
                        recipe.name,
                        tuple(outcomes),
                        False,
                        f"stopped at step {index + 1}: not confirmed",
                    )
                outcomes.append(StepOutcome(index, step.do, "confirmed"))
                continue
            message, values = getattr(runner, step.do)(step)
            outcomes.append(StepOutcome(index, step.do, message, values))
    finally:
        runner.close()
    return RecipeResult(recipe.name, tuple(outcomes), True, "all steps done")
