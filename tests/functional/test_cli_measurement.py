"""The measurement physics on the command line: how the pointer is read, the SNR figures, the
warning for a target beyond the bench's limits, the floor a null leaves, and fits that need
their bench."""

from __future__ import annotations

import json
import shutil

from aligner.bench import DEMO_BENCH, load_bench
from aligner.cli import main


def test_fit_without_a_bench_is_refused(tmp_path, capsys):
    csv = tmp_path / "scan.csv"
    csv.write_text("reading_deg,counts,dwell_s\n134,10,1\n135,2,1\n136,9,1\n137,30,1\n138,60,1\n")
    assert main(["fit", "null", str(csv)]) == 2
    err = capsys.readouterr().err
    assert "--bench BENCH is required" in err and "Traceback" not in err


def test_predict_shows_the_camera_reading_without_dark_counts(tmp_path, capsys):
    bench = tmp_path / "camera.toml"
    text = DEMO_BENCH.read_text(encoding="utf-8")
    camera = 'sensor = "camera"\nsensor_efficiency = 0.7'
    bench.write_text(text.replace('sensor = "counter"', camera), encoding="utf-8")
    assert main(["predict", str(bench)]) == 0
    out = capsys.readouterr().out
    assert "camera" in out and "dark counts alone" not in out
    assert "Cramer-Rao" in out
    assert main(["predict", str(bench), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["pointer"]["sensor"] == "camera" and doc["pointer"]["reading_fraction"] == 1.0
    assert doc["limit"]["limited_by"] != "dark counts"


def test_plan_beyond_the_limit_warns_in_words_and_json(capsys):
    assert main(["plan", "demo", "--amplification", "80", "--samples", "0"]) == 0
    out = capsys.readouterr().out
    assert "Warning: an amplification of 80 lies beyond" in " ".join(out.split())
    assert "[readout] sensor = 'camera'" in " ".join(out.split())  # markup shown as written
    assert main(["plan", "demo", "--amplification", "80", "--samples", "0", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert "dark counts" in doc["warnings"][0]


def test_null_write_keeps_the_analyzer_extinction(tmp_path, capsys):
    bench = tmp_path / "bench.toml"
    shutil.copy(DEMO_BENCH, bench)
    before = load_bench(bench).analyzer.extinction_ratio
    code = main(["null", str(bench), "--seed", "5", "--write", "--json", "--rounds", "3"])
    doc = json.loads(capsys.readouterr().out)
    assert code in (0, 2)
    assert {"floor", "effective_extinction_ratio", "attribution"} <= set(doc["last_fit"])
    after = load_bench(bench)
    assert after.analyzer.extinction_ratio == before
    assert "analyzer.extinction_ratio" not in doc["written"]
    if doc["converged"]:
        assert after.analyzer.unexplained_leak == doc["written"]["analyzer.unexplained_leak"]
