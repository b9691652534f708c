"""A bench file whose analyzer mount is a plug-in (``py:`` spec) runs a full sweep: the binary
protocol mount adapter through the pty emulator, the rest simulated (declared so), on the
station."""

from __future__ import annotations

import sys

import numpy as np
import pytest

from aligner.bench import DEMO_BENCH, load_bench
from aligner.run.log import RunLog
from aligner.run.schedule import parse_schedule, plan_points
from aligner.run.station import Station
from aligner_drivers.adapters.framed import Msg

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="pty emulator is POSIX only")

if sys.platform != "win32":
    from aligner_drivers.binary_emulator import BinaryEmulator

CPD = 1000.0  # encoder counts per degree (the demo bench's 0.001 deg resolution)


def test_a_bench_with_a_py_mount_runs_a_full_sweep(tmp_path):
    with BinaryEmulator(counts_per_deg=CPD, speed_deg_s=400.0) as emu:
        spec = (
            "py:aligner_drivers.adapters.binary:BinaryMount"
            f"?port={emu.port}&channel=1&counts_per_deg={CPD:g}&move_timeout_s=10"
        )
        text = DEMO_BENCH.read_text(encoding="utf-8")
        start = text.index("[mounts.analyzer]")
        text = text[:start] + text[start:].replace('driver = "sim"', f'driver = "{spec}"', 1)
        bench_file = tmp_path / "bench.toml"
        bench_file.write_text(text, encoding="utf-8")
        bench = load_bench(bench_file)  # validates the spec (imports the module, opens nothing)
        assert bench.mounts["analyzer"].driver == spec
        assert not emu.received

        schedule = parse_schedule("outback:0.3:1.5:5", dwell_s=0.1)
        plan = plan_points(bench, schedule)
        with RunLog(tmp_path / "runs.sqlite") as log, Station.open(bench) as station:
            analyzer = station.devices.mounts["analyzer"]
            assert analyzer.name == "analyzer"  # the bench's name reached the factory
            # the station homed the needs_home mount (shutter shut) when it opened
            assert "needs_home" in analyzer.capabilities
            assert any("analyzer homed" in e.message for e in station.events)
            record = next(d for d in station.provenance.devices if d.name == "analyzer")
            result = station.start_sweep(log, schedule, plan=plan)
            points = log.points(result.run_id)
        moves = [f.position()[0] for f in emu.received if f.msg == Msg.MOVE_TO]

    assert result.status == "complete", result.message
    assert (record.kind, record.spec) == ("real", spec)
    assert record.identity.startswith("ROT-EMU")
    assert len(points) == len(plan) == 10
    planned = np.array([p.readings["analyzer"] for p in plan])
    # every point's reading is the emulated encoder's read-back of the planned target
    assert np.allclose([p.reading_deg for p in points], np.round(planned * CPD) / CPD)
    assert set(np.round(planned * CPD).astype(int)) <= set(moves)
    assert all(p.readback["analyzer"] == p.reading_deg for p in points)
