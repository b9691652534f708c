"""``aligner recipe``: list, show and run written alignment procedures (TOML recipes)."""

from __future__ import annotations

import argparse
import sys

from .common import add_device_arguments, add_json_flag

SAFETY = (
    "Safety: recipes move mounts that can send a bright beam onto the detector. Follow your "
    "local laser-safety rules and your laser safety officer; keep beam blocks at the "
    "reject ports."
)


def register(sub: argparse._SubParsersAction) -> None:
    """Create the ``recipe`` subcommand and its actions."""
    parser = sub.add_parser(
        "recipe",
        help="list, show or run alignment recipes",
        description="Written alignment procedures: bundled ones by name, your own by file path.",
        epilog=SAFETY,
    )
    actions = parser.add_subparsers(dest="action", metavar="ACTION", required=True)
    listing = actions.add_parser("list", help="the bundled recipes")
    add_json_flag(listing)
    show = actions.add_parser("show", help="a recipe's cautions and steps")
    show.add_argument("recipe", metavar="RECIPE", help="bundled recipe name or a .toml file")
    add_json_flag(show)
    run_p = actions.add_parser("run", help="step through a recipe on a bench", epilog=SAFETY)
    run_p.add_argument("recipe", metavar="RECIPE", help="bundled recipe name or a .toml file")
    run_p.add_argument("bench", metavar="BENCH", help="bench file (TOML), or 'demo'")
    run_p.add_argument(
        "--yes",
        action="store_true",
        help="confirm every check without asking (simulated benches only)",
    )
    run_p.add_argument("--db", metavar="FILE", help="run-log file for sweep steps")
    run_p.add_argument("--seed", metavar="N", type=int, help="seed of the simulated bench")
    add_device_arguments(run_p, ("counter", "shutter"))
    add_json_flag(run_p)
    parser.set_defaults(handler=run)


def _recipe_json(recipe: object) -> dict:
    from dataclasses import asdict

    doc = asdict(recipe)  # type: ignore[call-overload]
    doc["path"] = str(doc["path"])
    doc["name"] = recipe.name  # type: ignore[attr-defined]
    return doc


def _ask(text: str) -> bool:
    try:
        answer = input(f"  check: {text} [y/N] ")
    except EOFError:
        return False
    return answer.strip().lower() in ("y", "yes")


def run(args: argparse.Namespace) -> int:
    """Dispatch the recipe action."""
    from ..recipes import bundled_recipes, find_recipe
    from .common import emit_json

    if args.action == "list":
        recipes = bundled_recipes()
        if args.json:
            emit_json(
                {
                    "recipes": [
                        {"name": r.name, "title": r.title, "steps": len(r.steps)} for r in recipes
                    ]
                }
            )
        else:
            for r in recipes:
                print(f"{r.name:<24} {r.title} ({len(r.steps)} steps)")
        return 0
    recipe = find_recipe(args.recipe)
    if args.action == "show":
        if args.json:
            emit_json(_recipe_json(recipe))
            return 0
        print(f"{recipe.title}\n\n{recipe.about}\n")
        for caution in recipe.cautions:
            print(f"caution: {caution}")
        for i, step in enumerate(recipe.steps, 1):
            detail = step.args.get("text") or ", ".join(f"{k}={v}" for k, v in step.args.items())
            print(f"{i:>3}. {step.do:<8} {step.label or detail}")
        return 0
    return _run_recipe(args, recipe)


def _run_recipe(args: argparse.Namespace, recipe: object) -> int:
    from ..bench import load_bench
    from ..errors import InputError
    from ..recipes import run_recipe
    from ..run.devices import choose_devices
    from .common import device_overrides, emit_json

    bench = load_bench(args.bench)
    overrides = device_overrides(args)
    simulated = all(c.kind in ("simulated", "absent") for c in choose_devices(bench, overrides))
    if args.yes and not simulated:
        raise InputError(
            "--yes is only for simulated benches; at a real bench confirm each check yourself"
        )
    print(SAFETY, file=sys.stderr)
    lines: list[str] = []

    def report(text: str) -> None:
        lines.append(text)
        if not args.json:
            print(text, flush=True)

    result = run_recipe(
        recipe,
        bench,
        confirm=(lambda _text: True) if args.yes else _ask,  # type: ignore[arg-type]
        report=report,
        db=args.db,
        seed=args.seed,
        overrides=overrides,
    )
    if args.json:
        emit_json(
            {
                "recipe": result.recipe,
                "completed": result.completed,
                "message": result.message,
                "lines": lines,
                "steps": [
                    {"index": o.index, "do": o.do, "message": o.message, "values": o.values}
                    for o in result.outcomes
                ],
            }
        )
    else:
        print(result.message)
    return 0 if result.completed else 2
