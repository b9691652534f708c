"""The station: device declarations, the read-back check, homing, the shutter's confirmation,
and the reference-normalised leak interval's coverage."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from aligner.bench import Device, load_bench
from aligner.errors import BenchFileError, InputError, ReadbackMismatch
from aligner.run.devices import choose_devices, spec_kind
from aligner.run.station import Station
from aligner.run.sweep import measured_leak
from aligner_drivers.sim import SimMount


@pytest.fixture(scope="module")
def bench():
    return load_bench("demo")


def test_spec_kinds():
    assert [spec_kind(s) for s in ("sim", "sim:?rate=5", "manual", "none", "/dev/ttyUSB0")] == [
        "simulated",
        "simulated",
        "typed",
        "absent",
        "real",
    ]


def test_a_fully_simulated_bench_needs_no_declarations(bench):
    bare = replace(
        bench,
        mounts={n: replace(m, declared=False) for n, m in bench.mounts.items()},
        devices={r: Device(r) for r in bench.devices},
    )
    assert {c.kind for c in choose_devices(bare)} == {"simulated"}


def test_a_real_device_makes_every_other_declaration_necessary(bench):
    real = bench.with_mounts(analyzer=replace(bench.mounts["analyzer"], driver="/dev/ttyX"))
    undeclared = replace(real, devices={**real.devices, "shutter": Device("shutter")})
    with pytest.raises(InputError, match=r"devices.shutter.driver is not declared.*'/dev/ttyX'"):
        choose_devices(undeclared)
    # an override on the command line counts as a declaration
    chosen = choose_devices(undeclared, {"shutter": ("none", None)})
    assert {c.name: c.kind for c in chosen}["shutter"] == "absent"
    assert {c.name: c.source for c in chosen}["shutter"] == "--shutter"


def test_a_counter_cannot_be_none_and_a_shutter_cannot_be_typed(bench):
    with pytest.raises(InputError, match="--counter: a counter cannot be 'none'"):
        choose_devices(bench, {"counter": ("none", None)})
    with pytest.raises(InputError, match="manual devices exist only"):
        choose_devices(bench, {"shutter": ("manual", None)})


def test_no_safe_rate_no_station(bench):
    loose = replace(bench, detector=replace(bench.detector, safe_rate=float("inf")))
    with pytest.raises(BenchFileError, match=r"detector\.safe_rate"):
        Station.open(loose)


class WrongBaseMount(SimMount):
    """A mount whose driver reads the position's fixed-width hexadecimal step count as if it
    were decimal (the mistake of a profile with the wrong number codec)."""

    def position(self) -> float:
        steps = round(super().position() * 1000)
        return int(f"{steps & 0xFFFFFFFF:08X}", 10) / 1000


def test_the_read_back_check_catches_a_wrong_number_base_on_the_first_move(bench):
    station = Station.open(bench, seed=1)
    station.devices.mounts["analyzer"] = WrongBaseMount(
        "analyzer", resolution_deg=0.001, travel_deg=(-10.0, 350.0), start_deg=136.0
    )
    station._positions["analyzer"] = None
    with station, pytest.raises(ReadbackMismatch) as info:
        station.move("analyzer", 10.0)  # 10000 steps = 0x2710, read back as 2710: 2.71 deg
    text = str(info.value)
    assert "analyzer was sent to 10.00000 deg but reads 2.71000 deg" in text
    assert "number format" in text and "steps per degree" in text


def test_a_mount_that_needs_homing_is_homed_with_the_shutter_shut(bench):
    class NeedsHome(SimMount):
        capabilities = frozenset({"home", "stop", "readback", "needs_home"})

    from aligner.run.devices import open_devices

    devices = open_devices(bench, seed=2)
    devices.shutter.open()
    devices.mounts["pre_hwp"] = NeedsHome("pre_hwp", start_deg=22.5)
    station = Station(bench, devices)
    station.prepare()
    assert devices.mounts["pre_hwp"].move_log[-1].kind == "home"
    assert devices.shutter.history[-2:] == [True, False]  # shut before the homing
    assert any("homed" in e.message for e in station.events)


def test_a_shutter_that_reads_back_open_is_not_taken_for_shut(bench):
    station = Station.open(bench, seed=3)
    shutter = station.devices.shutter
    shutter.shut = lambda: None  # the command is acknowledged but the blade does not move
    shutter.open()
    assert station.secure() == "failed"
    assert any("did not confirm" in e.message for e in station.events)
    station.devices.shutter = None
    assert station.secure() == "none"


@pytest.mark.parametrize("dark_fraction", [0.0, 0.5, 1.2])
def test_reference_normalised_leak_interval_covers_at_its_level(bench, dark_fraction):
    """Coverage of the 68.3 % interval over 2000 simulated points with the reference's dark as
    a fraction of its light: within 68 +/- 3 % (binomial spread of 2000 trials: 1.0 %). The
    profile-likelihood construction is Wilks' theorem (Cowan, Statistical Data Analysis,
    1998, ch. 9); the simulation is this test's own."""
    rng = np.random.default_rng(int(dark_fraction * 10) + 7)
    d = replace(bench.detector, dead_time_ns=0.0)
    monitor_light = bench.source.photon_rate * bench.reference.fraction  # counts/s
    leak_true, dwell = 3e-4, 0.5
    ref = replace(bench.reference, dark_rate=dark_fraction * monitor_light)
    b = replace(bench, detector=d, reference=ref)
    signal = bench.source.photon_rate * leak_true * d.efficiency
    post = rng.poisson((signal + d.dark_rate) * dwell, 2000)
    refs = rng.poisson((monitor_light + ref.dark_rate) * dwell, 2000)
    hits = 0
    for k, r in zip(post, refs, strict=True):
        m = measured_leak(b, int(k), dwell, int(r))
        hits += m.low <= leak_true <= m.high
    assert 0.65 <= hits / 2000 <= 0.71


def test_gates_follow_a_counter_with_fixed_windows(bench):
    """A free-running counter sums whole 20 ms windows: the probe gate and every later gate
    are whole windows, and a dwell off the window step is refused before anything moves."""
    station = Station.open(bench, seed=4)
    station.devices.counter.gate_step_s = 0.02
    gates = station.gates(2.5)
    assert sum(gates) == pytest.approx(2.5)
    assert gates[0] == pytest.approx(0.02)  # the probe: one window, not 10 ms
    assert all(abs(g / 0.02 - round(g / 0.02)) < 1e-9 for g in gates)
    assert max(gates) <= station.options.gate_s + 1e-9
    with pytest.raises(InputError, match=r"0\.02 s gate step"):
        station.check_dwell(0.015)
    station.close()


def test_what_a_device_noticed_becomes_an_event(bench):
    station = Station.open(bench, seed=5)
    counter = station.devices.counter
    counter.take_notices = lambda: ["a late reply to GATE 100 was discarded"]
    station.count(0.1, idx=3)
    notes = [e for e in station.events if e.kind == "device"]
    assert notes and notes[0].idx == 3 and "discarded" in notes[0].message
    station.close()
