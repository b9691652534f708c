"""docs/json.md against what the commands print: every documented key is emitted and every
emitted key is documented, for every command that has ``--json``.

The tables of docs/json.md are parsed (one ``###`` section per command and per shared
object), each command is run in-process on the demo bench, a copy of it with a heralded
source, a short simulated sweep and recipe runs in a temporary folder, and the JSON is
flattened to dotted paths (``[]`` for an array's elements, ``*`` in the docs for keys that
are names: mounts, symbols, bench keys).
"""

from __future__ import annotations

import argparse
import contextlib
import io
import json
import re
import shutil
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from aligner.bench import DEMO_BENCH, load_bench
from aligner.cli import build_parser, main
from aligner.fit.scanmodel import detected_rate
from aligner.run.log import RunLog
from aligner.run.schedule import parse_schedule
from aligner.run.simbench import true_bench
from aligner.run.station import Station

DOC = Path(__file__).resolve().parents[2] / "docs" / "json.md"

KeyPath = tuple[str, ...]

_HEADING = re.compile(r"^### (.+?)\s*$")
_ROW = re.compile(r"^\|\s*`([^`]+)`\s*\|([^|]*)\|")
_SHARED = re.compile(r"^\{([a-z ]+)\}$")
_REFERENCE = re.compile(r"\{([a-z ]+)\}")


def _segments(key: str) -> KeyPath:
    """``runs[].bench_name`` -> ``("runs", "[]", "bench_name")``."""
    out: list[str] = []
    for part in key.split("."):
        name, brackets = part.removesuffix("[]" * part.count("[]")), part.count("[]")
        if name:
            out.append(name)
        out += ["[]"] * brackets
    return tuple(out)


def parse_doc(text: str) -> dict[str, list[tuple[str, str]]]:
    """Section heading -> its table rows as (key, type)."""
    sections: dict[str, list[tuple[str, str]]] = {}
    current: list[tuple[str, str]] | None = None
    for line in text.splitlines():
        heading = _HEADING.match(line)
        if heading:
            current = sections.setdefault(heading.group(1), [])
        elif line.startswith("## ") or line.startswith("# "):
            current = None
        elif current is not None:
            row = _ROW.match(line)
            if row:
                current.append((row.group(1), row.group(2).strip()))
    return sections


def expand(
    sections: dict[str, list[tuple[str, str]]], name: str, prefix: KeyPath = ()
) -> set[KeyPath]:
    """The documented paths of a section, shared objects (``{name}``) expanded."""
    out: set[KeyPath] = set()
    for key, kind in sections[name]:
        whole = _SHARED.match(key)
        if whole:  # the shared object's keys at this level
            out |= expand(sections, "{" + whole.group(1) + "}", prefix)
            continue
        path = prefix + _segments(key)
        out.add(path)
        for ref in _REFERENCE.findall(kind):
            out |= expand(sections, "{" + ref + "}", path)
    return out


def flatten(doc: Any, prefix: KeyPath = ()) -> set[KeyPath]:
    """Every path of a JSON document, containers included; an empty array still has ``[]``."""
    out: set[KeyPath] = {prefix} if prefix else set()
    if isinstance(doc, dict):
        for key, value in doc.items():
            out |= flatten(value, (*prefix, key))
    elif isinstance(doc, list):
        out.add((*prefix, "[]"))
        for value in doc:
            out |= flatten(value, (*prefix, "[]"))
    return out


def matches(pattern: KeyPath, path: KeyPath) -> bool:
    """``*`` stands for one key (a name), never for ``[]``."""
    return len(pattern) == len(path) and all(
        p == q or (p == "*" and q != "[]") for p, q in zip(pattern, path, strict=True)
    )


def _with_prefixes(paths: set[KeyPath]) -> set[KeyPath]:
    return {p[:i] for p in paths for i in range(1, len(p) + 1)}


# -- the commands, run in-process ------------------------------------------------------------


def _run(argv: list[str], status: int = 0, answers: str = "") -> Any:
    """Run one command; its stdout must be one JSON document and nothing else."""
    out, err = io.StringIO(), io.StringIO()
    stdin, sys.stdin = sys.stdin, io.StringIO(answers)
    try:
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            code = main(argv)
    finally:
        sys.stdin = stdin
    assert code == status, f"aligner {' '.join(argv)}: exit {code}\n{err.getvalue()}"
    return json.loads(out.getvalue())


def _scan(path: Path, mount: str, readings: np.ndarray, dwell_s: float, *, truth: Any) -> str:
    rate = detected_rate(truth, {mount: readings}, truth.source.photon_rate)
    counts = np.random.default_rng(4).poisson(rate * dwell_s)
    path.write_text(
        "reading_deg,counts,dwell_s\n"
        + "".join(f"{r},{n},{dwell_s}\n" for r, n in zip(readings, counts, strict=True))
    )
    return str(path)


def _heralded_bench(folder: Path) -> str:
    text = DEMO_BENCH.read_text(encoding="utf-8")
    source = re.search(r"^photon_rate = .*$", text, flags=re.M)
    assert source is not None
    heralded = (
        'type = "heralded"\npair_rate = 2.0e6\nherald_efficiency = 0.3\n'
        "signal_efficiency = 0.4\ncoincidence_window_ns = 2.0\nherald_dark_rate = 500.0"
    )
    path = folder / "heralded.toml"
    path.write_text(text.replace(source.group(0), heralded), encoding="utf-8")
    return str(path)


def _interrupted_sweep(bench_file: Path, db: Path) -> None:
    """A sweep stopped after two of six points (resumed below: a second session)."""
    schedule = parse_schedule("linear:0.3:1.5:6", dwell_s=0.2)
    with RunLog(db) as log, Station.open(load_bench(bench_file), seed=1) as station:

        def stop_after_two(point: Any, done: int, total: int) -> None:
            if done == 2:
                station.request_stop()

        station.start_sweep(log, schedule, on_point=stop_after_two)


def _documents(tmp: Path) -> Iterator[tuple[str, Any]]:
    """(section heading, JSON document) for every scenario."""
    bench = tmp / "bench.toml"
    shutil.copy(DEMO_BENCH, bench)
    heralded = _heralded_bench(tmp)
    db, recipes_db = str(tmp / "runs.sqlite"), str(tmp / "recipes.sqlite")

    yield "`aligner predict`", _run(["predict", "demo", "--json"])
    yield "`aligner predict`", _run(["predict", heralded, "--json"])
    for target in (["--amplification", "20"], ["--weak-value", "5,3"], ["--leak-rate", "1e-3"]):
        yield "`aligner plan`", _run(["plan", "demo", *target, "--samples", "40", "--json"])
    yield "`aligner plan`", _run(["plan", heralded, "--amplification", "20", "--json"])
    yield "`aligner derive`", _run(["derive", "demo", "--json"])

    counted = ["leak", "--counts", "3000", "--dwell", "10", "--reference", "100000"]
    yield "`aligner leak` (counts)", _run([*counted, "--bench", "demo", "--json"])
    yield "`aligner leak` (counts)", _run(["leak", "--counts", "20", "--dwell", "1", "--json"])
    pulsed = ["leak", "--counts", "40", "--dwell", "1", "--rep-rate", "1e6", "--json"]
    yield "`aligner leak` (counts)", _run(pulsed)
    herald = ["leak", "--dwell", "10", "--coincidences", "400", "--heralds", "100000"]
    herald += ["--signal-singles", "2000", "--heralding-efficiency", "0.3"]
    yield "`aligner leak` (heralded)", _run([*herald, "--window-ns", "2", "--json"])
    yield "`aligner leak` (heralded)", _run([*herald, "--bench", heralded, "--json"])

    truth = true_bench(load_bench("demo"))
    null_scan = _scan(
        tmp / "null.csv", "analyzer", np.linspace(131.0, 139.0, 41), 0.05, truth=truth
    )
    yield "`aligner fit null`", _run(["fit", "null", null_scan, "--bench", "demo", "--json"])
    written = ["fit", "null", null_scan, "--bench", str(bench), "--write", "--json"]
    yield "`aligner fit null`", _run(written)
    plate_readings = np.arange(0.0, 180.0, 2.0)
    plate = _scan(tmp / "plate.csv", "pre_qwp", plate_readings, 0.02, truth=load_bench("demo"))
    yield "`aligner fit waveplate`", _run(["fit", "waveplate", plate, "--bench", "demo", "--json"])
    written = ["fit", "waveplate", plate, "--bench", str(bench), "--write", "--json"]
    yield "`aligner fit waveplate`", _run(written)

    yield "`aligner null`", _run(["null", "demo", "--seed", "1", "--json"])
    shutil.copy(DEMO_BENCH, bench)
    yield "`aligner null`", _run(["null", str(bench), "--seed", "1", "--write", "--json"])

    shutil.copy(DEMO_BENCH, bench)
    _interrupted_sweep(bench, Path(db))
    yield (
        "`aligner sweep`",
        _run(["sweep", str(bench), "--resume", "1", "--db", db, "--seed", "2", "--json"]),
    )
    fresh = ["sweep", "demo", "--schedule", "list:0.5,1", "--dwell", "0.1", "--db", db]
    yield "`aligner sweep`", _run([*fresh, "--seed", "3", "--json"])
    assert main(["log", "note", "1", "iris", "checked", "--db", db]) == 0
    yield "`aligner fit leak`", _run(["fit", "leak", "1", "--db", db, "--json"])
    yield "`aligner fit coupling`", _run(["fit", "coupling", "1", "--db", db, "--json"])
    written = ["fit", "coupling", "1", "--db", db, "--bench", str(bench), "--write", "--json"]
    yield "`aligner fit coupling`", _run(written)
    yield "`aligner log list`", _run(["log", "list", "--db", db, "--json"])
    yield "`aligner log show` (sweep run)", _run(["log", "show", "1", "--db", db, "--json"])
    report = ["log", "report", "1", "--db", db, "--out", str(tmp / "report"), "--json"]
    yield "`aligner log report`", _run(report)
    salvage = ["log", "salvage", "--db", db, "--out", str(tmp / "copy.sqlite"), "--json"]
    yield "`aligner log salvage`", _run(salvage)

    yield "`aligner recipe list`", _run(["recipe", "list", "--json"])
    for entry in _run(["recipe", "list", "--json"])["recipes"]:
        yield "`aligner recipe show`", _run(["recipe", "show", entry["name"], "--json"])
    refused = [
        "recipe",
        "run",
        "pre-selection",
        "demo",
        "--db",
        recipes_db,
        "--seed",
        "4",
        "--json",
    ]
    yield "`aligner recipe run`", _run(refused, status=2, answers="no\n")
    resumed = ["recipe", "run", "pre-selection", "demo", "--yes", "--resume", "1", "--seed", "5"]
    yield "`aligner recipe run`", _run([*resumed, "--db", recipes_db, "--json"])
    yield (
        "`aligner log show` (recipe run)",
        _run(["log", "show", "1", "--db", recipes_db, "--json"]),
    )
    for name in ("cross-analyzer", "working-amplification"):
        recipe = ["recipe", "run", name, "demo", "--yes", "--db", recipes_db, "--seed", "3"]
        done = _run([*recipe, "--json"])
        yield "`aligner recipe run`", done
        show = ["log", "show", str(done["run"]), "--db", recipes_db, "--json"]
        yield "`aligner log show` (recipe run)", _run(show)
    yield "`aligner log list`", _run(["log", "list", "--db", recipes_db, "--json"])

    yield "`aligner device profiles`", _run(["device", "profiles", "--json"])
    for role in ("mount", "counter", "shutter", "pointer"):
        yield "`aligner device show`", _run(["device", "show", "sim", "--as", role, "--json"])
        trial = ["device", "try", "sim", "--as", role, "--yes", "--dwell", "0.01", "--json"]
        yield "`aligner device try`", _run(trial)


@pytest.fixture(scope="module")
def emitted(tmp_path_factory: pytest.TempPathFactory) -> dict[str, set[KeyPath]]:
    """Section heading -> every path its scenarios printed."""
    out: dict[str, set[KeyPath]] = {}
    for section, doc in _documents(tmp_path_factory.mktemp("json")):
        out.setdefault(section, set()).update(flatten(doc))
    return out


@pytest.fixture(scope="module")
def sections() -> dict[str, list[tuple[str, str]]]:
    return parse_doc(DOC.read_text(encoding="utf-8"))


def _commands(sections: dict[str, list[tuple[str, str]]]) -> list[str]:
    return [name for name in sections if name.startswith("`aligner ")]


def test_every_documented_key_is_printed_and_every_printed_key_documented(
    sections: dict[str, list[tuple[str, str]]], emitted: dict[str, set[KeyPath]]
) -> None:
    assert set(_commands(sections)) == set(emitted), "a command section without a run, or back"
    problems = []
    for name in _commands(sections):
        documented = expand(sections, name)
        allowed = _with_prefixes(documented)
        for path in sorted(emitted[name]):
            if not any(matches(p, path) for p in allowed):
                problems.append(f"{name}: {'.'.join(path)} is printed but not documented")
        for pattern in sorted(documented):
            if not any(matches(pattern, path) for path in emitted[name]):
                problems.append(f"{name}: {'.'.join(pattern)} is documented but never printed")
    assert not problems, "\n".join(problems)


def _json_commands(parser: argparse.ArgumentParser, words: tuple[str, ...] = ()) -> set[str]:
    """Every command line (``log show``, ``fit null``) whose parser has ``--json``; a
    positional with fixed choices (the fit's kind) counts each choice as a command."""
    out: set[str] = set()
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                out |= _json_commands(sub, (*words, name))
    if "--json" in parser._option_string_actions:
        kinds = [a for a in parser._actions if not a.option_strings and a.choices]
        out |= (
            {" ".join((*words, str(c))) for c in kinds[0].choices} if kinds else {" ".join(words)}
        )
    return out


def test_every_command_with_json_has_a_section(
    sections: dict[str, list[tuple[str, str]]],
) -> None:
    documented = {re.sub(r"^`aligner (.+?)`.*$", r"\1", name) for name in _commands(sections)}
    assert _json_commands(build_parser()) == documented


def test_the_comparison_can_fail() -> None:
    """The checks above see an undocumented key, a missing one and a wrong wildcard."""
    sections = {
        "`aligner x`": [("a", "number"), ("b[]", "{obj}"), ("m.*", "number")],
        "{obj}": [("c", "string")],
    }
    documented = expand(sections, "`aligner x`")
    assert documented == {("a",), ("b", "[]"), ("b", "[]", "c"), ("m", "*")}
    printed = flatten({"a": 1, "b": [{"c": "x", "d": 2}], "m": {"left": 1.0}})
    allowed = _with_prefixes(documented)
    assert [p for p in printed if not any(matches(q, p) for q in allowed)] == [("b", "[]", "d")]
    assert not matches(("m", "*"), ("m", "[]"))
    assert flatten({"e": []}) == {("e",), ("e", "[]")}
