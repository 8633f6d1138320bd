"""The ``cells`` assessment section (planner.sections.cells) on invented demo protocols."""

from __future__ import annotations

import json
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from planner.assessment import default_policy, judge
from planner.errors import InputError
from planner.protocol import parse_protocol
from planner.results import to_jsonable
from planner.sections import SectionOutput
from planner.sections import cells as section

ROOT = Path(__file__).resolve().parents[1]

# Invented demo scenario for tests; not data from any lab or study.
BASE = """
schema: coldmargin/protocol-1
title: Mouse oocytes, slow freezing in 1.5 molal DMSO (invented demo)
sample: {volume_ml: 0.25, geometry: cylinder, diameter_mm: 2.0, origin: animal}
container: {kind: open, interface: exposed}
solution:
  carrier: isotonic-saline
  cryoprotectants: [{agent: dmso, molal: 1.5}]
schedule:
  start_c: 20.0
  steps:
{steps}
cells:
{cells}
"""
SLOW_FREEZE = """    - {ramp_to_c: -7.0, rate_c_per_min: 2.0}
    - {seed_ice: {at_c: -7.0}}
    - {ramp_to_c: -80.0, rate_c_per_min: 0.5}"""
OOCYTE = """  preset: mouse-oocyte
  permeability_um_per_s: {dmso: 0.2}
  permeability_activation_kj_per_mol: {dmso: 80.0}
  min_volume_fraction: 0.6
  max_volume_fraction: 1.5
  loading:
    - {carrier: isotonic-saline, cryoprotectants: [{agent: dmso, molal: 1.5}], temperature_c: 20.0, duration_min: 15}
  unloading:
    - {carrier: isotonic-saline, cryoprotectants: [{agent: dmso, molal: 0.75}], temperature_c: 20.0, duration_min: 10}
    - {carrier: isotonic-saline, temperature_c: 20.0, duration_min: 10}"""


def protocol(steps: str = SLOW_FREEZE, cells: str = OOCYTE):
    return parse_protocol(BASE.replace("{steps}", steps).replace("{cells}", cells), "test")


@pytest.fixture(scope="module")
def built() -> SectionOutput:
    return section.build(protocol(), {})


def test_no_cells_section_gives_none():
    p = parse_protocol((ROOT / "protocols" / "supercooled-open-vial.yaml").read_text(), "demo")
    assert p.cells is None
    assert section.build(p, {}) is None


def test_report_has_the_issue_keys(built):
    r = to_jsonable(built.report)
    assert r["model"] == "two-parameter"
    assert r["solution_model"] == "multisolute osmotic virial equation"  # non-ideal on both sides
    for key in ("min_volume_fraction", "max_volume_fraction", "within_tolerance", "toxicity_cost",
                "max_intracellular_supercooling_k", "flags", "suggestion", "steps", "tradeoff"):
        assert key in r
    assert 0.6 <= r["min_volume_fraction"] < 1.0 < r["max_volume_fraction"] <= 1.5
    assert r["within_tolerance"] is True
    assert r["toxicity_cost"] > 0
    assert r["cooling_applies"] is True
    assert r["cooling_rate_c_per_min"] == pytest.approx(0.5)  # the ramp after the seed step
    assert r["intracellular_nucleation_c"] == pytest.approx(-40.0)
    assert r["intracellular_ice"] in {"unlikely", "possible", "likely"}
    assert [s["stage"] for s in r["steps"]] == ["loading", "unloading", "unloading"]
    json.dumps(r, allow_nan=False)  # a record carries no NaN


def test_margins_and_policy(built):
    names = {m.name: m for m in built.margins}
    assert set(names) == {"cell_min_volume_fraction_margin", "cell_max_volume_fraction_margin",
                          "intracellular_supercooling_k"}
    r = built.report
    assert names["cell_min_volume_fraction_margin"].value == pytest.approx(r.min_volume_fraction - 0.6, abs=1e-3)
    assert names["cell_max_volume_fraction_margin"].value == pytest.approx(1.5 - r.max_volume_fraction, abs=1e-3)
    assert names["intracellular_supercooling_k"].value == pytest.approx(r.supercooling_at_nucleation_k, abs=1e-3)
    policy = default_policy()
    for name in names:
        assert name in policy, name
    # a cell past its limit is "do not proceed"
    entry = policy["cell_max_volume_fraction_margin"]
    assert judge(-0.01, entry["better"], entry["watch"], entry["stop"]) == "do-not-proceed"


def test_state_holds_the_time_series(built):
    s = built.state
    assert s.time.size == s.relative_volume.size == s.stage.size > 100
    assert np.all(np.diff(s.time) >= 0)
    assert set(s.stage.tolist()) == {"loading", "unloading"}
    assert s.intracellular_molality["dmso"].size == s.time.size
    assert s.cooling is not None and s.cooling.temperature.size > 10
    assert s.tradeoff is not None and s.tradeoff.cooling_rate.size == len(section.TRADEOFF_RATES_C_PER_MIN)


def test_flags_are_indicative_where_the_models_are(built):
    codes = {(f.code, f.source) for f in built.report.flags}
    assert ("indicative", "benson-2012") in codes
    assert ("indicative", "leibo-1978") in codes
    assert "cryoprotectant-toxicity" in built.cautions


def test_one_step_removal_past_the_limit_gets_a_suggestion():
    cells = OOCYTE.replace("max_volume_fraction: 1.5", "max_volume_fraction: 1.2")
    cells = cells.replace("""    - {carrier: isotonic-saline, cryoprotectants: [{agent: dmso, molal: 0.75}], temperature_c: 20.0, duration_min: 10}
""", "")
    out = section.build(protocol(cells=cells), {})
    r = out.report
    assert r.within_tolerance is False
    sug = r.unloading_suggestion
    assert sug is not None and sug["feasible"] is True and sug["step_count"] >= 2
    assert sug["max_volume_fraction"] <= 1.2
    assert sug["steps"][-1]["cryoprotectants"] == []
    margin = {m.name: m for m in out.margins}["cell_max_volume_fraction_margin"]
    assert margin.value < 0


def test_no_tolerance_limits_is_flagged_not_judged():
    cells = OOCYTE.replace("  min_volume_fraction: 0.6\n", "").replace("  max_volume_fraction: 1.5\n", "")
    out = section.build(protocol(cells=cells), {})
    assert out.report.within_tolerance is None
    assert any(f.code == "missing-data" and "tolerance" in f.message for f in out.report.flags)
    assert {m.name for m in out.margins} == {"intracellular_supercooling_k"}


def test_plunge_schedule_does_not_run_the_mazur_model():
    steps = """    - {ramp_to_c: 4.0, rate_c_per_min: 2.0}
    - {plunge_to_c: -196.0}"""
    out = section.build(protocol(steps=steps), {})
    assert out.report.cooling_applies is False
    assert "does not apply" in out.report.cooling_note
    assert out.report.max_intracellular_supercooling_k is None


def test_sample_cooling_rate_from_the_thermal_section():
    # a sample lagging the bath: its coldest point cools at 0.25 K/min through the liquidus range
    t = np.linspace(0.0, 20000.0, 401)
    temp = 273.15 - 0.25 / 60.0 * t
    thermal = SimpleNamespace(state=SimpleNamespace(time=t, coldest_temperature_history=temp))
    out = section.build(protocol(), {"thermal": thermal})
    assert out.report.cooling_rate_c_per_min == pytest.approx(0.25, rel=1e-3)
    assert "heat-transfer" in out.report.cooling_rate_from


def test_negative_permeability_in_the_protocol_names_the_key():
    cells = OOCYTE.replace("permeability_um_per_s: {dmso: 0.2}", "permeability_um_per_s: {dmso: -0.2}")
    with pytest.raises(InputError, match=r"cells\.permeability_um_per_s\.dmso"):
        section.build(protocol(cells=cells), {})


def test_missing_permeability_names_the_key():
    cells = OOCYTE.replace("  permeability_um_per_s: {dmso: 0.2}\n", "").replace(
        "  permeability_activation_kj_per_mol: {dmso: 80.0}\n", "")
    with pytest.raises(InputError, match=r"cells\.permeability_um_per_s\.dmso"):
        section.build(protocol(cells=cells), {})


def test_unseeded_ramp_to_minus_80_runs_the_mazur_model():
    steps = """    - {ramp_to_c: -80.0, rate_c_per_min: 1.0}"""
    out = section.build(protocol(steps=steps), {})
    assert out.report.cooling_applies is True
    assert out.report.cooling_rate_c_per_min == pytest.approx(1.0)
    # faster cooling in the trade-off leaves more supercooling
    sc = [row["max_intracellular_supercooling_k"] for row in out.report.tradeoff]
    assert all(b > a for a, b in zip(sc, sc[1:], strict=False))


def test_cooling_rate_with_ice_outside_is_taken_after_the_seed():
    # Mazur 1963 [ref:mazur-1963]: the water loss is driven by extracellular ice, so the cooling rate that
    # matters is the one after ice forms outside - here the 0.5 C/min ramp after the seed, not the 2 C/min
    # ramp before it. In a stirred bath the thin straw tracks the ramps within seconds (lumped model,
    # time constant rho c (V/A) / h of about 1 s, Incropera & DeWitt [ref:incropera-dewitt]).
    from planner.sections import thermal

    text = BASE.replace("{steps}", SLOW_FREEZE).replace("{cells}", OOCYTE)
    p = parse_protocol(text.replace("schedule:", "environment: {h_w_per_m2_k: 2000}\nschedule:", 1), "test")
    out = section.build(p, {"thermal": thermal.build(p, {})})
    assert out.report.cooling_rate_c_per_min == pytest.approx(0.5, rel=0.05)


def test_cooling_rate_ignores_a_later_pass_through_the_band():
    # cooling through the band, a long hold, then warming back through it: only the cooling pass counts
    knots = np.array([0.0, 4800.0, 4800.0 + 86400.0, 4800.0 * 1.25 + 86400.0])
    t = np.linspace(0.0, knots[-1], 20001)
    temp = np.interp(t, knots, [273.15, 233.15, 233.15, 273.15])  # 0.5 C/min down, 2 C/min back up
    thermal = SimpleNamespace(state=SimpleNamespace(time=t, coldest_temperature_history=temp))
    steps = """    - {ramp_to_c: -40.0, rate_c_per_min: 0.5}
    - {hold_h: 24}
    - {ramp_to_c: 0.0, rate_c_per_min: 2.0}"""
    out = section.build(protocol(steps=steps), {"thermal": thermal})
    assert out.report.cooling_rate_c_per_min == pytest.approx(0.5, rel=1e-3)
