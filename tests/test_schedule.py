"""The bath schedule resolved in time."""

import numpy as np
import pytest

from planner.protocol import Schedule, Step
from planner.schedule import bath_history, segments


def demo_schedule():
    # 4 C -> -4 C at 0.5 C/min, hold 48 h, back to 4 C at 2 C/min, then a plunge to -150 C
    return Schedule(277.15, (
        Step(0, "ramp", 269.15, 0.5 / 60),
        Step(1, "hold", duration=48 * 3600.0),
        Step(2, "ramp", 277.15, 2.0 / 60),
        Step(3, "plunge", 123.15),
    ))


def test_segment_times_follow_rates_and_durations():
    # arithmetic of the program itself: 8 K at 0.5 K/min = 16 min; 8 K at 2 K/min = 4 min
    segs = segments(demo_schedule())
    assert [s.kind for s in segs] == ["ramp", "hold", "ramp", "plunge"]
    assert segs[0].t_end == pytest.approx(16 * 60)
    assert segs[1].t_end - segs[1].t_start == pytest.approx(48 * 3600)
    assert segs[2].t_end - segs[2].t_start == pytest.approx(4 * 60)
    assert segs[3].t_start == segs[3].t_end == segs[2].t_end


def test_history_is_sampled_and_steps_at_a_plunge():
    h = bath_history(demo_schedule(), max_step_s=60.0)
    assert np.all(np.diff(h.time) >= 0)
    assert np.max(np.diff(h.time)) <= 60.0 + 1e-9
    assert h.duration == pytest.approx(16 * 60 + 48 * 3600 + 4 * 60)
    assert h.temperature[-1] == pytest.approx(123.15)
    assert h.temperature_at(8 * 60) == pytest.approx(273.15)  # half way down the first ramp
    assert h.temperature_at(h.duration) == pytest.approx(123.15)  # after the plunge
    arr = h.temperature_at(np.array([0.0, 16 * 60, 3600.0]))
    assert arr.shape == (3,) and arr[1] == pytest.approx(269.15) and arr[2] == pytest.approx(269.15)


def test_bad_sampling_step():
    with pytest.raises(ValueError, match="max_step_s"):
        bath_history(demo_schedule(), max_step_s=0)
