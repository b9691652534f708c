"""``aligner fit`` readable output: words with units, warnings, the scan's mount."""

import json
import shutil

import numpy as np

from aligner.bench import DEMO_BENCH, load_bench
from aligner.cli import main
from aligner.fit.scanmodel import detected_rate
from aligner.run.simbench import true_bench


def _scan(path, scale_odd=1.0, mount=None):
    truth = true_bench(load_bench("demo"))
    r = np.linspace(131.0, 139.0, 81)
    n = np.random.default_rng(4).poisson(
        detected_rate(truth, {"analyzer": r}, truth.source.photon_rate) * 0.05
    )
    n = (n * np.where(np.arange(n.size) % 2, scale_odd, 1.0)).astype(int)
    extra = "" if mount is None else ",mount"
    cell = "" if mount is None else f",{mount}"
    path.write_text(
        f"reading_deg,counts,dwell_s{extra}\n"
        + "".join(f"{a},{b},0.05{cell}\n" for a, b in zip(r, n, strict=True))
    )
    return path


def test_readable_table_has_words_not_keys(tmp_path, capsys):
    assert main(["fit", "null", str(_scan(tmp_path / "s.csv")), "--bench", "demo"]) == 0
    out = capsys.readouterr().out
    assert "null reading" in out and "deg" in out
    for raw in ("written", "null_reading_err_deg", "termination condition", "{}"):
        assert raw not in out
    assert "taken to belong to mount 'analyzer'" in out


def test_bad_fit_warns_and_is_not_written(tmp_path, capsys):
    bench = tmp_path / "bench.toml"
    shutil.copy(DEMO_BENCH, bench)
    before = bench.read_text()
    csv = _scan(tmp_path / "d.csv", scale_odd=2.0)
    assert main(["fit", "null", str(csv), "--bench", str(bench), "--write"]) == 0
    out = capsys.readouterr().out
    assert "does not describe the data" in out and "nothing written" in out
    assert bench.read_text() == before
    assert main(["fit", "null", str(csv), "--bench", str(bench), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert "does not describe the data" in doc["message"] and doc["optimizer_message"]


def test_waveplate_fit_refuses_a_scan_of_another_mount(tmp_path, capsys):
    csv = _scan(tmp_path / "a.csv", mount="analyzer")
    assert main(["fit", "waveplate", str(csv), "--bench", "demo"]) == 2
    err = capsys.readouterr().err
    assert "readings are of mount 'analyzer'" in err and "Traceback" not in err


def test_coupling_table_compares_with_the_bench_file(tmp_path, capsys):
    from aligner.model import coupling_observable, forward
    from aligner.physics.weak import pointer_response
    from aligner.prediction import predict

    bench = load_bench("demo")
    r = np.linspace(135.3, 137.0, 18)
    fwd = forward(bench, {"analyzer": r})
    q = pointer_response(
        fwd.rho,
        fwd.effect,
        coupling_observable(bench),
        bench.coupling.strength,
        bench.coupling.pointer_sigma,
    ).position
    # the demo reads its pointer from the counted events: dark counts dilute the shift
    q = q * np.asarray(predict(bench, {"analyzer": r}).reading_fraction)
    err = 1e-2 * float(np.max(np.abs(q)))
    csv = tmp_path / "p.csv"
    csv.write_text(
        "reading_deg,pointer,pointer_err\n"
        + "".join(f"{a},{b},{err}\n" for a, b in zip(r, q, strict=True))
    )
    assert main(["fit", "coupling", str(csv), "--bench", "demo"]) == 0
    out = capsys.readouterr().out
    assert "coupling.strength" in out and "fitted - bench file" in out
    assert "consistent" in out and "-0.0" not in out
