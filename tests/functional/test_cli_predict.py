"""``aligner predict`` end to end: JSON block, readable tables, bad --set."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from aligner.bench import load_bench
from aligner.cli import main
from aligner.prediction import predict


def run(capsys, *argv):
    code = main(["predict", *argv])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_json_block_matches_the_engine(capsys):
    code, out, _ = run(capsys, "demo", "--json", "--set", "analyzer=135.4")
    assert code == 0
    block = json.loads(out)
    p = predict(load_bench("demo"), {"analyzer": 135.4})
    assert block["angles_deg"]["analyzer"] == pytest.approx(135.4)
    assert block["weak_value"]["re"] == pytest.approx(complex(p.weak_value).real)
    assert block["leak"] == pytest.approx(float(p.leak_rate))
    assert block["amplification"]["exact"] == pytest.approx(float(p.amplification_exact))
    assert block["detector"]["measured_rate"] == pytest.approx(float(p.measured_rate))
    assert block["units"] == "um"
    assert block["limit"]["limited_by"] in ("extinction", "pointer", "resolution", "dark counts")


def test_readable_output_has_units_and_caution(capsys):
    code, out, _ = run(capsys, "demo")
    assert code == 0
    out = " ".join(out.split())  # the table wraps to the terminal width
    for text in (
        "counts/s",
        "per source photon",
        "deg",
        "um",
        "laser safety officer",
        "where the amplification stops",
        "Limited by",
    ):
        assert text in out


@pytest.mark.parametrize(
    ("setting", "message"),
    [
        ("nomount=3", "unknown mount 'nomount'"),
        ("analyzer=abc", "must be a number"),
        ("analyzer", "expected MOUNT=READING_DEG"),
        ("analyzer=999", "outside the mount's travel"),
    ],
)
def test_bad_set_exits_2_with_a_clear_message(capsys, setting, message):
    code, out, err = run(capsys, "demo", "--set", setting)
    assert code == 2
    assert message in err and "Traceback" not in err
    assert out == ""


def test_missing_bench_file(capsys, tmp_path):
    code, _, err = run(capsys, str(tmp_path / "none.toml"))
    assert code == 2 and "file not found" in err


def test_console_entry_point():
    done = subprocess.run(
        [sys.executable, "-m", "aligner", "predict", "demo", "--json"],
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
    )
    assert done.returncode == 0, done.stderr
    assert set(json.loads(done.stdout)) == {
        "angles_deg",
        "imbalance_deg",
        "weak_value",
        "leak",
        "amplification",
        "units",
        "detector",
        "limit",
        "pointer",
        "snr",
        "heralded",
    }
