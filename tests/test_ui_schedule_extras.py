"""The schedule chart's additions: the freezing path and the recalescence jump."""

from pathlib import Path

import pytest

from planner.assessment import assess
from planner.protocol import load_protocol, parse_protocol
from planner.ui.schedule_extras import (
    freezing_panel,
    freezing_series,
    recalescence_layers,
    recalescence_marker,
)

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def slow():
    p = load_protocol(ROOT / "protocols" / "slow-freeze-dmso.yaml")
    return p, assess(p)


@pytest.fixture(scope="module")
def open_vial():
    p = load_protocol(ROOT / "protocols" / "supercooled-open-vial.yaml")
    return p, assess(p)


def test_freezing_series_of_a_seeded_protocol(slow):
    p, a = slow
    s = freezing_series(a)
    assert s is not None
    # ice is started at the seed step; the plateau sits at the liquidus (the freezing section's own numbers)
    assert s["liquidus_c"] == pytest.approx(a.to_dict()["freezing"]["liquidus_c"], abs=1e-3)
    fractions = [v for v in s["mean_unfrozen"] if v is not None]
    # at the seed a supercooled sample freezes a little at once (recalescence), then the water freezes out
    assert 0.9 < fractions[0] < 1.0 and min(fractions) < 0.3
    assert all(0.0 <= v <= 1.0 for v in fractions)
    assert len(s["time_h"]) == len(s["centre_c"]) <= 300
    chart = freezing_panel(s).to_dict()
    assert len(chart["vconcat"]) == 2


def test_no_freezing_series_for_a_supercooled_hold(open_vial):
    assert freezing_series(open_vial[1]) is None


def test_recalescence_shown_when_the_risk_is_material(open_vial):
    p, a = open_vial
    m = recalescence_marker(a, p.policy.target_freeze_probability)
    assert m is not None
    d = a.to_dict()
    # the jump starts at the coldest point and ends near the liquidus (adiabatic recalescence to equilibrium)
    assert m["from_c"] == pytest.approx(d["chamber"]["recalescence_from_c"], abs=0.05)
    assert d["solution"]["freezing_point_c"] - 0.5 < m["to_c"] <= d["solution"]["freezing_point_c"] + 1e-6
    assert m["ice_fraction_of_water"] > 0 and "freezes" in m["label"]
    assert len(recalescence_layers(m)) == 3


def test_recalescence_not_drawn_when_the_risk_is_remote():
    text = (ROOT / "protocols" / "rigid-chamber-hold.yaml").read_text()
    p = parse_protocol(text)
    a = assess(p)
    upper = a.to_dict()["nucleation"]["freeze_probability_interval"][1]
    assert upper < 0.1 * p.policy.target_freeze_probability
    assert recalescence_marker(a, p.policy.target_freeze_probability) is None


def test_schedule_step_chart_draws_the_freezing_path_and_the_jump(slow, open_vial):
    from types import SimpleNamespace

    from planner.ui.stepcharts import CHARTS

    p, a = slow
    chart, note = CHARTS["schedule"](SimpleNamespace(protocol=p, assessment=a))
    spec = chart.to_dict()
    titles = str(spec)
    assert "Unfrozen water during freezing" in titles and "freezing model" in note
    # ice is seeded on purpose: no recalescence "risk" is drawn
    assert "if ice forms here" not in titles
    p2, a2 = open_vial
    chart2, note2 = CHARTS["schedule"](SimpleNamespace(protocol=p2, assessment=a2))
    assert "if ice forms here" in str(chart2.to_dict()) and "red jump" in note2
