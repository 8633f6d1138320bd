"""The "nucleation" assessment section on invented demo protocols (labelled as such in their files)."""

import json
import shutil
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from planner.errors import ExtrapolationWarning
from planner.protocol import load_protocol, parse_protocol
from planner.results import to_jsonable
from planner.sections import nucleation as section

ROOT = Path(__file__).resolve().parents[1]
OPEN = ROOT / "protocols" / "supercooled-open-vial.yaml"
RIGID = ROOT / "protocols" / "rigid-chamber-hold.yaml"
SLOW = ROOT / "protocols" / "slow-freeze-dmso.yaml"

# invented demo protocol: 2 mL of saline sealed under oil, held at -6 C for 72 h
SEALED = """
schema: coldmargin/protocol-1
title: Invented demo - sealed 2 mL hold at -6 C
sample: {volume_ml: 2.0, geometry: cylinder, diameter_mm: 10.0}
container: {kind: open, interface: sealed}
solution: {carrier: water}
schedule:
  start_c: 4.0
  steps:
    - {ramp_to_c: -6.0, rate_c_per_min: 0.5}
    - {hold_h: 72}
    - {ramp_to_c: 4.0, rate_c_per_min: 1.0}
"""

ISSUE_KEYS = {
    "model", "critical_radius_nm", "critical_diameter_nm", "critical_molecules", "critical_confinement_length_nm",
    "freeze_probability", "freeze_probability_interval", "homogeneous_probability", "target_probability",
    "longest_hold_h_for_target", "largest_volume_ml_for_target", "flags", "source", "parameters",
}


def build(text, context=None, base_dir=None):
    return section.build(parse_protocol(text, "demo", base_dir), context or {})


@pytest.fixture(scope="module")
def open_vial():
    return section.build(load_protocol(OPEN), {})


def test_report_has_the_issue_keys_and_serialises(open_vial):
    d = to_jsonable(open_vial.report)
    assert ISSUE_KEYS <= set(d)
    text = json.dumps(d, allow_nan=False)
    assert "NaN" not in text
    lo, hi = d["freeze_probability_interval"]
    assert 0 <= lo <= d["freeze_probability"] <= hi <= 1
    assert d["target_probability"] == 0.01
    assert [m.name for m in open_vial.margins] == ["freeze_probability", "freeze_probability_upper"]
    assert open_vial.margins[1].value == hi and open_vial.margins[0].unit == "1"


def test_defaults_are_flagged(open_vial):
    d = to_jsonable(open_vial.report)
    defaults = [f["message"] for f in d["flags"] if f["code"] == "default-used"]
    assert any("bath schedule" in m for m in defaults)
    assert any("exposed-interface" in m for m in defaults)
    assert d["nucleation_model"] == "exposed-interface"
    assert d["temperature_history"] == "bath schedule"
    assert "not a guarantee" in d["summary"]


def test_critical_sizes_at_the_coldest_point_from_the_liquidus(open_vial):
    from planner import nucleation as nuc

    r = open_vial.report
    assert r.coldest_temperature_c == -4.0
    expected = nuc.critical_nucleus(269.15, open_vial.state.liquidus)
    assert r.critical_radius_nm == pytest.approx(expected.radius * 1e9, rel=1e-3)
    assert r.critical_diameter_nm == pytest.approx(2 * r.critical_radius_nm, rel=1e-3)
    lo, hi = r.critical_radius_interval_nm
    assert lo < r.critical_radius_nm < hi


def test_rigid_chamber_gets_the_confinement_sentence():
    out = section.build(load_protocol(RIGID), {})
    assert "no protection" in out.report.confinement_note
    assert out.report.critical_confinement_length_nm > 0


def test_sealed_default_and_what_it_takes():
    out = build(SEALED)
    r = out.report
    assert r.nucleation_model == "sealed-interface"
    assert r.main_hold_c == -6.0
    assert r.longest_hold_h_for_target > 0 and r.largest_volume_ml_for_target > 0
    assert r.coldest_hold_c_for_target is not None and r.coldest_hold_c_for_target < 0
    looser = build(SEALED + "policy: {target_freeze_probability: 0.05}\n").report
    assert looser.target_probability == 0.05
    assert looser.longest_hold_h_for_target > r.longest_hold_h_for_target


def test_homogeneous_only_preset():
    r = build(SEALED + "nucleation: {preset: homogeneous-only}\n").report
    assert r.nucleation_model == "homogeneous-only"
    assert r.freeze_probability == 0.0 and r.homogeneous_probability == 0.0
    assert not any(f.code == "default-used" and "nucleation" in f.message for f in r.flags)


def test_calibration_from_the_users_assay(tmp_path):
    (tmp_path / "assays").mkdir()
    shutil.copy(ROOT / "protocols" / "assays" / "demo-saline-holds.csv", tmp_path / "assays")
    text = SEALED + "nucleation: {calibration: assays/demo-saline-holds.csv}\n"
    r = build(text, base_dir=tmp_path).report
    assert r.nucleation_kind == "fit" and r.nucleation_model.startswith("calibration:")
    # -6 C sits inside the assay's -4.5 to -8.5 C holds: no extrapolation flag
    assert not any(f.code == "extrapolated" for f in r.flags)
    with pytest.warns(ExtrapolationWarning):
        deep = build(text.replace("ramp_to_c: -6.0", "ramp_to_c: -15.0"), base_dir=tmp_path).report
    assert any(f.code == "extrapolated" for f in deep.flags)


def test_heat_transfer_history_and_solution_liquidus_are_used():
    t = np.array([0.0, 3600.0, 3600.0 * 73, 3600.0 * 75])
    y = np.array([277.15, 268.15, 268.15, 277.15])
    thermal = SimpleNamespace(state=SimpleNamespace(time=t, coldest_temperature_history=y, coldest_temperature=268.15))
    solution = SimpleNamespace(state=SimpleNamespace(properties=SimpleNamespace(freezing_point=272.6)))
    out = build(SEALED, {"thermal": thermal, "solution": solution})
    r = out.report
    assert r.temperature_history.startswith("sample's coldest point")
    assert r.liquidus_c == pytest.approx(-0.55)
    assert r.coldest_temperature_c == pytest.approx(-5.0)
    assert not any(f.code == "default-used" and "bath" in f.message for f in r.flags)
    assert not any(f.code == "missing-data" for f in r.flags)


def test_seeded_protocol_covers_until_the_seed_step():
    r = section.build(load_protocol(SLOW), {}).report
    assert "seed step" in r.covers
    assert r.coldest_temperature_c == pytest.approx(-6.0)
    assert r.critical_radius_nm is not None


def test_deep_cooling_is_cut_and_flagged():
    text = SEALED.replace("ramp_to_c: -6.0", "ramp_to_c: -80.0")
    with pytest.warns(ExtrapolationWarning):
        r = build(text).report
    assert any(f.code == "refused" for f in r.flags)
    assert "until the sample first reaches" in r.covers
    # pure water passing -38 C freezes homogeneously before the cut at 40 K of supercooling
    assert r.freeze_probability == pytest.approx(1.0)


def test_rigid_chamber_counts_every_millilitre_of_liquid_in_the_cavity():
    # In a sealed rigid chamber the whole cavity is filled with the solution; ice nucleating anywhere in it
    # pressurises the chamber, so the volume at risk is the cavity's liquid, not the biological sample's
    # share (common practice, no source). The demo: 2 mL sample in a 20 mL cavity, no gas.
    protocol = load_protocol(RIGID)
    out = section.build(protocol, {})
    r = out.report
    assert r.parameters["volume_m3"] == pytest.approx(20e-6, rel=1e-9)
    assert "20 mL" in r.summary
    # Vali 1971 [ref:vali-1971] volume scaling of a stochastic volume rate: f_V = 1 - (1 - f_ref)^(V/V_ref)
    from planner import nucleation as nuc

    st = out.state
    ref = nuc.freeze_probability(st.time, st.temperature, 2e-6, st.model, st.liquidus).probability
    assert st.result.probability == pytest.approx(1 - (1 - ref) ** 10, rel=1e-6)


def test_rigid_chamber_with_trapped_gas_has_a_liquid_gas_interface():
    # invented variation of the demo chamber: 0.5 mL of air sealed in with the liquid
    text = RIGID.read_text().replace("trapped_gas_ml: 0.0", "trapped_gas_ml: 0.5")
    r = build(text).report
    assert r.parameters["volume_m3"] == pytest.approx(19.5e-6, rel=1e-9)
    # the gas meets the liquid at least across the 25 mm bore: pi (12.5 mm)^2 (geometry, no source)
    assert r.parameters["interface_area_m2"] >= 3.14159 * 0.0125**2 * 0.999


@pytest.mark.parametrize(("p", "words"), [(0.998, "99.8 %"), (0.9999, "above 99.9 %"), (0.5, "50 %"),
                                          (0.0123, "1.2 %")])
def test_percentages_read_as_percentages(p, words):
    # plain reading of a probability (common practice, no source): never "1e+02 %"
    assert section._percent(p) == words


def test_what_it_takes_does_not_blame_the_ramps_for_the_sample_catching_up():
    # Invented demo: 1 mL in still air lags a 0.2 C/min ramp by ~4 K (time constant ~25 min), so the sample
    # spends the first couple of hours of the hold getting to -4 C. With the bath hold cut to 1 min the sample
    # never even reaches its liquidus - the ramps alone carry no risk - so a note must not say they do.
    from planner.sections import solution as solution_section
    from planner.sections import thermal

    def run(text):
        p = parse_protocol(text, "demo")
        ctx = {"solution": solution_section.build(p, {})}
        ctx["thermal"] = thermal.build(p, ctx)
        return section.build(p, ctx).report

    text = OPEN.read_text()
    short = run(text.replace("hold_h: 72", "hold_min: 1"))
    assert short.freeze_probability == 0.0
    notes = " ".join(run(text).what_it_takes_notes)
    assert "ramps and other steps alone" not in notes
    assert "catching up" in notes


def test_supercooling_policy_does_not_stop_a_published_sealed_hold():
    # Huang, Yarmush, Usta 2018 [ref:huang-2018]: sealed water up to 100 mL kept supercooled at -20 C for up to
    # 100 days - 20 K below the liquidus. The supercooling margin must not call that depth "do not proceed" on
    # its own (the freeze probability is the margin that judges the risk); deeper than the sealed preset's
    # range it may.
    from planner import nucleation as nuc
    from planner.assessment import default_policy, judge

    entry = default_policy()["supercooling_k"]
    assert judge(20.0, entry["better"], entry["watch"], entry["stop"]) == "watch"
    deepest = nuc.preset("sealed-interface").supercooling_range.high
    assert judge(deepest + 0.5, entry["better"], entry["watch"], entry["stop"]) == "do-not-proceed"
