"""The assessment: margins judged against policy, verdict, flags and cautions chosen by the protocol."""

from pathlib import Path

import pytest

from planner.assessment import assess, caution_catalogue, default_policy, judge
from planner.protocol import load_protocol, parse_protocol
from planner.references import bibliography

ROOT = Path(__file__).resolve().parents[1]
RIGID = ROOT / "protocols" / "rigid-chamber-hold.yaml"
OPEN = ROOT / "protocols" / "supercooled-open-vial.yaml"
SLOW = ROOT / "protocols" / "slow-freeze-dmso.yaml"


@pytest.mark.parametrize(
    ("value", "better", "state"),
    [(0.5, "lower", "fine"), (1.0, "lower", "watch"), (4.9, "lower", "watch"), (5.0, "lower", "do-not-proceed"),
     (6.0, "higher", "fine"), (5.0, "higher", "watch"), (1.0, "higher", "do-not-proceed"),
     (None, "lower", "not-judged")],
)
def test_judge_three_levels(value, better, state):
    watch, stop = (1.0, 5.0) if better == "lower" else (5.0, 1.0)
    assert judge(value, better, watch, stop) == state


def test_policy_and_caution_files_are_complete():
    refs = bibliography()
    for name, entry in default_policy().items():
        assert entry["better"] in ("higher", "lower"), name
        assert entry["source"] in refs, name
        lo_first = entry["watch"] < entry["stop"]
        assert lo_first == (entry["better"] == "lower"), f"{name}: watch and stop in the wrong order"
    for cid, entry in caution_catalogue().items():
        assert entry["source"] in refs, cid
        assert entry["applies"] in {"always", "rigid", "ln2", "cryoprotectant", "dmso", "human-material",
                                    "animal-material", "section"}, cid
        assert entry["title"] and len(entry["text"]) > 40, cid


@pytest.fixture(scope="module")
def rigid():
    return assess(load_protocol(RIGID))


def test_supercooling_margin_is_liquidus_minus_coldest_point(rigid):
    d = rigid.to_dict()
    fp = d["solution"]["freezing_point_c"]
    coldest = d["thermal"]["coldest_point_min_c"] if "thermal" in d else -4.0
    assert d["margins"]["supercooling_k"] == pytest.approx(fp - coldest, abs=2e-3)
    state = next(m for m in d["margin_states"] if m["name"] == "supercooling_k")
    assert state["policy"] == "default" and state["state"] in ("fine", "watch", "do-not-proceed")


def test_planning_support_statement_is_always_there(rigid):
    ids = [c.id for c in rigid.cautions]
    assert ids[0] == "planning-support"
    assert "cryoprotectant-toxicity" in ids and "human-material" in ids
    assert all(c.citation for c in rigid.cautions)


def test_dmso_and_ln2_cautions_follow_the_protocol():
    ids = {c.id for c in assess(load_protocol(SLOW)).cautions}
    assert "dmso-skin" in ids
    ids_open = {c.id for c in assess(load_protocol(OPEN)).cautions}
    assert "dmso-skin" not in ids_open


def test_lab_policy_overrides_default_and_record_says_so():
    text = RIGID.read_text() + "policy:\n  margins:\n    supercooling_k: {watch: 0.5, stop: 1.0}\n"
    d = assess(parse_protocol(text)).to_dict()
    m = next(m for m in d["margin_states"] if m["name"] == "supercooling_k")
    assert m["policy"] == "protocol" and (m["watch"], m["stop"]) == (0.5, 1.0)
    assert m["state"] == "do-not-proceed"
    assert d["verdict"]["state"] == "do-not-proceed"
    assert any("Supercooling" in r for r in d["verdict"]["reasons"])


def test_supercooling_not_judged_when_ice_is_seeded():
    d = assess(load_protocol(SLOW)).to_dict()
    m = next(m for m in d["margin_states"] if m["name"] == "supercooling_k")
    assert m["state"] == "not-judged"


def test_ice_risk_margins_not_judged_when_ice_is_intended():
    # a slow-freezing protocol seeds ice on purpose: the chance of ice before the seed is reported, not judged
    d = assess(load_protocol(SLOW)).to_dict()
    states = {m["name"]: m for m in d["margin_states"]}
    for name in ("freeze_probability", "freeze_probability_upper"):
        assert states[name]["state"] == "not-judged" and "on purpose" in states[name]["detail"]


def test_common_practice_citation_reads_plainly():
    from planner.references import cite

    assert cite("common-practice").citation() == "Common practice, no source"


def test_a_solution_that_missed_its_tolerance_keeps_the_verdict_from_fine(monkeypatch):
    """A section whose numerical solution did not converge withholds its figures; the verdict may not
    then say "fine" on the strength of the other margins (common practice, no source: an unfinished
    calculation is not a pass)."""
    import planner.assessment as assessment
    from planner.results import Flag

    protocol = load_protocol(SLOW)
    before = assess(protocol)
    real = assessment._section_builder

    def with_unsolved_freezing(name):
        build = real(name)
        if name != "freezing":
            return build

        def flagged(p, context):
            out = build(p, context)
            out.report.flags.append(Flag("not-converged", "ramp to -80 C: residual 3e-4 K at t = 1200 s (test)"))
            return out
        return flagged

    monkeypatch.setattr(assessment, "_section_builder", with_unsolved_freezing)
    after = assess(protocol)
    order = ("fine", "watch", "do-not-proceed")
    assert order.index(after.verdict.state) >= max(order.index(before.verdict.state), 1)
    assert any("not computed – freezing: ramp to -80 C" in r for r in after.verdict.reasons)


def test_the_verdict_of_fine_margins_becomes_watch_when_a_solution_did_not_converge():
    from planner.assessment import Margin, _verdict
    from planner.results import Flag

    fine = Margin("supercooling_k", "Supercooling below the liquidus", 2.0, "K", "lower", 5.0, 20.5, "fine",
                  "default", "", None, "")
    assert _verdict([fine]).state == "fine"
    v = _verdict([fine], [Flag("not-converged", "freezing: step at 10 s (test)")])
    assert v.state == "watch" and v.reasons == ["not computed – freezing: step at 10 s (test) (the figures "
                                                "that depend on it are withheld)"]
    stop = Margin("x", "X", 9.0, "K", "lower", 1.0, 2.0, "do-not-proceed", "default", "", None, "")
    v = _verdict([fine, stop], [Flag("not-converged", "freezing: step (test)")])
    assert v.state == "do-not-proceed" and v.reasons[0].startswith("X: 9 K") and len(v.reasons) == 2
