"""Recipe runs on the simulated demo bench: every bundled recipe to its end, the hidden truths
recovered within the tolerance each recipe states, every ending shut and resumable, a SIGKILL
mid-scan resumed without repeating a finished step, hostile recipes refused before anything
runs, and the run log's schema upgrade."""

from __future__ import annotations

import math
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from aligner.bench import load_bench
from aligner.cli import main
from aligner.errors import SignalInterrupt
from aligner.prediction import predict
from aligner.recipe import Operator, find_recipe, resume_recipe, run_recipe
from aligner.run.log import SCHEMA_VERSION, RunLog
from aligner.run.simbench import true_bench
from aligner.run.sweep import resume_plan


class Scripted(Operator):
    """Answers yes (or as ``answers`` says, in order) and keeps every line said."""

    automatic = True

    def __init__(self, answers: tuple[bool, ...] = ()) -> None:
        self.lines: list[str] = []
        self.answers = list(answers)

    def say(self, text: str) -> None:
        self.lines.append(text)

    def confirm(self, text: str) -> bool:
        self.lines.append(f"confirm: {text}")
        return self.answers.pop(0) if self.answers else True

    def ask(self, step):
        return step.args["default"]


def _run(name: str, db: Path, seed: int = 11, operator: Operator | None = None):
    op = operator or Scripted()
    return run_recipe(find_recipe(name), load_bench("demo"), op, db=db, seed=seed), op


def _stated(recipe_name: str, quantity: str) -> float:
    """The tolerance a recipe states: the ``max`` of its check of ``quantity``."""
    recipe = find_recipe(recipe_name)
    return next(s.args["max"] for s in recipe.steps if s.args.get("quantity") == quantity)


def _outcome(db: Path, run_id: int, name: str) -> dict:
    with RunLog(db) as log:
        return next(r.outcome for r in log.recipe_steps(run_id) if r.outcome["name"] == name)


def _true_null(bench, readings: dict[str, float]) -> float:
    """The analyzer reading of least leak on the simulated bench's hidden true bench."""
    grid = np.linspace(133.5, 136.5, 30001)
    return float(
        grid[np.argmin(predict(true_bench(bench), {**readings, "analyzer": grid}).leak_rate)]
    )


@pytest.mark.parametrize(
    "name",
    ["cross-analyzer", "waveplate-axis", "pre-selection", "working-amplification", "daily-drift"],
)
def test_every_bundled_recipe_runs_to_its_end(tmp_path, name):
    result, op = _run(name, tmp_path / "runs.sqlite")
    assert result.status == "complete", result.message
    assert result.reason == "" and result.shutter == "confirmed"
    assert result.steps_done == result.steps_total == len(find_recipe(name).steps)
    said = "\n".join(op.lines)
    assert "laser safety officer" in said
    with RunLog(tmp_path / "runs.sqlite") as log:
        record = log.run(result.run_id)
        assert record.kind == "recipe" and record.status == "complete"
        assert record.data_label == "SIMULATED"
        steps = log.recipe_steps(result.run_id)
        assert [r.number for r in steps] == list(range(1, result.steps_total + 1))
        assert all(r.started_utc <= r.ended_utc for r in steps)


def test_cross_analyzer_recovers_the_true_null(tmp_path):
    db = tmp_path / "runs.sqlite"
    result, _ = _run("cross-analyzer", db)
    assert result.status == "complete"
    crossing = _outcome(db, result.run_id, "crossing")["quantities"]["null_reading_deg"]
    bench = load_bench("demo")
    truth = _true_null(bench, bench.readings())
    assert abs(crossing["value"] - truth) <= _stated(
        "cross-analyzer", "crossing.null_reading_err_deg"
    )


def test_waveplate_axis_recovers_the_true_fast_axis_and_retardance(tmp_path):
    db = tmp_path / "runs.sqlite"
    result, _ = _run("waveplate-axis", db)
    assert result.status == "complete"
    plate = _outcome(db, result.run_id, "plate")["quantities"]
    sim = load_bench("demo").simulation
    # the hidden truth of the demo bench's [simulation] table: the plate's true offset (its
    # fast-axis reading) and its nominal retardance plus the simulated error
    assert abs(plate["fast_axis_reading_deg"]["value"] - sim.true_offset_deg["pre_qwp"]) <= (
        _stated("waveplate-axis", "plate.fast_axis_err_deg")
    )
    true_waves = plate["nominal_retardance_waves"]["value"] + sim.retardance_error_waves
    assert abs(plate["retardance_waves"]["value"] - true_waves) <= _stated(
        "waveplate-axis", "plate.retardance_err_waves"
    )


def test_working_amplification_recovers_the_true_imbalance_offset(tmp_path):
    db = tmp_path / "runs.sqlite"
    result, _ = _run("working-amplification", db)
    assert result.status == "complete"
    fitted = _outcome(db, result.run_id, "offset")["quantities"]["imbalance_offset_deg"]["value"]
    sweep_run = _outcome(db, result.run_id, "out_and_back")["run"]
    with RunLog(db) as log:
        logged, _plan = resume_plan(log.run(sweep_run))
    # the true null in the imbalance of the bench the sweep was logged with
    from aligner.model import imbalance_deg

    readings = logged.readings()
    truth = float(imbalance_deg(logged, {**readings, "analyzer": _true_null(logged, readings)}))
    assert abs(fitted - truth) <= _stated(
        "working-amplification", "offset.imbalance_offset_err_deg"
    )


def test_daily_drift_compares_with_the_previous_run(tmp_path):
    db = tmp_path / "runs.sqlite"
    first, _ = _run("daily-drift", db, seed=1)
    second, _ = _run("daily-drift", db, seed=2)
    with RunLog(db) as log:
        before = {r.number: r.state for r in log.recipe_steps(first.run_id)}
        after = {r.number: r for r in log.recipe_steps(second.run_id)}
    assert before[4] == before[5] == "skipped"  # nothing to compare with on the first day
    assert after[3].outcome["run"] == first.run_id
    assert (
        after[4].state in ("passed", "failed")
        and "standard deviations" in after[4].outcome["message"]
    )


# -- endings ---------------------------------------------------------------------------------------


def test_a_refusal_stops_shut_and_the_resume_goes_on_at_that_step(tmp_path):
    db = tmp_path / "runs.sqlite"
    result, _ = _run("working-amplification", db, operator=Scripted((False,)))
    assert (result.status, result.reason, result.exit_code) == ("interrupted", "refused", 2)
    assert result.shutter == "confirmed"
    again = resume_recipe(result.run_id, load_bench("demo"), Scripted(), db=db, seed=3)
    assert again.status == "complete", again.message


class _Signalled(Scripted):
    """Raises SIGTERM's interrupt while the operator is asked the ``at``-th question."""

    def __init__(self, at: int) -> None:
        super().__init__()
        self.at, self.asked = at, 0

    def confirm(self, text: str) -> bool:
        self.asked += 1
        if self.asked == self.at:
            raise SignalInterrupt(signal.SIGTERM)
        return True


def test_a_signal_stops_shut_and_resumable_and_finished_steps_are_not_repeated(tmp_path):
    db = tmp_path / "runs.sqlite"
    # cross-analyzer asks twice at the start, then at its set step (step 9)
    result, _ = _run("cross-analyzer", db, operator=_Signalled(3))
    assert result.reason == "interrupt" and result.exit_code == 128 + signal.SIGTERM
    assert result.shutter == "confirmed"
    with RunLog(db) as log:
        assert log.run(result.run_id).status == "interrupted"
        before = {r.number: r for r in log.recipe_steps(result.run_id)}
    assert before[9].state == "stopped" and all(before[n].state != "stopped" for n in range(1, 9))
    op = Scripted()
    again = resume_recipe(result.run_id, load_bench("demo"), op, db=db, seed=4)
    assert again.status == "complete", again.message
    with RunLog(db) as log:
        after = {r.number: r for r in log.recipe_steps(result.run_id)}
    for n in range(1, 9):  # finished before the signal: kept as they were
        assert after[n].started_utc == before[n].started_utc
    assert not any(line.startswith("confirm: Beam blocks") for line in op.lines)


def test_an_internal_error_is_raised_after_the_bench_is_secured(tmp_path, monkeypatch):
    from aligner.recipe import steps

    def broken(ctx, step):
        raise ZeroDivisionError("planted")

    monkeypatch.setitem(steps.STEP_FUNCTIONS, "fit", broken)
    with pytest.raises(ZeroDivisionError):
        _run("cross-analyzer", tmp_path / "runs.sqlite")
    with RunLog(tmp_path / "runs.sqlite") as log:
        record = log.runs()[0]
        assert record.status == "interrupted" and "internal error" in record.message
        assert "shutter shut (confirmed" in record.message


# -- the command line ----------------------------------------------------------------------------


def test_yes_prints_every_confirmation_and_log_show_and_report_go_step_by_step(tmp_path, capsys):
    db = str(tmp_path / "runs.sqlite")
    assert main(["recipe", "run", "pre-selection", "demo", "--yes", "--db", db, "--seed", "2"]) == 0
    out = capsys.readouterr().out
    for step in find_recipe("pre-selection").steps:
        if step.do == "confirm":
            assert step.args["text"] in out
    assert "-> yes (--yes" in out
    assert main(["log", "show", "1", "--db", db]) == 0
    shown = capsys.readouterr().out
    assert "recipe pre-selection" in shown and "step 8 (check) PASSED" in " ".join(shown.split())
    assert main(["log", "report", "1", "--db", db, "--out", str(tmp_path / "rep")]) == 0
    report = (tmp_path / "rep" / "run-1.md").read_text()
    assert "| 8 | check | PASSED |" in report and "laser safety officer" in report


HOSTILE = {
    "code in a step kind": "[[step]]\ndo = \"__import__('os').system('touch CANARY')\"\n",
    "a format string as a name": '[[step]]\ndo = "measure"\ndwell_s = 1\nname = "{0.__class__}"\n',
    "shell metacharacters as a mount": (
        '[[step]]\ndo = "move"\nmount = "$(touch CANARY)"\nby_deg = 1\n'
    ),
    "markup as a mount": '[[step]]\ndo = "move"\nmount = "[/]"\nby_deg = 1\n',
    "a huge number": '[[step]]\ndo = "measure"\ndwell_s = 1e308\nname = "m"\n',
    "deep nesting": '[[step]]\ndo = "note"\ntext = ' + "[" * 3000 + "]" * 3000 + "\n",
    "an unknown step": '[[step]]\ndo = "exec"\ntext = "touch CANARY"\n',
    "a result that does not exist": '[[step]]\ndo = "check"\nquantity = "ghost.counts"\nmax = 1\n',
    "an undeclared mount": '[[step]]\ndo = "move"\nmount = "periscope"\nby_deg = 90\n',
}


@pytest.mark.parametrize("case", sorted(HOSTILE))
def test_hostile_recipes_are_refused_before_anything_runs(tmp_path, capsys, monkeypatch, case):
    monkeypatch.chdir(tmp_path)
    head = '[recipe]\ntitle = "t"\npurpose = "p"\nduration_min = 1\ncautions = ["c"]\n'
    path = tmp_path / "hostile.toml"
    path.write_text(head + '[[step]]\ndo = "note"\ntext = "first"\n' + HOSTILE[case])
    db = tmp_path / "runs.sqlite"
    code = main(["recipe", "run", str(path), "demo", "--yes", "--db", str(db)])
    captured = capsys.readouterr()
    assert code == 2, captured.err
    assert str(path) in captured.err and "Traceback" not in captured.err + captured.out
    assert "first" not in captured.out  # not even the first step ran
    assert not (tmp_path / "CANARY").exists() and not db.exists()


def test_texts_are_shown_as_written_never_run_or_formatted(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    head = '[recipe]\ntitle = "[bold]t"\npurpose = "p"\nduration_min = 1\ncautions = ["c"]\n'
    text = "$(touch CANARY) {__import__('os').system('touch CANARY')} [red]x[/] :fire:"
    path = tmp_path / "odd.toml"
    path.write_text(head + f'[[step]]\ndo = "note"\ntext = "{text}"\n')
    assert main(["recipe", "run", str(path), "demo", "--yes", "--db", str(tmp_path / "r.db")]) == 0
    assert text in capsys.readouterr().out
    assert not (tmp_path / "CANARY").exists()


KILLABLE = """\
[recipe]
title = "killable"
purpose = "a long scan to be killed"
duration_min = 1
cautions = ["Follow your local laser-safety rules and your laser safety officer."]

[[step]]
do = "note"
text = "first note"

[[step]]
do = "scan"
mount = "analyzer"
around = "predicted-null"
span_deg = 1.0
step_deg = 0.02
dwell_s = 0.03
name = "long"

[[step]]
do = "fit"
fit = "null"
scan = "long"
name = "crossing"
"""


@pytest.mark.skipif(sys.platform == "win32", reason="SIGKILL is POSIX only")
def test_sigkill_mid_scan_then_resume_finishes_without_repeating_steps(tmp_path):
    recipe, db = tmp_path / "killable.toml", tmp_path / "runs.sqlite"
    recipe.write_text(KILLABLE)
    cmd = [sys.executable, "-m", "aligner", "recipe", "run", str(recipe), "demo", "--yes"]
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    proc = subprocess.Popen(
        [*cmd, "--realtime", "--db", str(db)], stdout=subprocess.PIPE, text=True, env=env
    )
    for line in proc.stdout:
        if line.startswith("step 2 (scan)"):
            break
    time.sleep(0.5)  # inside the scan: 101 readings of 30 ms each
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    proc.stdout.close()
    with RunLog(db) as log:
        assert log.integrity_ok()
        run_id = log.runs()[0].id
        assert log.run(run_id).status == "running"  # killed: nothing could record the end
        first = log.recipe_steps(run_id)
    assert [r.number for r in first] == [1]
    out = subprocess.run(
        [*cmd, "--resume", str(run_id), "--db", str(db)],
        capture_output=True,
        text=True,
        timeout=120,
        env=env,
    )
    assert out.returncode == 0, out.stderr
    assert "first note" not in out.stdout and "going on at step 2" in out.stdout
    with RunLog(db) as log:
        steps = log.recipe_steps(run_id)
        assert log.run(run_id).status == "complete"
    assert [r.number for r in steps] == [1, 2, 3]
    assert steps[0].started_utc == first[0].started_utc
    assert math.isfinite(steps[2].outcome["quantities"]["null_reading_deg"]["value"])


# -- the run log -----------------------------------------------------------------------------------


def test_a_schema_1_log_is_upgraded_in_place_and_keeps_its_runs(tmp_path):
    db = tmp_path / "old.sqlite"
    with RunLog(db) as log:
        run_id = log.create_run(
            bench_name="b",
            bench_path=None,
            bench_toml="",
            schedule="list:0.5",
            plan=[],
            dwell_s=1.0,
            settle_s=0.0,
            repeats=1,
            imbalance_mount="analyzer",
            software_version="0",
            provenance={},
        )
    raw = sqlite3.connect(db)  # make it a file as schema 1 wrote it
    raw.executescript("DROP TABLE recipe_runs; DROP TABLE recipe_steps; PRAGMA user_version=1;")
    raw.close()
    with RunLog(db) as log:
        assert log.run(run_id).schedule == "list:0.5"
        assert log.recipe_run_ids("anything") == []
        version = log._db.execute("PRAGMA user_version").fetchone()[0]
    assert version == SCHEMA_VERSION == 2


def test_yes_is_refused_on_a_bench_with_a_real_device(tmp_path, capsys):
    from aligner.bench import DEMO_BENCH

    text = DEMO_BENCH.read_text(encoding="utf-8")
    real = text.replace(
        '[mounts.analyzer]\ndriver = "sim"', '[mounts.analyzer]\ndriver = "/dev/ttyX"'
    )
    assert real != text
    path = tmp_path / "real.toml"
    path.write_text(real, encoding="utf-8")
    code = main(
        ["recipe", "run", "cross-analyzer", str(path), "--yes", "--db", str(tmp_path / "r")]
    )
    err = capsys.readouterr().err
    assert code == 2 and "--yes is only for simulated benches" in err
    assert not (tmp_path / "r").exists()
