"""Membrane transport, loading/unloading, toxicity cost and the Mazur model (planner.cells).

Every published check names its source beside it. Closed forms hold exactly in the dilute (van 't Hoff)
limit, so the transport equations are checked there with :class:`DiluteSolution`; the assessment's
non-ideal model (:class:`VirialSolution`) is checked against direct evaluation of the solution module
and against the same published observations.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from planner import cells as c
from planner import solution as solmod
from planner.errors import InputError
from planner.protocol import CELSIUS_OFFSET, Cells, Cryoprotectant, Solution
from planner.references import bibliography

DILUTE = c.DiluteSolution()


@pytest.fixture(scope="module")
def virial():
    return c.VirialSolution()


def saline(**agents_molal) -> Solution:
    return Solution("isotonic-saline", tuple(Cryoprotectant(a.replace("_", "-"), "molal", v)
                                             for a, v in agents_molal.items()))


def sperm() -> c.CellParameters:
    return c.resolve_cell(Cells(preset="human-sperm"))


def oocyte(**overrides) -> c.CellParameters:
    return c.resolve_cell(Cells(preset="mouse-oocyte", **overrides))


# --- units -------------------------------------------------------------------------------------------------
def test_lp_unit_conversion_from_first_principles():
    # 1 um = 1e-6 m, 1 min = 60 s, 1 atm = 101325 Pa (exact, SI definition of the standard atmosphere);
    # the cryobiology conversion 1 um min-1 atm-1 = 1.645e-13 m Pa-1 s-1 (Mazur 1963 usage, REFERENCES §5)
    assert c.UM_PER_MIN_ATM == pytest.approx(1e-6 / 60.0 / 101325.0, rel=1e-15)
    assert round(c.UM_PER_MIN_ATM, 16) == pytest.approx(1.645e-13, abs=5e-17)


def test_leibo_1980_preset_lp_converts_to_si():
    # Leibo 1980 (abstract): unfertilized mouse ova L_p = 0.44 um/(min atm) at 20 C, E_a 14.5 kcal/mol
    cell = oocyte()
    assert cell.hydraulic_conductivity / c.UM_PER_MIN_ATM == pytest.approx(0.44, abs=5e-3)
    assert cell.hydraulic_activation_energy / 4184.0 == pytest.approx(14.5, abs=0.05)
    assert cell.reference_temperature == pytest.approx(293.15)


# --- Arrhenius ---------------------------------------------------------------------------------------------
def test_arrhenius_scalar_and_array():
    ea = 50e3
    assert float(c.arrhenius(2.0, ea, 300.0, 300.0)) == pytest.approx(2.0)
    t = np.array([280.0, 300.0, 320.0])
    out = c.arrhenius(2.0, ea, t, 300.0)
    assert out.shape == (3,)
    assert np.all(np.diff(out) > 0)
    # ratio between two temperatures: exp(Ea/R (1/T1 - 1/T2)), computed by hand: 50 kJ/mol, 280 vs 300 K
    assert out[0] / out[1] == pytest.approx(math.exp(-50e3 / 8.314462618 * (1 / 280 - 1 / 300)), rel=1e-12)


@pytest.mark.parametrize(
    ("temperature_c", "published_cm_per_min", "sd"),
    [(0.0, 1.1e-4, 0.3e-4), (10.0, 2.1e-4, 0.4e-4)],
    ids=["du-1994-0C", "du-1994-10C"],
)
def test_glycerol_permeability_arrhenius_against_du_1994(temperature_c, published_cm_per_min, sd):
    # Du, Kleinhans, Mazur, Critser 1994 (abstract): human sperm glycerol P in 2 M glycerol,
    # 6.0e-4 cm/min at 20 C, (2.1 +- 0.4)e-4 at 10 C, (1.1 +- 0.3)e-4 at 0 C, E_a 11.6 kcal/mol.
    # The preset's Arrhenius line from 20 C must land within 2.5 SD of the measured means.
    cell = sperm()
    p = float(cell.permeability_at("glycerol", temperature_c + CELSIUS_OFFSET)) * 100 * 60  # m/s -> cm/min
    assert abs(p - published_cm_per_min) <= 2.5 * sd


# --- Boyle-van 't Hoff ---------------------------------------------------------------------------------------
def test_boyle_van_t_hoff_closed_form_scalar_and_array():
    # Kleinhans 1998: V/V_iso = v_b + (1 - v_b) pi_iso/pi. Litkouhi et al. 1997 exposed ICR oocytes
    # (v_b 24.7 %) from 288 to 900 mOsm NaCl: 0.247 + 0.753 * 288/900 = 0.488 (hand calculation)
    assert float(c.boyle_van_t_hoff(0.900, 0.288, 0.247)) == pytest.approx(0.488, abs=5e-4)
    out = c.boyle_van_t_hoff(np.array([0.144, 0.288, 0.576]), 0.288, 0.247)
    assert out == pytest.approx([1.753, 1.0, 0.6235], abs=5e-4)


def test_boyle_van_t_hoff_refuses_impossible_input():
    with pytest.raises(ValueError, match="osmolality"):
        c.boyle_van_t_hoff(0.0, 0.29, 0.2)
    with pytest.raises(ValueError, match="inactive_fraction"):
        c.boyle_van_t_hoff(0.5, 0.29, 0.99)


@pytest.mark.parametrize("sucrose_molal", [0.1, 0.3, 0.6])
def test_two_parameter_equilibrium_is_boyle_van_t_hoff_in_non_permeating_solute(sucrose_molal):
    # Kleinhans 1998: with non-permeating solute only, the two-parameter model must relax to the
    # Boyle-van 't Hoff volume at the outside osmolality (dilute limit: pi = 0.29 + m_sucrose).
    cell = sperm()
    step = c.PlannedStep("loading", 0, saline(sucrose=sucrose_molal), 295.15, 120.0)
    h = c.simulate_steps(cell, [step], DILUTE)
    expected = float(c.boyle_van_t_hoff(0.29 + sucrose_molal, 0.29, cell.inactive_fraction))
    assert h.steps[0].end_volume_fraction == pytest.approx(expected, rel=1e-5)
    assert h.min_volume_fraction == pytest.approx(expected, rel=1e-5)  # monotone shrinking
    assert h.steps[0].equilibrated


# --- two-parameter model: equilibria and mass balance ----------------------------------------------------------
def test_two_parameter_equilibrium_with_permeating_agent():
    # Kleinhans 1998: at equilibrium the permeating agent has the same molality inside and out and the
    # water volume returns to isotonic (the carrier is isotonic); the cell volume grows by the agent's
    # own volume, (1 - v_b) * rho_w * m * v_agent (apparent molar volume from the solution module).
    cell = sperm()
    step = c.PlannedStep("loading", 0, saline(glycerol=1.0), 295.15, 3600.0)
    h = c.simulate_steps(cell, [step], DILUTE)
    end = h.end_state
    assert end.water_ratio == pytest.approx(1.0, rel=1e-5)
    assert end.molality()[0] == pytest.approx(1.0, rel=1e-5)
    v_glycerol = solmod.agent_data("glycerol").apparent_molar_volume(0.0)
    expected = cell.inactive_fraction + (1 - cell.inactive_fraction) * (1 + 1000.0 * 1.0 * v_glycerol)
    assert h.steps[0].end_volume_fraction == pytest.approx(expected, rel=1e-6)


class _AllPermeating:
    """A membrane test case with no impermeant solute inside (Katkov 2000's all-permeating system)."""

    name = "all-permeating dilute test case"
    source = "katkov-2000"

    def __init__(self, outside):
        self._outside = outside

    def isotonic_osmolality(self):
        return 0.29

    def outside(self, solution, field):
        return c.Outside(sum(self._outside.values()), dict(self._outside))

    def inside_osmolality(self, water_ratio, molality, agents):
        return float(sum(molality))


def test_katkov_2000_invariant_and_final_volume():
    # Katkov 2000 (abstract): with every solute permeating, W[1 + LpRT sum(M_i/P_i)] is conserved, so
    # the final water volume is W_0 [1 + LpRT sum(M0_i/P_i)] / [1 + LpRT sum(Mf_i/P_i)] with Mf_i the outside
    # values. Constant area, constant temperature, M_i as osmolarity rho_w * m_i.
    cell = c.CellParameters("katkov test cell", 1e-15, 5e-10, 0.3, 1.0 * c.UM_PER_MIN_ATM, 0.0, 293.15,
                            {"dmso": 1e-7, "glycerol": 2e-8}, {}, {}, area_exponent=0.0)
    agents = ("dmso", "glycerol")
    model = _AllPermeating({"dmso": 0.2, "glycerol": 0.6})
    start = c.CellState(1.0, (0.25, 0.04))  # 0.29 osmol/kg inside at x = 1
    transport = c._Transport(cell, model, agents)
    lp, ps = transport.rates(293.15)
    k = lp * c.GAS_CONSTANT * 293.15 * c.WATER_DENSITY
    step = c.PlannedStep("loading", 0, Solution("water"), 293.15, 4000.0)
    h = c.simulate_steps(cell, [step], model, agents, start)
    invariant0 = start.water_ratio + k * sum(s / p for s, p in zip(start.solute, ps, strict=True))
    x = h.water_ratio
    inv = x + k * sum(h.intracellular_molality[a] * x / p for a, p in zip(agents, ps, strict=True))
    assert np.max(np.abs(inv - invariant0)) < 1e-5 * invariant0
    final = invariant0 / (1 + k * (0.2 / ps[0] + 0.6 / ps[1]))
    assert h.end_state.water_ratio == pytest.approx(final, rel=1e-4)


def test_solute_mass_balance_along_a_step():
    # Kleinhans 1998: dn/dt = P_s A (m_out - m_in) rho_w. The moles that entered must equal the integral of
    # the flux over the step (trapezoid on the dense time grid), constant area.
    cell = sperm()
    step = c.PlannedStep("loading", 0, saline(glycerol=1.0), 295.15, 300.0)
    h = c.simulate_steps(cell, [step], DILUTE)
    t = h.time
    m_in = h.intracellular_molality["glycerol"]
    ps = float(cell.permeability_at("glycerol", 295.15))
    flux = ps * cell.membrane_area * (1.0 - m_in) * c.WATER_DENSITY  # mol/s
    entered = np.trapezoid(flux, t)
    w_iso = cell.isotonic_water_volume
    moles_end = h.end_state.solute[0] * c.WATER_DENSITY * w_iso
    assert entered == pytest.approx(moles_end, rel=2e-3)


# --- one-step addition: the minimum volume -------------------------------------------------------------------
def test_minimum_volume_one_step_addition_approaches_the_boyle_van_t_hoff_bound():
    # Closed form (Kleinhans 1998; Katkov 2000 treats the same limit): when the agent permeates much more
    # slowly than water, the cell first shrinks to the Boyle-van 't Hoff volume at the total outside
    # osmolality before the agent enters: v_min -> v_b + (1 - v_b) pi_iso/(pi_iso + m) from above, and a
    # faster agent shrinks the cell less.
    m = 1.0
    bound = float(c.boyle_van_t_hoff(0.29 + m, 0.29, 0.5))
    mins = []
    for ps_um_s in (1e-4, 1e-3, 1e-2, 1e-1):
        cell = c.resolve_cell(Cells(preset="human-sperm", solute_permeability={"glycerol": ps_um_s * 1e-6}))
        step = c.PlannedStep("loading", 0, saline(glycerol=m), 293.15, 600.0)
        mins.append(c.simulate_steps(cell, [step], DILUTE).min_volume_fraction)
    assert all(v >= bound - 1e-9 for v in mins)
    assert np.all(np.diff(mins) > 0)
    assert mins[0] == pytest.approx(bound, abs=2e-3)  # b = P_s/(L_p R T M) ~ 1e-5: within 0.2 %


# --- non-ideal osmolality -------------------------------------------------------------------------------------
def test_virial_fast_table_matches_direct_evaluation(virial):
    # The fast table must reproduce the solution module's osmotic virial equation (Elliott et al. 2007)
    rng = np.random.default_rng(1)
    virial.prepare(("dmso",), 3.0)
    for _ in range(40):
        x = float(np.exp(rng.uniform(np.log(0.05), np.log(5.0))))
        s = float(rng.uniform(0.0, 4.0))
        fast = virial.inside_osmolality(x, [s / x], ("dmso",))
        direct = virial._direct(x, np.array([s / x]), ("dmso",))
        assert fast == pytest.approx(direct, rel=2e-6)


def test_virial_isotonic_osmolality_is_common_practice(virial):
    # 0.9 % saline is about 285-290 mOsm/kg (common practice, no source)
    assert 0.283 <= virial.isotonic_osmolality() <= 0.292


def test_virial_and_dilute_agree_in_dilute_solution(virial):
    # Both describe the same membrane physics; at 0.1 molal glycerol they must give the same minimum volume
    # within the non-ideality of the virial equation (~1 %)
    cell = sperm()
    step = c.PlannedStep("loading", 0, saline(glycerol=0.1), 295.15, 120.0)
    a = c.simulate_steps(cell, [step], DILUTE).min_volume_fraction
    b = c.simulate_steps(cell, [step], virial).min_volume_fraction
    assert a == pytest.approx(b, abs=0.01)


# --- toxicity cost ----------------------------------------------------------------------------------------------
def test_toxicity_rate_scalar_and_array():
    # Benson, Kearsley, Higgins 2012 form k C^alpha; alpha = 1.6 (from memory), k = 1
    assert float(c.toxicity_rate(1.0)) == pytest.approx(1.0)
    out = c.toxicity_rate(np.array([0.0, 2.0, -1.0]))
    assert out == pytest.approx([0.0, 2.0**1.6, 0.0])


def test_toxicity_cost_of_a_constant_exposure():
    # J = integral of C^alpha dt [min]: a cell already equilibrated in 1 molal glycerol for 10 min costs 10
    cell = sperm()
    start = c.CellState(1.0, (1.0,))
    step = c.PlannedStep("loading", 0, saline(glycerol=1.0), 295.15, 600.0)
    h = c.simulate_steps(cell, [step], DILUTE, ("glycerol",), start)
    assert h.toxicity_cost == pytest.approx(10.0, rel=1e-4)


# --- steps, extremes, suggestion ----------------------------------------------------------------------------------
def test_three_step_loading_extremes_and_series():
    cell = sperm()
    steps = [c.PlannedStep("loading", i, saline(glycerol=f), 295.15, 300.0) for i, f in enumerate([0.33, 0.67, 1.0])]
    h = c.simulate_steps(cell, steps, DILUTE)
    assert len(h.steps) == 3
    assert h.time[0] == 0.0 and h.time[-1] == pytest.approx(900.0)
    assert np.all(np.diff(h.time) >= 0)
    assert h.min_volume_fraction == pytest.approx(min(e.min_volume_fraction for e in h.steps))
    # each step's smallest volume is found between grid points, never above the sampled minimum
    for e in h.steps:
        assert e.min_volume_fraction <= e.end_volume_fraction
    assert h.intracellular_molality["glycerol"][-1] == pytest.approx(1.0, rel=1e-3)
    assert h.to_dict()["model"] == "two-parameter"


def test_suggestion_removal_needs_more_steps_than_addition():
    # Gao et al. 1995 (from memory): for human sperm and glycerol, removal is the osmotically more damaging
    # direction (swelling past the 1.1 upper limit) and needs more steps than addition.
    cell = sperm()
    add = c.suggest_steps(cell, DILUTE, saline(glycerol=1.0), 295.15, "loading")
    remove = c.suggest_steps(cell, DILUTE, saline(glycerol=1.0), 295.15, "unloading")
    assert add.feasible and remove.feasible
    assert remove.step_count > add.step_count
    assert add.min_volume_fraction >= cell.min_volume_fraction
    assert remove.max_volume_fraction <= cell.max_volume_fraction
    # the fewest: one step fewer leaves the limits
    fewer = c._plan(cell, DILUTE, ("glycerol",), saline(glycerol=1.0), 295.15, "unloading",
                    c.equilibrium_state(cell, DILUTE, DILUTE.outside(saline(glycerol=1.0), "t"), ("glycerol",)),
                    remove.step_count - 1, 3600.0)
    assert not fewer[0]
    assert remove.steps[-1].cryoprotectants == ()  # the last dilution is the carrier alone


def test_suggestion_needs_tolerance_limits():
    cell = oocyte(solute_permeability={"dmso": 2e-7})
    with pytest.raises(InputError, match="cells.min_volume_fraction"):
        c.suggest_steps(cell, DILUTE, saline(dmso=1.0), 293.15)


# --- Mazur model ----------------------------------------------------------------------------------------------
def test_mazur_liquidus_of_isotonic_saline_is_common_practice():
    # isotonic saline (0.29 osmol/kg) freezes near -0.52 to -0.56 C (common practice, no source)
    assert DILUTE.liquidus_temperature(0.29) - CELSIUS_OFFSET == pytest.approx(-0.54, abs=0.02)


def test_mazur_very_slow_cooling_tracks_boyle_van_t_hoff_at_ice_equilibrium(virial):
    # Mazur 1963: cooled slowly enough, the cell stays at equilibrium with the outside liquid, whose
    # osmolality is the liquidus value; with non-permeating solute only that is the Boyle-van 't Hoff
    # volume at pi_e(T). Tolerance: 0.5 % of isotonic volume from 1 K below the liquidus on.
    cell = oocyte()
    h = c.cool_with_extracellular_ice(cell, virial, Solution("isotonic-saline"), 0.01 / 60.0, 243.15, points=60)
    pi_e = np.array([virial.liquidus_osmolality(t) for t in h.temperature])
    expected = c.boyle_van_t_hoff(pi_e, virial.isotonic_osmolality(), cell.inactive_fraction)
    below = h.temperature <= h.start_temperature - 1.0
    # the virial inside osmolality is not exactly van 't Hoff: compare with the model's own equilibrium too
    assert np.max(np.abs(h.relative_volume[below] - h.equilibrium_volume[below])) < 0.005
    assert np.max(np.abs(h.relative_volume[below] - expected[below])) < 0.03
    assert np.max(h.supercooling[below]) < 0.2


def test_mazur_dilute_slow_cooling_is_exactly_boyle_van_t_hoff():
    # Mazur 1963 with ideal solutions: equilibrium volume = Boyle-van 't Hoff at pi_e(T) exactly
    cell = oocyte()
    h = c.cool_with_extracellular_ice(cell, DILUTE, Solution("isotonic-saline"), 0.01 / 60.0, 243.15, points=40)
    pi_e = np.array([DILUTE.liquidus_osmolality(t) for t in h.temperature])
    expected = c.boyle_van_t_hoff(pi_e, 0.29, cell.inactive_fraction)
    assert h.equilibrium_volume == pytest.approx(expected, rel=1e-6)
    below = h.temperature <= h.start_temperature - 1.0
    assert np.max(np.abs(h.relative_volume[below] - expected[below])) < 0.005


def test_mazur_supercooling_grows_with_cooling_rate_leibo_1978(virial):
    # Leibo, McGrath, Cravalho 1978 (abstract): unfertilized mouse ova in DMSO froze intracellularly in
    # 13 %, 72 % and 100 % of cells at 1.3, 2.9 and 4.8 C/min, at about -40 to -45 C; survival about 65 %
    # at 0.2-1.5 C/min. Trend check: with the Leibo 1980 preset in 1 molal DMSO (held inside, Mazur's
    # assumption) the supercooling at -40 C rises strictly with rate; 0.2 C/min does not read "likely",
    # 4.8 C/min does, and the onset of "likely" falls inside the observed 1.3-4.8 C/min rise (stated
    # tolerance: the whole observed window). The 8 K threshold is calibrated on these data (see planner.cells).
    cell = oocyte(solute_permeability={"dmso": 1e-7})
    rates = np.array([0.2, 1.3, 2.9, 4.8]) / 60.0
    tr = c.supercooling_tradeoff(cell, virial, saline(dmso=1.0), rates, 232.15, solute_transport=False)
    at_n = tr.supercooling_at_nucleation
    assert np.all(np.diff(at_n) > 0)
    assert at_n[0] < c.DEFAULT_IIF_SUPERCOOLING_K <= at_n[-1]
    assert 1.3 / 60.0 <= tr.iif_onset_rate <= 4.8 / 60.0
    assert np.all(np.diff(tr.max_supercooling) > 0)
    # faster cooling leaves more water inside: the smallest volume reached grows with rate
    assert np.all(np.diff(tr.min_volume_fraction) > 0)


def test_tradeoff_scalar_and_array(virial):
    cell = oocyte()
    one = c.supercooling_tradeoff(cell, virial, Solution("isotonic-saline"), 1.0 / 60.0, 243.15)
    assert one.cooling_rate.shape == (1,)
    assert one.supercooling_at_nucleation.shape == (1,)
    many = c.supercooling_tradeoff(cell, virial, Solution("isotonic-saline"), np.array([0.5, 1.0]) / 60.0, 243.15)
    assert many.max_supercooling.shape == (2,)
    assert many.max_supercooling[1] == pytest.approx(one.max_supercooling[0], rel=1e-6)


def test_mazur_reading_is_flagged_indicative(virial):
    cell = oocyte()
    h = c.cool_with_extracellular_ice(cell, virial, Solution("isotonic-saline"), 1.0 / 60.0, 233.15)
    assert h.intracellular_ice in {"unlikely", "possible", "likely"}
    assert any(f.code == "indicative" for f in h.flags)
    no_tn = sperm()
    h2 = c.cool_with_extracellular_ice(no_tn, virial, Solution("isotonic-saline"), 1.0 / 60.0, 243.15)
    assert h2.intracellular_ice == "not-assessed"
    assert any(f.code == "missing-data" for f in h2.flags)


def test_mazur_refuses_out_of_range():
    cell = oocyte()
    with pytest.raises(InputError, match="cooling_rate"):
        c.cool_with_extracellular_ice(cell, DILUTE, Solution("isotonic-saline"), -1.0, 243.15)
    with pytest.raises(ValueError, match="cooling_rate"):
        c.cool_with_extracellular_ice(cell, DILUTE, Solution("isotonic-saline"), 100.0, 243.15)
    with pytest.raises(ValueError, match="temperature"):
        c.cool_with_extracellular_ice(cell, DILUTE, Solution("isotonic-saline"), 0.01, 150.0)


# --- bad input: errors name the key --------------------------------------------------------------------------------
def test_negative_permeability_is_an_error_naming_the_key():
    with pytest.raises(InputError, match=r"cells\.permeability_um_per_s\.dmso") as err:
        c.resolve_cell(Cells(preset="mouse-oocyte", solute_permeability={"dmso": -2e-7}))
    assert "-0.2" in str(err.value)


@pytest.mark.parametrize(
    ("cells", "key"),
    [
        (Cells(preset="mouse-oocyte", hydraulic_conductivity=-1e-13), "cells.lp_um_per_min_atm"),
        (Cells(preset="mouse-oocyte", inactive_fraction=1.2), "cells.inactive_fraction"),
        (Cells(preset="mouse-oocyte", radius=-5e-6), "cells.radius_um"),
        (Cells(preset="mouse-oocyte", permeability_activation_energy={"dmso": 50e3}),
         "cells.permeability_activation_kj_per_mol.dmso"),
        (Cells(preset="mouse-ocyte"), "cells.preset"),
        (Cells(radius=5e-6, inactive_fraction=0.3), "cells.lp_um_per_min_atm"),
        (Cells(hydraulic_conductivity=1e-13, inactive_fraction=0.3), "cells.radius_um"),
        (Cells(preset="human-sperm", min_volume_fraction=0.4), "cells.min_volume_fraction"),
    ],
    ids=["negative-lp", "inactive-above-1", "negative-radius", "ea-without-permeability", "unknown-preset",
         "no-lp", "no-size", "min-below-inactive"],
)
def test_bad_cell_input_names_the_key(cells, key):
    with pytest.raises(InputError, match=key.replace(".", r"\.")):
        c.resolve_cell(cells)


def test_unknown_preset_suggests_the_nearest():
    with pytest.raises(InputError, match="mouse-oocyte"):
        c.resolve_cell(Cells(preset="mouse-ocyte"))


def test_missing_permeability_for_a_permeating_agent_names_the_key():
    cell = oocyte()
    with pytest.raises(InputError, match=r"cells\.permeability_um_per_s\.dmso"):
        c.simulate_steps(cell, [c.PlannedStep("loading", 0, saline(dmso=1.0), 293.15, 60.0)], DILUTE)


def test_sucrose_needs_no_permeability():
    # sucrose is non-permeating in the solution module's agent data
    cell = oocyte()
    h = c.simulate_steps(cell, [c.PlannedStep("loading", 0, saline(sucrose=0.3), 293.15, 600.0)], DILUTE)
    assert h.agents == ()


def test_step_temperature_out_of_range_names_the_key():
    cell = sperm()
    with pytest.raises(InputError, match=r"cells\.loading\[0\]\.temperature_c"):
        c.simulate_steps(cell, [c.PlannedStep("loading", 0, saline(glycerol=1.0), 330.0, 60.0)], DILUTE)


def test_missing_activation_energy_is_flagged_away_from_reference():
    # Karlsson et al. 2009 measured the rhesus oocyte at 23.5 C only: a 4 C step is an extrapolation
    cell = c.resolve_cell(Cells(preset="rhesus-oocyte"))
    h = c.simulate_steps(cell, [c.PlannedStep("loading", 0, saline(dmso=1.0), 277.15, 60.0)], DILUTE)
    assert any(f.code == "extrapolated" and "activation energy" in f.message for f in h.flags)


# --- data file ------------------------------------------------------------------------------------------------------
def test_every_preset_resolves_and_cites_known_sources():
    refs = bibliography()
    for name in c.preset_names():
        cell = c.resolve_cell(Cells(preset=name))
        assert cell.isotonic_volume > 0 and cell.membrane_area > 0
        assert cell.sources, name
        for key in cell.sources.values():
            assert key in refs, (name, key)
        assert "note" in c.cell_data()[name]


def test_karlsson_2009_rhesus_preset_values():
    # Karlsson et al. 2009 (abstract), mature rhesus oocytes at 23.5 C: P_s DMSO 0.24, EG 0.34, PG 0.56 um/s;
    # L_p 0.55 um/(min atm); v_b 19.7 %
    cell = c.resolve_cell(Cells(preset="rhesus-oocyte"))
    assert cell.solute_permeability["dmso"] / c.UM_PER_S == pytest.approx(0.24)
    assert cell.solute_permeability["ethylene-glycol"] / c.UM_PER_S == pytest.approx(0.34)
    assert cell.solute_permeability["propylene-glycol"] / c.UM_PER_S == pytest.approx(0.56)
    assert cell.hydraulic_conductivity / c.UM_PER_MIN_ATM == pytest.approx(0.55)
    assert cell.inactive_fraction == pytest.approx(0.197)


def test_user_values_override_the_preset():
    cell = c.resolve_cell(Cells(preset="human-sperm", hydraulic_conductivity=1.0 * c.UM_PER_MIN_ATM,
                                min_volume_fraction=0.8))
    assert cell.hydraulic_conductivity / c.UM_PER_MIN_ATM == pytest.approx(1.0)
    assert cell.reference_temperature == pytest.approx(293.15)  # user L_p is at 20 C
    assert cell.min_volume_fraction == 0.8
    assert cell.max_volume_fraction == 1.10  # from the preset (Gao et al. 1995)
    assert "lp_um_per_min_atm" in cell.entered


# --- property test --------------------------------------------------------------------------------------------------
@settings(max_examples=12, deadline=None)
@given(m=st.floats(0.05, 2.0), ps_um_s=st.floats(0.01, 1.0), temp_c=st.floats(0.0, 30.0))
def test_one_step_addition_stays_between_bounds_and_equilibrates(m, ps_um_s, temp_c):
    # For any one-step addition: the cell never shrinks below the Boyle-van 't Hoff volume at the total
    # outside osmolality, never swells above its final equilibrium volume, and ends with the outside molality.
    cell = c.resolve_cell(Cells(preset="human-sperm", solute_permeability={"glycerol": ps_um_s * 1e-6}))
    step = c.PlannedStep("loading", 0, saline(glycerol=m), temp_c + CELSIUS_OFFSET, 7200.0)
    h = c.simulate_steps(cell, [step], DILUTE)
    bound = float(c.boyle_van_t_hoff(0.29 + m, 0.29, cell.inactive_fraction))
    assert h.min_volume_fraction >= bound - 1e-6
    assert h.max_volume_fraction <= h.steps[0].end_volume_fraction + 1e-6
    assert h.end_state.molality()[0] == pytest.approx(m, rel=1e-3)


def test_two_permeating_agents_equilibrate_with_the_virial_model(virial):
    # Katkov 2000 (multisolute two-parameter model): each agent ends at its outside molality; the
    # intracellular osmolality then equals the outside one (non-ideal, evaluated directly for two agents)
    cell = c.resolve_cell(Cells(preset="rhesus-oocyte"))
    sol = saline(dmso=0.7, ethylene_glycol=0.7)
    step = c.PlannedStep("loading", 0, sol, 296.65, 3 * 3600.0)
    h = c.simulate_steps(cell, [step], virial)
    assert h.agents == ("dmso", "ethylene-glycol")
    m = h.end_state.molality()
    assert m == pytest.approx([0.7, 0.7], rel=1e-3)
    outside = virial.outside(sol, "t")
    inside = virial.inside_osmolality(h.end_state.water_ratio, m, h.agents)
    assert inside == pytest.approx(outside.osmolality, rel=1e-4)
    assert h.min_volume_fraction < 1.0


def test_rate_coefficients_scalar_and_array():
    # Noiles et al. 1993 (abstract): human sperm L_p 2.40 um/(min atm) at 22 C, E_a 3.92 kcal/mol
    cell = sperm()
    assert float(cell.hydraulic_conductivity_at(295.15)) / c.UM_PER_MIN_ATM == pytest.approx(2.40)
    temps = np.array([273.15, 295.15, 303.15])
    lp = cell.hydraulic_conductivity_at(temps)
    ps = cell.permeability_at("glycerol", temps)
    assert lp.shape == ps.shape == (3,)
    assert np.all(np.diff(lp) > 0) and np.all(np.diff(ps) > 0)
    scalar_lp, scalar_ps = cell.rates_at(273.15, ("glycerol",))
    assert scalar_lp == pytest.approx(lp[0], rel=1e-12)
    assert scalar_ps[0] == pytest.approx(ps[0], rel=1e-12)
