"""Helpers shared by the command modules: argument types, JSON output, readings from --set."""

from __future__ import annotations

import argparse
import json
import math
import sys
from collections.abc import Mapping
from typing import Any

from ..errors import InputError

__all__ = [
    "add_bench_argument",
    "add_json_flag",
    "emit_json",
    "laser_safety",
    "parse_settings",
    "to_jsonable",
]


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


def add_json_flag(parser: argparse.ArgumentParser) -> None:
    """``--json``: print one JSON document on stdout instead of the readable table."""
    parser.add_argument("--json", action="store_true", help="print machine-readable JSON")


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
