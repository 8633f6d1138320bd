"""The compare, archive and calibrate apps, the charts and the server launcher, headless."""

from __future__ import annotations

import base64
import hashlib
import html
import json
import math
import os
import re
import socket
from pathlib import Path

import numpy as np
import pytest

from planner.errors import InputError
from planner.protocol import parse_protocol, protocol_to_yaml
from planner.ui.planner_model import Evaluation

ROOT = Path(__file__).resolve().parents[1]
DEMO = "supercooled-open-vial"


def stand_in_evaluate():
    """Test-only assessment: the real loader, then one margin equal to the sample volume in mL (no physics)."""

    def evaluate(document, name, base_dir):
        protocol = parse_protocol(protocol_to_yaml(document), name, base_dir=base_dir)
        volume_ml = protocol.sample.volume * 1e6
        state = "fine" if volume_ml < 5 else "watch" if volume_ml < 10 else "do-not-proceed"
        report = {"schema": "test", "title": protocol.title, "flags": [], "cautions": [],
                  "margin_states": [{"name": "volume_test", "label": "Test margin", "value": volume_ml, "unit": "mL",
                                     "watch": 5.0, "stop": 10.0, "better": "lower", "policy": "default",
                                     "state": state}],
                  "verdict": {"state": "fine", "reasons": []}}
        return Evaluation(protocol, None, report)

    return evaluate


def downloads(html_text):
    """The page's download links: file name -> (link text, mime type, the bytes it downloads)."""
    found = {}
    for name, mime, b64, text in re.findall(
            r'<a class="cm-download" download="([^"]+)" href="data:([^;]+);base64,([^"]*)">([^<]*)</a>', html_text):
        found[name] = (text, mime, base64.b64decode(b64))
    return found

# --- the homogeneous-nucleation limit drawn on the schedule chart -------------------------------------------


@pytest.mark.parametrize("celsius, log10_rate_per_cm3_s", [
    # Koop & Murray 2016 (J. Chem. Phys. 145:211915) parameterisation, evaluated at these temperatures:
    # log10 J = 4.42 at -35 C and 8.79 at -38 C, computed from the published polynomial
    # [ref:koop-murray-2016]
    (-35.0, 4.42),
    (-38.0, 8.79),
])
def test_homogeneous_limit_koop_murray_2016(celsius, log10_rate_per_cm3_s):
    """A volume that freezes within a second at exactly the published rate has its limit at that temperature."""
    import planner.nucleation as nuc
    from planner.ui.stepcharts import homogeneous_limit

    volume = 10.0 ** (-log10_rate_per_cm3_s) * 1e-6  # m3 with J V = 1/s
    limit = homogeneous_limit(volume, nuc.PURE_WATER_LIQUIDUS)
    assert limit - 273.15 == pytest.approx(celsius, abs=0.15)  # grid of 0.1 K, published rate to 0.01 dex


def test_homogeneous_limit_of_a_millilitre_is_warmer_than_of_a_droplet():
    import planner.nucleation as nuc
    from planner.ui.stepcharts import homogeneous_limit

    small = homogeneous_limit(1e-15, nuc.PURE_WATER_LIQUIDUS)
    large = homogeneous_limit(1e-6, nuc.PURE_WATER_LIQUIDUS)
    assert large > small


# --- chart builders take plain data -----------------------------------------------------------------------

def test_chart_builders_draw_offline_and_skip_missing_points():
    from planner.ui.stepcharts import (
        cells_chart,
        chamber_chart,
        freeze_map_chart,
        freezing_point_chart,
        schedule_chart,
    )
    from planner.ui.svg import chart_svg

    charts = [
        schedule_chart([0, 1, 2], {"bath": [4, -4, -4], "sample centre": [4, None, -3.9]}, liquidus_c=-0.8,
                       homogeneous_c=-38.0, probability_time_h=[0, 2], probability=[0, 0.01]),
        freezing_point_chart([0, 5, 10], [-0.5, -0.8, float("nan")], unit="% w/w", agent="glycerol", chosen=5,
                             chosen_freezing_c=-0.8, hold_c=-4),
        chamber_chart([-1, -5, -10], [13.2, 60.0, 110.0], [0.07, 0.26, 0.39], hold_c=-4, worst_c=-21.985),
        cells_chart([0, 1, 2], [1.0, 0.7, 1.1], ["loading", "loading", "unloading"], low=0.6, high=1.2),
        freeze_map_chart([1, 2], [-2, -4], [[0.01, 0.02], [0.05, 0.1]], marks=[(1.0, -4.0, "A")]),
    ]
    for chart in charts:
        svg = chart_svg(chart)
        assert svg.startswith("<svg") and "http" not in svg.replace("http://www.w3.org", "")


def _text_positions(svg):
    """aria label -> (x, y) of each text mark of a chart's SVG."""
    return {label: (float(x), float(y)) for label, x, y in re.findall(
        r'<text aria-label="([^"]*)"[^>]*transform="translate\(([-\d.]+),([-\d.]+)\)"', svg)}


def test_freeze_map_labels_sit_inside_their_cell_and_shared_cells_share_one_label():
    """A scenario's label is drawn inside its boxed cell, nearer its own number than the number of the
    cell above (drawn above the box it covered that number); two scenarios in one cell get one label."""
    from planner.ui.stepcharts import freeze_map_chart
    from planner.ui.svg import chart_svg

    svg = chart_svg(freeze_map_chart([1, 2], [-2, -4], [[0.01, 0.02], [0.05, 0.1]],
                                     marks=[(1.0, -4.0, "A"), (1.0, -4.0, "B"), (2.0, -2.0, "C")]))
    at = _text_positions(svg)
    label_ab, own, above = at["v: 1; t: -4; label: A B"], at["v: 1; t: -4; p: 0.05"], at["v: 1; t: -2; p: 0.01"]
    assert label_ab[0] == own[0] and label_ab[1] < own[1]  # above its own number, in the same column
    assert own[1] - label_ab[1] < label_ab[1] - above[1]
    assert "v: 2; t: -2; label: C" in at
    assert sum(1 for k in at if "label:" in k) == 2  # one label per boxed cell


def _svg_texts(html_text):
    return set(re.findall(r"<text[^>]*>([^<]*)</text>", html_text))


def _line_marks(html_text):
    """The aria labels of the line marks (each names its first point, with its series)."""
    return re.findall(r'<path aria-label="([^"]*)" role="graphics-symbol" aria-roledescription="line mark"', html_text)


def test_chamber_chart_of_the_rigid_demos_real_assessment():
    """The step chart on the real assessment of the rigid demo: pressure and ice fraction against
    temperature, the planned hold and the worst case marked."""
    from planner.ui.planner_model import PlannerModel
    from planner.ui.stepcharts import chart_for_step

    m = PlannerModel(inline=True)  # the real assessment
    m.load_demo("rigid-chamber-hold")
    assert m.current, m.message
    chart = chart_for_step("chamber", m)
    assert chart.startswith('<div class="cm-chart"><svg')  # a chart, not a note saying why there is none
    texts = _svg_texts(chart)
    assert {"Chamber pressure if ice forms", "Ice fraction at equilibrium", "pressure (MPa)", "ice mass fraction",
            "temperature (°C)"} <= texts
    assert "planned hold -4.0 °C" in texts  # the demo holds at -4 C (protocols/rigid-chamber-hold.yaml)
    # the worst case is the ice Ih-III-liquid triple point, 251.165 K = -21.985 C [ref:iapws-r14-08]
    assert "worst case -22.0 °C" in texts
    lines = _line_marks(chart)
    assert any("pressure (MPa):" in a for a in lines) and any("ice mass fraction:" in a for a in lines)


def test_cells_chart_of_a_demo_with_a_cells_block_real_assessment():
    """The step chart on the real assessment of the cells demo: cell volume during loading and unloading
    with the cell's tolerance band."""
    from planner.ui.planner_model import PlannerModel
    from planner.ui.stepcharts import chart_for_step

    m = PlannerModel(inline=True)
    m.load_demo("slow-freeze-cells-loading")
    assert m.current, m.message
    chart = chart_for_step("cells", m)
    assert chart.startswith('<div class="cm-chart"><svg')
    texts = _svg_texts(chart)
    assert {"Cell volume during loading and unloading", "cell volume / isotonic volume", "time (min)",
            "loading", "unloading"} <= texts
    # the human-sperm preset's tolerance, 0.75 to 1.1 of isotonic volume (planner/data/cells.yaml, from
    # Gao et al. 1995 as quoted in a secondary source [ref:gao-1995])
    assert {"smallest tolerated 0.75", "largest tolerated 1.10"} <= texts
    assert 'fill="#1f6f43"' in chart  # the band between them
    lines = _line_marks(chart)
    assert any(a.startswith("time (min): 0;") and a.endswith("phase: loading") for a in lines)
    # four loading steps of 5 min, then the unloading line continues the time axis
    assert any(a.startswith("time (min): 20;") and a.endswith("phase: unloading") for a in lines)


def test_open_vial_has_no_chamber_or_cells_chart_and_says_why():
    from planner.ui.planner_model import PlannerModel
    from planner.ui.stepcharts import chart_for_step

    m = PlannerModel(inline=True)
    m.load_demo(DEMO)
    assert "No chamber chart: the container is open" in chart_for_step("chamber", m)
    assert "No cell chart: the protocol has no cells block." in chart_for_step("cells", m)


def test_freeze_map_marks_each_scenario_with_the_nucleation_model():
    from planner.protocol import load_protocol
    from planner.ui.maps import VOLUMES_ML, freeze_map
    from planner.ui.planner_model import default_evaluate
    from planner.yamlio import load_yaml

    path = ROOT / "protocols" / f"{DEMO}.yaml"
    ev = default_evaluate(load_yaml(path.read_text()), DEMO, path.parent)
    volumes, temps, grid, marks, note = freeze_map([(load_protocol(path), ev.assessment)], labels=["A"])
    assert volumes == list(VOLUMES_ML) and grid.shape == (len(temps), len(volumes))
    assert marks == [(pytest.approx(1.0), pytest.approx(marks[0][1]), "A")]
    assert np.all(np.diff(grid, axis=1) >= 0)  # bigger samples freeze more readily ...
    assert np.all(np.diff(grid, axis=0) >= -1e-12)  # ... and so do colder holds (rows go colder)
    assert "72 h" in note


# --- compare --------------------------------------------------------------------------------------------------

def test_compare_lines_up_scenarios_and_keeps_two_to_four():
    from planner.ui.compare_model import CompareModel, scenarios_from_query

    assert scenarios_from_query("scenario=supercooled-open-vial&scenario=nope&scenario=../x") == [DEMO]
    m = CompareModel([DEMO], inline=True, evaluate=stand_in_evaluate())
    assert len(m.scenarios) == 2 and m.names == [f"A: {DEMO}", f"B: copy of {DEMO}"]
    m.set_value(1, "sample.volume_ml", "7")
    names, rows = m.margins_table()
    label, cells = rows[1]
    assert label == "Test margin" and [c.value_text for c in cells] == ["1 mL", "7 mL"]
    assert [c.state for c in cells] == ["fine", "watch"]
    m.set_value(1, "sample.volume_ml", "-1")
    assert m.margins_table()[1][1][1][1].value_text == "7 mL (stale)"
    m.add_demo("rigid-chamber-hold")
    m.duplicate(0)
    with pytest.raises(InputError, match="2 to 4"):
        m.duplicate(0)
    for _ in range(2):
        m.remove(0)
    with pytest.raises(InputError, match="2 to 4"):
        m.remove(0)
    assert m.letters == ["A", "B"]


def test_compare_app_widgets_edit_one_scenario():
    from planner.ui.compare_app import CompareApp
    from planner.ui.compare_model import CompareModel

    app = CompareApp(model=CompareModel([DEMO, "rigid-chamber-hold"], inline=True, evaluate=stand_in_evaluate()))
    column = app.columns[1]
    path, box, err = next(i for i in column.inputs if i[0] == "sample.volume_ml")
    box.value = "12"
    assert "do not proceed" in app.table.value and "12 mL" in app.table.value
    box.value = "abc"
    assert "sample.volume_ml" in err.value and "stale" in app.table.value
    assert "<svg" in app.charts.value  # without the thermal section the bath histories are drawn
    assert "Planning support only" in app.widget.children[-1].value


# --- archive and signing ----------------------------------------------------------------------------------------

PASS = "a passphrase for tests"


@pytest.fixture
def signed(tmp_path):
    from planner.keys import generate_key
    from planner.ui.planner_model import PlannerModel
    from planner.ui.signing import sign_into_archive

    key = tmp_path / "k"
    generate_key("Test Signer", "tester", key, PASS, kdf_rounds=1)
    model = PlannerModel(evaluate=stand_in_evaluate(), inline=True)
    model.load_demo(DEMO)
    archive = tmp_path / "a.sqlite"
    done = sign_into_archive(model, "Test Signer", "authored", str(key), PASS, str(archive), register_key=True,
                             cautions_seen=True)
    return model, key, archive, done


def test_signing_refuses_what_it_must(signed, tmp_path):
    from planner.ui.signing import sign_into_archive

    model, key, archive, done = signed
    assert len(done.record_hash) == 64 and done.version == 1
    with pytest.raises(InputError, match="cautions"):
        sign_into_archive(model, "Test Signer", "authored", str(key), PASS, str(archive), cautions_seen=False)
    with pytest.raises(InputError, match="wrong passphrase"):
        sign_into_archive(model, "Test Signer", "authored", str(key), "not the passphrase", str(archive),
                          cautions_seen=True)
    with pytest.raises(InputError, match="printed name"):
        sign_into_archive(model, "Someone Else", "authored", str(key), PASS, str(archive), cautions_seen=True)
    with pytest.raises(InputError, match="meaning"):
        sign_into_archive(model, "Test Signer", "liked", str(key), PASS, str(archive), cautions_seen=True)
    with pytest.raises(InputError, match="registered"):
        sign_into_archive(model, "Test Signer", "authored", str(key), PASS, str(tmp_path / "new.sqlite"),
                          cautions_seen=True)
    model.set_value("sample.volume_ml", "-3")
    with pytest.raises(InputError, match="stale"):
        sign_into_archive(model, "Test Signer", "authored", str(key), PASS, str(archive), cautions_seen=True)


def test_archive_lists_opens_and_verifies_a_signed_record(signed):
    from planner.ui.archive_app import ArchiveApp
    from planner.ui.archive_model import ArchiveModel

    _, _, archive, done = signed
    m = ArchiveModel(archive)
    m.load()
    assert [r.record_hash for r in m.rows] == [done.record_hash]
    assert m.head == done.head
    opened = m.open_record(done.record_hash, expected_head=done.head)
    assert opened.check.ok and opened.chain.ok and opened.data == done.data
    assert opened.check.signatures[0].printed_name == "Test Signer"
    assert "<html" in m.rendering_html().lower() and m.rendering_pdf().startswith(b"%PDF")
    with pytest.raises(InputError, match="listed"):
        m.open_record("0" * 64)
    app = ArchiveApp(archive)
    assert "<p>1 archived record copy. Chain head" in app.summary.value
    app.verify_button.click()
    assert "cm-verified" in app.result.value and done.record_hash in app.result.value
    assert "record (JSON" in app.downloads.value and "srcdoc=" in app.view.value
    app.expected.value = "9:" + "f" * 64
    app.verify_button.click()
    assert "NOT verified" in app.result.value  # a head kept elsewhere that the archive does not hold


def test_archive_app_offers_the_record_and_both_renderings_for_download(signed):
    from planner.ui.archive_app import ArchiveApp

    _, _, archive, done = signed
    app = ArchiveApp(archive)
    app.verify_button.click()
    links = downloads(app.downloads.value)
    stem = f"record-{done.record_id}-v{done.version}"
    assert sorted(links) == [f"{stem}.html", f"{stem}.json", f"{stem}.pdf"]
    text, mime, data = links[f"{stem}.json"]
    assert mime == "application/json" and data == done.data  # the exact stored bytes
    assert hashlib.sha256(data).hexdigest() == done.record_hash
    text, mime, page = links[f"{stem}.html"]
    assert (text, mime) == ("rendering (HTML)", "text/html")
    page = page.decode("utf-8")
    assert page.lstrip().lower().startswith(("<!doctype html", "<html")) and done.record_hash in page
    assert f"{json.loads(done.data)['body']['record_id']}" in page
    text, mime, pdf = links[f"{stem}.pdf"]
    assert (text, mime) == ("rendering (PDF)", "application/pdf")
    assert pdf.startswith(b"%PDF-") and pdf.rstrip().endswith(b"%%EOF")


def test_a_new_hold_row_shows_its_error_beside_its_hold_box_not_on_the_row():
    from planner.ui.planner_app import PlannerApp
    from planner.ui.planner_model import PlannerModel

    app = PlannerApp(protocol=ROOT / "protocols" / f"{DEMO}.yaml",
                     model=PlannerModel(evaluate=stand_in_evaluate(), inline=True))
    app.model.go("schedule")
    rows = app.step_views["schedule"].rows[0]
    n = len(app.model.value("schedule.steps"))
    rows.new_kind.value = "hold"
    add = [c for c in rows.box.children[-1].children if "cm-add" in c._dom_classes][0]
    add.click()
    rows = app.step_views["schedule"].rows[0]
    box = [fv for fv in rows.fields if fv.path == f"schedule.steps[{n}].hold_h"][0]
    assert "a value is required" in box.error.value and "cm-field-bad" in box.input._dom_classes
    row_error = dict(rows.row_errors)[f"schedule.steps[{n}]"]
    assert row_error.value == ""  # not repeated on the row
    box.input.value = "2"
    assert box.error.value == "" and app.model.current


def test_sign_step_shows_the_record_and_offers_three_downloads(tmp_path):
    from planner.archive import Archive
    from planner.keys import generate_key
    from planner.ui.planner_app import PlannerApp
    from planner.ui.planner_model import PlannerModel

    key = tmp_path / "k"
    generate_key("Test Signer", "tester", key, PASS, kdf_rounds=1)
    archive = tmp_path / "signed.sqlite"
    app = PlannerApp(protocol=ROOT / "protocols" / f"{DEMO}.yaml",
                     model=PlannerModel(evaluate=stand_in_evaluate(), inline=True))
    app.model.go("sign")
    sign = app.sign
    sign.name.value = "Test Signer"
    sign.key_file.value = str(key)
    sign.passphrase.value = PASS
    sign.archive.value = str(archive)
    sign.register.value = True
    sign.sign_button.click()
    assert "cm-message" in sign.status.value and "cautions" in sign.status.value  # the box is not ticked yet
    assert sign.result.value == "" and not archive.exists()
    sign.seen.value = True
    sign.passphrase.value = PASS
    sign.sign_button.click()
    assert sign.status.value == "" and sign.passphrase.value == ""  # the passphrase is not kept
    with Archive.open(archive) as a:
        entries = [e for e in a.entries() if e.kind == "record"]
    assert len(entries) == 1
    data = entries[0].content
    body = json.loads(data)["body"]
    shown = sign.result.value
    assert "Signed and archived." in shown
    assert f"<code class='cm-record-id'>{body['record_id']}</code> version 1" in shown
    assert f"<code class='cm-record-hash'>sha256:{hashlib.sha256(data).hexdigest()}</code>" in shown
    from planner.ui.summary import state_badge

    # the state signed is the record's own (the stand-in assessment's "fine")
    assert body["assessment"]["verdict"]["state"] == "fine"
    assert f"signed with: {state_badge('fine')}" in shown
    links = downloads(shown)
    stem = f"record-{body['record_id']}-v1"
    assert {name: (t, m) for name, (t, m, _) in links.items()} == {
        f"{stem}.json": ("record (JSON)", "application/json"),
        f"{stem}.html": ("record (HTML)", "text/html"),
        f"{stem}.pdf": ("record (PDF)", "application/pdf"),
    }
    assert links[f"{stem}.json"][2] == data  # the bytes that went into the archive
    assert body["record_id"] in links[f"{stem}.html"][2].decode("utf-8")
    assert links[f"{stem}.pdf"][2].startswith(b"%PDF-")


def test_archive_that_does_not_exist_is_an_error_not_created(tmp_path):
    from planner.ui.archive_model import ArchiveModel

    with pytest.raises(InputError, match="existing archive"):
        ArchiveModel(tmp_path / "none.sqlite").load()
    assert not (tmp_path / "none.sqlite").exists()


# --- calibrate --------------------------------------------------------------------------------------------------

def test_calibrate_fits_a_demo_assay_and_saves_without_overwriting(tmp_path):
    from planner.calibration import load_calibration
    from planner.ui.calibrate_model import CalibrateModel, demo_assays

    assays = demo_assays()
    assert assays, "the invented demo assays are missing"
    m = CalibrateModel()
    m.load_demo(next(iter(assays)))
    cal = m.fit()
    summary = dict(m.summary())
    assert summary["Samples (frozen)"] == f"{cal.samples} ({cal.frozen})"
    curve = m.curve()
    assert all(lo <= c <= hi for lo, c, hi in zip(curve["log10_low"], curve["log10_rate"], curve["log10_high"],
                                                  strict=True))
    saved = m.save(tmp_path, "lab cal")
    assert saved.name == "lab-cal.yaml" and (tmp_path / m.assay.name).is_file()
    back = load_calibration(saved)
    assert back.ln_rate_ref == pytest.approx(cal.ln_rate_ref)
    with pytest.raises(InputError, match="overwritten"):
        m.save(tmp_path, "lab cal")
    with pytest.raises(InputError, match="UTF-8"):
        m.load_text("x.csv", b"\xff\xfe")


# an invented plan for the calibration test: 2 mL of saline sealed under oil, held at -6 C (inside the
# demo assay's -4.5 to -8.5 C holds) for 24 h
CALIBRATED_PLAN = """\
schema: coldmargin/protocol-1
title: Invented demo - sealed 2 mL hold at -6 C
sample: {volume_ml: 2.0, geometry: cylinder, diameter_mm: 10.0}
container: {kind: open, interface: sealed}
solution: {carrier: isotonic-saline}
schedule:
  start_c: 4.0
  steps:
    - {ramp_to_c: -6.0, rate_c_per_min: 0.5}
    - {hold_h: 24}
    - {ramp_to_c: 4.0, rate_c_per_min: 1.0}
"""


def test_calibrate_app_fits_shows_the_interval_and_saves_without_overwriting(tmp_path):
    """The calibrate page headless: open the demo assay, fit, see the result with its uncertainty and the
    observed-against-predicted chart, save, and a second save does not overwrite the first."""
    from planner.assessment import assess
    from planner.protocol import load_protocol
    from planner.ui.calibrate_app import CalibrateApp

    app = CalibrateApp(inline=True)
    app.demo.value = "demo-saline-holds"
    app.open_demo.click()
    assert app.message.value == ""
    # protocols/assays/README.md: 36 holds of 2 mL (invented demo data)
    assert "demo-saline-holds.csv: 36 samples" in app.assay.value and "liquidus -0.55 °C" in app.assay.value
    app.fit_button.click()
    result = app.result.value
    assert "cm-message" not in result
    assert "<td>Result</td><td>fitted rate</td>" in result
    rate = re.search(r"<td>Rate at the reference \(1/\(mL s\)\)</td><td>(\S+) \(90 % interval (\S+) to (\S+)\)</td>",
                     result)
    assert rate, result
    centre, low, high = (float(x) for x in rate.groups())
    assert 0 < low < centre < high
    assert f"<td>Samples (frozen)</td><td>36 ({app.model.calibration.frozen})</td>" in result
    charts = re.findall(r'<div class="cm-chart">(<svg.*?</svg>)</div>', result, flags=re.S)
    assert len(charts) == 2  # the rate with its band, and observed against predicted
    observed = _svg_texts(charts[1])
    assert {"Observed against predicted", "predicted fraction frozen", "observed fraction frozen"} <= observed
    assert not app.fit_button.disabled and app.progress.layout.display == "none"

    app.folder.value = str(tmp_path)
    app.name.value = "lab cal"
    app.save_button.click()
    saved = tmp_path / "lab-cal.yaml"
    assert f"<code class='cm-cal-path'>{saved}</code>" in app.saved.value
    first = saved.read_bytes()
    snippet = re.search(r"<code>(nucleation: \{calibration: [^<]+\})</code>", app.saved.value).group(1)
    assert snippet == "nucleation: {calibration: lab-cal.yaml}"
    app.save_button.click()
    assert "cm-message" in app.saved.value and "overwritten" in app.saved.value
    assert saved.read_bytes() == first  # the first calibration is kept as it was

    # a plan whose nucleation key points at the saved file is assessed with it ...
    plain = tmp_path / "plain.yaml"
    plain.write_text(CALIBRATED_PLAN)
    calibrated = tmp_path / "calibrated.yaml"
    calibrated.write_text(CALIBRATED_PLAN + snippet + "\n")
    with_cal = assess(load_protocol(calibrated)).sections["nucleation"].report
    without = assess(load_protocol(plain)).sections["nucleation"].report
    assert with_cal.nucleation_model == "calibration:demo-saline-holds.csv" and with_cal.nucleation_kind == "fit"
    assert with_cal.parameters["nucleation_preset_or_file"] == "calibration:demo-saline-holds.csv"
    assert with_cal.source == "vali-1971"  # the fitted rate's form (Vali 1971), not the default preset's source
    assert not any(f.code == "default-used" and "no nucleation key" in f.message for f in with_cal.flags)
    assert not any(f.code == "extrapolated" for f in with_cal.flags)  # -6 C lies inside the assay
    # ... and without it the documented default for a sealed interface is used, and says so
    assert without.nucleation_model == "sealed-interface" and without.source != with_cal.source
    assert any(f.code == "default-used" and "no nucleation key" in f.message for f in without.flags)
    assert with_cal.freeze_probability != without.freeze_probability


# --- serving ------------------------------------------------------------------------------------------------------

def test_voila_command_binds_loopback_with_token_and_no_sources():
    from planner.serve import ServeConfig, voila_command

    cfg = ServeConfig(token="abc", pool=3, cull_idle_s=600).check()
    cmd = voila_command(cfg, 9999)
    joined = " ".join(cmd)
    for part in ("--Voila.ip=127.0.0.1", "--port=9999", "--Voila.port_retries=0", "--token=abc",
                 "--strip_sources=True", "--show_tracebacks=False", "--template=coldmargin",
                 "--MappingKernelManager.cull_idle_timeout=600", "--preheat_kernel=True", "--pool_size=3",
                 "--VoilaExecutor.timeout=", "--VoilaKernelManager.fill_delay=60"):
        assert part in joined
    assert cmd[3].endswith("notebooks")
    # the pool serves the planner page only; the other notebooks start kernels on demand
    denied = [c.split("=", 1)[1] for c in cmd if c.startswith("--VoilaKernelManager.preheat_denylist=")]
    assert sorted(denied) == ["archive.ipynb", "calibrate.ipynb", "compare.ipynb"]


def test_the_app_writes_the_bytecode_kernels_load(tmp_path, monkeypatch):
    """Kernels load the planner from bytecode, written at app start even where PYTHONDONTWRITEBYTECODE is set."""
    import importlib.util
    import time

    from planner.serve import compile_package

    monkeypatch.setenv("PYTHONDONTWRITEBYTECODE", "1")
    pkg = tmp_path / "pkg"
    (pkg / "sub").mkdir(parents=True)
    (pkg / "a.py").write_text("X = 1\n")
    (pkg / "sub" / "b.py").write_text("Y = 2\n")
    assert compile_package(pkg)
    for src in (pkg / "a.py", pkg / "sub" / "b.py"):
        assert Path(importlib.util.cache_from_source(str(src))).is_file()
    cached = Path(importlib.util.cache_from_source(str(pkg / "a.py")))
    first = cached.read_bytes()
    (pkg / "a.py").write_text("X = 30\n")  # a changed source is compiled again
    later = time.time() + 5
    os.utime(pkg / "a.py", (later, later))
    assert compile_package(pkg)
    assert cached.read_bytes() != first


def test_voila_waits_for_a_cells_output_as_long_as_for_the_notebook():
    """nbclient's own 4 s wait for a cell's output after its reply left pages blank with ten viewers at once
    (the output holding the app's widgets came later, and the page was sent without it; voila's log said
    "Timeout waiting for IOPub output" ten times). The wait is the notebook's own time limit."""
    from planner.serve import ServeConfig, voila_command

    for limit in (10, 180, 3600):
        cmd = voila_command(ServeConfig(token="abc", timeout_s=limit).check(), 9999)
        assert f"--VoilaExecutor.iopub_timeout={limit}" in cmd
        assert f"--VoilaExecutor.timeout={limit}" in cmd


def test_the_app_command_keeps_one_kernel_ready_unless_told_otherwise():
    """The person who starts the server opens the page next: one pre-started kernel has run the notebook by
    then (the page opens in ~2 s, not ~6 s; benchmarks/bench_app.py). ``--pool 0`` keeps none."""
    import argparse

    from planner.serve import add_app_arguments, config_from_args, voila_command

    parser = argparse.ArgumentParser()
    add_app_arguments(parser)
    default = config_from_args(parser.parse_args([]))
    assert default.pool == 1 and "--pool_size=1" in voila_command(default, 9999)
    none = config_from_args(parser.parse_args(["--pool", "0"]))
    assert none.pool == 0 and not any(c.startswith("--preheat_kernel") for c in voila_command(none, 9999))


def test_voila_environment_uses_its_own_jupyter_folders(tmp_path):
    from planner.serve import STATIC, ServeConfig, voila_environment

    protocol = ROOT / "protocols" / f"{DEMO}.yaml"
    env = voila_environment(ServeConfig(protocol=protocol, large_type=True), tmp_path, base={"PATH": "/bin"})
    for name in ("JUPYTER_CONFIG_DIR", "JUPYTER_DATA_DIR", "JUPYTER_RUNTIME_DIR", "IPYTHONDIR"):
        assert Path(env[name]).is_dir() and Path(env[name]).parent == tmp_path
    assert env["JUPYTER_PATH"].split(":")[0] == str(STATIC)
    assert (STATIC / "voila" / "templates" / "coldmargin" / "index.html.j2").is_file()
    assert "cdn." not in (STATIC / "voila" / "templates" / "coldmargin" / "index.html.j2").read_text()
    assert env["COLDMARGIN_PROTOCOL"] == str(protocol.resolve()) and env["COLDMARGIN_LARGE_TYPE"] == "1"


def test_a_taken_port_falls_back_to_a_free_one():
    from planner.serve import free_port, port_is_free

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        s.listen()
        taken = s.getsockname()[1]
        assert not port_is_free(taken)
        other = free_port(taken)
        assert other != taken and port_is_free(other)


@pytest.mark.parametrize("changes, field", [
    ({"port": 70000}, "--port"), ({"pool": 99}, "--pool"), ({"cull_idle_s": 1}, "--cull-idle-min"),
    ({"notebook": "nope"}, "--notebook"), ({"protocol": Path("/no/such.yaml")}, "--protocol"),
    ({"timeout_s": 1}, "--timeout-s"),
])
def test_bad_server_options_name_the_option(changes, field):
    from planner.serve import ServeConfig

    with pytest.raises(InputError, match=field):
        ServeConfig(**changes).check()


def test_print_command_hides_the_token(capsys):
    from planner.serve import main

    assert main(["--print-command", "--port", "0"]) == 0
    out = capsys.readouterr().out
    assert "--token=(hidden)" in out and "voila" in out


def test_notebooks_are_thin_and_saved_without_outputs():
    import nbformat

    for name in ("plan", "compare", "calibrate", "archive"):
        nb = nbformat.read(ROOT / "notebooks" / f"{name}.ipynb", as_version=4)
        code = [c for c in nb.cells if c.cell_type == "code"]
        assert len(code) == 1 and not code[0].outputs and code[0].execution_count is None
        assert code[0].source.startswith("from planner.ui import ") and len(code[0].source.splitlines()) <= 3


def test_isolated_percent_formatting_of_margins():
    from planner.ui.summary import MarginRow

    row = MarginRow("p", "Chance", 0.0096, "1", "fine", 0.01, 0.05, "lower", "default")
    assert row.value_text == "0.0096" and row.threshold_text == "watch above 0.01, stop above 0.05 (default policy)"
    assert math.isfinite(row.value)


def test_the_compare_map_runs_off_the_page_and_shows_progress(monkeypatch):
    """Long work never freezes the page: while the freeze map is computed, the progress bar is shown and an
    edit on the page's own thread is taken at once; the bar goes when the map arrives."""
    import threading

    from planner.ui import maps
    from planner.ui.compare_app import CompareApp
    from planner.ui.compare_model import CompareModel

    started, release = threading.Event(), threading.Event()
    real = maps.freeze_map

    def slow_map(*args, **kwargs):
        started.set()
        assert release.wait(timeout=60)
        return real(*args, **kwargs)

    monkeypatch.setattr(maps, "freeze_map", slow_map)
    release.set()  # the first map, drawn while the app is built, is not held
    model = CompareModel([DEMO, "rigid-chamber-hold"], inline=True)  # the real assessment: the map needs it
    app = CompareApp(model=model)
    app.wait()
    # the page is up: the map and charts are worked out on threads from here on, as in voila
    app.model.inline = False
    from planner.ui.work import Worker

    for m in app.model.scenarios:
        m.worker = Worker(inline=False)
    app.chart_worker, app.map_worker = Worker(inline=False), Worker(inline=False)
    started.clear()
    release.clear()
    column = app.columns[0]
    path, box, err = next(i for i in column.inputs if i[0] == "sample.volume_ml")
    box.value = "0.5"
    assert started.wait(timeout=60)  # the map is being computed on its thread ...
    assert app.map_progress.layout.display == ""
    box.value = "0.8"  # ... and the page's thread takes an edit meanwhile
    assert app.model.scenarios[0].value(path) == 0.8
    assert app.map_progress.layout.display == ""
    release.set()
    app.wait()
    assert app.map_progress.layout.display == "none"
    assert "<svg" in app.map.value


def test_a_refused_edit_marks_the_chart_stale_without_drawing_it_again(monkeypatch):
    """The last valid result stays on show: its chart gains a stale note at once (no "Updating" note and
    no second drawing of the same result), and loses it when the value is put right."""
    import planner.ui.charting as stepcharts
    from planner.ui.planner_app import UPDATING, PlannerApp
    from planner.ui.planner_model import PlannerModel
    from planner.ui.stepcharts_data import STALE_NOTE

    drawn = []
    real = stepcharts.chart_for_step
    monkeypatch.setattr(stepcharts, "chart_for_step", lambda name, snap: drawn.append(name) or real(name, snap))
    app = PlannerApp(protocol=ROOT / "protocols" / f"{DEMO}.yaml", model=PlannerModel(inline=True))
    view = app.step_views["sample"]
    app.release_charts()
    first = view.chart.value
    assert "<svg" in first and STALE_NOTE not in first and drawn == ["freeze_map"]
    box = [fv for fv in view.fields if fv.path == "sample.volume_ml"][0]
    box.input.value = "-2"
    assert app.model.stale and "sample.volume_ml" in box.error.value
    assert STALE_NOTE in view.chart.value and UPDATING not in view.chart.value
    assert view.chart.value.replace(STALE_NOTE, "") == first and drawn == ["freeze_map"]
    box.input.value = "1.0"  # the demo's own volume: its result again
    assert not app.model.stale and view.chart.value == first and drawn == ["freeze_map"]
    box.input.value = "0.5"  # a new result is drawn
    assert drawn == ["freeze_map", "freeze_map"] and view.chart.value != first


def test_the_stale_note_goes_after_the_chart_and_before_its_note():
    from planner.ui.stepcharts_data import STALE_NOTE, with_stale_note

    text = '<div class="cm-chart"><svg></svg></div><div class="cm-chart cm-muted">a note</div>'
    marked = with_stale_note(text, True)
    assert marked == '<div class="cm-chart"><svg></svg></div>' + STALE_NOTE + '<div class="cm-chart cm-muted">a note</div>'
    assert with_stale_note(marked, True) == marked and with_stale_note(marked, False) == text


def test_the_map_says_how_it_scales_the_interface_with_volume():
    """The open-vial demo's 10 mm vial has a liquid-air interface of pi (5 mm)^2 = 78.5 mm^2 (geometry);
    the map's note states it and the volume^(2/3) scaling it assumes for the other volumes."""
    from planner.ui.maps import freeze_map
    from planner.ui.planner_model import PlannerModel

    m = PlannerModel(inline=True)
    m.load_demo("supercooled-open-vial")
    note = freeze_map([(m.protocol, m.assessment)])[4]
    assert "liquid–air interface (78.5 mm² at 1 mL) scales as volume^(2/3)" in note


def _altair_freeze_map(volumes, temps, grid, marks):
    """The map as altair writes it from the same description (altair is the outside reference for the
    spec that planner.ui.mapchart writes by hand)."""
    import altair as alt

    from planner.ui.mapchart import HEIGHT, LIMIT, TITLE, WIDTH, nearest

    p = np.asarray(grid, dtype=float)
    marked = {}
    for v, t, lbl in marks:
        marked.setdefault((nearest(volumes, v), nearest(temps, t)), []).append(lbl)
    rows = [{"v": float(v), "t": float(t), "p": float(p[i, j]), "label": " ".join(marked.get((float(v), float(t)), []))}
            for i, t in enumerate(temps) for j, v in enumerate(volumes) if math.isfinite(p[i, j])]
    x, y = alt.X("v:O", sort="ascending"), alt.Y("t:O", sort="descending")
    ink = alt.condition("datum.p > 0.5", alt.value("white"), alt.value("black"))
    plain, boxed = [r for r in rows if not r["label"]], [r for r in rows if r["label"]]
    layers = [
        alt.Chart(alt.Data(values=rows)).mark_rect().encode(
            x=alt.X("v:O", title="sample volume (mL)", sort="ascending"),
            y=alt.Y("t:O", title="hold temperature (°C)", sort="descending"),
            color=alt.Color("p:Q", title="P(frozen)", scale=alt.Scale(scheme="greys", domain=[0, 1]))),
        alt.Chart(alt.Data(values=plain)).mark_text(fontSize=11).encode(
            x=x, y=y, text=alt.Text("p:Q", format=".2f"), color=ink),
        alt.Chart(alt.Data(values=boxed)).mark_rect(fillOpacity=0, stroke=LIMIT, strokeWidth=3).encode(x=x, y=y),
        alt.Chart(alt.Data(values=boxed)).mark_text(fontSize=11, dy=6).encode(
            x=x, y=y, text=alt.Text("p:Q", format=".2f"), color=ink),
        alt.Chart(alt.Data(values=boxed)).mark_text(fontSize=10, dy=-7, fontWeight="bold").encode(
            x=x, y=y, text="label:N", color=alt.condition("datum.p > 0.5", alt.value("white"), alt.value(LIMIT))),
    ]
    return alt.layer(*layers).properties(width=WIDTH, height=HEIGHT + 40, title=TITLE).to_dict()


def test_the_map_written_without_altair_is_the_spec_altair_writes():
    import altair as alt

    from planner.ui.mapchart import SCHEMA, freeze_map_chart

    args = ([0.1, 1, 10], [-1, -4, -8], [[0.0, 0.01, 0.03], [0.002, 0.0097, 0.6], [0.02, 0.07, 0.9]],
            [(1.0, -4.0, "A"), (1.0, -4.0, "B"), (10.0, -8.0, "C")])
    assert freeze_map_chart(*args[:3], marks=args[3]) == _altair_freeze_map(*args)
    assert SCHEMA == alt.SCHEMA_URL  # the Vega-Lite version the installed altair writes


def test_a_pages_first_chart_loads_no_chart_library_in_the_kernel():
    """The sample step's map is drawn with neither altair nor (through the app's renderer) vl-convert in
    the process; here with no renderer, so vl-convert draws it locally, but altair stays out."""
    import subprocess
    import sys

    code = ("import sys; from planner.ui.planner_model import PlannerModel; "
            "from planner.ui.charting import chart_for_step; m = PlannerModel(inline=True); "
            "m.load_demo('supercooled-open-vial'); html = chart_for_step('freeze_map', m); "
            "print('altair' in sys.modules, '<svg' in html, 'this plan' in html)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=180, check=True,
                         cwd=ROOT).stdout.split()
    assert out == ["False", "True", "True"]


# invented values a person would type into a blank protocol, by key pattern
BLANK_FILL = {
    "title": "Invented blank-start test", "sample.volume_ml": "1.0", "sample.geometry": "cylinder",
    "sample.diameter_mm": "10", "container.kind": "open", "solution.carrier": "isotonic-saline",
    "solution.cryoprotectants[].agent": "glycerol", "solution.cryoprotectants[].mass_percent": "10",
    "schedule.start_c": "4", "schedule.steps[].ramp_to_c": "-3", "schedule.steps[].rate_c_per_min": "0.5",
}


def _shown_in(app, message: str) -> bool:
    """The message is on the page: beside a box, on a row, or as the app's message."""
    views = list(app.step_views.values())
    boxes = [fv.error.value for v in views for fv in v.fields + [f for rv in v.rows for f in rv.fields]]
    rows = [err.value for v in views for rv in v.rows for _, err in rv.row_errors]
    return any(message in html.unescape(t) for t in boxes + rows + [app.message.value])


def test_from_a_blank_protocol_every_refusal_is_shown_until_the_plan_is_assessed():
    """A biologist starting blank fills what the planner asks for, one refusal at a time; each refusal is
    on show where it belongs (never only in the model), and the plan ends assessed with its margins."""
    from planner.ui.planner_app import PlannerApp
    from planner.ui.planner_model import PlannerModel

    app = PlannerApp(model=PlannerModel(inline=True))
    m = app.model
    m.start_blank()
    asked = []
    for _ in range(30):
        if m.current:
            break
        (path, message), = m.field_errors.items()
        m.go(m.step_of_error(path))
        assert _shown_in(app, message), (path, message)
        pattern = re.sub(r"\[\d+\]", "[]", path)
        asked.append(pattern)
        if pattern == "solution.cryoprotectants[]":  # an agent with no concentration: said on its row
            path, pattern = path + ".mass_percent", pattern + ".mass_percent"
        m.set_value(path, BLANK_FILL[pattern])
    assert m.current and m.report["margin_states"], asked
    assert asked[:2] == ["title", "sample.volume_ml"]  # the block left out is asked for at its first box


@pytest.mark.parametrize("demo, edits", [
    # both ways of giving the surroundings at once: the loader refuses the block, which has no box of its own
    ("supercooled-open-vial", [("environment.h_w_per_m2_k", "10")]),
    ("supercooled-open-vial", [("schedule.steps[1].hold_h", "17520")]),  # two years of schedule in all
    ("supercooled-open-vial", [("nucleation.calibration", "x.yaml")]),  # a preset and a calibration
    ("rigid-chamber-hold", [("container.trapped_gas_ml", "25")]),  # more gas than the cavity holds
    ("rigid-chamber-hold", [("solution.cryoprotectants[0].mass_percent", "95")]),
])
def test_every_refusal_is_on_show_on_the_step_it_belongs_to(demo, edits):
    from planner.ui.planner_app import PlannerApp
    from planner.ui.planner_model import PlannerModel

    app = PlannerApp(model=PlannerModel(inline=True))
    app.model.load_demo(demo)
    for path, value in edits:
        app.model.set_value(path, value)
    (path, message), = app.model.field_errors.items()
    app.model.go(app.model.step_of_error(path))
    assert _shown_in(app, message), (path, message)


def test_a_number_past_its_range_is_refused_on_show_for_every_number_of_every_demo():
    """Each number each demo holds, set past its range in the planner, is refused where the person sees
    it (beside its box, on its row, or in the message line of its step)."""
    from test_protocol import NUMBER_LEAVES, _joined

    from planner.protocol import bound_for
    from planner.ui.planner_app import PlannerApp
    from planner.ui.planner_model import PlannerModel

    app = PlannerApp(model=PlannerModel(inline=True))
    hidden = []
    for demo, path, _ in NUMBER_LEAVES:
        field = _joined(path)
        app.model.load_demo(demo.removesuffix(".yaml"))
        app.model.set_value(field, str(bound_for(field).high * 2 + 1))
        (where, message), = app.model.field_errors.items()
        app.model.go(app.model.step_of_error(where))
        if not _shown_in(app, message):
            hidden.append((demo, field, message))
    assert len(NUMBER_LEAVES) > 60 and hidden == []


def test_a_word_the_planner_does_not_know_is_refused_on_show_for_every_word_of_every_demo():
    """Each choice word each demo holds (agent, carrier, geometry, preset ...), replaced by one the planner
    does not know (as an uploaded file may hold), is refused where the person sees it."""
    from test_protocol import _joined, demo_leaves

    from planner.ui.planner_app import PlannerApp
    from planner.ui.planner_model import PlannerModel

    words = [(d, p) for d, p, v in demo_leaves()
             if isinstance(v, str) and p[-1] not in ("title", "notes", "description", "schema")]
    app = PlannerApp(model=PlannerModel(inline=True))
    hidden = []
    for demo, path in words:
        app.model.load_demo(demo.removesuffix(".yaml"))
        app.model.set_value(_joined(path), "not-a-word")
        (where, message), = app.model.field_errors.items()
        app.model.go(app.model.step_of_error(where))
        if not _shown_in(app, message):
            hidden.append((demo, _joined(path), message))
    assert len(words) > 40 and hidden == []


def test_ticking_cells_with_nothing_given_says_nothing_is_worked_out_yet():
    from planner.ui.planner_app import PlannerApp
    from planner.ui.planner_model import PlannerModel

    app = PlannerApp(model=PlannerModel(inline=True))
    app.model.load_demo(DEMO)  # no cells block
    app.model.go("cells")
    view = app.step_views["cells"]
    assert view.include_note.value == ""
    view.include.value = True
    assert "Nothing is given for the cells yet" in view.include_note.value
    assert "cells" not in app.model.report  # indeed nothing about cells is worked out
    preset = [f for f in view.fields if f.path == "cells.preset"][0]
    preset.input.value = "human-sperm"  # a preset of the planner's cell data
    assert view.include_note.value == "" and "cells" in app.model.report
