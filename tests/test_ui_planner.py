"""The plan notebook without a browser: the draft, the model and the widgets driven through the demos.

Most tests use the real protocol loader with a small stand-in assessment (defined here, in the tests only)
so they stay fast; ``test_whole_demo_with_the_real_assessment`` runs the real assessment end to end.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from planner.errors import InputError
from planner.protocol import CELSIUS_OFFSET, parse_protocol, protocol_to_yaml
from planner.ui.draft import Draft, blank_like, format_entry, join_path, parse_entry, split_path
from planner.ui.fields import css_name, label_for, unit_of
from planner.ui.planner_model import Evaluation, PlannerModel, demo_files
from planner.ui.summary import fmt, margin_rows, strip_html

ROOT = Path(__file__).resolve().parents[1]
DEMO = "supercooled-open-vial"


def stand_in_evaluate(calls: list | None = None):
    """Test-only assessment: the real loader, then one margin equal to the sample volume in mL.

    Its numbers mean nothing physically; they only let the tests see that a change reaches the strip.
    """

    def evaluate(document, name, base_dir):
        protocol = parse_protocol(protocol_to_yaml(document), name, base_dir=base_dir)
        if calls is not None:
            calls.append(document)
        volume_ml = protocol.sample.volume * 1e6
        report = {
            "schema": "test", "title": protocol.title,
            "margin_states": [{"name": "volume_test", "label": "Test margin", "value": volume_ml, "unit": "mL",
                               "watch": 5.0, "stop": 10.0, "better": "lower", "policy": "default",
                               "state": "fine" if volume_ml < 5 else "watch" if volume_ml < 10 else "do-not-proceed"}],
            "verdict": {"state": "fine", "reasons": []}, "flags": [], "cautions": [],
        }
        return Evaluation(protocol, None, report)

    return evaluate


# --- draft and fields ------------------------------------------------------------------------------------

@pytest.mark.parametrize("path, parts", [
    ("sample.volume_ml", ["sample", "volume_ml"]),
    ("schedule.steps[2].ramp_to_c", ["schedule", "steps", 2, "ramp_to_c"]),
    ("schedule.steps[1].seed_ice.at_c", ["schedule", "steps", 1, "seed_ice", "at_c"]),
    ("title", ["title"]),
])
def test_key_paths_split_and_join(path, parts):
    assert split_path(path) == parts
    assert join_path(parts) == path


@pytest.mark.parametrize("bad", ["", "a..b", "a[x]", "[", "a.b["])
def test_bad_key_paths_are_refused_naming_the_path(bad):
    with pytest.raises(InputError, match="field"):
        split_path(bad)


@pytest.mark.parametrize("typed, stored", [
    ("2", 2), ("2.5", 2.5), ("\u22124", -4), ("-4.0", -4.0), ("1e-3", 0.001), ("", None), ("  ", None),
    ("abc", "abc"), ("12 mL", "12 mL"), ("1,5", "1,5"),
])
def test_typed_text_is_stored_as_a_number_or_kept_as_typed(typed, stored):
    assert parse_entry(typed) == stored
    assert type(parse_entry(typed)) is type(stored)


def test_format_entry_round_trips_numbers():
    for value in (2, 2.5, -4.0, 0.001, 1e-7, 1234567.0, 0.1 + 0.2, 5e-324):
        back = parse_entry(format_entry(value))
        assert back == value and type(back) is type(value)  # exactly, nothing rounded away


def test_draft_set_get_remove_and_prune():
    d = Draft({"sample": {"volume_ml": 1.0}, "schedule": {"steps": [{"hold_h": 1}]}})
    d.set("sample.diameter_mm", 10)
    d.set("schedule.steps[0].hold_h", 2)
    d.set("container.kind", "open")  # creates the mapping
    assert d.get("sample.diameter_mm") == 10
    assert d.get("schedule.steps[0].hold_h") == 2
    assert d.get("container.kind") == "open"
    d.set("sample.diameter_mm", None)
    assert "diameter_mm" not in d.document["sample"]  # an empty box is "not given"
    assert d.has("sample.diameter_mm")  # ... but the box stays
    with pytest.raises(InputError, match=r"schedule.steps\[3\]"):
        d.set("schedule.steps[3].hold_h", 1)
    d.remove("schedule.steps[0]")
    assert d.get("schedule.steps") == []


def test_draft_copies_what_it_is_given():
    doc = {"sample": {"volume_ml": 1.0}}
    d = Draft(doc)
    d.set("sample.volume_ml", 2.0)
    assert doc["sample"]["volume_ml"] == 1.0


def test_blank_keeps_the_keys_and_the_schema_only():
    blank = blank_like({"schema": "s", "title": "t", "sample": {"volume_ml": 2}, "steps": [{"a": 1}, {"b": 2}]})
    assert blank == {"schema": "s", "title": None, "sample": {"volume_ml": None}, "steps": [{"a": None}]}


@pytest.mark.parametrize("path, label", [
    ("sample.volume_ml", "Volume (mL)"),
    ("schedule.steps[3].rate_c_per_min", "Rate (°C/min)"),
    ("schedule.steps[0].ramp_to_c", "Ramp to (°C)"),
    ("solution.cryoprotectants[0].mass_percent", "Concentration (% w/w)"),
    ("container.cavity_compliance_per_gpa", "Cavity compliance (1/GPa)"),
    ("environment.h_w_per_m2_k", "Heat-transfer coefficient (W/(m² K))"),
    ("a_new_section.some_pressure_mpa", "Some pressure (MPa)"),  # an unknown key still gets a unit
    ("time_to_within_0p5k_min", "Time to within 0.5 K of the bath (min)"),  # the report key's 0p5k in words
    # report keys of the nucleation, chamber and "what would it take" results
    ("critical_radius_nm", "Critical radius (nm)"),
    ("barrier_kt", "Nucleation barrier (kT)"),
    ("von_mises_mpa", "Von Mises stress (MPa)"),
    ("coldest_hold_c_for_target", "Coldest hold for the target (°C)"),
    ("largest_volume_ml_for_target", "Largest volume for the target (mL)"),
    ("target_probability", "Target probability"),
])
def test_labels_carry_the_unit_of_the_key(path, label):
    assert label_for(path) == label


def test_unit_suffixes_and_css_names():
    assert unit_of("hold_h") == ("hold", "h")
    assert unit_of("geometry") == ("geometry", "")
    assert css_name("schedule.steps[1].hold_h") == "cm-f-schedule-steps-1-hold_h"


@pytest.mark.parametrize("demo, path, bad", [
    # (demo, field, a value the loader refuses): the field's hint states the range the loader names
    (DEMO, "schedule.start_c", 41.0),
    (DEMO, "schedule.steps[0].ramp_to_c", -197.0),
    (DEMO, "schedule.steps[1].hold_h", 0.0),
    (DEMO, "schedule.steps[1].hold_h", 17521.0),
    ("slow-freeze-dmso", "schedule.steps[1].hold_min", 0.0),
    ("slow-freeze-dmso", "schedule.steps[5].plunge_to_c", -200.0),
    (DEMO, "sample.volume_ml", 6000.0),
    (DEMO, "sample.diameter_mm", 0.0),
    ("rigid-chamber-hold", "container.cavity_ml", 0.0),
    ("rigid-chamber-hold", "container.outer_diameter_mm", 5000.0),
    (DEMO, "solution.cryoprotectants[0].mass_percent", 0.0),
    ("slow-freeze-cells-loading", "cells.loading[0].temperature_c", 41.0),
    ("slow-freeze-cells-loading", "cells.min_volume_fraction", 0.0),
])
def test_a_fields_hint_states_the_range_the_loader_enforces(demo, path, bad):
    from planner.ui.fields import hint_for, range_for

    m = PlannerModel(evaluate=stand_in_evaluate(), inline=True)
    m.load_demo(demo)
    assert m.current and "valid: " in hint_for(path)
    m.set_value(path, bad)
    message = m.field_errors[path]  # the loader's own refusal, as the field shows it
    allowed = message.split("allowed: ", 1)[1]
    assert allowed == range_for(path).split(";")[0]
    assert f"valid: {allowed}" in hint_for(path)


def test_a_rigid_chambers_temperature_limit_is_in_the_hint_as_the_loader_states_it():
    from planner.ui.fields import hint_for

    m = PlannerModel(evaluate=stand_in_evaluate(), inline=True)
    m.load_demo("rigid-chamber-hold")
    m.set_value("schedule.steps[0].ramp_to_c", -22.0)
    message = m.field_errors["schedule.steps[0].ramp_to_c"]
    # the ice Ih-III-liquid triple point, 251.165 K [ref:iapws-r14-08], is -21.985 C
    assert "no colder than -21.985 C in a rigid chamber" in message
    assert "in a rigid chamber no colder than -21.985" in hint_for("schedule.steps[0].ramp_to_c")


def test_range_hints_keep_the_words_and_leave_the_labels_alone():
    from planner.ui.fields import hint_for

    # the labels the browser tests find the fields by
    assert [label_for(p) for p in ("schedule.start_c", "schedule.steps[1].hold_h", "schedule.steps[1].hold_min",
                                   "schedule.steps[2].plunge_to_c")] == [
        "Start temperature (°C)", "Hold for (h)", "Hold for (min)", "Plunge into bath at (°C)"]
    assert hint_for("sample.volume_ml") == "volume of the sample body; valid: a number from 1e-09 to 5000"
    assert hint_for("environment.heat_transfer") == "how heat leaves the sample"  # a word, not a number


def test_number_formatting_for_the_screen():
    assert fmt(None) == "–"
    assert fmt(3.14159) == "3.142"
    assert fmt(2.205e-05) == "2.205e-5"
    assert fmt(float("nan")) == "–"
    assert fmt(True) == "yes"


# --- the model with the stand-in assessment --------------------------------------------------------------

@pytest.fixture
def model():
    m = PlannerModel(evaluate=stand_in_evaluate(), inline=True)
    m.load_demo(DEMO)
    return m


def test_demos_are_found_and_are_invented_examples():
    demos = demo_files()
    assert {"supercooled-open-vial", "rigid-chamber-hold", "slow-freeze-dmso"} <= set(demos)
    for path in demos.values():
        assert "invented" in path.read_text(encoding="utf-8").lower()


def test_a_change_reaches_the_margins(model):
    assert model.current and model.margins()[0].value == pytest.approx(1.0)
    model.set_value("sample.volume_ml", "7.5")
    assert model.current
    row = model.margins()[0]
    assert row.value == pytest.approx(7.5) and row.state == "watch" and row.word == "watch"


def test_a_bad_value_shows_the_loaders_own_error_and_keeps_the_last_result_stale(model):
    before = model.report
    model.set_value("sample.volume_ml", "-2")
    with pytest.raises(InputError) as loader_error:
        doc = model.draft.document
        parse_protocol(protocol_to_yaml(doc), DEMO)
    assert model.field_errors == {"sample.volume_ml": str(loader_error.value)}
    assert "sample.volume_ml" in model.field_errors["sample.volume_ml"]
    assert "-2" in model.field_errors["sample.volume_ml"]
    assert model.stale and not model.current
    assert model.report is before  # the last valid result stays ...
    assert "Stale" in strip_html(model.margins(), "fine", model.stale, False)  # ... marked stale
    model.set_value("sample.volume_ml", "1")
    assert not model.stale and model.field_errors == {} and model.current


def test_text_in_a_number_field_is_refused_by_the_loader_naming_the_field(model):
    model.set_value("sample.volume_ml", "two")
    message = model.field_errors["sample.volume_ml"]
    assert "sample.volume_ml" in message and "'two'" in message and "5000" in message


def test_moving_between_steps_loses_nothing(model):
    model.set_value("sample.volume_ml", "0.5")
    model.set_value("solution.cryoprotectants[0].mass_percent", "12")
    for _ in model.step_names:
        model.next()
    assert model.step == "sign"
    for _ in model.step_names:
        model.back()
    assert model.step == "sample"
    model.go("schedule")
    model.go("solution")
    assert model.value("sample.volume_ml") == 0.5
    assert model.value("solution.cryoprotectants[0].mass_percent") == 12
    assert model.visited == set(model.step_names)
    with pytest.raises(InputError, match="step"):
        model.go("nowhere")


def test_rows_are_added_removed_and_moved(model):
    steps = model.value("schedule.steps")
    n = len(steps)
    index = model.add_row("schedule.steps", "hold")
    assert index == n and model.value(f"schedule.steps[{n}]") == {"hold_h": None}
    # an empty hold reaches the loader as an empty step (the draft keeps no empty values); the refusal is
    # shown on the box to fill, in the loader's words for a missing value
    assert model.field_errors == {
        f"schedule.steps[{n}].hold_h": f"schedule.steps[{n}].hold_h: no value given; allowed: a value is "
                                       "required"}
    assert model.errors_within(f"schedule.steps[{n}]") == [model.field_errors[f"schedule.steps[{n}].hold_h"]]
    assert not model.current and model.message == ""  # shown on the box, so not repeated as a message
    model.set_value(f"schedule.steps[{n}].hold_h", "1")
    assert model.current
    model.move_row(f"schedule.steps[{n}]", -1)
    assert model.value(f"schedule.steps[{n - 1}]") == {"hold_h": 1}
    model.remove_row(f"schedule.steps[{n - 1}]")
    assert len(model.value("schedule.steps")) == n
    with pytest.raises(InputError, match="new row"):
        model.add_row("schedule.steps", "teleport")


@pytest.mark.parametrize("list_path, kind, box", [
    ("schedule.steps", "seed ice", "seed_ice.at_c"),
    ("schedule.steps", "ramp", "ramp_to_c"),
    ("schedule.steps", "plunge", "plunge_to_c"),
    ("solution.cryoprotectants", None, "agent"),
])
def test_a_new_empty_row_is_refused_at_its_first_box(model, list_path, kind, box):
    index = model.add_row(list_path, kind)
    path = f"{list_path}[{index}].{box}"
    assert list(model.field_errors) == [path]
    assert model.field_errors[path] == f"{path}: no value given; allowed: a value is required"
    assert model.step_of_error(path) == model.step_of_error(f"{list_path}[{index}]")


def test_a_row_with_something_typed_keeps_the_loaders_own_error(model):
    n = model.add_row("schedule.steps", "ramp")
    model.set_value(f"schedule.steps[{n}].ramp_to_c", "2")
    # the rate is still empty: the loader itself names that box
    assert list(model.field_errors) == [f"schedule.steps[{n}].rate_c_per_min"]
    model.set_value(f"schedule.steps[{n}].rate_c_per_min", "1")
    assert model.field_errors == {} and model.current


def test_the_last_schedule_step_cannot_be_removed(model):
    while len(model.value("schedule.steps")) > 1:
        model.remove_row("schedule.steps[0]")
    with pytest.raises(InputError, match="at least 1"):
        model.remove_row("schedule.steps[0]")


def test_changing_the_concentration_unit_keeps_the_number(model):
    row = "solution.cryoprotectants[0]"
    assert model.unit_of_row(row) == "mass_percent"
    model.set_unit(row, "percent_w_v")
    assert model.value(row) == {"agent": "trehalose", "percent_w_v": 5.0}
    assert list(model.value(row)) == ["agent", "percent_w_v"]
    with pytest.raises(InputError, match="unit"):
        model.set_unit(row, "furlongs")


def test_the_cells_block_is_optional_and_comes_back_as_it_was(model):
    assert not model.draft.has("cells")
    model.include("cells", True)
    model.set_value("cells.preset", "made-up-cell")
    assert "cells.preset" in model.field_errors  # the loader names the unknown preset
    model.include("cells", False)
    assert not model.draft.has("cells") and model.current
    model.include("cells", True)
    assert model.value("cells.preset") == "made-up-cell"


def test_an_error_outside_any_field_is_a_message(model):
    model.set_value("schema", "coldmargin/protocol-0")
    expected = "schema: 'coldmargin/protocol-0' is not valid; allowed: exactly 'coldmargin/protocol-1'"
    assert model.step_of_error("schema") is None  # no step shows the schema key ...
    assert model.field_errors == {"schema": expected}
    assert model.message == expected  # ... so the loader's message is shown as a message
    assert model.stale and not model.current
    assert model.step_of_error("sample.volume_ml") == "sample"
    assert model.step_of_error("schedule.steps[1].hold_h") == "schedule"
    assert model.step_of_error("solution.cryoprotectants[0].agent") == "solution"


def test_upload_blank_and_download(model):
    text = (ROOT / "protocols" / "rigid-chamber-hold.yaml").read_text(encoding="utf-8")
    model.load_upload("my-chamber.yaml", text.encode("utf-8"))
    assert model.source_name == "my-chamber" and model.current
    assert model.download_name() == "my-chamber.yaml"
    assert parse_protocol(model.protocol_yaml(), "again").container.kind == "rigid"
    with pytest.raises(InputError, match="UTF-8"):
        model.load_upload("bad.yaml", b"\xff\xfe\x00")
    with pytest.raises(InputError, match="mapping"):
        model.load_upload("list.yaml", b"- 1\n- 2\n")
    model.start_blank()
    assert model.value("sample.volume_ml") is None and model.report is None
    # a blank protocol says what is missing, first the title (the loader checks required keys in order)
    assert model.field_errors == {"title": "title: no value given; allowed: a value is required"}
    assert model.message == ""  # the title field shows it


def test_assessments_are_reused_for_a_draft_seen_before():
    calls: list = []
    m = PlannerModel(evaluate=stand_in_evaluate(calls), inline=True)
    m.load_demo(DEMO)
    m.set_value("sample.volume_ml", "2.0")
    m.set_value("sample.volume_ml", "1.0")
    m.set_value("sample.volume_ml", "2.0")
    assert len(calls) == 2  # the demo and volume 2; flipping back and forth is not re-assessed


def test_the_threaded_worker_applies_only_the_newest_result():
    m = PlannerModel(evaluate=stand_in_evaluate(), inline=False)
    m.load_demo(DEMO)
    m.wait()
    for v in ("2", "3", "4"):
        m.set_value("sample.volume_ml", v)
    m.wait()
    assert m.margins()[0].value == pytest.approx(4.0) and not m.working


def test_margin_rows_read_the_assessment_shape():
    rows = margin_rows({"margin_states": [
        {"name": "a", "label": "A", "value": 1.0, "unit": "K", "state": "do-not-proceed", "watch": 5, "stop": 15,
         "better": "lower", "policy": "default"}]})
    assert rows[0].word == "do not proceed"
    assert rows[0].threshold_text == "watch above 5, stop above 15 K (default policy)"
    html = strip_html(rows, "do-not-proceed", False, False)
    assert "do not proceed" in html and "✕" in html  # a word and a mark, not colour alone


# --- the widgets, headless ---------------------------------------------------------------------------------

def _field(app, path):
    for view in app.step_views.values():
        for fv in view.fields:
            if fv.path == path:
                return fv
        for rows in view.rows:
            for fv in rows.fields:
                if fv.path == path:
                    return fv
    raise AssertionError(f"no field {path}")


def test_app_widgets_bind_to_the_model():
    from planner.ui.planner_app import PlannerApp

    app = PlannerApp(protocol=ROOT / "protocols" / f"{DEMO}.yaml",
                     model=PlannerModel(evaluate=stand_in_evaluate(), inline=True))
    assert "Test margin" in app.strip.value and "fine" in app.strip.value
    volume = _field(app, "sample.volume_ml")
    volume.input.value = "7"
    assert app.model.value("sample.volume_ml") == 7
    assert "watch" in app.strip.value and "7 mL" in app.strip.value
    volume.input.value = "-1"
    assert "sample.volume_ml" in volume.error.value and "-1" in volume.error.value
    assert "Stale" in app.strip.value and "7 mL" in app.strip.value  # last valid result, marked stale
    volume.input.value = "1"
    assert volume.error.value == "" and "Stale" not in app.strip.value
    # steps: the bar, next and back drive the model; the body shows the step
    app.next_button.click()
    assert app.model.step == "container" and app.body.children[0] is app.step_views["container"].box
    app.steps_bar.value = "review"
    assert app.body.children[0] is app.review.box
    # rows: add a hold from the schedule step
    rows = app.step_views["schedule"].rows[0]
    n = len(app.model.value("schedule.steps"))
    rows.new_kind.value = "hold"
    rows.box.children[-1].children[1].click()
    assert len(app.model.value("schedule.steps")) == n + 1
    assert any(fv.path == f"schedule.steps[{n}].hold_h" for fv in rows.fields)
    # the protocol downloads as YAML from the page itself
    assert "data:text/yaml;base64," in app.download.value
    assert "Planning support only" in app.planning.value


@pytest.mark.slow
def test_whole_demo_with_the_real_assessment():
    """The open-vial demo through every step with the real assessment: a change of the trehalose
    concentration moves the liquidus the way the solution model says, and the supercooling margin with it."""
    from planner.solution import composition, freezing_point
    from planner.ui.planner_app import PlannerApp

    app = PlannerApp(protocol=ROOT / "protocols" / f"{DEMO}.yaml", inline=True)
    m = app.model
    assert m.current, m.message
    before = m.report["solution"]
    margins = {r.name: r for r in m.margins()}
    assert "supercooling_k" in margins
    visited = []
    while True:
        visited.append(m.step)
        if m.step == "sign":
            break
        app.next_button.click()
    assert visited == m.step_names
    field = _field(app, "solution.cryoprotectants[0].mass_percent")
    field.input.value = "15"
    assert m.current
    after = m.report["solution"]
    expected = float(np.asarray(freezing_point(composition("isotonic-saline", [("trehalose", "mass_percent", 15.0)]))))
    liquidus_key = next(k for k in after if k.startswith("freezing_point") or k.startswith("liquidus"))
    assert after[liquidus_key] == pytest.approx(expected - CELSIUS_OFFSET, abs=2e-3)
    assert after[liquidus_key] < before[liquidus_key]
    new_margins = {r.name: r for r in m.margins()}
    assert new_margins["supercooling_k"].value < margins["supercooling_k"].value
    assert "Cautions" in app.sign.box.children[0].value
    assert app.sign.cautions.value  # cautions shown before signing


def test_what_would_it_take_lists_only_changes_that_help(model):
    from planner.ui.whatif import suggestions

    model.set_value("sample.volume_ml", "7")
    assert model.margins()[0].state == "watch"

    def evaluate(doc):
        return stand_in_evaluate()(doc, "x", None).report

    seen = []
    found = suggestions(model.draft.document, model.report, evaluate, progress=lambda d, t: seen.append((d, t)))
    labels = [s.label for s in found]
    assert labels == ["half the sample volume"]  # the stand-in margin only depends on the volume
    assert found[0].improved == [("Test margin", "watch", "fine")]
    assert seen[-1][0] == seen[-1][1]
    assert model.value("sample.volume_ml") == 7  # the draft itself is not changed


def test_review_suggestions_from_the_widgets():
    from planner.ui.planner_app import PlannerApp

    app = PlannerApp(protocol=ROOT / "protocols" / f"{DEMO}.yaml",
                     model=PlannerModel(evaluate=stand_in_evaluate(), inline=True))
    app.model.set_value("sample.volume_ml", "7")
    app.model.go("review")
    app.review.suggest_button.click()
    assert "half the sample volume" in app.review.suggestions.value


def test_opening_another_protocol_over_typed_changes_asks_first():
    from planner.ui.planner_app import PlannerApp

    app = PlannerApp(protocol=ROOT / "protocols" / f"{DEMO}.yaml",
                     model=PlannerModel(evaluate=stand_in_evaluate(), inline=True))
    assert not app.model.edited
    _field(app, "sample.volume_ml").input.value = "3"
    assert app.model.edited
    app.start_choice.value = "demo:rigid-chamber-hold"
    app.open_button.click()
    assert app.model.value("sample.volume_ml") == 3 and "click Open again" in app.message.value
    app.open_button.click()
    assert app.model.source_name == "rigid-chamber-hold" and not app.model.edited


@pytest.mark.slow
def test_a_key_the_planner_asks_for_gets_a_box_of_its_own():
    """The real assessment asks for a DMSO permeability the chosen cell type lacks: a box appears for it."""
    from planner.ui.planner_app import PlannerApp

    app = PlannerApp(protocol=ROOT / "protocols" / "slow-freeze-dmso.yaml", inline=True)
    cells = app.step_views["cells"]
    cells.include.value = True
    assert app.model.draft.has("cells")
    preset = next(fv for fv in cells.fields if fv.path == "cells.preset")
    preset.input.value = preset.input.options[1][1]  # the first cell type the data file knows
    wanted = [p for p in app.model.field_errors if p.startswith("cells.permeability_um_per_s.")]
    assert wanted, app.model.field_errors  # this cell type has no permeability for DMSO
    box = next(fv for fv in cells.fields if fv.path == wanted[0])
    assert box.input.description == "Permeability of dmso (µm/s)" and "dmso" in box.error.value
    box.input.value = "1.5"
    assert app.model.value(wanted[0]) == 1.5
    assert wanted[0] not in app.model.field_errors


def test_the_app_is_built_in_line_then_uses_threads(monkeypatch):
    """While the notebook runs no page is connected: the first assessment and chart are made in line (no
    thread touches widgets before a page is there), the workers take over afterwards. Outside voila (a
    script, or a notebook in Jupyter) the chart is drawn at once."""
    from planner.ui.planner_app import PlannerApp

    monkeypatch.setenv("COLDMARGIN_PROTOCOL", str(ROOT / "protocols" / f"{DEMO}.yaml"))
    monkeypatch.delenv("VOILA_PREHEAT", raising=False)
    app = PlannerApp()
    assert app.model.current and "<svg" in app.step_views["sample"].chart.value
    assert not app.model.worker.inline
    assert not any(v.chart_worker.inline for v in app.step_views.values())
    assert not app.charts_held and not hasattr(app, "page_shown")


def _held_app(monkeypatch, preheat: str = "False"):
    from planner.ui.planner_app import PlannerApp

    monkeypatch.setenv("COLDMARGIN_PROTOCOL", str(ROOT / "protocols" / f"{DEMO}.yaml"))
    monkeypatch.setenv("VOILA_PREHEAT", preheat)  # "False": a kernel started for one page; "True": pre-started
    return PlannerApp()


def test_a_pre_started_kernel_holds_the_chart_and_warms_the_engine_without_touching_widgets(monkeypatch):
    """A pre-started kernel may be handed to a page that is already waiting: the chart waits for the page,
    and the chart engine is warmed meanwhile (a kernel started for one page does not warm it: it would
    hold the interpreter while that page loads)."""
    import threading

    from planner.ui import planner_app

    warmed = threading.Event()
    monkeypatch.setattr(planner_app, "_warm_charts", warmed.set)
    monkeypatch.setattr(planner_app, "WARM_UP_AFTER_S", 0.0)
    app = _held_app(monkeypatch, "True")
    assert app.charts_held and "<svg" not in app.step_views["sample"].chart.value
    assert warmed.wait(timeout=10)
    app.page_shown.shown = True
    app.step_views["sample"].chart_worker.wait(timeout=60)
    assert "<svg" in app.step_views["sample"].chart.value

    warmed.clear()
    app = _held_app(monkeypatch, "False")
    assert app.charts_held and not warmed.wait(timeout=0.5)


def test_a_page_kernel_draws_the_first_chart_once_the_page_says_it_is_up(monkeypatch):
    """In a kernel started for a page's request, the first chart (about a second of work) waits until the
    page has shown the app; the strip and the inputs do not wait."""
    from planner.ui.widgets import PageShown

    app = _held_app(monkeypatch)
    view = app.step_views["sample"]
    assert app.model.current and "cm-verdict" in app.strip.value  # assessed in line
    assert app.charts_held and "<svg" not in view.chart.value
    assert isinstance(app.page_shown, PageShown) and app.page_shown in app.widget.children
    app.page_shown.shown = True  # what the widget's script does when the page renders it
    assert not app.charts_held
    view.chart_worker.wait(timeout=60)
    assert "<svg" in view.chart.value


def test_a_held_chart_is_drawn_on_the_first_edit_even_without_the_page_signal(monkeypatch):
    """If the page's signal never arrives (its script failed to load, say), a person's first edit or step
    change still brings the charts back."""
    app = _held_app(monkeypatch)
    app.model.step = "solution"
    assert not app.charts_held
    view = app.step_views["solution"]
    view.chart_worker.wait(timeout=60)
    assert "<svg" in view.chart.value

    app = _held_app(monkeypatch)
    volume = next(fv for fv in app.step_views["sample"].fields if fv.path.endswith("volume_ml"))
    app.edit(lambda: app.model.set_value(volume.path, 1.5))
    assert not app.charts_held
    app.model.worker.wait(timeout=60)
    app.step_views["sample"].chart_worker.wait(timeout=60)
    assert "<svg" in app.step_views["sample"].chart.value


def test_a_chart_is_not_drawn_while_a_newer_assessment_runs():
    """Drawing the chart of a result already replaced would slow the newer assessment down; its own chart
    follows when it arrives."""
    from planner.ui.planner_app import PlannerApp

    app = PlannerApp(protocol=ROOT / "protocols" / f"{DEMO}.yaml", inline=True)
    view = app.step_views["sample"]
    before = view.chart.value
    assert "<svg" in before
    app.model.working = True  # as while the worker assesses a newer draft
    view.chart_revision = -1
    view.chart_evaluation = None  # the chart on show is of an older result than the model's
    view.refresh_chart()
    assert "<svg" not in view.chart.value.split("</div>", 1)[0]  # the "updating" note, not a new chart
    assert view.chart_revision == -1  # to be drawn again
    app.model.working = False
    view.refresh_chart()
    assert view.chart.value.startswith('<div class="cm-chart"><svg')  # drawn anew (its SVG ids differ)
    assert view.chart_revision == app.model.result_revision


def test_a_page_starts_with_the_first_step_only_and_builds_the_others_when_shown():
    """Every widget is a model the browser must build before the page is usable: the first page holds the
    first step's widgets only (ten viewers at once each get a light page); a step is built when first
    shown and then kept, so what was typed in it stays."""
    import ipywidgets as w

    from planner.ui.planner_app import PlannerApp

    before = len(w.widgets.widget._instances)
    app = PlannerApp(protocol=ROOT / "protocols" / f"{DEMO}.yaml",
                     model=PlannerModel(evaluate=stand_in_evaluate(), inline=True))
    first_page = len(w.widgets.widget._instances) - before
    assert list(app.step_views) == ["sample"]
    assert app._review is None and app._sign is None
    assert first_page < 250, first_page  # was about 560 with every step built up front
    app.model.go("container")
    assert list(app.step_views) == ["sample", "container"]
    assert app.body.children[0] is app.step_views["container"].box
    volume = _field(app, "sample.volume_ml")
    volume.input.value = "3"
    app.model.go("solution")
    app.model.go("sample")
    assert app.step_views["sample"] is volume.app.step_views["sample"]
    assert _field(app, "sample.volume_ml").input.value == "3" and app.model.value("sample.volume_ml") == 3
    app.steps_bar.value = "review"
    assert app._review is not None and app.body.children[0] is app.review.box
    assert app._sign is None


def test_a_second_agent_in_a_bath_is_chosen_from_the_same_list_as_the_first():
    from planner.ui import steps as registry

    spec = [i for i in registry.step("cells").items if isinstance(i, registry.Rows) and i.path == "cells.unloading"][0]
    row = {"carrier": "isotonic-saline", "temperature_c": 22.0, "duration_min": 5,
           "cryoprotectants": [{"agent": "glycerol", "molal": 0.66}, {"agent": "trehalose", "molal": 0.2}]}
    fields = {f.path: f for f in registry.row_fields(spec, row)}
    second = fields["cryoprotectants[1].agent"]
    assert second.kind == "choice" and {"trehalose", "glycerol"} <= set(second.options())
    assert fields["cryoprotectants[1].molal"].kind == "number"


def test_a_word_and_its_label_show_on_one_row():
    from planner.ui.summary import section_numbers

    rows = dict(section_numbers({"environment": "still-air", "environment_label": "Still air", "biot_number": 0.0165,
                                 "material_label": "a label with no word beside it"}))
    assert rows["Environment"] == "Still air (still-air)"
    assert "Environment label" not in rows and rows["Biot number"] == "0.0165"
    assert rows["Material label"] == "a label with no word beside it"  # kept: nothing to join it to
