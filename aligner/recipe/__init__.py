"""Alignment recipes: written procedures as TOML files, validated, run on a station, logged.

* :mod:`.format` -- the file format and its validation (:func:`load_recipe`);
* :mod:`.catalog` -- bundled and local recipes (:func:`find_recipe`, :func:`catalog`);
* :mod:`.results` -- what steps store: quantities with units and uncertainties, scans, outcomes;
* :mod:`.steps` -- what each kind of step does, and the :class:`Operator` a recipe talks to;
* :mod:`.runner` -- walking the steps, logging them, every ending, resuming.

The reference of the format is ``docs/recipes.md``.
"""

from __future__ import annotations

from .catalog import Entry, bundled_dir, bundled_recipes, catalog, find_recipe, local_dir
from .format import STEP_KINDS, Recipe, Step, load_recipe
from .results import Quantity, ScanData, StepOutcome
from .runner import RecipeRunResult, check_bench, resume_recipe, run_recipe
from .steps import Operator, OperatorPause, parse_answer

__all__ = [
    "STEP_KINDS",
    "Entry",
    "Operator",
    "OperatorPause",
    "Quantity",
    "Recipe",
    "RecipeRunResult",
    "ScanData",
    "Step",
    "StepOutcome",
    "bundled_dir",
    "bundled_recipes",
    "catalog",
    "check_bench",
    "find_recipe",
    "load_recipe",
    "local_dir",
    "parse_answer",
    "resume_recipe",
    "run_recipe",
]
