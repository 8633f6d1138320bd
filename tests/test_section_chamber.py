"""The ``chamber`` assessment section on the demo protocols and variants of them."""

import json
from pathlib import Path
from types import SimpleNamespace

import pytest

from planner import isochoric as iso
from planner import solution as sol
from planner import wall
from planner import water_ice as wi
from planner.assessment import assess, caution_catalogue, default_policy
from planner.errors import InputError
from planner.protocol import parse_protocol
from planner.references import bibliography
from planner.results import to_jsonable
from planner.sections import chamber
from planner.sections import solution as solution_section

ROOT = Path(__file__).resolve().parents[1]
# The rigid demo with a 316 stainless chamber of 25 mm bore and 45 mm outside: too weak for the worst case.
RIGID = (
    (ROOT / "protocols" / "rigid-chamber-hold.yaml").read_text()
    .replace("material: stainless-17-4ph-h1150", "material: stainless-316")
    .replace("outer_diameter_mm: 55.0", "outer_diameter_mm: 45.0")
)
assert "stainless-316" in RIGID and "outer_diameter_mm: 45.0" in RIGID
OPEN = (ROOT / "protocols" / "supercooled-open-vial.yaml").read_text()


def _build(text, context=None):
    p = parse_protocol(text)
    ctx = {"solution": solution_section.build(p, {})} if context is None else context
    return p, chamber.build(p, ctx)


@pytest.fixture(scope="module")
def rigid():
    return _build(RIGID)


def test_rigid_report_keys_and_numbers(rigid):
    p, out = rigid
    d = to_jsonable(out.report)
    for key in ("kind", "pressure_if_frozen_mpa", "ice_mass_fraction_if_frozen", "ice_volume_fraction_if_frozen",
                "liquid_osmolality_if_frozen_osmol_per_kg", "hoop_stress_mpa", "von_mises_mpa", "safety_factor",
                "worst_case", "recalescence_ice_fraction", "flags"):
        assert key in d, key
    assert d["kind"] == "rigid" and d["temperature_c"] == -4.0
    # the section's numbers are those of the domain modules at the coldest point
    comp = sol.composition("isotonic-saline", [("glycerol", "mass_percent", 10.0)])
    v, m = iso.solute_volume_and_mass(comp)
    c = p.container
    beta = wall.cylinder_compliance(c.inner_diameter / 2, c.outer_diameter / 2, 193e9, 0.27)
    fill = iso.make_fill(277.15, compliance=beta, solute_volume=v, solute_mass=m)
    st = iso.isochoric_state(269.15, fill, iso.liquid_from_composition(comp))
    assert d["pressure_if_frozen_mpa"] == pytest.approx(st.pressure / 1e6, rel=1e-3)
    assert d["ice_mass_fraction_if_frozen"] == pytest.approx(st.ice_mass_fraction, abs=1e-3)
    s = wall.cylinder_stresses(st.pressure - wi.STANDARD_PRESSURE, c.inner_diameter / 2, c.outer_diameter / 2)
    assert d["von_mises_mpa"] == pytest.approx(s.von_mises / 1e6, rel=1e-3)
    assert d["safety_factor"] == pytest.approx(205e6 / s.von_mises, rel=2e-3)
    assert d["worst_case"]["temperature_c"] == -21.985
    assert d["worst_case"]["pressure_mpa"] == pytest.approx(208.566, abs=0.01)  # R14-08 [ref:iapws-r14-08]
    json.dumps(d, allow_nan=False)


def test_rigid_margins_have_policy_entries(rigid):
    _, out = rigid
    names = [m.name for m in out.margins]
    assert names == ["chamber_safety_factor", "chamber_worst_case_safety_factor"]
    policy = default_policy()
    for n in names:
        entry = policy[n]
        assert entry["better"] == "higher" and entry["stop"] < entry["watch"]
        assert entry["source"] in bibliography()


def test_demo_chamber_fails_the_worst_case(rigid):
    # 316 stainless (205 MPa minimum yield), 25 mm bore, 45 mm outside: von Mises at 208.6 MPa is
    # sqrt(3) p b2/(b2 - a2) = 522 MPa, so the wall would yield in the fault case [ref:lame-timoshenko]
    _, out = rigid
    worst = next(m for m in out.margins if m.name == "chamber_worst_case_safety_factor")
    assert worst.value == pytest.approx(205 / (3**0.5 * 208.465 * 22.5**2 / (22.5**2 - 12.5**2)), rel=2e-3)
    assert worst.value < 1.0
    needed = {n["case"]: n for n in out.report.outer_diameter_needed_mm}
    assert needed["worst_case"]["outer_diameter_mm"] is None and needed["planned"]["outer_diameter_mm"] > 25.0


def test_open_container_comparison_and_rise_ratio(rigid):
    _, out = rigid
    cmp = out.report.open_container
    assert cmp["concentration_rise_open_over_rigid"] > 3.0  # [ref:rubinsky-perez-carlson-2005]
    assert cmp["liquid_osmolality_osmol_per_kg"] > out.report.liquid_osmolality_if_frozen_osmol_per_kg


def test_rigid_cautions_in_the_catalogue_and_shown():
    catalogue = caution_catalogue()
    rigid_ids = [k for k, v in catalogue.items() if v["applies"] == "rigid"]
    assert {"rigid-pressure-rating", "rigid-hydrostatic-test", "rigid-no-trapped-gas", "rigid-shielding",
            "rigid-fatigue", "rigid-engineer"} <= set(rigid_ids)
    for k in rigid_ids + ["trapped-gas"]:
        assert catalogue[k]["source"] in bibliography()
    d = assess(parse_protocol(RIGID)).to_dict()
    shown = {c["id"] for c in d["cautions"]}
    assert set(rigid_ids) <= shown and "trapped-gas" not in shown
    assert "chamber" in d and d["chamber"]["kind"] == "rigid"
    json.dumps(d, allow_nan=False)
    d_open = assess(parse_protocol(OPEN)).to_dict()
    assert not set(rigid_ids) & {c["id"] for c in d_open["cautions"]}


def test_trapped_gas_raises_caution_and_more_ice(rigid):
    _, base = rigid
    p, out = _build(RIGID.replace("trapped_gas_ml: 0.0", "trapped_gas_ml: 0.5"))
    assert "trapped-gas" in out.cautions
    assert any(f.code == "indicative" and "gas" in f.message for f in out.report.flags)
    assert out.report.ice_mass_fraction_if_frozen > base.report.ice_mass_fraction_if_frozen
    assert out.report.pressure_if_frozen_mpa < base.report.pressure_if_frozen_mpa
    d = assess(p).to_dict()
    assert "trapped-gas" in {c["id"] for c in d["cautions"]}


def test_compliance_override_is_used():
    text = RIGID.replace("trapped_gas_ml: 0.0", "trapped_gas_ml: 0.0\n  cavity_compliance_per_gpa: 0.5")
    _, out = _build(text)
    assert out.report.cavity_compliance_per_gpa == pytest.approx(0.5)
    assert "given in the protocol" in out.report.compliance_basis


def test_coldest_point_read_from_thermal_section():
    p = parse_protocol(RIGID)
    ctx = {"solution": solution_section.build(p, {}),
           "thermal": SimpleNamespace(state=SimpleNamespace(coldest_temperature=270.15))}
    out = chamber.build(p, ctx)
    assert out.report.temperature_c == -3.0 and "heat-transfer" in out.report.temperature_basis


def test_without_solution_section_builds_the_composition(rigid):
    p = parse_protocol(RIGID)
    out = chamber.build(p, {})
    assert out.report.pressure_if_frozen_mpa == rigid[1].report.pressure_if_frozen_mpa


def test_warm_rigid_chamber_judges_only_the_worst_case():
    text = RIGID.replace("{ramp_to_c: -4.0, rate_c_per_min: 0.5}", "{ramp_to_c: 3.0, rate_c_per_min: 0.5}")
    _, out = _build(text)
    assert out.report.frozen_at_equilibrium is False and out.report.worst_case["safety_factor"] < 1.0
    assert out.margins[0].value is None and out.margins[1].value is not None


def test_above_liquidus_reports_liquid_only_pressure():
    text = RIGID.replace("{ramp_to_c: -4.0, rate_c_per_min: 0.5}", "{ramp_to_c: -1.0, rate_c_per_min: 0.5}")
    _, out = _build(text)
    assert out.report.frozen_at_equilibrium is False and out.report.ice_mass_fraction_if_frozen == 0.0
    assert any(f.code == "refused" and "liquidus" in f.message for f in out.report.flags)


def test_open_container_section():
    p, out = _build(OPEN)
    d = to_jsonable(out.report)
    assert d["kind"] == "open" and d["pressure_if_frozen_mpa"] is None and out.margins == []
    comp = solution_section.build(p, {}).state.composition
    fc = sol.freeze_concentration(comp, p.schedule.coldest_temperature)
    assert d["ice_mass_fraction_if_frozen"] == pytest.approx(float(fc.ice_mass_fraction), abs=1e-3)
    assert 0 < d["recalescence_ice_fraction"] < 0.2
    json.dumps(d, allow_nan=False)


def test_heat_transfer_coldest_below_triple_point_refused_with_field():
    p = parse_protocol(RIGID)
    ctx = {"thermal": SimpleNamespace(state=SimpleNamespace(coldest_temperature=250.0))}
    with pytest.raises(InputError, match=r"schedule\.steps"):
        chamber.build(p, ctx)


def test_protocol_loader_refuses_rigid_schedule_below_triple_point():
    text = RIGID.replace("{ramp_to_c: -4.0, rate_c_per_min: 0.5}", "{ramp_to_c: -22.5, rate_c_per_min: 0.5}")
    with pytest.raises(InputError, match=r"schedule\.steps\[0\]"):
        parse_protocol(text)
    assert wi.TRIPLE_POINT_IH_III_TEMPERATURE - 273.15 == pytest.approx(-21.985)


def test_sphere_chamber_and_contents_at_the_triple_point():
    text = RIGID.replace("  material: stainless-316", "  material: titanium-6al-4v\n  shape: sphere")
    _, out = _build(text)
    r = out.report
    assert r.shape == "sphere" and r.material == "titanium-6al-4v"
    s = wall.sphere_stresses(208.566e6 - wi.STANDARD_PRESSURE, 0.0125, 0.0225)
    assert r.worst_case["von_mises_mpa"] == pytest.approx(s.von_mises / 1e6, rel=1e-3)
    assert r.worst_case["safety_factor"] == pytest.approx(828e6 / s.von_mises, rel=2e-3)
    # the solution itself stays below the design pressure at -21.985 C and has frozen further
    assert r.worst_case["contents_pressure_mpa"] < 208.566
    assert r.worst_case["contents_ice_mass_fraction"] > r.ice_mass_fraction_if_frozen


def test_margins_judged_in_the_assessment():
    d = assess(parse_protocol(RIGID)).to_dict()
    states = {m["name"]: m for m in d["margin_states"]}
    assert states["chamber_worst_case_safety_factor"]["state"] == "do-not-proceed"  # 0.39 < 1.0
    assert states["chamber_safety_factor"]["state"] == "fine"  # 6.9 > 3.0


def test_sphere_chamber_is_described_as_a_sphere():
    # a thick sphere has no ends and no axis: its two tangential stresses are equal, the bore value being
    # p (b^3 + 2 a^3) / (2 (b^3 - a^3)) (Timoshenko & Goodier [ref:lame-timoshenko], thick sphere)
    text = RIGID.replace("  material: stainless-316", "  material: titanium-6al-4v\n  shape: sphere")
    _, out = _build(text)
    r = out.report
    assert "closed ends" not in r.compliance_basis and "sphere" in r.compliance_basis
    assert r.axial_stress_mpa is None
    p = r.pressure_if_frozen_mpa - 0.101325
    a, b = 0.0125, 0.0225
    assert r.hoop_stress_mpa == pytest.approx(p * (b**3 + 2 * a**3) / (2 * (b**3 - a**3)), rel=2e-3)


def test_a_needed_wall_near_the_elastic_limit_says_so():
    # Lamé [ref:lame-timoshenko]: bore von Mises of a thick sphere = 3 p b^3 / (2 (b^3 - a^3)) -> 1.5 p as b grows.
    # Invented variation: titanium sphere of isotonic saline at -20 C (about 184 MPa): a factor of 3 on
    # 828 MPa needs 1.5 p ~ 276 MPa, just inside the limit, so the wall needed is huge.
    text = (RIGID.replace("  material: stainless-316", "  material: titanium-6al-4v\n  shape: sphere")
            .replace("ramp_to_c: -4.0", "ramp_to_c: -20.0")
            .replace("  cryoprotectants:\n    - {agent: glycerol, mass_percent: 10.0}\n", ""))
    assert "agent: glycerol" not in text
    _, out = _build(text)
    assert out.report.pressure_if_frozen_mpa == pytest.approx(184, abs=3)
    planned = next(n for n in out.report.outer_diameter_needed_mm if n["case"] == "planned")
    assert planned["outer_diameter_mm"] > 4 * 25.0
    assert "elastic limit" in planned["note"]
    worst = next(n for n in out.report.outer_diameter_needed_mm if n["case"] == "worst_case")
    assert worst["outer_diameter_mm"] < 4 * 25.0 and worst["note"] == ""
