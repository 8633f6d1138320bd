"""Protocol files: loading, SI conversion, and refusals that name the key path, the value and the range."""

import math
import re
from pathlib import Path

import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from planner.errors import InputError, PlannerError
from planner.protocol import load_protocol, parse_protocol, protocol_to_yaml

ROOT = Path(__file__).resolve().parents[1]
DEMOS = sorted((ROOT / "protocols").glob("*.yaml"))
RIGID = (ROOT / "protocols" / "rigid-chamber-hold.yaml").read_text()


def edited(text: str, old: str, new: str) -> str:
    assert old in text, old
    return text.replace(old, new, 1)


def error_of(text: str) -> InputError:
    with pytest.raises(InputError) as info:
        parse_protocol(text, "test.yaml")
    return info.value


@pytest.mark.parametrize("path", DEMOS, ids=lambda p: p.name)
def test_demo_protocols_load_and_say_they_are_invented(path):
    protocol = load_protocol(path)
    assert "invented" in protocol.title.lower()
    assert path.read_text().startswith("# Invented demo")


def test_rigid_demo_in_si_units():
    p = parse_protocol(RIGID)
    assert p.sample.volume == pytest.approx(2.0e-6)
    assert p.sample.diameter == pytest.approx(12.0e-3)
    # height of a 2 mL cylinder of 12 mm diameter: V / (pi d^2 / 4) = 17.68 mm (geometry, no source needed)
    assert p.sample.height == pytest.approx(2.0e-6 / (math.pi * 0.012**2 / 4))
    assert p.container.kind == "rigid" and p.container.interface == "sealed"
    assert p.container.cavity_volume == pytest.approx(20e-6)
    assert p.schedule.start_temperature == pytest.approx(277.15)
    assert p.schedule.coldest_temperature == pytest.approx(269.15)
    ramp, hold, warm = p.schedule.steps
    assert ramp.rate == pytest.approx(0.5 / 60) and hold.duration == pytest.approx(48 * 3600)
    assert warm.target_temperature == pytest.approx(277.15)
    assert p.environment.preset == "stirred-bath" and not p.environment.defaulted
    assert p.nucleation.defaulted
    assert p.entered["solution"]["cryoprotectants"][0] == {"agent": "glycerol", "mass_percent": 10.0}


def test_round_trip_through_yaml_keeps_everything():
    p = parse_protocol(RIGID)
    again = parse_protocol(protocol_to_yaml(p.entered))
    assert again.entered == p.entered
    assert again.sample == p.sample and again.schedule == p.schedule and again.solution == p.solution


@pytest.mark.parametrize(
    ("old", "new", "field", "words"),
    [
        ("volume_ml: 2.0", "volum_ml: 2.0", "sample.volum_ml", "did you mean 'volume_ml'"),
        ("volume_ml: 2.0", "volume_ml: 0.0", "sample.volume_ml", "from 1e-09"),
        ("volume_ml: 2.0", "volume_ml: -1.0", "sample.volume_ml", "from 1e-09"),
        ("diameter_mm: 12.0", "diameter_mm: 3.88e-221", "sample.diameter_mm", "from 0.001"),
        ("volume_ml: 2.0", "volume_ml: .nan", "line", "finite"),
        ("volume_ml: 2.0", "volume_ml: true", "sample.volume_ml", "a number"),
        ("volume_ml: 2.0", "volume_ml: two", "sample.volume_ml", "a number"),
        ("geometry: cylinder ", "geometry: cylindre ", "sample.geometry", "did you mean 'cylinder'"),
        ("kind: rigid ", "kind: sealed ", "container.kind", "one of: rigid, open"),
        ("outer_diameter_mm: 55.0", "outer_diameter_mm: 20.0", "container.outer_diameter_mm", "larger than"),
        ("cavity_ml: 20.0", "cavity_ml: 1.0", "container.cavity_ml", "at least the sample volume"),
        ("trapped_gas_ml: 0.0", "trapped_gas_ml: -0.5", "container.trapped_gas_ml", "from 0"),
        ("rate_c_per_min: 0.5", "rate_c_per_min: 0.0", "schedule.steps[0].rate_c_per_min", "above 0"),
        ("rate_c_per_min: 0.5", "rate_c_per_min: -1", "schedule.steps[0].rate_c_per_min", "above 0"),
        ("start_c: 4.0", "start_c: 400.0", "schedule.start_c", "-196 to 40"),
        ("{hold_h: 48}", "{hold_h: 0}", "schedule.steps[1].hold_h", "above 0"),
        ("{hold_h: 48}", "{hold_hours: 48}", "schedule.steps[1]", "did you mean 'hold_h'"),
        ("{ramp_to_c: -4.0, rate_c_per_min: 0.5}", "{ramp_to_c: -30.0, rate_c_per_min: 0.5}",
         "schedule.steps[0].ramp_to_c", "triple point"),
        # a rigid chamber that starts below the triple point is refused at start_c, not later by a section
        ("start_c: 4.0", "start_c: -30.0", "schedule.start_c", "triple point"),
        ("schema: coldmargin/protocol-1", "schema: coldmargin/protocol-9", "schema", "coldmargin/protocol-1"),
        ("carrier: isotonic-saline ", "carrier: saline ", "solution.carrier", "isotonic-saline"),
        ("{agent: glycerol, mass_percent: 10.0}", "{agent: glycerine, mass_percent: 10.0}",
         "solution.cryoprotectants[0].agent", "glycerol"),
        ("{agent: glycerol, mass_percent: 10.0}", "{agent: glycerol, mass_percent: 10.0, molal: 1.0}",
         "solution.cryoprotectants[0]", "exactly one of"),
        ("{agent: glycerol, mass_percent: 10.0}", "{agent: glycerol, mass_percent: 120.0}",
         "solution.cryoprotectants[0].mass_percent", ""),
    ],
)
def test_bad_values_are_refused_naming_key_value_and_range(old, new, field, words):
    err = error_of(edited(RIGID, old, new))
    message = str(err)
    assert message.startswith(field), message
    assert words in message, message


def test_duplicate_key_is_refused():
    err = error_of(edited(RIGID, "  volume_ml: 2.0\n", "  volume_ml: 2.0\n  volume_ml: 3.0\n"))
    assert "duplicate key" in str(err) and "volume_ml" in str(err)


def test_concentrations_summing_past_100_percent_are_refused():
    text = edited(RIGID, "    - {agent: glycerol, mass_percent: 10.0}",
                  "    - {agent: glycerol, mass_percent: 60.0}\n    - {agent: dmso, mass_percent: 50.0}")
    assert "solution.cryoprotectants" in str(error_of(text))


def test_cylinder_whose_diameter_and_volume_disagree_is_refused():
    err = error_of(edited(RIGID, "diameter_mm: 12.0", "diameter_mm: 12.0\n  height_mm: 40.0"))
    assert str(err).startswith("sample.diameter_mm") and "height" in str(err)


def test_hold_before_any_ramp_into_it_is_refused():
    text = edited(RIGID, "    - {ramp_to_c: -4.0, rate_c_per_min: 0.5}\n", "")
    text = edited(text, "    - {ramp_to_c: 4.0, rate_c_per_min: 1.0}", "    - {ramp_to_c: -4.0, rate_c_per_min: 1.0}")
    err = error_of(text)
    assert str(err).startswith("schedule.steps[0].hold_h")


def test_open_container_refuses_rigid_only_keys():
    text = (ROOT / "protocols" / "supercooled-open-vial.yaml").read_text()
    err = error_of(edited(text, "kind: open", "kind: open\n  cavity_ml: 5"))
    assert str(err).startswith("container.cavity_ml") and "rigid" in str(err)


def test_unreadable_file_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="readable"):
        load_protocol(tmp_path / "missing.yaml")
    bad = tmp_path / "bin.yaml"
    bad.write_bytes(b"\xff\xfe\x00")
    with pytest.raises(InputError, match="UTF-8"):
        load_protocol(bad)


def test_policy_override_and_unknown_margin():
    p = parse_protocol(RIGID + "policy:\n  margins:\n    supercooling_k: {watch: 3.0, stop: 6.0}\n")
    assert p.policy.margins["supercooling_k"] == {"watch": 3.0, "stop": 6.0}
    err = error_of(RIGID + "policy:\n  margins:\n    supercooling: {watch: 3.0, stop: 6.0}\n")
    assert str(err).startswith("policy.margins.supercooling") and "supercooling_k" in str(err)


# Any YAML document either loads or raises the package's own error, never anything else.
scalars = st.one_of(
    st.none(), st.booleans(), st.integers(-(10**30), 10**30), st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=12), st.sampled_from(["rigid", "open", "cylinder", "glycerol", "isotonic-saline"]),
)
keys = st.sampled_from(["schema", "title", "sample", "container", "solution", "schedule", "volume_ml",
                        "geometry", "kind", "steps", "agent", "mass_percent", "hold_h", "ramp_to_c", "x"])
documents = st.recursive(scalars, lambda inner: st.one_of(st.lists(inner, max_size=4),
                                                           st.dictionaries(keys, inner, max_size=5)),
                         max_leaves=20)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(documents)
def test_any_document_loads_or_raises_our_error(doc):
    try:
        text = yaml.safe_dump(doc)
    except (yaml.YAMLError, ValueError):
        return
    try:
        parse_protocol(text)
    except PlannerError:
        pass


def _paths(node, prefix=()):
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _paths(v, prefix + (i,))
    yield prefix


RIGID_DOC = yaml.safe_load(RIGID)
RIGID_PATHS = [p for p in _paths(RIGID_DOC) if p]


@settings(max_examples=200, deadline=None)
@given(st.sampled_from(RIGID_PATHS), scalars)
def test_any_single_edit_of_a_demo_loads_or_raises_our_error(path, value):
    import copy

    doc = copy.deepcopy(RIGID_DOC)
    node = doc
    for k in path[:-1]:
        node = node[k]
    node[path[-1]] = value
    try:
        text = yaml.safe_dump(doc)
    except (yaml.YAMLError, ValueError):
        return
    try:
        parse_protocol(text)
    except PlannerError as exc:
        # the message starts with a key path or a line number
        assert re.match(r"^[\w\[\]\.\- ]+:", str(exc)), str(exc)


@settings(max_examples=150, deadline=None)
@given(st.text(max_size=200))
def test_any_text_loads_or_raises_our_error(text):
    try:
        parse_protocol(text)
    except PlannerError:
        pass


def _joined(path) -> str:
    out = ""
    for k in path:
        out += f"[{k}]" if isinstance(k, int) else (f".{k}" if out else str(k))
    return out


def demo_leaves():
    """(demo file name, key path tuple, value) for every scalar the invented demo protocols hold."""
    for demo in sorted((ROOT / "protocols").glob("*.yaml")):
        doc = yaml.safe_load(demo.read_text())
        for path in _paths(doc):
            node = doc
            for k in path:
                node = node[k]
            if path and not isinstance(node, (dict, list)):
                yield demo.name, path, node


def _number_leaves():
    """(demo, key path tuple, value) for every number the invented demo protocols hold."""
    return ((d, p, v) for d, p, v in demo_leaves() if isinstance(v, (int, float)) and not isinstance(v, bool))


NUMBER_LEAVES = list(_number_leaves())


def test_the_demos_hold_numbers_of_every_section():
    """The range test below covers numbers of the sample, container, solution, schedule and cells."""
    assert {p[0] for _, p, _ in NUMBER_LEAVES} >= {"sample", "container", "solution", "schedule", "cells"}


@pytest.mark.parametrize(("demo", "path", "value"), NUMBER_LEAVES,
                         ids=[f"{d}:{_joined(p)}" for d, p, _ in NUMBER_LEAVES])
def test_every_number_has_its_range_as_data_and_the_loader_refuses_past_it(demo, path, value):
    """Each number of each demo lies inside its range in BOUNDS; just past either end the loader refuses
    it at that key, in the words of that range (the words the app's field hint shows)."""
    import copy

    from planner.protocol import bound_for

    field = _joined(path)
    bound = bound_for(field)
    assert bound is not None, field
    assert bound.holds(float(value)), (field, value)
    doc = yaml.safe_load((ROOT / "protocols" / demo).read_text())
    for past in (bound.high * 2 + 1, bound.low if bound.low_open else bound.low - 1):
        edited_doc = copy.deepcopy(doc)
        node = edited_doc
        for k in path[:-1]:
            node = node[k]
        node[path[-1]] = past
        with pytest.raises(InputError) as err:
            parse_protocol(yaml.safe_dump(edited_doc), base_dir=ROOT / "protocols")
        assert err.value.field == field and err.value.allowed == bound.words(), (past, str(err.value))


def test_every_key_the_loader_reads_as_a_number_has_a_range():
    """A key read with ``number("...")`` but missing from BOUNDS would stop the loader with a KeyError
    instead of a refusal naming the key: every such key ends some BOUNDS pattern."""
    import planner.protocol as protocol
    from planner.protocol import BOUNDS

    source = Path(protocol.__file__).read_text()
    keys = set(re.findall(r'\.number\("([a-z_0-9]+)"', source))
    assert len(keys) >= 30
    last = {pattern.rsplit(".", 1)[-1] for pattern in BOUNDS}
    assert keys - last == set()


def test_a_value_left_out_is_said_to_be_missing_not_quoted_as_if_typed():
    err = error_of(edited(RIGID, "  volume_ml: 2.0\n", ""))
    assert str(err) == "sample.volume_ml: no value given; allowed: a value is required"
    assert err.value == "missing" and err.field == "sample.volume_ml"
