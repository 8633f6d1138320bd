"""The vitrification section: when it applies, the margins, one source of truth for rates, bad inputs."""

import importlib

import numpy as np
import pytest

from planner.errors import ExtrapolationWarning, InputError
from planner.heat_transfer import cooling_rate_through
from planner.protocol import parse_protocol
from planner.results import to_jsonable
from planner.sections import vitrification as section
from planner.sections.vitrification import check_protocol, preservation_mode

# Invented demo scenarios for the tests; not data from any lab or study.
HEAD = """
schema: coldmargin/protocol-1
title: {title} (invented test scenario)
sample: {{volume_ml: 0.2, geometry: cylinder, diameter_mm: 5.0}}
container: {{kind: open, interface: exposed}}
"""
EG50 = """
solution:
  carrier: water
  cryoprotectants: [{agent: ethylene-glycol, mass_percent: 50.0}]
"""
PLUNGE_AND_WARM = """
schedule:
  start_c: 4.0
  steps:
    - {plunge_to_c: -196.0, heat_transfer: ln2-immersion}
    - {hold_h: 1}
    - {plunge_to_c: 37.0, heat_transfer: stirred-bath}
    - {hold_min: 10}
"""


def protocol(solution: str = EG50, schedule: str = PLUNGE_AND_WARM, title: str = "vitrification"):
    return parse_protocol(HEAD.format(title=title) + solution + schedule, "test")


def context_for(p, names=("solution", "thermal")):
    ctx = {}
    for name in names:
        out = importlib.import_module(f"planner.sections.{name}").build(p, ctx)
        if out is not None:
            ctx[name] = out
    return ctx


@pytest.fixture(scope="module")
def eg50():
    p = protocol()
    ctx = context_for(p)
    return p, ctx, section.build(p, ctx)


def test_report_has_the_issue_keys(eg50):
    _, _, out = eg50
    d = to_jsonable(out.report)
    for key in ("glass_transition_c", "critical_cooling_rate_c_per_min", "critical_warming_rate_c_per_min",
                "achieved_cooling_rate_c_per_min", "achieved_warming_rate_c_per_min", "cooling_margin",
                "warming_margin", "storage_below_glass_transition_k", "source", "flags"):
        assert key in d
    assert d["critical_rates_from"] == "published"


def test_published_rates_are_those_of_the_source(eg50):
    # Baudot & Odagescu 2004, 50 % w/w ethylene glycol: 11 and 853 K/min
    _, _, out = eg50
    assert out.report.critical_cooling_rate_c_per_min == pytest.approx(11.0, abs=0.5)
    assert out.report.critical_warming_rate_c_per_min == pytest.approx(853.0, abs=0.5)
    assert out.report.source == "baudot-odagescu-2004"


def test_achieved_rates_are_the_heat_transfer_sections_own(eg50):
    # One source of truth: the slowest point's rates are cooling_rate_through on the thermal section's own
    # history, over the band from the liquidus down to the band's lower end.
    p, ctx, out = eg50
    history = ctx["thermal"].state.history
    upper = out.state.liquidus
    lower = out.state.glass_transition or section.FALLBACK_GLASS_TRANSITION
    band = cooling_rate_through(history, upper, lower)
    assert out.state.achieved_cooling_rate == band.cooling_rate
    assert out.state.achieved_warming_rate == band.warming_rate
    assert out.report.achieved_cooling_rate_c_per_min == pytest.approx(band.cooling_rate * 60, rel=5e-4)
    assert out.report.achieved_warming_rate_c_per_min == pytest.approx(band.warming_rate * 60, rel=5e-4)
    # the slowest point is slower than the surface: the centre's own pass is not faster than the reported rate
    centre = history.centre_temperature
    t_in = np.interp(-upper, -centre[: np.argmin(centre) + 1], history.time[: np.argmin(centre) + 1])
    t_out = np.interp(-lower, -centre[: np.argmin(centre) + 1], history.time[: np.argmin(centre) + 1])
    assert (upper - lower) / (t_out - t_in) >= band.cooling_rate * (1 - 1e-6)


def test_margins_are_achieved_over_critical(eg50):
    _, _, out = eg50
    r = out.report
    assert r.cooling_margin == pytest.approx(out.state.achieved_cooling_rate / out.state.critical_cooling_rate, rel=2e-3)
    assert r.warming_margin == pytest.approx(out.state.achieved_warming_rate / out.state.critical_warming_rate, rel=2e-3)
    names = {m.name: m.value for m in out.margins}
    assert names["vitrification_cooling_margin"] == r.cooling_margin
    assert names["vitrification_warming_margin"] == r.warming_margin
    # warming is the harder limit here, as it usually is (Wowk 2010)
    assert r.warming_margin < r.cooling_margin


def test_cautions_and_chart_series(eg50):
    _, _, out = eg50
    assert out.cautions == ["ln2-handling", "vitrified-fracture"]
    st = out.state
    assert st.time.shape == st.centre_temperature.shape == st.bath_temperature.shape
    assert np.all(np.diff(st.time) >= 0)


def test_no_glass_transition_data_is_flagged_not_invented(eg50):
    _, _, out = eg50
    assert out.report.glass_transition_c is None and out.report.storage_below_glass_transition_k is None
    assert any(f.code == "missing-data" and "glass transition" in f.message for f in out.report.flags)


SUCROSE_ENTERED = """
solution:
  carrier: water
  cryoprotectants: [{agent: sucrose, mass_percent: 60.0}]
  critical_cooling_rate_c_per_min: 2.5
  critical_warming_rate_c_per_min: 50.0
"""


def test_entered_rates_apply_and_storage_above_glass_transition_is_refused():
    # Gordon-Taylor, sucrose T_g,s = 335 K, k = 4.7 (Roos & Karel 1991, from memory), water 136 K:
    # 60 % w/w -> (0.6*335 + 4.7*0.4*136) / (0.6 + 4.7*0.4) = 184.1 K = -89.0 C
    schedule = """
schedule:
  start_c: 4.0
  steps:
    - {plunge_to_c: -196.0, heat_transfer: ln2-immersion}
    - {hold_min: 30}
    - {ramp_to_c: -80.0, rate_c_per_min: 10.0}
    - {hold_h: 48}
"""
    p = protocol(SUCROSE_ENTERED, schedule, "sucrose stored in a -80 C freezer")
    with pytest.warns(ExtrapolationWarning, match="sucrose"):  # 60 % w/w is past the osmotic fit's range
        out = section.build(p, context_for(p))
    r = out.report
    assert r.critical_rates_from == "entered"
    assert r.critical_cooling_rate_c_per_min == 2.5 and r.critical_warming_rate_c_per_min == 50.0
    assert r.glass_transition_c == pytest.approx(-89.0, abs=0.2)
    assert r.storage_temperature_c == -80.0
    assert r.storage_below_glass_transition_k == pytest.approx(-9.0, abs=0.2)
    assert any(f.code == "refused" and "above the glass transition" in f.message for f in r.flags)
    # no warming back through the band in the schedule: the warming margin is not judged
    assert r.warming_margin is None and r.achieved_warming_rate_c_per_min is None
    assert any("warming margin" in f.message for f in r.flags)


def test_cocktail_without_entered_rates_has_no_invented_rates():
    sol = """
solution:
  carrier: water
  cryoprotectants: [{agent: ethylene-glycol, mass_percent: 20.0}, {agent: dmso, mass_percent: 20.0}]
"""
    p = protocol(sol)
    out = section.build(p, context_for(p))
    assert out.report.critical_rates_from == "none"
    assert out.report.cooling_margin is None and out.report.warming_margin is None
    assert any("solution.critical_cooling_rate_c_per_min" in f.message for f in out.report.flags)


def test_more_concentrated_than_the_data_gives_a_bounded_margin():
    sol = """
solution:
  carrier: water
  cryoprotectants: [{agent: ethylene-glycol, mass_percent: 55.0}]
"""
    p = protocol(sol)
    out = section.build(p, context_for(p))
    assert out.report.critical_cooling_rate_bound == "at-most"
    assert any("lower bound" in f.message for f in out.report.flags)


# --- when the section applies --------------------------------------------------------------------------------
def test_seeded_and_supercooled_protocols_do_not_vitrify():
    seeded = """
schedule:
  start_c: 4.0
  steps:
    - {ramp_to_c: -5.0, rate_c_per_min: 1.0}
    - {seed_ice: {at_c: -5.0}}
    - {ramp_to_c: -80.0, rate_c_per_min: 1.0}
"""
    saline = "\nsolution: {carrier: isotonic-saline}\n"
    p = protocol(saline, seeded)
    assert section.build(p, context_for(p)) is None
    hold = """
schedule:
  start_c: 4.0
  steps:
    - {ramp_to_c: -3.0, rate_c_per_min: 0.5}
    - {hold_h: 72}
"""
    p = protocol(saline, hold)
    assert section.build(p, context_for(p)) is None
    assert preservation_mode(p, 272.6, None)[0] is None


def test_slow_ramp_without_rates_is_unseeded_freezing_not_vitrification():
    ramp = """
schedule:
  start_c: 4.0
  steps:
    - {ramp_to_c: -150.0, rate_c_per_min: 1.0}
"""
    p = protocol(EG50, ramp)
    mode, _ = preservation_mode(p, 237.55, None, critical_cooling_rate=11.0 / 60)
    assert mode == "unseeded-freezing"  # 1 C/min is slower than the 11 C/min critical cooling rate
    fast = protocol(EG50, ramp.replace("1.0}", "20.0}"))
    assert preservation_mode(fast, 237.55, None, critical_cooling_rate=11.0 / 60)[0] == "vitrification"


# --- bad inputs: errors naming the key ---------------------------------------------------------------------
def test_seeding_above_the_liquidus_names_the_seed_key():
    # 10 % w/w glycerol freezes near -2.3 C (CRC Handbook): seeding at -1 C cannot start ice
    sol = "\nsolution: {carrier: water, cryoprotectants: [{agent: glycerol, mass_percent: 10.0}]}\n"
    schedule = """
schedule:
  start_c: 4.0
  steps:
    - {ramp_to_c: -1.0, rate_c_per_min: 1.0}
    - {seed_ice: {at_c: -1.0}}
    - {ramp_to_c: -80.0, rate_c_per_min: 1.0}
"""
    with pytest.raises(InputError, match=r"schedule\.steps\[1\]\.seed_ice\.at_c.*liquidus"):
        check_protocol(protocol(sol, schedule))


def test_seeding_where_the_schedule_is_not_names_the_seed_key():
    schedule = """
schedule:
  start_c: 4.0
  steps:
    - {ramp_to_c: -2.0, rate_c_per_min: 1.0}
    - {seed_ice: {at_c: -6.0}}
"""
    with pytest.raises(InputError, match=r"schedule\.steps\[1\]\.seed_ice\.at_c.*-2 C"):
        check_protocol(protocol("\nsolution: {carrier: isotonic-saline}\n", schedule))


def test_storage_with_no_cooling_into_it_names_the_hold():
    schedule = """
schedule:
  start_c: -150.0
  steps:
    - {ramp_to_c: -196.0, rate_c_per_min: 5.0}
    - {hold_h: 12}
"""
    with pytest.raises(InputError, match=r"schedule\.steps\[1\]\.hold_h.*cooling"):
        check_protocol(protocol(EG50, schedule))


def test_rate_given_for_a_solution_with_no_agent_names_the_rate():
    sol = "\nsolution: {carrier: isotonic-saline, critical_cooling_rate_c_per_min: 5.0}\n"
    with pytest.raises(InputError, match=r"solution\.critical_cooling_rate_c_per_min"):
        check_protocol(protocol(sol))
    p = protocol(sol)
    with pytest.raises(InputError, match=r"solution\.critical_cooling_rate_c_per_min"):
        section.build(p, context_for(p, ("solution",)))


def test_rates_and_margins_span_the_h_range(eg50):
    # The thermal section solves the low and high ends of each surroundings' h range: the slowest point's
    # rates there bracket the nominal one, and so do the margins.
    r = eg50[2].report
    lo, hi = r.achieved_cooling_rate_range_c_per_min
    assert lo <= r.achieved_cooling_rate_c_per_min <= hi
    lo, hi = r.warming_margin_range
    assert lo <= r.warming_margin <= hi
