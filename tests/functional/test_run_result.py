"""Every sweep's result: the report, ``log show`` and the fits of a simulated run on a bench
whose simulation hides no error, checked against closed forms and the simulated truth."""

from __future__ import annotations

import json
import math

import pytest

from aligner.cli import main

# the detector guard evaluates the weak value at the exact null of these ideal polarizers,
# where it is 0/0 (numpy warns; the guard uses only the exposure there)
pytestmark = pytest.mark.filterwarnings("ignore:invalid value encountered:RuntimeWarning")

G, SIGMA = 0.6, 250.0
BENCH = f"""name = "ideal crossed pair [red]x[/red]"
wavelength_nm = 800.0
imbalance_mount = "analyzer"

[source]
angle_deg = 45.0
photon_rate = 4.0e6

[coupling]
observable = "HV"
readout = "position"
pointer_sigma = {SIGMA}
strength = {G}
units = "um"
jitter_rms = 0.05

[readout]
sensor = "camera"             # a separate sensor: the closed forms apply without dilution

[analyzer]
mount = "analyzer"

[detector]
efficiency = 0.62
dark_rate = 150.0
dead_time_ns = 22.0
safe_rate = 1.5e6

[reference]
kind = "port"
efficiency = 0.55
dead_time_ns = 45.0
dark_rate = 300.0
safe_rate = 5.0e6             # the other port sees nearly the whole beam

[mounts.analyzer]
reading_deg = 136.0
resolution_deg = 0.001
travel_deg = [-10.0, 350.0]

[simulation]
seed = 7
"""


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    """One simulated sweep (12 points from 0.2 to 2 deg past the null, 2 s each) and the JSON
    of its report."""
    folder = tmp_path_factory.mktemp("result")
    bench, db = folder / "ideal.toml", folder / "runs.sqlite"
    bench.write_text(BENCH)
    sweep = ["sweep", str(bench), "--schedule", "linear:0.2:2.0:12", "--dwell", "2"]
    assert main([*sweep, "--db", str(db), "--json"]) == 0
    return folder, bench, db


def _report(run, capsys):
    folder, _, db = run
    out = folder / "report"
    args = ["log", "report", "1", "--db", str(db), "--out", str(out), "--json", "--force"]
    capsys.readouterr()
    assert main(args) == 0
    return json.loads(capsys.readouterr().out), out


def test_report_gives_the_pointer_figures_against_closed_forms(run, capsys):
    doc, _ = _report(run, capsys)
    result = doc["result"]
    assert result["data"] == "SIMULATED" and len(result["points"]) == 12
    for p in result["points"]:
        eps = math.radians(p["imbalance_deg"])
        # Aharonov, Albert, Vaidman, PRL 60, 1351 (1988), worked case of physics.md:
        # pre-selection at 45 deg, analyzer at -45 deg + eps, A = HV: A_w = cot(eps)
        assert p["amplification_linear"] == pytest.approx(1 / math.tan(eps), rel=1e-9)
        assert p["linear_shift"] == pytest.approx(G / math.tan(eps), rel=1e-9)
        # Kofman, Ashhab, Nori, Phys. Rep. 520, 43 (2012): pure states, A^2 = 1:
        # <q> = g Re A_w / D, D = (1 + A_w^2)/2 + (1 - A_w^2)/2 exp(-g^2 / (2 sigma^2))
        aw = 1 / math.tan(eps)
        d = (1 + aw**2) / 2 + (1 - aw**2) / 2 * math.exp(-(G**2) / (2 * SIGMA**2))
        assert p["exact_shift"] == pytest.approx(G * aw / d, rel=1e-9)
        assert p["pointer"] is not None and p["pointer_err"] > 0
        assert p["amplification"] == pytest.approx(
            p["pointer"] / result["coupling"]["strength"], rel=1e-12
        )
    # the dense curve covers the run's range with many more points than the run
    curve = result["curve"]
    assert len(curve["imbalance_deg"]) > 200
    assert min(curve["imbalance_deg"]) < 0.2 < 2.0 < max(curve["imbalance_deg"])


def test_report_estimates_the_coupling_within_its_error_of_the_truth(run, capsys):
    doc, out = _report(run, capsys)
    c = doc["result"]["coupling"]
    # the simulation hides no error, so its truth is the file's strength; 3 standard errors
    assert c["success"] and abs(c["strength"] - G) < 3 * c["strength_err"]
    assert c["strength_err"] < 0.2 * G  # the run measures g, not just bounds it
    text = (out / "run-1.md").read_text()
    assert "coupling strength (exact response, 12 points)" in text
    assert "| # | reading (deg) | imbalance (deg) | pointer (um) |" in text
    assert "what the post-selection bought" in text and "Cramer-Rao" in text
    assert "ideal crossed pair [red]x[/red]" in text  # log text written as data
    svg = (out / "run-1.svg").read_text()
    assert svg.lstrip().startswith("<?xml") and "SIMULATED" in svg and "<svg" in svg


def test_benefit_agrees_with_the_shot_noise_limit(run, capsys):
    doc, _ = _report(run, capsys)
    b = doc["result"]["benefit"]
    # Ferrie & Combes, PRL 112, 040406 (2014): in the linear regime the post-selected events
    # of the ideal case keep cos^2(eps) of the standard measurement's Fisher information, so
    # the two Cramer-Rao bounds agree to O(eps^2) (eps <= 2 deg here: within 0.1 %)
    assert b["cramer_rao_post"] / b["cramer_rao_standard"] == pytest.approx(1.0, abs=1e-3)
    # the standard measurement without jitter is the Gaussian location bound sigma/sqrt(N)
    # with N the detected photons (common practice, no source)
    photons = 4.0e6 * 2.0 * 12 * 0.62
    assert b["standard_shot_error"] == pytest.approx(SIGMA / math.sqrt(photons), rel=1e-12)
    # the jitter (0.05 um after 1 s) is tiny against the shot noise of a few hundred photons
    assert b["shot_share"] > 0.99 and b["limited_by"] == "shot noise"
    # ... so in the shot-noise limit the design cannot beat the standard measurement; with the
    # same jitter the standard measurement loses a little (here 10 % of its variance)
    assert b["predicted_error"] >= b["standard_shot_error"]
    assert b["standard_error"] > b["standard_shot_error"]
    assert "Ferrie & Combes" in b["statement"]
    # the run's error and the design's agree within the spread of a 12-point estimate
    assert b["run_error"] == pytest.approx(b["predicted_error"], rel=0.5)


def test_log_show_prints_the_pointer_table_and_the_result(run, capsys):
    _, _, db = run
    capsys.readouterr()
    assert main(["log", "show", "1", "--db", str(db)]) == 0
    out = capsys.readouterr().out
    assert "pointer shift (um) and amplification" in out
    assert "coupling strength (exact response" in out
    assert "ideal crossed pair [red]x[/red]" in out  # markup shown as written
    assert main(["log", "show", "1", "--db", str(db), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["result"]["coupling"]["points_fitted"] == 12 and doc["result_note"] == ""


def test_fits_on_a_run_use_its_stored_bench_unless_told(run, capsys):
    _, bench, db = run
    bench.write_text(BENCH.replace(f"strength = {G}", "strength = 0.9"))  # edited after the run
    try:
        capsys.readouterr()
        assert main(["fit", "coupling", "1", "--db", str(db), "--json"]) == 0
        stored = json.loads(capsys.readouterr().out)
        assert stored["bench_strength"] == G and "stored with run 1" in stored["bench_used"]
        args = ["fit", "coupling", "1", "--db", str(db), "--bench", str(bench), "--json"]
        assert main(args) == 0
        given = json.loads(capsys.readouterr().out)
        assert given["bench_strength"] == 0.9 and "(--bench)" in given["bench_used"]
        # ideal polarizers: the floor is below what the counts can see, so the fit may end
        # at its bound (exit 2); the likelihood still pairs the two ports of the run
        assert main(["fit", "leak", "1", "--db", str(db), "--json"]) in (0, 2)
        leak = json.loads(capsys.readouterr().out)
        assert "analyzer's other port" in leak["reference_text"] and leak["points_fitted"] == 12
        assert main(["fit", "coupling", "1", "--db", str(db), "--write"]) == 2
        assert "--bench" in capsys.readouterr().err
    finally:
        bench.write_text(BENCH)


def test_report_is_not_overwritten_without_force(run, capsys):
    folder, _, db = run
    out = folder / "kept"
    args = ["log", "report", "1", "--db", str(db), "--out", str(out)]
    assert main(args) == 0
    (out / "run-1.md").write_text("my notes\n")
    assert main(args) == 2
    assert "--force" in capsys.readouterr().err
    assert (out / "run-1.md").read_text() == "my notes\n"
    assert main([*args, "--force"]) == 0 and "my notes" not in (out / "run-1.md").read_text()


def test_a_momentum_readout_estimates_the_coupling_from_im_aw(tmp_path, capsys):
    """A momentum readout sees Im A_w (Jozsa, Phys. Rev. A 76, 044103 (2007)): an elliptical
    pre-selection (a quarter-wave plate 0.3 deg off) makes it; the run's shifts in 1/um give
    back the simulated g, and the measured amplification is the shift over g / (2 sigma^2)."""
    text = BENCH.replace('readout = "position"', 'readout = "momentum"')
    text = text.replace("[coupling]", '[[pre]]\ntype = "qwp"\nmount = "qwp"\n\n[coupling]')
    text = text.replace(
        "[mounts.analyzer]", "[mounts.qwp]\nreading_deg = 45.3\n\n[mounts.analyzer]"
    )
    bench, db = tmp_path / "momentum.toml", tmp_path / "runs.sqlite"
    bench.write_text(text)
    sweep = ["sweep", str(bench), "--schedule", "linear:0.7:3.0:10", "--dwell", "2"]
    assert main([*sweep, "--db", str(db), "--json"]) == 0
    capsys.readouterr()
    assert main(["log", "show", "1", "--db", str(db), "--json"]) == 0
    result = json.loads(capsys.readouterr().out)["result"]
    assert result["units"] == "1/um" and result["readout"] == "momentum"
    c = result["coupling"]
    assert c["success"] and abs(c["strength"] - G) < 3 * c["strength_err"]
    for p in result["points"]:
        assert p["amplification"] == pytest.approx(
            p["pointer"] * 2 * SIGMA**2 / c["strength"], rel=1e-12
        )
