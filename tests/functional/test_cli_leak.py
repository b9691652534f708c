"""``aligner leak`` end to end."""

import json

import pytest

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
    assert doc["verdict"]["status"] == "high" and "null has drifted" in doc["verdict"]["text"]


def test_leak_bad_counts(capsys):
    assert main(["leak", "--counts", "-3", "--dwell", "1"]) == 2
    assert "--counts" in capsys.readouterr().err


def test_leak_below_dark_prints_an_upper_limit(capsys):
    assert (
        main(
            [
                "leak",
                "--counts",
                "50",
                "--dwell",
                "1",
                "--reference-rate",
                "2.28e6",
                "--dark",
                "140",
                "--dark-dwell",
                "1",
            ]
        )
        == 0
    )
    out = capsys.readouterr().out
    assert "upper limit" in out and "below" in out and "0 to 0" not in out


def test_leak_bright_reference_above_safe_rate_warns(capsys):
    assert (
        main(
            [
                "leak",
                "--counts",
                "300",
                "--dwell",
                "1",
                "--reference",
                "4000000",
                "--reference-dwell",
                "1",
                "--reference-kind",
                "bright",
                "--bench",
                "demo",
                "--json",
            ]
        )
        == 0
    )
    doc = json.loads(capsys.readouterr().out)
    assert len(doc["warnings"]) == 1 and "safe rate" in doc["warnings"][0]
    assert "laser safety officer" in doc["warnings"][0]
    # the bench's computed reference (photon rate x efficiency) exposed nothing
    assert main(["leak", "--counts", "300", "--dwell", "1", "--bench", "demo", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["warnings"] == []


def test_leak_table_shows_dead_time_and_dark_rows(capsys):
    assert (
        main(
            [
                "leak",
                "--counts",
                "1000000",
                "--dwell",
                "1",
                "--dead-time-ns",
                "50",
                "--bench",
                "demo",
            ]
        )
        == 0
    )
    out = capsys.readouterr().out
    assert "raw rate" in out and "after dead-time correction (50 ns)" in out
    assert "1.053e+06" in out and "dark rate subtracted" in out
    assert "-0.0 sigma" not in out


def test_swapped_counts_give_a_leak_above_one_and_a_warning(capsys):
    assert main(["leak", "--counts", "5000", "--dwell", "1", "--reference", "100", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["leak"] > 1 and any("swapped" in w for w in doc["warnings"])


def test_heralded_coincidences_give_the_leak_per_heralded_photon(capsys):
    """Each herald is a trial: p = 1 - (1 - eta P)(1 - a), a = 1 - exp(-R_u T_c) (the
    accidental formula of physics.md, common practice); the leak inverts it."""
    import math

    argv = ["leak", "--dwell", "10", "--coincidences", "400", "--heralds", "100000"]
    argv += ["--signal-singles", "2000", "--window-ns", "2", "--heralding-efficiency", "0.3"]
    assert main([*argv, "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    a = 1 - math.exp(-(2000 - 400) / 10 * 2e-9)
    assert doc["accidental_probability"] == pytest.approx(a)
    assert doc["leak"] == pytest.approx((400 / 1e5 - a) / (1 - a) / 0.3)
    assert doc["leak_low"] < doc["leak"] < doc["leak_high"]
    assert doc["weak_value_abs"] == pytest.approx(math.sqrt(1 / doc["leak"] - 1))
    assert main([*argv[:3], "--coincidences", "400", "--heralds", "100"]) == 2
    assert "--signal-singles" in capsys.readouterr().err
