"""The freezing section: seeded and unseeded freezing, plateau, freezing time, unfrozen fraction."""

import importlib
from pathlib import Path

import numpy as np
import pytest

from planner.errors import ExtrapolationWarning, InputError
from planner.protocol import load_protocol, parse_protocol
from planner.results import to_jsonable
from planner.sections import freezing as section
from planner.solution import composition, freeze_concentration

ROOT = Path(__file__).resolve().parents[1]

# Invented demo scenarios for the tests; not data from any lab or study.
HEAD = """
schema: coldmargin/protocol-1
title: {title} (invented test scenario)
sample: {{volume_ml: 0.5, geometry: cylinder, diameter_mm: 8.0}}
container: {{kind: open, interface: exposed}}
environment: {{heat_transfer: stirred-bath}}
"""
GLYCEROL10 = "\nsolution: {carrier: water, cryoprotectants: [{agent: glycerol, mass_percent: 10.0}]}\n"
SEEDED_HOLD = """
schedule:
  start_c: 4.0
  steps:
    - {ramp_to_c: -6.0, rate_c_per_min: 1.0}
    - {hold_min: 20}
    - {seed_ice: {at_c: -6.0}}
    - {hold_min: 90}
"""


def protocol(solution: str, schedule: str, title: str = "freezing"):
    return parse_protocol(HEAD.format(title=title) + solution + schedule, "test")


def context_for(p, names=("solution", "thermal", "nucleation")):
    ctx = {}
    for name in names:
        out = importlib.import_module(f"planner.sections.{name}").build(p, ctx)
        if out is not None:
            ctx[name] = out
    return ctx


@pytest.fixture(scope="module")
def held():
    p = protocol(GLYCEROL10, SEEDED_HOLD, "glycerol seeded at -6 C and held")
    ctx = context_for(p, ("solution", "thermal"))
    return p, ctx, section.build(p, ctx)


def test_report_has_the_issue_keys(held):
    d = to_jsonable(held[2].report)
    for key in ("seeded_at_c", "freezing_time_min", "plateau_c", "unfrozen_fraction_at_storage", "flags"):
        assert key in d
    assert d["how_ice_starts"] == "seeded" and d["seeded_at_c"] == -6.0


def test_plateau_sits_at_the_liquidus(held):
    _, ctx, out = held
    liquidus_c = ctx["solution"].report.freezing_point_c
    # 10 % w/w glycerol: the CRC Handbook gives a depression of 2.32 K (from memory); the solution model's
    # own liquidus is the reference here, the plateau is within 0.2 K below it (freeze concentration)
    assert liquidus_c == pytest.approx(-2.32, abs=0.1)
    assert liquidus_c - 0.2 < out.report.plateau_c <= liquidus_c + 1e-3


def test_ends_at_the_equilibrium_ice_of_the_hold(held):
    _, ctx, out = held
    comp = ctx["solution"].state.composition
    equilibrium = float(freeze_concentration(comp, 273.15 - 6.0).ice_fraction_of_water)
    assert out.report.frozen_by_end_of_leg is True
    assert out.state.centre_unfrozen_fraction[-1] == pytest.approx(1 - equilibrium, abs=5e-3)
    # storage is the 90 min hold at -6 C: the unfrozen fraction there is the equilibrium one
    assert out.report.unfrozen_fraction_at_storage == pytest.approx(1 - equilibrium, abs=2e-3)


def test_freezing_time_of_water_is_near_planks_estimate():
    # Pure water seeded at -6 C in a bath held at -6 C: Plank's equation (long cylinder, P = 1/4, R = 1/16,
    # [Plank 1913]) counts the latent heat released at 0 C with the full 6 K driving it; the enthalpy method
    # also carries the sensible heat (slower) and the instant recalescence of the supercooled water (7.5 % of
    # it frozen at once: faster). They agree within 15 %. (For a solution held just below its liquidus the
    # two differ more: its latent heat comes out gradually as the temperature falls towards the bath.)
    p = protocol("\nsolution: {carrier: water}\n", SEEDED_HOLD, "water seeded at -6 C and held")
    r = section.build(p, context_for(p, ("solution", "thermal"))).report
    assert r.freezing_time_min is not None and r.plank_freezing_time_min is not None
    assert r.freezing_time_min == pytest.approx(r.plank_freezing_time_min, rel=0.15)
    assert r.plateau_c == pytest.approx(0.0, abs=0.01)


def test_chart_series_share_one_time_axis(held):
    st = held[2].state
    n = st.time.size
    for series in (st.bath_temperature, st.centre_temperature, st.surface_temperature, st.mean_temperature,
                   st.centre_unfrozen_fraction, st.mean_unfrozen_fraction, st.centre_liquid_osmolality):
        assert series.shape == (n,)
    assert np.all(np.diff(st.time) > 0) and st.time[0] == pytest.approx(st.ice_start_time)
    # the unfrozen liquid concentrates as ice grows: osmolality rises while the unfrozen fraction falls
    assert st.centre_liquid_osmolality[-1] > st.centre_liquid_osmolality[1]
    assert st.centre_unfrozen_fraction[-1] < st.centre_unfrozen_fraction[1]


def test_demo_slow_freezing_protocol():
    p = load_protocol(ROOT / "protocols" / "slow-freeze-dmso.yaml")
    out = section.build(p, context_for(p, ("solution", "thermal")))
    r = out.report
    assert r.seeded_at_c == -6.0 and r.storage_temperature_c == -150.0
    assert 0.0 < r.unfrozen_fraction_at_storage < 0.3
    assert "ln2-handling" in out.cautions
    # forced air and a 20 min hold at -6 C bring the sample below its liquidus before ice is started
    assert not any("still above its liquidus" in f.message for f in r.flags)
    assert r.supercooling_at_ice_start_k > 0


def test_seeding_before_the_sample_reaches_the_liquidus_is_flagged():
    text = (ROOT / "protocols" / "slow-freeze-dmso.yaml").read_text()
    # no hold before the seed, and the default still air: the sample lags the 1 C/min ramp by several K
    text = text.replace("environment:\n  heat_transfer: forced-air\n", "").replace("    - {hold_min: 20}\n", "")
    p = parse_protocol(text)
    r = section.build(p, context_for(p, ("solution", "thermal"))).report
    assert any("still above its liquidus" in f.message for f in r.flags)


def test_unseeded_freezing_reports_where_ice_starts_on_its_own():
    saline = "\nsolution: {carrier: isotonic-saline}\n"
    ramp = """
schedule:
  start_c: 4.0
  steps:
    - {ramp_to_c: -80.0, rate_c_per_min: 1.0}
"""
    p = protocol(saline, ramp, "saline cooled without seeding")
    # cooled to -80 C, the exposed-interface prior is used past the supercooling its parameters come from
    with pytest.warns(ExtrapolationWarning, match="deeper than the 0 to 20.5 K"):
        ctx = context_for(p)
    assert any(f.code == "extrapolated" for f in ctx["nucleation"].report.flags)  # said in the result too
    out = section.build(p, ctx)
    r = out.report
    liquidus_c = ctx["solution"].report.freezing_point_c
    assert r.how_ice_starts == "unseeded" and r.seeded_at_c is None
    assert liquidus_c - 40.0 <= r.nucleation_temperature_c < liquidus_c
    assert r.supercooling_at_ice_start_k == pytest.approx(liquidus_c - r.nucleation_temperature_c, abs=0.02)
    warm, cold = r.nucleation_temperature_range_c
    assert warm is None or warm >= r.nucleation_temperature_c
    assert cold is None or cold <= r.nucleation_temperature_c


def test_protocols_that_do_not_freeze_have_no_section():
    p = load_protocol(ROOT / "protocols" / "supercooled-open-vial.yaml")
    assert section.build(p, context_for(p, ("solution", "thermal"))) is None
    vit = """
schedule:
  start_c: 4.0
  steps:
    - {plunge_to_c: -196.0, heat_transfer: ln2-immersion}
    - {hold_h: 1}
"""
    eg = "\nsolution: {carrier: water, cryoprotectants: [{agent: ethylene-glycol, mass_percent: 50.0}]}\n"
    p = protocol(eg, vit, "vitrified")
    assert section.build(p, context_for(p, ("solution", "thermal"))) is None


def test_seed_above_the_liquidus_is_an_error_naming_the_key():
    schedule = SEEDED_HOLD.replace("-6.0", "-1.0")
    p = protocol(GLYCEROL10, schedule)
    with pytest.raises(InputError, match=r"schedule\.steps\[2\]\.seed_ice\.at_c"):
        section.build(p, context_for(p, ("solution",)))


def test_one_dimensional_body_choice():
    flat = parse_protocol(HEAD.format(title="bag").replace(
        "{volume_ml: 0.5, geometry: cylinder, diameter_mm: 8.0}",
        "{volume_ml: 50.0, geometry: slab, thickness_mm: 5.0}") + GLYCEROL10 + SEEDED_HOLD, "test")
    assert section.one_dimensional(flat)[:2] == ("slab", pytest.approx(0.0025))
    comp = composition("water", [("glycerol", "mass_percent", 10.0)])
    assert comp.water_mass_fraction == pytest.approx(0.9, abs=1e-9)


def test_freezing_time_spans_the_h_range(held):
    # Faster surface transfer (the high end of the stirred-bath range) freezes sooner than the nominal, the low
    # end later.
    r = held[2].report
    fast, slow = r.freezing_time_range_min
    assert fast <= r.freezing_time_min <= slow


def test_record_carries_the_unfrozen_fraction_curve():
    p = load_protocol(ROOT / "protocols" / "slow-freeze-dmso.yaml")
    out = section.build(p, context_for(p, ("solution", "thermal")))
    c = out.report.curve
    assert len(c["time_h"]) == len(c["mean_unfrozen_fraction"]) <= 80
    fractions = [v for v in c["mean_unfrozen_fraction"] if v is not None]
    assert all(0.0 <= v <= 1.0 for v in fractions) and fractions[-1] < fractions[0]


def test_a_freezing_path_that_does_not_converge_gives_no_freezing_time(monkeypatch):
    # No Newton update allowed: the solver keeps each step's start and flags the path ``not-converged``. The
    # section must then give no freezing time, plateau or centre ice (None, never a number from that path),
    # carry the flag with the step time and residual, and draw or record no freezing curve.
    from planner.assessment import assess

    monkeypatch.setattr(section, "NEWTON_UPDATES", 0)
    p = protocol(GLYCEROL10, SEEDED_HOLD, "glycerol seeded at -6 C and held")
    out = section.build(p, context_for(p, ("solution", "thermal")))
    r = out.report
    nominal = [f for f in r.flags if f.code == "not-converged" and not f.message.startswith("at the ")]
    assert len(nominal) == 1 and "t = " in nominal[0].message and "J/kg is left" in nominal[0].message
    for end in ("high", "low"):  # the bracket runs' flags say which end of the h range they are about
        assert any(f.code == "not-converged" and f.message.startswith(f"at the {end} end of the h range")
                   for f in r.flags)
    assert r.freezing_time_min is None and r.freezing_time_range_min == [None, None]
    assert r.plateau_c is None and r.frozen_by_end_of_leg is None and r.centre_ice_fraction_at_leg_end is None
    assert r.curve is None and out.state is None
    assert any("did not converge" in note for note in r.notes)
    d = to_jsonable(r)
    assert d["freezing_time_min"] is None and "not-converged" in [f["code"] for f in d["flags"]]
    # the whole assessment carries the flag too, and its JSON keeps the time null
    whole = assess(p)
    assert any(f.code == "not-converged" and f.message.startswith("freezing: ") for f in whole.flags)
    assert whole.to_dict()["freezing"]["freezing_time_min"] is None


def test_the_converged_path_carries_no_convergence_flag(held):
    r = held[2].report
    assert "not-converged" not in [f.code for f in r.flags]
    assert r.freezing_time_min is not None and held[2].state is not None
