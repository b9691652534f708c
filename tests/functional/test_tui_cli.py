"""``aligner desk``: the command, its errors, and that the rest of the CLI stays free of textual."""

from __future__ import annotations

import subprocess
import sys

import pytest

from aligner.cli import build_parser, main


def _python(code: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=60, check=False
    )


def test_desk_is_registered_without_importing_textual():
    out = _python(
        "import sys; from aligner.cli import build_parser; "
        "p = build_parser(); p.parse_args(['desk', 'demo', '--db', 'x.sqlite']); "
        "print('textual' in sys.modules)"
    )
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "False"


def test_desk_help_names_the_keys_and_the_safety_rules(capsys):
    with pytest.raises(SystemExit) as done:
        build_parser().parse_args(["desk", "--help"])
    assert done.value.code == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "--db FILE" in text and "BENCH" in text
    assert "F1 lists the keys" in text and "F2-F8 switch screens" in text
    assert "laser safety officer" in text and "SIGTERM, SIGHUP and SIGINT" in text


def test_desk_with_a_missing_bench_file_is_one_plain_error(tmp_path):
    missing = tmp_path / "no-such-bench.toml"
    out = subprocess.run(
        [sys.executable, "-m", "aligner", "desk", str(missing)],
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
    )
    assert out.returncode == 2
    assert "Traceback" not in out.stderr
    assert str(missing) in out.stderr and len(out.stderr.strip().splitlines()) == 1


def test_desk_runs_the_app_built_by_the_factory(monkeypatch, tmp_path):
    from aligner.tui.app import DeskApp

    seen = {}

    def fake_run(self: DeskApp) -> None:
        seen["bench"] = self.backend.bench.name
        seen["db"] = self.backend.db_path
        seen["realtime"] = self.backend.realtime

    monkeypatch.setattr(DeskApp, "run", fake_run)
    assert main(["desk", "demo", "--db", str(tmp_path / "runs.sqlite")]) == 0
    assert seen == {
        "bench": "demo walk-off readout, 830 nm",
        "db": tmp_path / "runs.sqlite",
        "realtime": True,
    }


def test_desk_with_an_unusable_run_log_is_refused_before_the_ui_starts(tmp_path, capsys):
    not_a_db = tmp_path / "notes.txt"
    not_a_db.write_text("these are not runs\n" * 50, encoding="utf-8")
    assert main(["desk", "demo", "--db", str(not_a_db)]) == 2
    err = capsys.readouterr().err
    assert str(not_a_db) in err and "--db" in err and "Traceback" not in err
    assert not_a_db.read_text(encoding="utf-8").startswith("these are not runs")  # untouched
