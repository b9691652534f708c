"""Helpers shared by the command modules: argument types, JSON output, readings from --set."""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
from collections.abc import Callable, Mapping
from typing import Any, NoReturn

from ..errors import InputError, allowed_range, outside_range

__all__ = [
    "AlignerParser",
    "add_bench_argument",
    "add_device_arguments",
    "add_json_flag",
    "console",
    "device_overrides",
    "emit_json",
    "laser_safety",
    "number",
    "parse_settings",
    "run_id",
    "to_jsonable",
]

#: Help is wrapped for an 80-column terminal whatever the terminal says.
HELP_WIDTH = 80


def _closest(word: str, choices: list[str]) -> str:
    import difflib

    close = difflib.get_close_matches(word, choices, n=1, cutoff=0.6)
    return f"; did you mean {close[0]!r}?" if close else ""


class AlignerParser(argparse.ArgumentParser):
    """An argument parser that never guesses: no abbreviated options (``--dwel`` is not
    ``--dwell``), an unknown option is named with a did-you-mean by the command it was given
    to (before any complaint about a missing option), and help wraps at 80 columns."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        kwargs.setdefault("allow_abbrev", False)
        kwargs.setdefault("formatter_class", _Formatter)
        super().__init__(*args, **kwargs)

    def _is_leaf(self) -> bool:
        return not any(isinstance(a, argparse._SubParsersAction) for a in self._actions)

    def parse_known_args(  # type: ignore[override]
        self, args: Any = None, namespace: Any = None
    ) -> tuple[argparse.Namespace, list[str]]:
        if self._is_leaf() and args is not None:
            known = list(self._option_string_actions)
            for token in args:
                if token == "--":
                    break
                name = token.split("=", 1)[0]
                if name.startswith("--") and name not in known:
                    self.error(f"unknown option {name}{_closest(name, known)}")
        return super().parse_known_args(args, namespace)

    def error(self, message: str) -> NoReturn:
        import re

        choice = re.search(r"invalid choice: '([^']*)' \(choose from (.*)\)", message)
        if choice:
            options = [c.strip(" '") for c in choice.group(2).split(",")]
            message += _closest(choice.group(1), options)
        super().error(message)


class _Formatter(argparse.HelpFormatter):
    """Help at 80 columns: descriptions and epilogs are filled paragraph by paragraph, except
    paragraphs with indented lines (tables, examples), which are kept as written."""

    def __init__(self, prog: str) -> None:
        super().__init__(prog, width=HELP_WIDTH, max_help_position=30)

    def _fill_text(self, text: str, width: int, indent: str) -> str:
        import textwrap

        paragraphs = text.strip("\n").split("\n\n")
        out = []
        for paragraph in paragraphs:
            lines = paragraph.splitlines()
            if any(line.startswith((" ", "\t")) for line in lines[1:]) or (
                lines and lines[0].startswith((" ", "\t"))
            ):
                out.append("\n".join(indent + line for line in lines))
            else:
                out.append(
                    textwrap.fill(
                        " ".join(paragraph.split()),
                        width,
                        initial_indent=indent,
                        subsequent_indent=indent,
                    )
                )
        return "\n\n".join(out)


def number(low: float, high: float, *, integer: bool = False) -> Callable[[str], float]:
    """An argparse ``type`` for a number in ``[low, high]`` (whole numbers with ``integer``);
    the error states the allowed range."""

    def convert(text: str) -> float:
        what = "a whole number" if integer else "a number"
        bound = allowed_range(low, high, integer=integer)
        try:
            value: float = int(text) if integer else float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not {what} ({bound})") from None
        inside = low <= value <= high
        if not (math.isfinite(value) and inside):
            raise argparse.ArgumentTypeError(outside_range(text, low, high, integer=integer))
        return value

    convert.__name__ = "whole number" if integer else "number"
    return convert


#: A run id as the run log stores it (SQLite's signed 64-bit integers, from 1).
run_id = number(1, 2**63 - 1, integer=True)


def laser_safety(advice: str) -> str:
    """The laser-safety line of a command's help: local rules and the laser safety officer
    first, then the command's own ``advice``."""
    return (
        "Laser safety: follow your local laser-safety rules and your laser safety officer; "
        + advice
    )


def add_bench_argument(parser: argparse.ArgumentParser, *, optional: bool = False) -> None:
    """The BENCH positional (or ``--bench`` when ``optional``): a bench file, or ``demo``."""
    help_text = "bench file (TOML), or 'demo' for the bundled demo bench"
    if optional:
        parser.add_argument("--bench", metavar="BENCH", help=help_text)
    else:
        parser.add_argument("bench", metavar="BENCH", help=help_text)


def add_device_arguments(parser: argparse.ArgumentParser, roles: tuple[str, ...] = ()) -> None:
    """``--counter SPEC`` / ``--shutter SPEC`` / ``--pointer SPEC`` and their ``--*-profile``:
    overrides of the bench file's ``[devices.<role>]`` declarations (default: all three)."""
    for role in roles or ("counter", "shutter", "pointer"):
        extra = "" if role == "counter" else "; none: the bench has no " + role
        manual = "" if role == "shutter" else ", manual"
        parser.add_argument(
            f"--{role}",
            metavar="SPEC",
            help=f"{role} to use instead of the bench file's [devices.{role}]: a port, URL, "
            f"sim{manual} or a plug-in spec{extra}",
        )
        parser.add_argument(
            f"--{role}-profile", metavar="PROFILE", help=f"device profile of the --{role}"
        )


def device_overrides(args: argparse.Namespace) -> dict[str, tuple[str, str | None]]:
    """The ``--counter``/``--shutter``/``--pointer`` options given, as station overrides."""
    out = {}
    for role in ("counter", "shutter", "pointer"):
        spec = getattr(args, role, None)
        profile = getattr(args, f"{role}_profile", None)
        if spec is None and profile is not None:
            raise InputError(f"--{role}-profile needs --{role} (the device it describes)")
        if spec is not None:
            out[role] = (spec, profile)
    return out


def console(*, stderr: bool = False) -> Any:
    """A Rich console for command output: no highlighting, no emoji codes (text from files and
    devices may contain ``:name:``), long lines kept whole."""
    from rich.console import Console

    class _Console(Console):
        def on_broken_pipe(self) -> None:
            """The reader went away: later output goes nowhere, and the command stops as for
            SIGPIPE (a running sweep secures the bench and stays resumable)."""
            from ..errors import OutputClosed

            self.quiet = True
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, (sys.stderr if stderr else sys.stdout).fileno())
            raise OutputClosed

    return _Console(stderr=stderr, highlight=False, emoji=False, soft_wrap=True)


def add_json_flag(parser: argparse.ArgumentParser) -> None:
    """``--json``: print one JSON document on stdout instead of the readable table."""
    parser.add_argument(
        "--json", action="store_true", help="print one JSON document (every key: docs/json.md)"
    )


def add_set_argument(parser: argparse.ArgumentParser) -> None:
    """``--set MOUNT=READING_DEG`` (repeatable)."""
    parser.add_argument(
        "--set",
        metavar="MOUNT=READING_DEG",
        action="append",
        default=[],
        help="override a mount reading in degrees (repeatable)",
    )


def parse_settings(items: list[str]) -> dict[str, float]:
    """``["analyzer=135.4", ...]`` -> ``{"analyzer": 135.4}``, with a clear error otherwise."""
    out: dict[str, float] = {}
    for item in items:
        name, sep, value = item.partition("=")
        if not sep or not name.strip():
            raise InputError(f"--set {item!r}: expected MOUNT=READING_DEG, e.g. analyzer=135.4")
        try:
            number = float(value)
        except ValueError:
            raise InputError(f"--set {item!r}: the reading must be a number of degrees") from None
        if not math.isfinite(number):
            raise InputError(f"--set {item!r}: the reading must be a finite number of degrees")
        out[name.strip()] = number
    return out


def to_jsonable(value: Any) -> Any:
    """Numbers, numpy scalars/arrays, mappings and sequences -> plain JSON types.

    Non-finite floats become ``null`` (JSON has no NaN or infinity)."""
    if isinstance(value, Mapping):
        return {str(k): to_jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [to_jsonable(v) for v in value]
    if hasattr(value, "tolist"):
        return to_jsonable(value.tolist())
    if isinstance(value, bool) or value is None or isinstance(value, str | int):
        return value
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, complex):
        return {"re": to_jsonable(value.real), "im": to_jsonable(value.imag)}
    return str(value)


def emit_json(document: Mapping[str, Any]) -> None:
    """Write one JSON document to stdout."""
    json.dump(to_jsonable(document), sys.stdout, indent=2)
    sys.stdout.write("\n")
