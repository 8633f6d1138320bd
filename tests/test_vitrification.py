"""Critical cooling and warming rates, their interpolation, and the vitrification margins."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.errors import InputError, ModelRangeError
from planner.references import bibliography
from planner.vitrification import (
    PER_MINUTE,
    check_entered_rate,
    critical_cooling_rate,
    critical_rate,
    critical_warming_rate,
    glass_margin,
    known_agents,
    parse_rate_table,
    rate_margin,
    rate_rows,
)

# --- the data file reproduces its sources at the tabulated points -------------------------------------------
# (agent, % w/w, quantity, published value [C/min], absolute tolerance at the published precision, source)
PUBLISHED = [
    # Baudot & Odagescu 2004, Cryobiology 48:283, abstract: "Vccr 569 K/min and Vcwr 1,08.10^10 K/min for
    # 40 % (w/w) ... Vccr 11 K/min and Vcwr 853 K/min for 50 % (w/w)"
    pytest.param("ethylene-glycol", 40.0, "cooling", 569.0, 0.5, "baudot-odagescu-2004", id="baudot-2004-eg40-ccr"),
    pytest.param("ethylene-glycol", 40.0, "warming", 1.08e10, 0.005e10, "baudot-odagescu-2004", id="baudot-2004-eg40-cwr"),
    pytest.param("ethylene-glycol", 50.0, "cooling", 11.0, 0.5, "baudot-odagescu-2004", id="baudot-2004-eg50-ccr"),
    pytest.param("ethylene-glycol", 50.0, "warming", 853.0, 0.5, "baudot-odagescu-2004", id="baudot-2004-eg50-cwr"),
    # Wowk et al. 1999, Cryobiology 39:215, abstract: "For 35 % (w/w) PG, 40 % EG, and 45 % glycerol ...
    # approximately 500 ... C/min"; 5 % (w/w) more of the parent polyol: "approximately ... 50 C/min"
    # (one significant figure)
    pytest.param("propylene-glycol", 35.0, "cooling", 500.0, 50.0, "wowk-1999", id="wowk-1999-pg35-ccr"),
    pytest.param("glycerol", 45.0, "cooling", 500.0, 50.0, "wowk-1999", id="wowk-1999-gly45-ccr"),
    pytest.param("propylene-glycol", 40.0, "cooling", 50.0, 5.0, "wowk-1999", id="wowk-1999-pg40-ccr"),
    pytest.param("glycerol", 50.0, "cooling", 50.0, 5.0, "wowk-1999", id="wowk-1999-gly50-ccr"),
    pytest.param("ethylene-glycol", 45.0, "cooling", 50.0, 5.0, "wowk-1999", id="wowk-1999-eg45-ccr"),
]


@pytest.mark.parametrize(("agent", "w", "quantity", "published", "tol", "source"), PUBLISHED)
def test_table_reproduces_source_at_tabulated_point(agent, w, quantity, published, tol, source):
    result = critical_rate(quantity, agent, w)
    assert result.rate * PER_MINUTE == pytest.approx(published, abs=tol)
    assert result.bound == "interpolated"
    assert source in result.sources
    row = next(r for r in rate_rows(agent) if r.mass_percent == w)
    assert row.source == source


def test_sources_agree_where_they_overlap():
    # Ethylene glycol 40 % w/w: Baudot & Odagescu 2004 give 569 C/min, Wowk et al. 1999 "approximately
    # 500 C/min" for the same solution. A consistency check of the two sources (within 25 %), not a
    # precision check.
    assert critical_cooling_rate("ethylene-glycol", 40.0).rate * PER_MINUTE == pytest.approx(500.0, rel=0.25)


def test_every_row_names_a_known_source_and_its_conditions():
    refs = bibliography()
    for agent in known_agents():
        for row in rate_rows(agent):
            assert row.source in refs, (agent, row.mass_percent)
            assert len(row.conditions) > 20 and row.precision in ("stated", "approximate")


def test_warming_is_the_harder_limit_where_both_are_published():
    # Fahy and co-workers, Wowk 2010: the critical warming rate exceeds the critical cooling rate; in
    # Baudot & Odagescu 2004 by 1.5 orders of magnitude at 50 % and 7 at 40 % w/w.
    for w in (40.0, 50.0):
        ccr = critical_cooling_rate("ethylene-glycol", w).rate
        cwr = critical_warming_rate("ethylene-glycol", w).rate
        assert cwr > 10 * ccr


# --- interpolation ------------------------------------------------------------------------------------------
@settings(max_examples=60, deadline=None)
@given(st.sampled_from(["ethylene-glycol", "propylene-glycol", "glycerol"]), st.floats(0.0, 1.0), st.floats(0.0, 1.0))
def test_interpolated_rate_falls_with_concentration(agent, a, b):
    lo, hi = rate_rows(agent)[0].mass_percent, rate_rows(agent)[-1].mass_percent
    w1, w2 = sorted((lo + a * (hi - lo), lo + b * (hi - lo)))
    r1, r2 = critical_cooling_rate(agent, [w1, w2]).rate
    assert r1 >= r2 * (1 - 1e-12)
    rows = [r.critical_cooling_rate for r in rate_rows(agent) if r.critical_cooling_rate is not None]
    assert min(rows) * (1 - 1e-12) <= r2 <= r1 <= max(rows) * (1 + 1e-12)


def test_interpolation_is_log_linear_between_two_rows():
    # Warming rates of ethylene glycol have two rows (40 and 50 %): PCHIP of two points is a straight line in
    # log10(rate), so the midpoint is the geometric mean of the published ends.
    mid = critical_warming_rate("ethylene-glycol", 45.0).rate * PER_MINUTE
    assert mid == pytest.approx(np.sqrt(1.08e10 * 853.0), rel=1e-9)


def test_scalar_and_array_calls_agree():
    scalar = critical_cooling_rate("ethylene-glycol", 42.5)
    array = critical_cooling_rate("ethylene-glycol", np.array([42.5, 47.5]))
    assert isinstance(scalar.rate, float) and isinstance(scalar.bound, str)
    assert array.rate.shape == (2,) and array.bound == ["interpolated", "interpolated"]
    assert array.rate[0] == pytest.approx(scalar.rate, rel=1e-12)


# --- outside the data: flagged, never extrapolated in silence -----------------------------------------------
def test_above_the_data_is_a_flagged_upper_bound():
    r = critical_cooling_rate("ethylene-glycol", 55.0)
    assert r.bound == "at-most"
    assert r.rate * PER_MINUTE == pytest.approx(11.0, abs=0.5)  # the 50 % row, Baudot & Odagescu 2004
    assert [f.code for f in r.flags] == ["extrapolated"]
    assert "lower bound" in r.flags[0].message


def test_below_the_data_is_refused():
    r = critical_cooling_rate("ethylene-glycol", 30.0)
    assert np.isnan(r.rate) and r.bound == "refused"
    assert "refused" in [f.code for f in r.flags]
    mixed = critical_cooling_rate("ethylene-glycol", [30.0, 45.0, 60.0])
    assert mixed.bound == ["refused", "interpolated", "at-most"]
    assert np.isnan(mixed.rate[0]) and np.isfinite(mixed.rate[1:]).all()
    assert {f.code for f in mixed.flags} >= {"refused", "extrapolated", "indicative"}


def test_quantity_without_published_rows_is_missing_not_invented():
    r = critical_warming_rate("glycerol", 47.0)
    assert np.isnan(r.rate) and r.bound == "refused"
    assert [f.code for f in r.flags] == ["missing-data"]


@pytest.mark.parametrize("agent", ["propylene-glycol", "glycerol"])
def test_warming_rates_not_read_in_a_source_stay_missing(agent):
    # No critical warming rate of propylene glycol or glycerol was read in a source for the table (its
    # header lists the gap): the planner says missing-data at every concentration, scalar and array
    for w in (40.0, [40.0, 50.0]):
        r = critical_warming_rate(agent, w)
        assert np.all(np.isnan(r.rate))
        assert [f.code for f in r.flags] == ["missing-data"]


def test_dmso_has_no_rows_and_is_not_invented():
    # No DMSO critical rate was read in a source for the table: DMSO is not a table agent, and asking for
    # it is an error naming the agents that have rows (the vitrification section turns this into a
    # missing-data flag and asks for the user's measured rate)
    assert "dmso" not in known_agents()
    with pytest.raises(InputError, match="agent"):
        critical_cooling_rate("dmso", 40.0)


def test_approximate_rows_make_the_result_indicative():
    assert "indicative" in [f.code for f in critical_cooling_rate("glycerol", 47.0).flags]
    assert "indicative" not in [f.code for f in critical_warming_rate("ethylene-glycol", 47.0).flags]


# --- bad input ----------------------------------------------------------------------------------------------
def test_unknown_agent_names_the_nearest():
    with pytest.raises(InputError, match="ethylene-glycol"):
        critical_cooling_rate("ethylene-glycole", 45.0)


@pytest.mark.parametrize("w", [-1.0, 101.0, float("nan")])
def test_impossible_concentration_is_refused(w):
    with pytest.raises(ModelRangeError, match="mass_percent"):
        critical_cooling_rate("glycerol", w)


def test_table_that_rises_with_concentration_is_refused():
    raw = {"glycerol": [
        {"mass_percent": 40, "critical_cooling_rate_c_per_min": 100, "critical_warming_rate_c_per_min": None,
         "precision": "stated", "conditions": "test row", "source": "common-practice"},
        {"mass_percent": 50, "critical_cooling_rate_c_per_min": 200, "critical_warming_rate_c_per_min": None,
         "precision": "stated", "conditions": "test row", "source": "common-practice"},
    ]}
    with pytest.raises(InputError, match="glycerol.critical_cooling_rate_c_per_min"):
        parse_rate_table(raw)


@pytest.mark.parametrize("rate_c_per_min", [0.0, 1e-4, 1e12])
def test_entered_rate_outside_plausible_range_names_the_field(rate_c_per_min):
    with pytest.raises(InputError, match=r"solution\.critical_warming_rate_c_per_min"):
        check_entered_rate("solution.critical_warming_rate_c_per_min", rate_c_per_min / PER_MINUTE)
    check_entered_rate("solution.critical_warming_rate_c_per_min", 50.0 / PER_MINUTE)  # VS55-like, fine


# --- margins ------------------------------------------------------------------------------------------------
def test_rate_margin_scalar_and_array():
    # Issue example numbers (illustrative): 40 C/min achieved over 2.5 C/min critical = 16.
    assert rate_margin(40.0 / 60, 2.5 / 60) == pytest.approx(16.0)
    m = rate_margin(np.array([30.0, -30.0, 30.0]) / 60, np.array([50.0, 50.0, 0.0]) / 60)
    assert m[:2] == pytest.approx([0.6, 0.6]) and np.isnan(m[2])


def test_glass_margin_scalar_and_array():
    assert glass_margin(77.15, 150.15) == pytest.approx(73.0)
    assert glass_margin(np.array([77.15, 193.15]), 150.15) == pytest.approx([73.0, -43.0])


# --- glass-transition data behind the storage margin ------------------------------------------------------
def test_water_glass_transition_agrees_with_glycerol_water_glasses():
    # [ref:schwab-2024], abstract: the Tg of glycerol-water glasses (DSC, glycerol mole fraction >= 0.300)
    # give 135.3 +/- 1.2 K for water. The planner's water Tg, used in every Gordon-Taylor glass transition
    # and so in the storage margin, lies inside that interval.
    from planner.solution import water_data

    assert water_data().glass_transition == pytest.approx(135.3, abs=1.2)


def test_glycerol_tg_prime_lies_between_water_and_pure_glycerol():
    # The maximally freeze-concentrated glass is a water-glycerol glass, so its Tg' must lie between the
    # Tg of water (135.3 K, [ref:schwab-2024]) and that of anhydrous glycerol, read in [ref:toxqui-teran-2018]
    # (abstract) as a thermal event at 191-199 K. Checks the tabulated 164 K [ref:inaba-andersson-2007]
    # against both outside values.
    from planner.solution import agent_data

    fc = agent_data("glycerol").freeze_concentrate
    assert fc is not None and fc.source == "inaba-andersson-2007"
    assert 135.3 < fc.temperature < 191.0


@pytest.mark.parametrize("agent", ["dmso", "ethylene-glycol", "propylene-glycol", "glycerol"])
def test_glass_transition_without_published_constants_stays_missing(agent):
    # No Gordon-Taylor constant k was read in a source for these agents (agents.yaml says why for each):
    # the glass transition of the solution as prepared is not computed and is flagged missing-data, at a
    # vitrification concentration (45 % w/w) as at a freezing one (10 % w/w); never a number invented.
    from planner.solution import composition, glass_transition

    for w in (10.0, 45.0):
        g = glass_transition(composition("water", [(agent, "mass_percent", w)]))
        assert g.temperature is None
        assert any(f.code == "missing-data" and agent in f.message for f in g.flags)
