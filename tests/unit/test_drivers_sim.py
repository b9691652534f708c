"""Simulated devices: mechanics of SimMount, counters, shutter and pointer."""

from __future__ import annotations

import threading
import time

import numpy as np
import pytest
from scipy import stats

from aligner.errors import BadReply, DeviceError, Disconnected, InputError
from aligner_drivers.sim import FunctionCounter, SimMount, SimPointer, SimShutter, poisson_counter


def test_positive_approach_leaves_element_at_drive():
    mount = SimMount(backlash_deg=0.05)
    mount.move_to(10.0)
    assert mount.position() == 10.0
    assert mount.true_angle_deg() == pytest.approx(10.0)


def test_negative_approach_leaves_element_one_backlash_high():
    mount = SimMount(backlash_deg=0.05, start_deg=20.0)
    mount.move_to(10.0)
    assert mount.position() == 10.0
    assert mount.true_angle_deg() == pytest.approx(10.05)


def test_reversal_smaller_than_backlash_does_not_turn_element():
    mount = SimMount(backlash_deg=0.05)
    mount.move_to(10.0)
    mount.move_to(9.97)  # reversal by 0.03 deg, inside the play
    assert mount.true_angle_deg() == pytest.approx(10.0)
    mount.move_to(9.9)  # 0.1 deg past: the element turns after 0.05 deg of play
    assert mount.true_angle_deg() == pytest.approx(9.95)
    mount.move_to(9.92)  # reversing again: play taken up the other way first
    assert mount.true_angle_deg() == pytest.approx(9.95)


def test_move_log_records_targets_and_directions():
    mount = SimMount()
    for target in (5.0, 2.0, 2.0, 7.0):
        mount.move_to(target)
    mount.home()
    assert [(r.target_deg, r.direction, r.kind) for r in mount.move_log] == [
        (5.0, 1, "move"),
        (2.0, -1, "move"),
        (2.0, 0, "move"),
        (7.0, 1, "move"),
        (0.0, -1, "home"),
    ]


def test_resolution_quantizes_the_drive():
    mount = SimMount(resolution_deg=0.01)
    mount.move_to(1.2345)
    assert mount.position() == pytest.approx(1.23)
    mount.move_to(1.2351)
    assert mount.position() == pytest.approx(1.24)


def test_travel_limits_refuse_with_the_limits_named():
    mount = SimMount(travel_deg=(-170.0, 170.0))
    with pytest.raises(InputError, match=r"-170 to 170 deg \(travel_deg\)"):
        mount.move_to(171.0)
    assert mount.position() == 0.0 and mount.move_log == []


@pytest.mark.parametrize("bad", [float("nan"), float("inf"), "ten", None])
def test_non_numeric_targets_are_input_errors(bad):
    with pytest.raises(InputError, match="reading_deg"):
        SimMount().move_to(bad)


def test_repeatability_noise_has_the_requested_rms():
    rms, n = 0.0005, 2000
    mount = SimMount(noise_rms_deg=rms, seed=3)
    errors = []
    for i in range(n):
        target = 1.0 + (i % 2)  # alternate so every move turns the drive, from below or above
        mount.move_to(target)
        errors.append(mount.true_angle_deg() - target)
    sample_var = np.var(errors, ddof=1)
    # (n-1) s^2 / sigma^2 follows chi-square with n-1 degrees of freedom for normal data
    # (Cochran's theorem; e.g. Rice, Mathematical Statistics and Data Analysis, 3rd ed., 2007)
    low, high = stats.chi2.ppf([0.0005, 0.9995], n - 1) * rms**2 / (n - 1)
    assert low < sample_var < high
    assert abs(np.mean(errors)) < 4 * rms / np.sqrt(n)


def test_same_seed_same_noise_and_no_move_keeps_the_error():
    a, b = SimMount(noise_rms_deg=0.01, seed=7), SimMount(noise_rms_deg=0.01, seed=7)
    for m in (a, b):
        m.move_to(3.0)
    assert a.true_angle_deg() == b.true_angle_deg() != 3.0
    before = a.true_angle_deg()
    a.move_to(3.0)  # the drive does not turn: no new repeatability error
    assert a.true_angle_deg() == before


def test_motion_time_is_added_up_without_sleeping(monkeypatch):
    def no_sleep(*_args):
        raise AssertionError("a simulated mount that is not realtime must not wait")

    monkeypatch.setattr(time, "sleep", no_sleep)
    monkeypatch.setattr(threading.Event, "wait", no_sleep)
    mount = SimMount(speed_deg_s=10.0)
    mount.move_to(50.0)
    mount.move_to(-50.0)
    assert mount.motion_s == pytest.approx(15.0)


def test_realtime_move_can_be_stopped_from_another_thread():
    mount = SimMount(speed_deg_s=100.0, realtime=True)
    errors: list[Exception] = []

    def run():
        try:
            mount.move_to(100.0)  # 1 s
        except DeviceError as exc:
            errors.append(exc)

    worker = threading.Thread(target=run)
    worker.start()
    deadline = time.monotonic() + 1.0
    while not mount.is_moving() and time.monotonic() < deadline:
        time.sleep(0.005)
    assert mount.is_moving()
    mount.stop()
    worker.join(2.0)
    assert len(errors) == 1 and "stopped" in str(errors[0])
    assert 0.0 < mount.position() < 100.0
    assert not mount.is_moving()


def test_closed_mount_raises_disconnected():
    mount = SimMount()
    mount.close()
    with pytest.raises(Disconnected):
        mount.position()


def test_function_counter_checks_what_the_function_returns():
    counter = FunctionCounter(lambda dwell_s: (int(100 * dwell_s), 5), channels=2)
    assert counter.count(0.5) == (50, 5)
    assert FunctionCounter(lambda d: [np.int64(3)]).count(1.0) == (3,)
    with pytest.raises(BadReply, match="expected 2 whole counts"):
        FunctionCounter(lambda d: (1,), channels=2).count(1.0)
    with pytest.raises(BadReply, match="whole counts"):
        FunctionCounter(lambda d: (1.5,)).count(1.0)
    with pytest.raises(InputError, match="dwell_s"):
        counter.count(0.0)
    with pytest.raises(InputError, match="channels"):
        FunctionCounter(lambda d: (1,), channels=3)


def test_poisson_counter_matches_poisson_statistics():
    counter = poisson_counter((200.0, 50.0), seed=1)
    counts = np.array([counter.count(0.1) for _ in range(4000)])
    for channel, mean in enumerate((20.0, 5.0)):
        sample = counts[:, channel]
        # index of dispersion: (n-1) s^2 / mean ~ chi-square(n-1) for Poisson data
        # (Fisher's dispersion test; Cochran, Biometrics 10, 417 (1954)), from memory
        d = (len(sample) - 1) * np.var(sample, ddof=1) / mean
        assert stats.chi2.sf(d, len(sample) - 1) > 1e-4
        assert stats.chi2.cdf(d, len(sample) - 1) > 1e-4
        assert abs(sample.mean() - mean) < 4 * np.sqrt(mean / len(sample))


def test_shutter_history_and_close():
    shutter = SimShutter()
    shutter.open()
    assert shutter.is_open()
    shutter.shut()
    assert shutter.history == [False, True, False]
    shutter.close()
    with pytest.raises(Disconnected):
        shutter.open()


def test_sim_pointer_returns_and_checks_fn():
    pointer = SimPointer(lambda dwell_s: (0.25, 0.01 / dwell_s**0.5))
    mean, sem = pointer.read(4.0)
    assert (mean, sem) == (0.25, pytest.approx(0.005))
    with pytest.raises(BadReply, match="standard error"):
        SimPointer(lambda d: (0.1, -1.0)).read(1.0)
    with pytest.raises(BadReply):
        SimPointer(lambda d: 0.1).read(1.0)
