"""A stop request while a point is being counted (the desk's pause, its quit, a signal to the
desk): the count stops before its next gate, the partial point is discarded, the shutter
shuts and the run stays resumable. Simulated bench on the simulated clock; the counter is
wrapped so the test sees every gate and can ask for the stop between two of them."""

from __future__ import annotations

import pytest

from aligner.bench import load_bench
from aligner.errors import SignalInterrupt, StopRequested
from aligner.run.log import RunLog
from aligner.run.schedule import parse_schedule
from aligner.run.station import Station
from aligner_drivers.sim import FunctionCounter

#: A long dwell (s): 1 probe gate and 100 gates of at most 1 s each.
LONG_DWELL_S = 100.0


class GateCounter:
    """Wrap the station's counter: count the gates asked of it, and call ``request`` after
    gate ``stop_after`` of point ``at_point`` (the points' gates are told apart by the
    caller setting :attr:`point`)."""

    def __init__(self, station: Station, at_point: int, stop_after: int, signum: int = 0):
        inner = station.devices.counter
        self.station, self.at_point, self.stop_after, self.signum = (
            station,
            at_point,
            stop_after,
            signum,
        )
        self.point = -1
        self.gates: dict[int, int] = {}
        self.inner = inner
        station.devices.counter = FunctionCounter(self.count, channels=inner.channels)

    def count(self, gate_s: float) -> tuple[int, ...]:
        counts = self.inner.count(gate_s)
        n = self.gates[self.point] = self.gates.get(self.point, 0) + 1
        if self.point == self.at_point and n == self.stop_after:
            self.station.request_stop(self.signum)
        return counts


def _sweep(tmp_path, signum: int = 0):
    bench = load_bench("demo")
    schedule = parse_schedule("list:0.5,0.8,1.1", dwell_s=LONG_DWELL_S)
    log = RunLog(tmp_path / "runs.sqlite")
    station = Station.open(bench)
    gates = GateCounter(station, at_point=1, stop_after=3, signum=signum)
    moved = station.move

    def move(name, target, idx=None):  # tells the counter which point its gates belong to
        gates.point = idx if idx is not None else -1
        return moved(name, target, idx)

    station.move = move  # type: ignore[method-assign]
    result = station.start_sweep(log, schedule)
    return station, log, gates, result


def test_a_stop_request_ends_the_count_at_the_next_gate_and_discards_the_point(tmp_path):
    station, log, gates, result = _sweep(tmp_path)
    assert len(station.gates(LONG_DWELL_S)) == 101  # so a whole point is 101 gates
    assert gates.gates[0] == 101  # the first point was counted in full
    assert gates.gates[1] == 3  # not one gate after the request
    assert 2 not in gates.gates
    assert result.status == "interrupted" and result.reason == "operator"
    assert result.points_done == 1 and result.exit_code == 0
    assert result.shutter == "confirmed" and not station.devices.shutter.is_open()
    run = log.run(result.run_id)
    assert run.status == "interrupted" and "paused by the operator" in run.message
    assert [p.idx for p in log.points(run.id)] == [0]  # the partial point is not a point
    notes = [e for e in log.events(run.id) if e.kind == "note"]
    assert any(e.idx == 1 and "partial count is discarded" in e.message for e in notes)
    assert not station.stop_requested  # answered: the next operation is not stopped
    again = station.resume_sweep(log, run.id)
    assert again.status == "complete"
    assert [p.idx for p in log.points(run.id)] == [0, 1, 2]
    station.close()
    log.close()


def test_a_signal_stop_request_ends_the_count_as_an_interrupt(tmp_path):
    station, log, gates, result = _sweep(tmp_path, signum=15)
    assert gates.gates[1] == 3
    assert result.reason == "interrupt" and result.signal == 15 and result.exit_code == 143
    assert not station.devices.shutter.is_open()
    assert [p.idx for p in log.points(result.run_id)] == [0]
    assert "stopped by signal 15" in log.run(result.run_id).message
    station.close()
    log.close()


def test_a_count_outside_a_sweep_stops_too(tmp_path):
    # the meter and recipe steps count through the same call
    with Station.open(load_bench("demo")) as station:
        gates = GateCounter(station, at_point=-1, stop_after=2)
        with pytest.raises(StopRequested):
            station.count(LONG_DWELL_S)
        assert gates.gates[-1] == 2
        station.clear_stop()
        gates.signum, gates.gates = 1, {}
        with pytest.raises(SignalInterrupt) as stopped:
            station.count(LONG_DWELL_S)
        assert stopped.value.signum == 1 and gates.gates[-1] == 2
