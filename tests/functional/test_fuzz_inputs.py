"""Bad input never crashes (property tests): random bench files through predict and plan, and
random values for every numeric option of the commands that compute. Every run ends with
status 0, 2 or 3 and one plain message -- never an internal error, a traceback or a numpy or
scipy warning on stderr."""

from __future__ import annotations

import copy
import math
import warnings
from pathlib import Path

import pytest
import tomlkit
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from aligner.bench import DEMO_BENCH
from aligner.cli import main

BASE = tomlkit.parse(DEMO_BENCH.read_text(encoding="utf-8")).unwrap()

#: Values a careless edit or a hostile file may put anywhere.
ODD_VALUES = st.one_of(
    st.sampled_from(
        [0, -1, 1, 1e-320, 1e155, -1e155, math.inf, -math.inf, math.nan, 2**63, True, "", "[/]"]
    ),
    st.floats(allow_nan=True, allow_infinity=True),
    st.integers(min_value=-(2**70), max_value=2**70),
    st.text(max_size=8),
    st.lists(st.floats(-1e3, 1e3), max_size=4),
    st.dictionaries(st.sampled_from(["type", "mount", "x"]), st.integers(-3, 3), max_size=2),
)


def _paths(doc, prefix=()):
    """Every (path to a value) in a nested document."""
    if isinstance(doc, dict):
        for key, value in doc.items():
            yield (*prefix, key)
            yield from _paths(value, (*prefix, key))
    elif isinstance(doc, list):
        for i, value in enumerate(doc):
            yield (*prefix, i)
            yield from _paths(value, (*prefix, i))


PATHS = list(_paths(BASE))


@st.composite
def damaged_benches(draw):
    doc = copy.deepcopy(BASE)
    for _ in range(draw(st.integers(1, 3))):
        path = draw(st.sampled_from(PATHS))
        node = doc
        try:
            for key in path[:-1]:
                node = node[key]
            if draw(st.booleans()):
                node[path[-1]] = draw(ODD_VALUES)
            else:
                del node[path[-1]]
        except (KeyError, IndexError, TypeError):
            continue
    return doc


def _write(tmp: Path, doc) -> Path | None:
    path = tmp / "bench.toml"
    try:
        path.write_text(tomlkit.dumps(doc), encoding="utf-8")
    except (ValueError, TypeError):  # a value TOML cannot hold (nan in a key, ...)
        return None
    return path


def _run_clean(argv, capsys) -> None:
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)  # numpy/scipy warnings are failures
        code = main(argv)
    err = capsys.readouterr().err
    assert code in (0, 2, 3), (argv, code, err)
    assert "Traceback" not in err and "internal error" not in err, (argv, err)
    assert "Warning" not in err, (argv, err)


@settings(
    max_examples=120,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
@given(doc=damaged_benches())
def test_damaged_bench_files_through_predict_and_plan(tmp_path, capsys, doc):
    path = _write(tmp_path, doc)
    if path is None:
        return
    _run_clean(["predict", str(path), "--json"], capsys)
    _run_clean(["plan", str(path), "--amplification", "20", "--samples", "200", "--json"], capsys)


#: Commands that compute, with a placeholder for one numeric option's value.
NUMERIC_OPTIONS = [
    ["predict", "demo", "--set", "analyzer={}"],
    ["plan", "demo", "--amplification", "{}", "--samples", "100"],
    ["plan", "demo", "--leak-rate", "{}", "--samples", "100"],
    ["plan", "demo", "--amplification", "20", "--samples", "{}"],
    ["plan", "demo", "--amplification", "20", "--branch", "{}", "--samples", "100"],
    ["leak", "--counts", "{}", "--dwell", "1"],
    ["leak", "--counts", "100", "--dwell", "{}"],
    ["leak", "--counts", "100", "--dwell", "1", "--reference", "{}"],
    ["leak", "--counts", "100", "--dwell", "1", "--reference-rate", "{}", "--bench", "demo"],
    ["leak", "--counts", "100", "--dwell", "1", "--level", "{}"],
    ["leak", "--counts", "100", "--dwell", "1", "--rep-rate", "{}"],
    ["sweep", "demo", "--schedule", "list:{}", "--dwell", "0.01"],
    ["sweep", "demo", "--schedule", "linear:0.3:1:{}", "--dwell", "0.01"],
    ["sweep", "demo", "--schedule", "amplification:5:{}:3", "--dwell", "0.01"],
    ["sweep", "demo", "--schedule", "list:0.5", "--dwell", "{}"],
    ["sweep", "demo", "--schedule", "list:0.5", "--dwell", "0.01", "--repeats", "{}"],
    ["sweep", "demo", "--resume", "{}"],
    ["null", "demo", "--span", "{}", "--points", "5", "--rounds", "1", "--dwell", "0.01"],
    ["log", "show", "{}"],
]
NUMBERS = st.sampled_from(
    ["-1", "0", "1e-320", "nan", "inf", "-inf", "1e308", str(2**63), "2147483648", "abc", "", "1e7"]
) | st.floats(allow_nan=True, allow_infinity=True).map(repr)


@pytest.mark.parametrize("template", NUMERIC_OPTIONS, ids=lambda t: " ".join(t[:3]))
@settings(
    max_examples=15,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
@given(value=NUMBERS)
def test_every_numeric_option_takes_any_value_without_crashing(tmp_path, capsys, template, value):
    argv = [part.replace("{}", value) for part in template]
    if argv[0] in ("sweep", "log"):
        argv += ["--db", str(tmp_path / "runs.sqlite")]
    _run_clean(argv, capsys)


CELLS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-5, 10**7).map(str),
    st.sampled_from(["", "x", "1e400", "-0", "135.0", "1,5", '"2"']),
)


@st.composite
def scans(draw):
    header = draw(
        st.sampled_from(
            [
                "reading_deg,counts",
                "reading_deg,counts,dwell_s,reference",
                "reading_deg,pointer,pointer_err",
                "counts,reading_deg",
                "a,b",
            ]
        )
    )
    n = len(header.split(","))
    moved = draw(st.booleans())  # a mount that did not move: every reading the same
    rows = []
    for i in range(draw(st.integers(0, 12))):
        cells = [draw(CELLS) for _ in range(n)]
        if header.startswith("reading_deg") and not moved:
            cells[0] = "135.0"
        elif header.startswith("reading_deg") and draw(st.booleans()):
            cells[0] = repr(134.0 + 0.2 * i)
        rows.append(",".join(cells))
    bom = "\ufeff" if draw(st.booleans()) else ""
    return bom + "\n".join([header, *rows]) + "\n"


@settings(
    max_examples=60,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
@given(text=scans(), kind=st.sampled_from(["null", "waveplate", "leak", "coupling"]))
def test_any_scan_file_gives_a_fit_or_a_clear_error(tmp_path, capsys, text, kind):
    path = tmp_path / "scan.csv"
    path.write_text(text, encoding="utf-8")
    _run_clean(["fit", kind, str(path), "--bench", "demo", "--dwell", "1"], capsys)
