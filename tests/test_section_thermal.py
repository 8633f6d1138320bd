"""The ``thermal`` assessment section: protocol in, lags, hold times and the sample's histories out.

Every protocol here is an invented scenario for the test, not data from any lab or study.
"""

import dataclasses
import json

import numpy as np
import pytest

from planner import heat_transfer as ht
from planner.errors import InputError
from planner.protocol import Environment, parse_protocol
from planner.results import to_jsonable
from planner.sections import thermal


def _protocol(sample: str, steps: str, environment: str = "", solution: str = "carrier: water"):
    text = f"""
schema: coldmargin/protocol-1
title: invented test scenario
sample: {{{sample}}}
container: {{kind: open}}
solution: {{{solution}}}
{environment}
schedule:
  start_c: 4.0
  steps:
{steps}
"""
    return parse_protocol(text, "test")


VIAL = "volume_ml: 1.0, geometry: cylinder, diameter_mm: 10.0"
TUBE_20ML = "volume_ml: 20.0, geometry: cylinder, diameter_mm: 25.0"
COOL_HOLD_WARM = """    - {ramp_to_c: -4.0, rate_c_per_min: 0.5}
    - {hold_h: 12}
    - {ramp_to_c: 4.0, rate_c_per_min: 1.0}"""


def test_default_environment_is_still_air_and_flagged():
    out = thermal.build(_protocol(VIAL, COOL_HOLD_WARM), {})
    rep = out.report
    assert rep.environment == "still-air" and rep.h_w_per_m2_k == 5.0
    assert any(f.code == "default-used" and "still air" in f.message for f in rep.flags)
    assert rep.model == "lumped" and rep.biot_number < 0.1


def test_lumped_section_numbers_follow_the_exact_exponential():
    """Lumped sample, 0.5 K/min for 8 K then a hold: lag B tau (1 - e^(-t/tau)), hold time tau ln(lag/0.5)."""
    out = thermal.build(_protocol(VIAL, COOL_HOLD_WARM, "environment: {heat_transfer: forced-air}"), {})
    rep, state = out.report, out.state
    assert rep.model == "lumped"
    mat = ht.liquid_water(273.15 - 4.0, warn=False)  # properties at the coldest bath temperature
    body = thermal.body_of(_protocol(VIAL, COOL_HOLD_WARM).sample)
    tau = float(ht.lumped_time_constant(mat.volumetric_heat_capacity, body.volume, 25.0, body.area))
    rate, t_ramp = 0.5 / 60.0, 8.0 / (0.5 / 60.0)
    lag_end = rate * tau * -np.expm1(-t_ramp / tau)
    assert rep.ramps[0]["max_lag_k"] == pytest.approx(lag_end, abs=2e-3)
    assert rep.holds[0]["time_to_within_0p5k_min"] == pytest.approx(tau * np.log(lag_end / 0.5) / 60, abs=0.01)
    assert rep.time_constant_min == pytest.approx(tau / 60, abs=0.01)
    assert state.coldest_temperature == pytest.approx(273.15 - 4.0, abs=1e-6)
    assert rep.time_to_within_0p5k_range_min[0] < rep.holds[0]["time_to_within_0p5k_min"] < (
        rep.time_to_within_0p5k_range_min[1])


def test_large_sample_in_a_bath_uses_conduction_and_fills_the_state():
    out = thermal.build(_protocol(TUBE_20ML, COOL_HOLD_WARM, "environment: {heat_transfer: stirred-bath}"), {})
    rep, st = out.report, out.state
    assert rep.model == "conduction" and rep.biot_number > 0.1
    n = st.time.size
    for name in ("bath_temperature", "centre_temperature", "surface_temperature", "coldest_temperature_history",
                 "warmest_temperature_history", "h"):
        assert getattr(st, name).shape == (n,), name
    assert np.all(np.diff(st.time) >= 0)
    assert st.coldest_temperature >= st.bath_temperature.min() - 1e-9  # never colder than the bath
    assert st.warmest_temperature <= st.bath_temperature.max() + 1e-9
    assert np.all(st.coldest_temperature_history <= st.centre_temperature + 1e-12)
    assert rep.coldest_point_min_c == pytest.approx(st.coldest_temperature - 273.15, abs=1e-3)
    # on cooling the centre lags the surface
    i = np.searchsorted(st.time, 0.9 * 16 * 60)
    assert st.centre_temperature[i] > st.surface_temperature[i] > st.bath_temperature[i]


def test_lag_report_and_margin():
    out = thermal.build(_protocol(TUBE_20ML, COOL_HOLD_WARM), {})
    rep = out.report
    assert rep.max_lag_k == max(r["max_lag_k"] for r in rep.ramps)
    low_h_lag, high_h_lag = rep.max_lag_range_k[1], rep.max_lag_range_k[0]
    assert high_h_lag < rep.max_lag_k < low_h_lag
    (margin,) = out.margins
    assert margin.name == "thermal_lag_k" and margin.value == rep.max_lag_k and margin.unit == "K"
    from planner.assessment import default_policy

    entry = default_policy()["thermal_lag_k"]
    assert entry["better"] == "lower" and entry["watch"] < entry["stop"]


def test_hold_never_reached_is_reported():
    steps = """    - {ramp_to_c: -4.0, rate_c_per_min: 5.0}
    - {hold_min: 5}"""
    out = thermal.build(_protocol(TUBE_20ML, steps), {})
    hold = out.report.holds[0]
    assert hold["reached"] is False and hold["time_to_within_0p5k_min"] is None
    assert hold["deviation_at_end_k"] > 0.5
    assert any(f.code == "missing-data" and "schedule.steps[1]" in f.message for f in out.report.flags)


def test_plunge_changes_the_surroundings():
    steps = """    - {ramp_to_c: -20.0, rate_c_per_min: 1.0}
    - {plunge_to_c: -196.0, heat_transfer: ln2-immersion}
    - {hold_min: 30}"""
    out = thermal.build(_protocol(VIAL, steps, "environment: {heat_transfer: forced-air}"), {})
    rep, st = out.report, out.state
    assert [e["environment"] for e in rep.environments] == ["forced-air", "ln2-immersion"]
    assert rep.environments[1]["step"] == 1 and rep.environments[1]["from_min"] == pytest.approx(24.0)
    assert set(np.unique(st.h)) == {25.0, 100.0}
    assert any(f.code == "extrapolated" for f in rep.flags)  # -196 C is beyond the liquid property table
    rates = ht.cooling_rate_through(st.history, 273.15 - 60, 273.15 - 120)
    assert rates.cooling_rate is not None and rates.cooling_rate > 0


def test_seed_step_refuses_what_follows():
    steps = """    - {ramp_to_c: -5.0, rate_c_per_min: 1.0}
    - {seed_ice: {at_c: -5.0}}
    - {ramp_to_c: -40.0, rate_c_per_min: 1.0}
    - {hold_h: 1}"""
    out = thermal.build(_protocol(VIAL, steps), {})
    rep = out.report
    assert rep.ramps[0]["max_lag_k"] is not None and rep.ramps[1]["max_lag_k"] is None
    assert rep.holds[0]["time_to_within_0p5k_min"] is None
    assert any(f.code == "refused" and "seeded" in f.message for f in rep.flags)
    assert out.state.frozen_from == pytest.approx(9 * 60.0)
    assert rep.max_lag_k == rep.ramps[0]["max_lag_k"]


def test_report_is_json():
    out = thermal.build(_protocol(VIAL, COOL_HOLD_WARM, solution="carrier: isotonic-saline, cryoprotectants: "
                                  "[{agent: dmso, percent_v_v: 10.0}]"), {})
    text = json.dumps(to_jsonable(out.report), allow_nan=False)
    doc = json.loads(text)
    for key in ("model", "biot_number", "max_lag_k", "time_to_within_0p5k_min", "coldest_point_min_c",
                "warmest_point_max_c", "environment", "h_w_per_m2_k", "holds", "ramps", "flags"):
        assert key in doc, key
    assert any(f["code"] == "indicative" for f in doc["flags"])  # water properties for a DMSO solution


def test_bad_environment_h_names_the_key():
    p = _protocol(VIAL, COOL_HOLD_WARM)
    bad = dataclasses.replace(p, environment=Environment(h=-5.0))
    with pytest.raises(InputError, match=r"environment\.h_w_per_m2_k"):
        thermal.build(bad, {})


def test_unknown_plunge_preset_names_the_step():
    steps = """    - {ramp_to_c: -20.0, rate_c_per_min: 1.0}
    - {plunge_to_c: -196.0, heat_transfer: ln2-immersion}"""
    p = _protocol(VIAL, steps)
    plunge = dataclasses.replace(p.schedule.steps[1], heat_transfer="ln2-imersion")
    bad = dataclasses.replace(p, schedule=dataclasses.replace(p.schedule, steps=(p.schedule.steps[0], plunge)))
    with pytest.raises(InputError, match=r"schedule\.steps\[1\]\.heat_transfer.*did you mean 'ln2-immersion'"):
        thermal.build(bad, {})


def test_cylinder_whose_diameter_and_volume_disagree_is_refused():
    """Loader check the heat-transfer model relies on (the body must be the sample's own)."""
    with pytest.raises(InputError, match=r"sample\.diameter_mm"):
        _protocol("volume_ml: 1.0, geometry: cylinder, diameter_mm: 10.0, height_mm: 30.0", COOL_HOLD_WARM)


def test_hold_before_any_ramp_is_refused():
    with pytest.raises(InputError, match=r"schedule\.steps\[0\]\.hold_h"):
        _protocol(VIAL, "    - {hold_h: 1}")


def test_sphere_and_slab_samples():
    sphere = thermal.build(_protocol("volume_ml: 5.0, geometry: sphere", COOL_HOLD_WARM,
                                     "environment: {h_w_per_m2_k: 400}"), {})
    slab = thermal.build(_protocol("volume_ml: 50.0, geometry: slab, thickness_mm: 5.0", COOL_HOLD_WARM,
                                   "environment: {heat_transfer: stirred-bath}"), {})
    assert sphere.report.geometry == "sphere" and sphere.report.environment == "given"
    assert sphere.report.h_range_w_per_m2_k == [400.0, 400.0]
    assert slab.report.geometry == "slab"
    for out in (sphere, slab):
        assert out.report.max_lag_k is not None and out.report.holds[0]["reached"]


def test_rigid_chamber_wall_left_out_is_flagged():
    # The sample sits in a sealed chamber full of liquid inside a thick metal wall; both add heat capacity
    # and resistance between bath and sample that the sample-only model leaves out, so the lag shown is a
    # lower bound (common practice, no source). Invented demo scenario.
    from pathlib import Path

    from planner.protocol import load_protocol

    protocol = load_protocol(Path(__file__).resolve().parents[1] / "protocols" / "rigid-chamber-hold.yaml")
    out = thermal.build(protocol, {})
    msgs = [f.message for f in out.report.flags if f.code == "indicative"]
    assert any("chamber" in m and "wall" in m and "lower bound" in m for m in msgs)
    open_vial = thermal.build(_protocol(VIAL, COOL_HOLD_WARM), {})
    assert not any("chamber" in f.message for f in open_vial.report.flags)


def test_rigid_chamber_lumped_lag_by_hand():
    # The demo chamber (invented): 17-4PH, bore 25 mm, outside 55 mm, 20 mL cavity, stirred bath h = 150.
    # By hand, lumped capacitance (Incropera & DeWitt [ref:incropera-dewitt], Sec. 5.3; steel rho c from
    # Table A.1, from memory: 7780 kg/m3 x 460 J/(kg K)):
    #   cavity length 20e-6 / (pi 0.0125^2) = 40.74 mm; body length 40.74 + 2 x 15 = 70.74 mm
    #   wall volume pi 0.0275^2 x 0.07074 - 20e-6 = 148.1 mL -> 7780 x 460 x 148.1e-6 = 529.9 J/K
    #   liquid 20 mL x 999.4 x 4236 = 84.7 J/K; outer area 2 pi 0.0275 x 0.07074 + 2 pi 0.0275^2 = 169.7 cm2
    #   tau = 614.6 / (150 x 0.01697) = 241 s = 4.02 min
    #   warming ramp 1 C/min for 8 min: lag = B tau (1 - exp(-t/tau)) = 0.01667 x 241 x 0.8636 = 3.47 K
    #   (the cooling ramp, 0.5 C/min for 16 min, lags less: 0.00833 x 241 x 0.981 = 1.97 K)
    from pathlib import Path

    from planner.protocol import load_protocol

    protocol = load_protocol(Path(__file__).resolve().parents[1] / "protocols" / "rigid-chamber-hold.yaml")
    out = thermal.build(protocol, {})
    r = out.report
    assert r.chamber_heat_capacity_j_per_k == pytest.approx(614.6, rel=5e-3)
    assert r.chamber_time_constant_min == pytest.approx(4.02, rel=5e-3)
    assert r.chamber_max_lag_k == pytest.approx(3.47, rel=5e-3)
    assert r.chamber_max_lag_k > r.max_lag_k
    margin = next(m for m in out.margins if m.name == "thermal_lag_k")
    assert margin.value == r.chamber_max_lag_k and "rigid chamber" in margin.detail
    lo, hi = r.chamber_max_lag_range_k
    assert lo < r.chamber_max_lag_k < hi


def test_lumped_lag_function_scalar_limits():
    # long ramp: the lag tends to B tau; short ramp: to B t (Incropera & DeWitt [ref:incropera-dewitt], lumped)
    assert thermal.chamber_lumped_lag(0.01, 1e6, 100.0) == pytest.approx(1.0, rel=1e-9)
    assert thermal.chamber_lumped_lag(0.01, 1.0, 1e6) == pytest.approx(0.01, rel=1e-5)


def test_record_carries_a_thinned_temperature_curve_cut_at_the_seed():
    from pathlib import Path

    from planner.protocol import load_protocol

    root = Path(__file__).resolve().parents[1] / "protocols"
    out = thermal.build(load_protocol(root / "rigid-chamber-hold.yaml"), {})
    c = out.report.curve
    assert len(c["time_h"]) == len(c["bath_c"]) == len(c["coldest_point_c"]) <= 80
    # the bath program itself: starts at 4 C, reaches the -4 C hold, ends back at 4 C (the protocol file)
    assert c["bath_c"][0] == pytest.approx(4.0) and min(c["bath_c"]) == pytest.approx(-4.0, abs=1e-6)
    seeded = thermal.build(load_protocol(root / "slow-freeze-dmso.yaml"), {})
    assert seeded.state.frozen_from is not None
    assert seeded.report.curve["time_h"][-1] <= seeded.state.frozen_from / 3600.0 + 1e-4
