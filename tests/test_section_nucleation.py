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
