"""``aligner leak`` end to end."""

import json

from aligner.cli import main


def test_leak_json_interval(capsys):
    # Garwood, Biometrika 28, 437 (1936): k = 5 at 95 % -> [1.623486, 11.668332].
    assert main(["leak", "--counts", "5", "--dwell", "1", "--level", "0.95", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert abs(doc["signal_rate_low"] - 1.623486) < 1e-6
    assert abs(doc["signal_rate_high"] - 11.668332) < 1e-6


def test_leak_against_bench_gives_verdict(capsys):
    assert main(["leak", "--counts", "20000", "--dwell", "1", "--bench", "demo", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["status"] == "high" and "null has drifted" in doc["verdict"]


def test_leak_bad_counts(capsys):
    assert main(["leak", "--counts", "-3", "--dwell", "1"]) == 2
    assert "--counts" in capsys.readouterr().err
