"""The recipe file format: a TOML file read into a frozen, validated :class:`Recipe`.

A recipe is data, never code: every value is a plain TOML string, number, boolean or list of
strings checked against the table of keys below; steps refer to earlier results by name
(``coarse`` or ``coarse.null_reading_deg``), never by an expression or a format string. Every
error names the file, the step number (1 = the first ``[[step]]``) and the key, says what is
allowed and suggests the nearest known key. The reference page is ``docs/recipes.md``.

``[recipe]``: ``title``, ``purpose``, ``duration_min`` (expected minutes), ``cautions`` (shown
before step 1 and again before every step that opens the shutter or turns a polarizer),
``needs`` (mounts by role or name, checked against the bench before step 1), ``format``.
``[[step]]``: ``do`` (:data:`STEP_KINDS`), an optional ``title``, and the keys of its kind.
"""

from __future__ import annotations

import difflib
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..errors import RecipeError

__all__ = [
    "LIMITS",
    "MOUNT_ROLES",
    "QUANTITIES",
    "STEP_KINDS",
    "UNITS",
    "Key",
    "Recipe",
    "Step",
    "load_recipe",
    "parse_recipe",
]

#: The format this code reads (``[recipe] format``); newer files are refused.
FORMAT = 1

#: Size limits, so a hostile or broken file is refused quickly.
LIMITS = {
    "file_bytes": 64 * 1024,
    "steps": 200,
    "text_chars": 2000,
    "title_chars": 120,
    "cautions": 20,
    "needs": 20,
    "scan_points": 201,
    "nesting": 2,
}

#: Roles a recipe names mounts by, so one recipe fits every bench: role -> what it is.
MOUNT_ROLES = {
    "analyzer": "the mount of the analyzer",
    "imbalance": "the bench's imbalance_mount",
    "phase": "the bench's phase_mount",
    "pre-hwp": "the mount of the first half-wave plate of the pre-selection",
    "pre-qwp": "the mount of the first quarter-wave plate of the pre-selection",
    "post-hwp": "the mount of the first half-wave plate of the post-selection",
    "post-qwp": "the mount of the first quarter-wave plate of the post-selection",
}
#: Words ``move.to`` and ``scan.around`` accept besides a stored reading.
PLACE_WORDS = {
    "here": "where the mount is now",
    "file-reading": "the mount's reading in the bench file",
    "predicted-null": "the bench model's null of the mount nearest where it is",
}
#: Units a prompt may ask for.
UNITS = (
    "counts",
    "counts/s",
    "deg",
    "s",
    "nm",
    "um",
    "mm",
    "W",
    "mW",
    "uW",
    "nW",
    "V",
    "mV",
    "percent",
    "ratio",
)
FIT_KINDS = ("null", "waveplate", "leak")

_NAME = re.compile(r"[a-z][a-z0-9_]{0,31}")
_MOUNT = re.compile(r"[A-Za-z][A-Za-z0-9_-]{0,31}")
_REF = re.compile(r"(?P<name>[a-z][a-z0-9_]{0,31})(\.(?P<quantity>[a-z][a-z0-9_]{0,39}))?")
#: Control characters but tab and newline (terminal escape codes start with one).
_CONTROL = re.compile(r"[\x00-\x08\x0b-\x1f\x7f-\x9f]")


@dataclass(frozen=True)
class Key:
    """What one key of a step may hold: ``type`` (:data:`_CHECKERS`), ``required``, the
    numeric range ``low``..``high`` (inclusive), ``choices`` for a word, ``produces`` for a
    result reference (the step kinds whose results it accepts), ``doc`` in words."""

    type: str
    doc: str
    required: bool = False
    low: float = -math.inf
    high: float = math.inf
    choices: tuple[str, ...] = ()
    produces: tuple[str, ...] = ()


_DWELL = Key("number", "count time per reading, s", True, 0.001, 60.0)
_STORE = Key("name", "the name this step's result is stored under", True)

#: Every step kind and its keys (``do`` and ``title`` are accepted by all).
STEP_KINDS: dict[str, dict[str, Key]] = {
    "note": {"text": Key("text", "what the operator reads", True)},
    "confirm": {"text": Key("text", "what the operator must confirm before going on", True)},
    "prompt": {
        "text": Key("text", "the question", True),
        "name": _STORE,
        "unit": Key("word", "unit of the value", True, choices=UNITS),
        "min": Key("number", "smallest value accepted", True, -1e12, 1e12),
        "max": Key("number", "largest value accepted", True, -1e12, 1e12),
        "default": Key("number", "value taken on Enter and with --yes", False, -1e12, 1e12),
    },
    "move": {
        "mount": Key("mount", "the mount to turn (a role or a mount name)"),
        "to_deg": Key("number", "absolute reading to go to, deg", False, -720.0, 720.0),
        "by_deg": Key("number", "turn by this much from where it is, deg", False, -360.0, 360.0),
        "to": Key("place", "a stored reading (deg) or a place word", produces=("*deg",)),
        "to_plan": Key("result", "the readings of a plan step", produces=("plan",)),
    },
    "measure": {"dwell_s": _DWELL, "name": _STORE},
    "scan": {
        "mount": Key("mount", "the mount to step", True),
        "around": Key("place", "centre: a stored reading or a place word", produces=("*deg",)),
        "span_deg": Key("number", "half-width of the scan, deg", True, 0.001, 90.0),
        "step_deg": Key("number", "step between readings, deg", True, 0.0005, 10.0),
        "dwell_s": _DWELL,
        "name": _STORE,
    },
    "fit": {
        "fit": Key("word", "what to fit", True, choices=FIT_KINDS),
        "scan": Key("result", "the scan or sweep to fit", True, produces=("scan", "sweep")),
        "mount": Key("mount", "the mount the scan turned (default: the scan's)"),
        "name": _STORE,
    },
    "set": {
        "from": Key(
            "result", "the fit or null search whose values to set", True, produces=("fit", "null")
        ),
        "file": Key(
            "word",
            "ask before writing the bench file, or never write it",
            False,
            choices=("ask", "never"),
        ),
    },
    "plan": {
        "amplification": Key("number", "target amplification", False, 1.0, 1e5),
        "axis": Key("word", "real or imaginary part", False, choices=("re", "im")),
        "exact": Key("bool", "plan on the all-orders pointer response"),
        "leak_rate": Key("number", "target leak rate per source photon", False, 1e-9, 0.5),
        "name": _STORE,
    },
    "null": {
        "mount": Key("mount", "the mount to null (default: the analyzer's)"),
        "dwell_s": _DWELL,
        "span_deg": Key("number", "half-width of the first scan, deg", False, 0.01, 20.0),
        "points": Key("integer", "readings per scan", False, 5, 101),
        "rounds": Key("integer", "most scan-and-fit rounds", False, 1, 20),
        "name": _STORE,
    },
    "sweep": {
        "schedule": Key("schedule", "a sweep schedule, e.g. outback:0.5:2:5", True),
        "dwell_s": _DWELL,
        "name": _STORE,
    },
    "check": {
        "quantity": Key("ref", "the stored quantity to check", True, produces=("*",)),
        "min": Key("number", "smallest value that passes", False, -1e12, 1e12),
        "max": Key("number", "largest value that passes", False, -1e12, 1e12),
        "near": Key("value", "a number or a stored quantity to compare with", produces=("*",)),
        "within": Key("number", "largest difference that passes (same unit)", False, 0.0, 1e12),
        "within_sigma": Key(
            "number", "largest difference in standard deviations", False, 0.1, 100.0
        ),
        "pass_text": Key("text", "said when the check passes"),
        "fail_text": Key("text", "said when the check fails"),
        "on_fail": Key("word", "stop the recipe or continue", False, choices=("stop", "continue")),
    },
    "recall": {
        "result": Key("name", "a result of this recipe, from its last earlier run", True),
        "name": _STORE,
    },
}
COMMON_KEYS = {
    "do": Key("word", "the step kind", True, choices=tuple(STEP_KINDS)),
    "title": Key("title", "a short label for the step"),
}
HEADER_KEYS = {
    "format": Key("integer", "format version of the file", False, 1, FORMAT),
    "title": Key("title", "the recipe's name in lists", True),
    "purpose": Key("text", "what the recipe does and when to use it", True),
    "duration_min": Key("number", "expected duration, minutes", True, 0.1, 600.0),
    "cautions": Key("texts", "safety notes", True),
    "needs": Key("mounts", "mounts (roles or names) the bench must have"),
}

#: The quantities each kind of step stores: name -> unit ("1" = a plain number). ``*_err_*``
#: are standard errors (1 sigma), so a check can state the precision a recipe must reach.
QUANTITIES: dict[str, dict[str, str]] = {
    "prompt": {"value": "?"},
    "measure": {
        "counts": "counts",
        "count_rate": "counts/s",
        "leak_rate": "1",
        "predicted_leak_rate": "1",
        "imbalance_deg": "deg",
    },
    "scan": {"points": "1"},
    "fit:null": {
        "null_reading_deg": "deg",
        "null_reading_err_deg": "deg",
        "offset_deg": "deg",
        "extinction_ratio": "1",
    },
    "fit:waveplate": {
        "fast_axis_reading_deg": "deg",
        "fast_axis_err_deg": "deg",
        "retardance_waves": "waves",
        "retardance_err_waves": "waves",
        "nominal_retardance_waves": "waves",
    },
    "fit:leak": {
        "imbalance_offset_deg": "deg",
        "imbalance_offset_err_deg": "deg",
        "leak_floor": "1",
        "implied_extinction": "1",
    },
    "null": {
        "null_reading_deg": "deg",
        "null_reading_err_deg": "deg",
        "offset_deg": "deg",
        "extinction_ratio": "1",
        "final_reading_deg": "deg",
    },
    "plan": {"amplification": "1", "leak_rate": "1", "imbalance_deg": "deg"},
    "sweep": {"points": "1", "run": "1"},
}
#: The quantity a bare result name stands for.
PRIMARY = {"prompt": "value", "measure": "leak_rate"}
#: Steps that open the shutter, and steps that may turn a polarizer (cautions again first).
EXPOSING = ("measure", "scan", "null", "sweep")
TURNING = ("move", "scan", "null", "sweep")


@dataclass(frozen=True)
class Step:
    """One validated step: its number (1 = first), kind, title and arguments."""

    number: int
    do: str
    args: Mapping[str, Any]
    title: str = ""

    @property
    def name(self) -> str:
        """The name its result is stored under ("" for steps that store none)."""
        return str(self.args.get("name", ""))

    @property
    def produces(self) -> str:
        """The :data:`QUANTITIES` key of its result ("" when it stores none)."""
        if self.do == "fit":
            return f"fit:{self.args['fit']}"
        return self.do if self.do in QUANTITIES else ""

    def label(self) -> str:
        """``step 3 (scan)``, with the title when it has one."""
        head = f"step {self.number} ({self.do})"
        return f"{head}: {self.title}" if self.title else head

    def to_json(self) -> dict[str, Any]:
        """The step as plain data."""
        return {"number": self.number, "do": self.do, "title": self.title, **self.args}


@dataclass(frozen=True)
class Recipe:
    """A validated recipe; ``text`` is the file's text (kept with every run of it)."""

    path: Path
    title: str
    purpose: str
    duration_min: float
    cautions: tuple[str, ...]
    needs: tuple[str, ...]
    steps: tuple[Step, ...]
    text: str = field(default="", repr=False)

    @property
    def name(self) -> str:
        """The file stem (``aligner recipe run NAME`` takes it for bundled recipes)."""
        return self.path.stem

    def step_named(self, name: str) -> Step | None:
        """The step that stores ``name``."""
        return next((s for s in self.steps if s.name == name), None)

    def to_json(self) -> dict[str, Any]:
        """The recipe as plain data (``aligner recipe show --json``)."""
        return {
            "name": self.name,
            "path": str(self.path),
            "title": self.title,
            "purpose": self.purpose,
            "duration_min": self.duration_min,
            "cautions": list(self.cautions),
            "needs": list(self.needs),
            "steps": [s.to_json() for s in self.steps],
        }


# -- validation ---------------------------------------------------------------------------------


def _hint(word: str, known: Any) -> str:
    close = difflib.get_close_matches(str(word), list(known), n=1, cutoff=0.6)
    return f"; did you mean {close[0]!r}?" if close else ""


def _show(value: Any) -> str:
    """A value for an error message: short, printable."""
    text = repr(value)
    text = _CONTROL.sub("?", text)
    return text if len(text) <= 60 else text[:57] + "..."


class _Checker:
    """Validates one file; ``fail`` makes the error that names the file, step and key."""

    def __init__(self, path: Path) -> None:
        self.path = path

    def fail(self, where: str, problem: str) -> RecipeError:
        return RecipeError(f"{self.path}: {where}: {problem}")

    def text(self, where: str, value: Any, limit: int) -> str:
        if not isinstance(value, str):
            raise self.fail(where, f"must be text in quotes, got {_show(value)}")
        if len(value) > limit:
            raise self.fail(where, f"is {len(value)} characters long; at most {limit} allowed")
        bad = _CONTROL.search(value)
        if bad:
            raise self.fail(
                where,
                f"holds a control character (code {ord(bad.group()):#04x}) at position "
                f"{bad.start() + 1}; recipe texts hold printable characters, tabs and newlines "
                "only (terminal escape codes are refused)",
            )
        return value

    def number(self, where: str, value: Any, key: Key) -> float:
        ok = isinstance(value, int | float) and not isinstance(value, bool)
        if not ok or not math.isfinite(value) or not key.low <= value <= key.high:
            raise self.fail(
                where, f"must be a number from {key.low:g} to {key.high:g}, got {_show(value)}"
            )
        return float(value)

    def word(self, where: str, value: Any, choices: tuple[str, ...]) -> str:
        if not isinstance(value, str) or value not in choices:
            raise self.fail(
                where,
                f"must be one of {', '.join(choices)}, got {_show(value)}{_hint(value, choices)}",
            )
        return value

    def pattern(self, where: str, value: Any, rx: re.Pattern[str], what: str) -> str:
        if not isinstance(value, str) or not rx.fullmatch(value):
            raise self.fail(where, f"must be {what}, got {_show(value)}")
        return value

    def value(self, where: str, name: str, value: Any, key: Key) -> Any:
        t = key.type
        if t == "text":
            return self.text(where, value, LIMITS["text_chars"])
        if t == "title":
            return self.text(where, value, LIMITS["title_chars"])
        if t == "number":
            return self.number(where, value, key)
        if t == "integer":
            if not isinstance(value, int) or isinstance(value, bool):
                raise self.fail(where, f"must be a whole number, got {_show(value)}")
            return int(self.number(where, value, key))
        if t == "bool":
            if not isinstance(value, bool):
                raise self.fail(where, f"must be true or false, got {_show(value)}")
            return value
        if t == "word":
            return self.word(where, value, key.choices)
        if t == "name":
            return self.pattern(
                where, value, _NAME, "a name of lower-case letters, digits and _ (at most 32)"
            )
        if t == "mount":
            return self.mount(where, value)
        if t in ("ref", "result", "place"):
            if t == "place" and value in PLACE_WORDS:
                return value
            return self.pattern(
                where, value, _REF, "the name of an earlier result (name or name.quantity)"
            )
        if t == "value":
            if isinstance(value, str):
                return self.pattern(where, value, _REF, "a number or an earlier result's name")
            return self.number(where, value, Key("number", "", low=-1e12, high=1e12))
        if t == "schedule":
            return self.schedule(where, value)
        if t == "texts":
            return self.texts(where, value, LIMITS["cautions"])
        if t == "mounts":
            items = self.list_of(where, value, LIMITS["needs"])
            return tuple(self.mount(f"{where}[{i + 1}]", v) for i, v in enumerate(items))
        raise AssertionError(f"unknown key type {t}")

    def mount(self, where: str, value: Any) -> str:
        return self.pattern(
            where,
            value,
            _MOUNT,
            f"a mount role ({', '.join(MOUNT_ROLES)}) or a mount name of letters, digits, _ and -",
        )

    def list_of(self, where: str, value: Any, limit: int) -> list[Any]:
        if not isinstance(value, list):
            raise self.fail(where, f"must be a list in square brackets, got {_show(value)}")
        if len(value) > limit:
            raise self.fail(where, f"has {len(value)} entries; at most {limit} allowed")
        return value

    def texts(self, where: str, value: Any, limit: int) -> tuple[str, ...]:
        items = self.list_of(where, value, limit)
        return tuple(
            self.text(f"{where}[{i + 1}]", v, LIMITS["text_chars"]) for i, v in enumerate(items)
        )

    def schedule(self, where: str, value: Any) -> str:
        from ..run.schedule import parse_schedule

        text = self.pattern(
            where, value, re.compile(r"[a-z]+:[0-9eE.,:+-]{1,200}"), "a sweep schedule"
        )
        try:
            points = len(parse_schedule(text).targets)
        except RecipeError:
            raise
        except Exception as exc:
            raise self.fail(where, str(exc)) from None
        if points > LIMITS["scan_points"]:
            raise self.fail(
                where, f"has {points} points; a recipe sweep has at most {LIMITS['scan_points']}"
            )
        return text

    def table(self, where: str, table: Any, keys: Mapping[str, Key]) -> dict[str, Any]:
        """Check every key of ``table`` against ``keys``; return the checked values."""
        if not isinstance(table, Mapping):
            raise self.fail(where, f"must be a table, got {_show(table)}")
        out = {}
        for name, value in table.items():
            if name not in keys:
                raise self.fail(
                    f"{where}.{_show(name)[1:-1]}",
                    f"not a key here (allowed: {', '.join(keys)}){_hint(name, keys)}",
                )
            out[name] = self.value(f"{where}.{name}", name, value, keys[name])
        for name, key in keys.items():
            if key.required and name not in table:
                raise self.fail(f"{where}.{name}", f"is required ({key.doc})")
        return out


def _depth(value: Any) -> int:
    """Nesting depth of lists and tables inside a value (a number or text is 0)."""
    stack, deepest = [(value, 0)], 0
    while stack:
        item, level = stack.pop()
        deepest = max(deepest, level)
        if isinstance(item, Mapping):
            stack.extend((v, level + 1) for v in item.values())
        elif isinstance(item, list):
            stack.extend((v, level + 1) for v in item)
    return deepest


def _read(path: Path) -> tuple[str, dict[str, Any]]:
    import tomllib

    try:
        size = path.stat().st_size
        if size > LIMITS["file_bytes"]:
            raise RecipeError(
                f"{path}: is {size} bytes; a recipe file may have at most "
                f"{LIMITS['file_bytes']} bytes"
            )
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise RecipeError(f"{path}: file not found") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise RecipeError(f"{path}: cannot be read ({exc})") from None
    try:
        return text, tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise RecipeError(f"{path}: is not valid TOML ({exc})") from None
    except RecursionError:
        raise RecipeError(
            f"{path}: is nested too deeply; recipe values are at most {LIMITS['nesting']} "
            "levels deep"
        ) from None


def load_recipe(path: str | Path) -> Recipe:
    """Read and validate a recipe file (see the module docstring)."""
    p = Path(path)
    text, doc = _read(p)
    return parse_recipe(doc, p, text)


def parse_recipe(doc: Mapping[str, Any], path: Path, text: str = "") -> Recipe:
    """Validate a parsed recipe document (``path`` names it in errors)."""
    c = _Checker(path)
    for key in doc:
        if key not in ("recipe", "step"):
            raise c.fail(
                _show(key)[1:-1],
                "unknown top-level key (allowed: [recipe], [[step]])"
                + _hint(key, ("recipe", "step")),
            )
    deep = max((_depth(v) for v in doc.values()), default=0)
    if deep > LIMITS["nesting"]:
        raise c.fail(
            "recipe" if _depth(doc.get("recipe", {})) > LIMITS["nesting"] else "step",
            f"is nested {deep} levels deep; at most {LIMITS['nesting']} allowed (tables of "
            "plain values and lists of texts)",
        )
    head = c.table("recipe", doc.get("recipe"), HEADER_KEYS)
    if not head["cautions"]:
        raise c.fail("recipe.cautions", "list at least one caution (laser and detector safety)")
    steps_in = doc.get("step")
    if not isinstance(steps_in, list) or not steps_in:
        raise c.fail("step", "at least one [[step]] is required")
    if len(steps_in) > LIMITS["steps"]:
        raise c.fail("step", f"has {len(steps_in)} steps; at most {LIMITS['steps']} allowed")
    steps: list[Step] = []
    for number, table in enumerate(steps_in, 1):
        steps.append(_step(c, number, table, steps))
    return Recipe(
        path,
        head["title"],
        head["purpose"],
        head["duration_min"],
        head["cautions"],
        head.get("needs", ()),
        tuple(steps),
        text,
    )


def _step(c: _Checker, number: int, table: Any, earlier: list[Step]) -> Step:
    where = f"step {number}"
    if not isinstance(table, Mapping):
        raise c.fail(where, "must be a [[step]] table")
    kind = c.value(f"{where}.do", "do", table.get("do"), COMMON_KEYS["do"])
    keys = {**COMMON_KEYS, **STEP_KINDS[kind]}
    args = c.table(where, table, keys)
    title = args.pop("title", "")
    args.pop("do")
    step = Step(number, kind, args, title)
    _rules(c, step)
    names = {s.name: s for s in earlier if s.name}
    if step.name and step.name in names:
        raise c.fail(
            f"{where}.name",
            f"{step.name!r} is already the name of step {names[step.name].number}'s result; "
            "give each result its own name",
        )
    if kind == "recall":
        source = names.get(args["result"])
        if source is None or source.do == "recall":
            raise c.fail(
                f"{where}.result",
                f"{args['result']!r} is not stored by an earlier step of this recipe (earlier "
                f"results: {', '.join(names) or 'none'}){_hint(args['result'], names)}",
            )
    for name, value in args.items():
        key = keys[name]
        if key.type in ("ref", "result", "place", "value") and isinstance(value, str):
            if key.type == "place" and value in PLACE_WORDS:
                continue
            _resolve(c, f"{where}.{name}", value, key, names)
    return step


def _rules(c: _Checker, step: Step) -> None:
    """Rules between the keys of one step."""
    a, where = step.args, f"step {step.number}"
    if step.do == "prompt":
        if a["min"] > a["max"]:
            raise c.fail(f"{where}.min", f"is above max ({a['min']:g} > {a['max']:g})")
        if "default" in a and not a["min"] <= a["default"] <= a["max"]:
            raise c.fail(f"{where}.default", f"must lie from min {a['min']:g} to max {a['max']:g}")
    elif step.do == "move":
        given = [k for k in ("to_deg", "by_deg", "to", "to_plan") if k in a]
        if len(given) != 1:
            raise c.fail(
                where,
                "a move needs exactly one of to_deg, by_deg, to, to_plan"
                + (f" (got {', '.join(given)})" if given else ""),
            )
        if ("mount" in a) == ("to_plan" in a):
            raise c.fail(
                f"{where}.mount",
                "is required with to_deg, by_deg or to, and not allowed with to_plan",
            )
    elif step.do == "scan":
        points = 2 * round(a["span_deg"] / a["step_deg"]) + 1
        if points > LIMITS["scan_points"]:
            raise c.fail(
                f"{where}.step_deg",
                f"gives {points} readings over +/- {a['span_deg']:g} deg; a scan has at most "
                f"{LIMITS['scan_points']} (take a larger step or a smaller span)",
            )
        if points < 5:
            raise c.fail(f"{where}.step_deg", f"gives {points} readings; a scan needs at least 5")
    elif step.do == "plan":
        if ("amplification" in a) == ("leak_rate" in a):
            raise c.fail(where, "a plan needs exactly one of amplification or leak_rate")
        if "leak_rate" in a and ("axis" in a or "exact" in a):
            raise c.fail(where, "axis and exact belong to an amplification target")
    elif step.do == "check":
        ranged = "min" in a or "max" in a
        near = "near" in a
        if ranged == near:
            raise c.fail(where, "a check needs min and/or max, or near with within/within_sigma")
        if near and ("within" in a) == ("within_sigma" in a):
            raise c.fail(f"{where}.near", "needs exactly one of within or within_sigma")
        if not near and ("within" in a or "within_sigma" in a):
            raise c.fail(where, "within and within_sigma go with near")
        if "min" in a and "max" in a and a["min"] > a["max"]:
            raise c.fail(f"{where}.min", f"is above max ({a['min']:g} > {a['max']:g})")


def _resolve(c: _Checker, where: str, ref: str, key: Key, names: Mapping[str, Step]) -> None:
    """A reference must name an earlier result of the right kind (and a quantity it has)."""
    m = _REF.fullmatch(ref)
    assert m is not None
    name, quantity = m["name"], m["quantity"]
    if name not in names:
        known = ", ".join(names) or "none yet"
        raise c.fail(
            where,
            f"{name!r} is not the name of an earlier step's result (earlier results: {known})"
            f"{_hint(name, names)}",
        )
    source = _source(names[name], names)
    if key.type == "result":
        kind = source.do
        if kind not in key.produces or quantity:
            raise c.fail(
                where,
                f"must name the result of a {' or '.join(key.produces)} step; {name!r} is "
                f"step {names[name].number} ({names[name].do})"
                + (f", and takes no .{quantity}" if quantity else ""),
            )
        return
    quantities = QUANTITIES.get(source.produces, {})
    if quantity is None:
        quantity = PRIMARY.get(source.produces, "")
        if not quantity:
            raise c.fail(
                where,
                f"say which quantity of {name!r}: {', '.join(f'{name}.{q}' for q in quantities)}",
            )
    if quantity not in quantities:
        raise c.fail(
            where,
            f"{name!r} (step {names[name].number}, {source.produces}) has no quantity "
            f"{quantity!r}; it has {', '.join(quantities) or 'none'}{_hint(quantity, quantities)}",
        )
    if key.produces == ("*deg",) and quantities[quantity] != "deg":
        raise c.fail(where, f"{name}.{quantity} is not a reading in degrees")


def _source(step: Step, names: Mapping[str, Step]) -> Step:
    """The step whose kind of result ``step`` stores (a recall stores an earlier step's)."""
    return names[step.args["result"]] if step.do == "recall" else step
