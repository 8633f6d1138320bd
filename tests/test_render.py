"""Renderings: the HTML page is self-contained, the PDF's extracted text carries inputs, margins and
their states, cautions, flags, signatures, the planning-support statement and the record hash."""

import hashlib
import io
import json
import re
from pathlib import Path

import pytest
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
from pypdf import PdfReader

from planner import charts, records, render
from planner.keys import KeyRing, SigningKey

DATA = Path(__file__).parent / "data"
PROTOCOL_TEXT = (
    "# invented test protocol\nschema: coldmargin/protocol-1\ntitle: Rigid chamber hold at -4 C\n"
    "container:\n  kind: rigid\n  cavity_ml: 20.0\n"
)


def _key(name, user_id, seed):
    return SigningKey(name, user_id, Ed25519PrivateKey.from_private_bytes(hashlib.sha256(seed).digest()))


ADA = _key("Ada Author", "ada", b"ada")
RUI = _key("Rui Reviewer-Søndergaard", "rui", b"rui")
RING = KeyRing([ADA.public_entry(), RUI.public_entry()])


@pytest.fixture(scope="module")
def assessment():
    a = json.loads((DATA / "record_sample_assessment.json").read_text())
    a.pop("_note")
    return a


@pytest.fixture(scope="module")
def signed(assessment):
    r = records.build_record(PROTOCOL_TEXT, assessment, protocol_name="rigid-hold.yaml")
    r = records.sign_record(r, ADA, "authored")
    r = records.sign_record(r, RUI, "reviewed")
    return records.record_bytes(r)


@pytest.fixture(scope="module")
def page(signed):
    return render.render_html(signed, records.verify_record(signed, RING))


@pytest.fixture(scope="module")
def pdf_text(signed):
    pdf = render.render_pdf(signed, records.verify_record(signed, RING))
    assert pdf.startswith(b"%PDF-")
    reader = PdfReader(io.BytesIO(pdf))
    pages = [p.extract_text() for p in reader.pages]
    return pages


def _squash(text):
    return re.sub(r"\s+", " ", text)


def test_html_is_self_contained(page):
    assert page.startswith("<!DOCTYPE html>")
    assert "<svg" in page  # charts inline
    for pattern in (r'(?:src|href)\s*=\s*"(?:https?:)?//', r"url\(\s*['\"]?(?:https?:)?//", r"@import", r"<script\b",
                    r"<link\b"):
        assert not re.search(pattern, page, re.I), pattern
    # the only http strings are XML namespace names inside the SVG, which are never fetched
    for url in re.findall(r"https?://[^\s\"'<>]+", page):
        assert url in ("http://www.w3.org/2000/svg", "http://www.w3.org/1999/xlink"), url


def test_html_shows_everything(page, signed, assessment):
    text = _squash(re.sub(r"<[^>]+>", " ", page))
    h = hashlib.sha256(signed).hexdigest()
    assert f"sha256:{h}" in text
    assert "verified: every signature valid" in text
    for m in assessment["margin_states"]:
        assert m["label"] in text
    for word in ("fine", "watch", "not judged"):
        assert word in text
    for c in assessment["cautions"]:
        assert c["title"] in text
    assert "nucleation: preset parameters are rough" in text  # a flag
    assert "Ada Author" in text and "Rui Reviewer-Søndergaard" in text
    assert "authored" in text and "reviewed" in text
    assert "container: kind: rigid cavity_ml: 20.0" in text  # the protocol as entered
    assert "Planning support only" in text and "licensed practice decide" in text


def test_html_escapes_what_the_user_wrote(assessment):
    a = dict(assessment, title="<script>alert(1)</script>")
    r = records.sign_record(records.build_record("title: x\n", a, protocol_name="<b>.yaml"), ADA, "authored")
    page = render.render_html(records.record_bytes(r))
    assert "<script>alert" not in page and "&lt;script&gt;" in page
    assert "signatures not checked" in page


def test_state_colours_differ_in_lightness():
    """States stay apart in grey-scale: relative luminance (ITU-R BT.709 weights) at least 0.25 apart
    (common practice, no source) – and every state is also written as a word."""

    def luminance(hex_colour):
        r, g, b = (int(hex_colour[i:i + 2], 16) / 255 for i in (1, 3, 5))
        return 0.2126 * r + 0.7152 * g + 0.0722 * b

    fills = [luminance(charts.STATE_COLOURS[s][0]) for s in ("fine", "watch", "do-not-proceed")]
    assert fills[0] - fills[1] > 0.25 and fills[1] - fills[2] > 0.25


def test_margin_position():
    assert charts.margin_position(15.0, 5.0, 15.0) == 0.0  # at stop
    assert charts.margin_position(5.0, 5.0, 15.0) == 1.0  # at watch
    assert charts.margin_position(0.02, 0.01, 0.05) == pytest.approx(0.75)  # lower is better
    assert charts.margin_position(4.0, 2.0, 1.0) == 3.0  # higher is better
    assert charts.margin_position(None, 1, 2) is None
    pos = [charts.margin_position(v, 5.0, 15.0) for v in (1.0, 7.0, 20.0)]
    assert pos[0] > 1 > pos[1] > 0 > pos[2]


def test_series_chart_skips_missing_points():
    spec = charts.series_chart([1, 2, 3], [1.0, None, float("nan")], "T [C]", "p [MPa]").to_dict()
    assert spec["data"]["values"] == [{"x": 1.0, "y": 1.0}]
    with pytest.raises(ValueError, match="series"):
        charts.series_chart([1, 2], [1.0], "x", "y")


def test_pdf_text_carries_the_record(pdf_text, signed, assessment):
    text = _squash(" ".join(pdf_text))
    h = hashlib.sha256(signed).hexdigest()
    assert f"sha256:{h}" in text
    for p in pdf_text:  # every page: the statement and the hash in the footer
        assert "licensed practice decide" in _squash(p)
        assert h in p
    assert assessment["title"] in text
    for m in assessment["margin_states"]:
        assert m["label"].split()[0] in text
    for word in ("fine", "watch", "not judged", "Margins", "Cautions", "Flags", "Signatures"):
        assert word in text
    for c in assessment["cautions"]:
        assert c["title"] in text
    assert "nucleation: preset parameters are rough" in text
    assert "Ada Author" in text and "Rui Reviewer-Søndergaard" in text
    assert "authored" in text and "reviewed" in text
    for sig in records.load_record(signed)["signatures"]:
        assert sig["signed"][:16] in text
    assert "cavity_ml: 20.0" in text  # the protocol as entered
    assert "verified: every signature valid" in text


def test_unverified_record_says_so(signed):
    check = records.verify_record(signed, KeyRing([ADA.public_entry()]))
    page = render.render_html(signed, check)
    assert "NOT VERIFIED" in page and "unknown key" in page
    text = " ".join(p.extract_text() for p in PdfReader(io.BytesIO(render.render_pdf(signed, check))).pages)
    assert "NOT VERIFIED" in text


def test_charts_export_offline(assessment):
    chart = charts.margins_chart(assessment["margin_states"])
    svg = charts.to_svg(chart)
    assert svg.lstrip().startswith("<svg") and "Wall stress over allowable stress: watch" in svg
    png = charts.to_png(chart, scale=1)
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    assert charts.margins_chart([{"label": "x", "value": None, "watch": 1, "stop": 2, "state": "not-judged"}]) is None


def test_column_curves_are_charted_against_temperature(page):
    assert "chamber: pressure [MPa] against temperature [C]" in page
    assert "chamber: ice fraction of water against temperature [C]" in page
    assert render.axis_title("pressure_mpa") == "pressure [MPa]"
    assert render.axis_title("liquid_osmolality_osmol_per_kg") == "liquid osmolality [osmol/kg]"
    assert render.axis_title("ratio") == "ratio"


def test_pdf_chart_heading_stays_with_its_first_chart(pdf_text):
    # a section heading alone at the foot of a page reads as an empty section (common practice, no source)
    assert heading_kept_with_first_chart(pdf_text)


def heading_kept_with_first_chart(pages):
    with_heading = [i for i, t in enumerate(pages) if "\nCharts\n" in f"\n{t}\n"]
    return bool(with_heading) and "Margins between their thresholds" in pages[with_heading[0]]


def test_a_flag_two_sections_raise_is_shown_once_in_the_page_naming_both(assessment):
    a = json.loads(json.dumps(assessment))
    words = "trehalose: the sucrose coefficients are used (invented test flag)"
    a["flags"] = [{"code": "indicative", "message": f"solution: {words}", "source": "crc-handbook"},
                  {"code": "indicative", "message": f"chamber: {words}", "source": "crc-handbook"}]
    r = records.record_bytes(records.sign_record(
        records.build_record(PROTOCOL_TEXT, a, protocol_name="rigid-hold.yaml"), ADA, "authored"))
    page = render.render_html(r, records.verify_record(r, RING))
    assert page.count("the sucrose coefficients are used (invented test flag)") == 1
    assert f"solution, chamber: {words}" in page
