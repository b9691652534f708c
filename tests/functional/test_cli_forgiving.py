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
        (["sweep", "demo", "--schedule", "list:1", "--dwell", "inf"], "(above 0 up to 3600)"),
        (["sweep", "demo", "--schedule", "list:1", "--settle", "1e10"], "(from 0 to 600)"),
        (["log", "show", str(2**63)], "(from 1 to 9223372036854775807)"),
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
