"""``aligner recipe``: list, show and run written alignment procedures (TOML recipes)."""

from __future__ import annotations

import argparse
import sys
from typing import TYPE_CHECKING, Any, TextIO

from ..recipe.steps import Operator
from .common import add_device_arguments, add_json_flag, laser_safety, run_id

if TYPE_CHECKING:
    from ..recipe import Recipe, Step

SAFETY = laser_safety(
    "recipes move mounts that can send a bright beam onto the detector; keep beam blocks at "
    "the reject ports."
)


def register(sub: argparse._SubParsersAction) -> None:
    """Create the ``recipe`` subcommand and its actions."""
    parser = sub.add_parser(
        "recipe",
        help="list, show or run alignment recipes",
        description="Written alignment procedures: bundled and local ones by name, any by file "
        "path. Every run is logged step by step as a recipe run and can be resumed.",
        epilog=SAFETY,
    )
    actions = parser.add_subparsers(dest="action", metavar="ACTION", required=True)
    listing = actions.add_parser(
        "list",
        help="the bundled and local recipes",
        description="List the bundled recipes and the local ones (the user recipe folder and "
        "every --dir), each with its title and length, or why it does not load.",
    )
    listing.add_argument(
        "--dir", metavar="DIR", action="append", help="a folder of local recipes (repeatable)"
    )
    add_json_flag(listing)
    show = actions.add_parser(
        "show",
        help="a recipe's purpose, cautions and steps",
        description="Print a recipe: what it is for, what it needs, its cautions and every "
        "step, without running anything.",
    )
    show.add_argument("recipe", metavar="RECIPE", help="recipe name or a .toml file")
    add_json_flag(show)
    run_p = actions.add_parser(
        "run",
        help="step through a recipe on a bench",
        description="Run a recipe's steps on the bench's devices, asking the operator where "
        "the recipe says so; every step is logged, and a stopped run goes on with --resume.",
        epilog=SAFETY,
    )
    run_p.add_argument("recipe", metavar="RECIPE", help="recipe name or a .toml file")
    run_p.add_argument("bench", metavar="BENCH", help="bench file (TOML), or 'demo'")
    run_p.add_argument(
        "--yes",
        action="store_true",
        help="answer every confirmation yes and every prompt with its default, printing each "
        "(simulated benches only)",
    )
    run_p.add_argument("--resume", metavar="RUN", type=run_id, help="go on with a stopped run")
    run_p.add_argument(
        "--from-step",
        metavar="N",
        type=int,
        help="with --resume: do step N and every later step again",
    )
    run_p.add_argument("--db", metavar="FILE", help="run-log file (default: the user data folder)")
    run_p.add_argument("--seed", metavar="N", type=int, help="seed of the simulated devices")
    run_p.add_argument(
        "--realtime",
        action="store_true",
        help="simulated devices take real time for moves and dwells",
    )
    add_device_arguments(run_p)
    add_json_flag(run_p)
    parser.set_defaults(handler=run)


def run(args: argparse.Namespace) -> int:
    """Dispatch the recipe action."""
    from ..recipe import catalog, find_recipe
    from ..text import clean
    from .common import emit_json

    if args.action == "list":
        from pathlib import Path

        entries = catalog(tuple(Path(d) for d in args.dir) if args.dir else None)
        if args.json:
            emit_json({"recipes": [e.to_json() for e in entries]})
            return 0
        for e in entries:
            r = e.recipe
            what = (
                f"{r.title} ({len(r.steps)} steps, about {r.duration_min:g} min)"
                if r
                else f"DOES NOT LOAD: {e.error}"
            )
            print(clean(f"{e.name:<24} {e.origin:<8} {what}"))
        return 0
    if args.action == "show":
        recipe = find_recipe(args.recipe)
        if args.json:
            emit_json(recipe.to_json())
        else:
            _show(recipe)
        return 0
    return _run(args)


def _show(recipe: Recipe) -> None:
    from ..text import clean

    print(clean(f"{recipe.title} ({recipe.name}, about {recipe.duration_min:g} min)\n"))
    print(clean(recipe.purpose) + "\n")
    if recipe.needs:
        print(clean(f"needs: {', '.join(recipe.needs)}"))
    for caution in recipe.cautions:
        print(clean(f"caution: {caution}"))
    for step in recipe.steps:
        detail = step.args.get("text") or ", ".join(f"{k}={v}" for k, v in step.args.items())
        print(clean(f"{step.number:>3}. {step.do:<8} {step.title or detail}"))


class TerminalOperator(Operator):
    """The operator at a terminal: lines to ``out`` (cleaned of control characters), answers
    typed on standard input; ``automatic`` (``--yes``) prints each question and its answer."""

    def __init__(self, out: TextIO, total: int, *, automatic: bool) -> None:
        self.out, self.total, self.automatic = out, total, automatic

    def say(self, text: str) -> None:
        from ..text import clean

        print(clean(text), file=self.out, flush=True)

    def confirm(self, text: str) -> bool:
        if self.automatic:
            self.say(f"  confirm: {text}\n  -> yes (--yes, simulated bench)")
            return True
        return self._input(f"  confirm: {text} [y/N] ").strip().lower() in ("y", "yes")

    def ask(self, step: Step) -> float | None:
        from ..recipe import parse_answer

        a = step.args
        question = (
            f"  {a['text']} ({a['unit']}, {a['min']:g} to {a['max']:g}"
            + (f", Enter for {a['default']:g}" if "default" in a else "")
            + "; 'stop' stops the recipe) "
        )
        if self.automatic:
            self.say(f"{question}\n  -> {a['default']:g} (--yes: the default)")
            return float(a["default"])
        while True:
            text = self._input(question)
            if text.strip().lower() == "stop":
                return None
            answer = parse_answer(step, text)
            if not isinstance(answer, str):
                return answer
            self.say(f"  {answer}")

    def _input(self, question: str) -> str:
        """The operator's answer; the question goes to ``out`` like every other line (stderr
        with ``--json``, so stdout holds the JSON document alone)."""
        from ..text import clean

        print(clean(question), end="", file=self.out, flush=True)
        try:
            return input()
        except EOFError:
            return ""

    def step_started(self, step: Step) -> None:
        self.say(f"\n{step.label()}, {step.number} of {self.total}")

    def step_ended(self, outcome: Any) -> None:
        """Nothing more: the runner says the outcome."""


def _run(args: argparse.Namespace) -> int:
    from ..bench import load_bench
    from ..errors import InputError
    from ..recipe import find_recipe, resume_recipe, run_recipe
    from ..run.devices import choose_devices
    from .common import device_overrides, emit_json

    if args.from_step is not None and args.resume is None:
        raise InputError("--from-step goes with --resume RUN (the run to go on with)")
    recipe = find_recipe(args.recipe)
    bench = load_bench(args.bench)
    overrides = device_overrides(args)
    simulated = all(c.kind in ("simulated", "absent") for c in choose_devices(bench, overrides))
    if args.yes and not simulated:
        raise InputError(
            "--yes is only for simulated benches; at a real bench confirm each check yourself"
        )
    out = sys.stderr if args.json else sys.stdout
    print(SAFETY, file=sys.stderr)
    operator = TerminalOperator(out, len(recipe.steps), automatic=args.yes)
    options: dict[str, Any] = {
        "db": args.db,
        "seed": args.seed,
        "overrides": overrides,
        "realtime": args.realtime,
    }
    if args.resume is not None:
        result = resume_recipe(args.resume, bench, operator, from_step=args.from_step, **options)
        if result.recipe != recipe.name:
            operator.say(f"note: run {args.resume} follows recipe {result.recipe!r}")
    else:
        result = run_recipe(recipe, bench, operator, **options)
    if args.json:
        emit_json(result.to_json())
    else:
        operator.say(f"\nrecipe run {result.run_id}: {result.status}: {result.message}")
        if result.status != "complete":
            operator.say(
                f"go on with: aligner recipe run {result.recipe} {args.bench} --resume "
                f"{result.run_id}" + (" --db " + str(args.db) if args.db else "")
            )
    return result.exit_code
