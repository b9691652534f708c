"""Schedules: the one-word forms and their mapping to readings through the planner."""

import numpy as np
import pytest

from aligner.bench import load_bench
from aligner.errors import InputError
from aligner.model import imbalance_deg
from aligner.run.schedule import parse_schedule, plan_points


def test_linear_and_outback_and_list():
    s = parse_schedule("linear:0.2:2.0:10")
    assert s.quantity == "imbalance_deg" and len(s.targets) == 10
    assert s.targets[0] == pytest.approx(0.2) and s.targets[-1] == pytest.approx(2.0)
    o = parse_schedule("outback:0.2:2.0:10", repeats=3)
    assert o.targets == s.targets + s.targets[::-1] and o.n_points == 60
    assert parse_schedule("list:0.3, 0.6,1.2").targets == (0.3, 0.6, 1.2)


def test_amplification_is_log_spaced():
    s = parse_schedule("amplification:5:60:8")
    ratios = np.diff(np.log(s.targets))
    # log spacing: equal ratios between neighbours (common practice, no source)
    assert np.allclose(ratios, ratios[0]) and s.targets[0] == pytest.approx(5)
    assert s.targets[-1] == pytest.approx(60)


@pytest.mark.parametrize(
    "spec, words",
    [
        ("lin:0:1:3", "unknown form"),
        ("linear:0:1", "START:STOP:N"),
        ("linear:a:1:3", "START"),
        ("linear:0:1:x", "whole number"),
        ("amplification:0:10:3", "from 0.001 to 1e+06"),
        ("list:", "at least"),
        ("linear:0:1:0", "N must be"),
        ("linear:0:inf:3", "finite"),
    ],
)
def test_bad_schedules_name_the_problem(spec, words):
    with pytest.raises(InputError, match=r"^schedule ") as info:
        parse_schedule(spec)
    assert words in str(info.value)


def test_bad_dwell_settle_repeats():
    for kwargs, word in (
        ({"dwell_s": 0}, "dwell_s"),
        ({"settle_s": -1}, "settle_s"),
        ({"repeats": 0}, "repeats"),
    ):
        with pytest.raises(InputError, match=word):
            parse_schedule("linear:0.2:1:3", **kwargs)


def test_planned_readings_give_the_imbalance():
    bench = load_bench("demo")
    plan = plan_points(bench, parse_schedule("linear:0.2:2.0:5", repeats=2))
    assert [p.index for p in plan] == list(range(10))
    assert [p.pass_index for p in plan] == [0] * 5 + [1] * 5
    readings = np.array([p.readings[bench.imbalance_mount] for p in plan[:5]])
    # independent check through the forward model's signed imbalance
    got = imbalance_deg(bench, {bench.imbalance_mount: readings})
    assert np.allclose(got, np.linspace(0.2, 2.0, 5), atol=1e-6)
    # the other mounts stay at the file readings
    assert all(p.readings["pre_hwp"] == bench.mounts["pre_hwp"].reading_deg for p in plan)
