"""A forgiving command line: no guessed abbreviations, a did-you-mean for options, commands and
actions, bounded numbers with the allowed range in the message, help that reads at 80 columns."""

from __future__ import annotations

import pytest

from aligner.cli import COMMANDS, build_parser, main


@pytest.mark.parametrize(
    ("argv", "words"),
    [
        (["sweep", "demo", "--refernce", "x"], "unknown option --refernce"),
        (["sweep", "demo", "--dwel", "1", "--schedule", "list:1"], "did you mean '--dwell'"),
        (["plan", "demo", "--ampification", "40"], "did you mean '--amplification'"),
        (["swep", "demo"], "did you mean 'sweep'"),
        (["log", "lst"], "did you mean 'list'"),
    ],
)
def test_typos_are_named_with_a_suggestion(capsys, argv, words):
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert words in err and "Traceback" not in err
    if argv[0] in ("sweep", "plan"):
        assert f"usage: aligner {argv[0]}" in err  # the command's own usage, not the top level
        assert "required" not in err  # the typo is reported, not a missing option


@pytest.mark.parametrize(
    ("argv", "words"),
    [
        (["sweep", "demo", "--schedule", "list:1", "--seed", "-1"], "--seed: -1 is outside"),
        (["sweep", "demo", "--schedule", "list:1", "--dwell", "inf"], "(from 0.001 to 3600)"),
        (["sweep", "demo", "--schedule", "list:1", "--settle", "1e10"], "(from 0 to 600)"),
        (["log", "show", str(2**63)], "is outside the allowed range (1 or more)"),
        (["null", "demo", "--points", "1e7"], "--points: '1e7' is not a whole number"),
        (["leak", "--counts", "5", "--dwell", "nan"], "--dwell: nan is outside"),
    ],
)
def test_counts_and_durations_are_bounded(capsys, argv, words):
    assert main(argv) == 2
    assert words in capsys.readouterr().err


def _parsers():
    parser = build_parser()
    yield "aligner", parser
    for action in parser._subparsers._group_actions:  # the COMMAND subparsers
        for name, sub in action.choices.items():
            yield name, sub
            for inner in (
                getattr(sub, "_subparsers", None) and sub._subparsers._group_actions
            ) or ():
                yield from ((f"{name} {n}", p) for n, p in inner.choices.items())


def test_every_help_reads_at_80_columns():
    seen = set()
    for name, parser in _parsers():
        seen.add(name.split()[0])
        wide = [line for line in parser.format_help().splitlines() if len(line) > 80]
        assert not wide, (name, wide)
    assert set(COMMANDS) <= seen


def test_a_resumed_run_refuses_new_timing(capsys, tmp_path):
    # A resumed run keeps its logged schedule and timing: a --dwell given with --resume is an
    # error naming the option, not silently ignored (common practice, no source).
    db = str(tmp_path / "runs.sqlite")
    assert main(["sweep", "demo", "--resume", "1", "--dwell", "0.5", "--db", db]) == 2
    err = capsys.readouterr().err
    assert "--dwell cannot change a run being resumed" in err
    assert not (tmp_path / "runs.sqlite").exists()  # refused before the log was opened
