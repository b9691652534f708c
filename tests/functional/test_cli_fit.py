"""``aligner fit`` end to end: JSON keys, --write into a copied bench, clear CSV errors."""

import json
import shutil

import numpy as np

from aligner.bench import DEMO_BENCH, load_bench
from aligner.cli import main
from aligner.fit.scanmodel import detected_rate
from aligner.run.simbench import true_bench


def _null_csv(path):
    truth = true_bench(load_bench("demo"))
    r = np.linspace(131.0, 139.0, 81)
    n = np.random.default_rng(4).poisson(
        detected_rate(truth, {"analyzer": r}, truth.source.photon_rate) * 0.05
    )
    path.write_text(
        "reading_deg,counts,dwell_s\n"
        + "".join(f"{a},{b},0.05\n" for a, b in zip(r, n, strict=True))
    )


def test_fit_null_json_and_write(tmp_path, capsys):
    csv = tmp_path / "null.csv"
    _null_csv(csv)
    bench = tmp_path / "bench.toml"
    shutil.copy(DEMO_BENCH, bench)
    assert main(["fit", "null", str(csv), "--bench", str(bench), "--json", "--write"]) == 0
    doc = json.loads(capsys.readouterr().out)
    for key in (
        "null_reading_deg",
        "null_reading_err_deg",
        "extinction_ratio",
        "extinction_ratio_err",
    ):
        assert isinstance(doc[key], float)
    text = bench.read_text()
    assert "# Demo bench" in text  # comments kept
    assert load_bench(bench).mounts["analyzer"].offset_deg == round(doc["offset_deg"], 6)


def test_fit_rejects_bad_csv(tmp_path, capsys):
    csv = tmp_path / "bad.csv"
    csv.write_text("reading_deg,counts\n1,2\n2,oops\n3,4\n4,5\n")
    assert main(["fit", "null", str(csv), "--bench", "demo", "--dwell", "1"]) == 2
    err = capsys.readouterr().err
    assert str(csv) in err and "row 3" in err and "Traceback" not in err
