"""The planner in a real browser (Debian's chromium, driven by Playwright) against voila on loopback.

Each step of the demo is screenshotted under test-output/screenshots/. Every request the page makes must
go to the app's own server: the page works offline.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

pytestmark = pytest.mark.browser

STEPS = ["Sample", "Container", "Solution", "Schedule", "Cells", "Review", "Sign & archive"]


@pytest.fixture(scope="module")
def plan(browser, server):
    """One plan page (one kernel) for the plan tests; each test starts from the demo again."""
    context = browser.new_context(viewport={"width": 1300, "height": 2400})
    p = context.new_page()
    p.set_default_timeout(60_000)
    p.requests_seen = []
    p.on("request", lambda r: p.requests_seen.append(r.url))
    p.goto(server.url("plan"))
    p.locator(".cm-app").wait_for(timeout=180_000)
    p.locator(".cm-summary .cm-verdict").wait_for(timeout=180_000)
    # the fixture's server has no pre-started kernels: the first chart waits for the page's own signal that
    # it has shown the app, and must then appear with no click
    p.locator(".cm-body .cm-chart svg").first.wait_for(timeout=60_000)
    yield p
    context.close()


def _open_plan(page, server, demo: str = "supercooled-open-vial"):
    """Start from a demo again (the Open button reloads it) and show the first step."""
    before = _strip(page)
    page.get_by_label("Start from", exact=True).select_option(f"demo: {demo}")
    page.get_by_role("button", name="Open", exact=True).click()
    page.wait_for_timeout(800)
    if page.locator(".cm-app-message", has_text="click Open again").count():  # typed changes are not dropped
        page.get_by_role("button", name="Open", exact=True).click()
    page.get_by_role("button", name="Sample", exact=True).click()
    page.locator(".cm-body h3", has_text="Sample").wait_for()
    page.locator(".cm-summary .cm-verdict").wait_for()
    page.locator(".cm-summary .cm-stale-note").wait_for(state="detached")
    page.locator(".cm-summary .cm-working-note").wait_for(state="detached")
    return before


def _strip(page) -> str:
    return page.locator(".cm-summary").inner_text()


def _only_local(page, server):
    outside = [u for u in page.requests_seen
               if not u.startswith(f"http://127.0.0.1:{server.port}/") and not u.startswith(("data:", "blob:", "ws://127.0.0.1"))]
    assert outside == [], f"the page asked outside the app: {outside[:5]}"


# the width of the text itself against the room its box gives it, to the sub-pixel: a button squeezed by
# 0.4 px reports no overflow by its (whole-pixel) scrollWidth, yet draws "A..." for "Add"
CUT_TEXT = """() => Array.from(document.querySelectorAll('.cm-app .widget-label, .cm-app button'))
  .filter(e => e.offsetParent !== null && e.innerText.trim())
  .filter(e => { const r = document.createRange(); r.selectNodeContents(e);
    const cs = getComputedStyle(e);
    const room = e.getBoundingClientRect().width - parseFloat(cs.paddingLeft) - parseFloat(cs.paddingRight)
      - parseFloat(cs.borderLeftWidth) - parseFloat(cs.borderRightWidth);
    return r.getBoundingClientRect().width > room + 0.05; })
  .map(e => e.innerText.trim())"""


def _cut_text(page) -> list[str]:
    """Visible labels and buttons whose text does not fit (the browser would end it in an ellipsis)."""
    return page.evaluate(CUT_TEXT)


def test_step_through_the_demo_end_to_end(plan, server, shot):
    _open_plan(plan, server)
    assert "Supercooled hold of red cell suspension" in plan.get_by_label("Protocol title", exact=True).input_value()
    for i, title in enumerate(STEPS):
        if i:
            plan.get_by_role("button", name="Next", exact=True).click()
        plan.locator(".cm-body h3", has_text=title.replace("&", "&")).first.wait_for()
        if title in ("Sample", "Solution", "Schedule"):
            plan.locator(".cm-body .cm-chart svg").first.wait_for(timeout=60_000)  # drawn offline, in the plan
        shot(plan, f"plan-{i + 1}-{title.split()[0].lower()}")
        assert _cut_text(plan) == [], title  # a label names its unit: none may be cut short
    assert plan.locator(".cm-sign-cautions .cm-caution").count() >= 2  # cautions shown before signing
    assert "Planning support only" in plan.locator(".cm-planning-box").inner_text()
    plan.get_by_role("button", name="Review", exact=True).click()
    plan.locator(".cm-review-margins table").wait_for()
    text = plan.locator(".cm-review-margins").inner_text()
    assert re.search(r"fine|watch|do not proceed", text)
    assert "from planner.ui import" not in plan.content()  # the notebook's source is not sent to viewers
    plan.get_by_role("button", name="Large type").click()  # as projected in a lab meeting
    plan.locator(".cm-app.cm-large").wait_for()
    for title in ("Sample", "Container", "Schedule"):
        plan.get_by_role("button", name=title, exact=True).click()
        plan.locator(".cm-body h3", has_text=title).first.wait_for()
        assert _cut_text(plan) == [], f"{title}, large type"
    shot(plan, "plan-large-type-schedule")
    plan.get_by_role("button", name="Large type").click()
    plan.locator(".cm-app.cm-large").wait_for(state="detached")
    _only_local(plan, server)


def test_the_page_has_its_fonts_and_charts_with_no_internet(plan, server, shot):
    """The browser has no way out of the loopback address (see CHROMIUM_ARGS): the page's icon font and
    charts still come, from the app's own server."""
    _open_plan(plan, server)
    plan.locator(".cm-body .cm-chart svg").first.wait_for(timeout=60_000)
    plan.locator(".cm-body .cm-chart-updating").wait_for(state="detached", timeout=60_000)
    plan.evaluate("document.fonts.ready")
    loaded = plan.evaluate("() => [...document.fonts].filter(f => f.status === 'loaded').map(f => f.family)")
    assert any("FontAwesome" in f or "Font Awesome" in f for f in loaded), loaded
    probe = "https://cdn.jsdelivr.net/"  # the browser itself cannot reach outside
    assert plan.evaluate(f"() => fetch('{probe}').then(() => 'reached', () => 'blocked')") == "blocked"
    plan.requests_seen.remove(probe)
    shot(plan, "plan-offline-sample")
    _only_local(plan, server)
    # the charts came from the app's one shared renderer: no kernel has loaded a chart engine of its own
    kernels = _kernel_pids(server.pid)
    assert kernels
    assert [pid for pid in kernels if "vl_convert" in Path(f"/proc/{pid}/maps").read_text()] == []


def _kernel_pids(voila_pid: int) -> list[int]:
    out = []
    for d in Path("/proc").iterdir():
        if d.name.isdigit():
            try:
                if b"ipykernel" in (d / "cmdline").read_bytes() and int((d / "stat").read_text().split()[3]) == voila_pid:
                    out.append(int(d.name))
            except OSError:
                continue
    return out


def test_the_rigid_demo_shows_its_chamber_chart(plan, server, shot):
    """Pressure and ice fraction against temperature, with the planned hold and the worst case marked."""
    _open_plan(plan, server, "rigid-chamber-hold")
    plan.get_by_role("button", name="Container", exact=True).click()
    chart = plan.locator(".cm-step-container .cm-chart-box")
    chart.locator("svg").first.wait_for(timeout=60_000)
    plan.locator(".cm-step-container .cm-chart-updating").wait_for(state="detached")
    text = chart.text_content().replace("\u2212", "-")
    assert "planned hold -4.0" in text and "worst case -22.0" in text, text[:400]
    shot(plan, "plan-rigid-container")
    _only_local(plan, server)


def test_the_cells_demo_shows_cell_volume_with_its_tolerance_band(plan, server, shot):
    """The Cells step of the invented loading demo: its rows, and the volume chart with both limits."""
    _open_plan(plan, server, "slow-freeze-cells-loading")
    plan.get_by_role("button", name="Cells", exact=True).click()
    assert plan.get_by_label("Include cells in this protocol").is_checked()
    chart = plan.locator(".cm-step-cells .cm-chart-box")
    chart.locator("svg").first.wait_for(timeout=60_000)
    plan.locator(".cm-step-cells .cm-chart-updating").wait_for(state="detached")
    text = chart.text_content()
    assert "Cell volume during loading and unloading" in text
    assert "smallest tolerated" in text and "largest tolerated" in text, text[:400]
    assert _cut_text(plan) == []
    shot(plan, "plan-cells-demo")
    _only_local(plan, server)


def test_upload_a_protocol_change_one_number_and_download_it(plan, server, tmp_path, shot):
    """A protocol file sent through the page's own upload dialog opens in the planner; after one change
    the downloaded YAML holds that change and every other value as it was uploaded."""
    import yaml

    source = Path(__file__).resolve().parents[2] / "protocols" / "slow-freeze-dmso.yaml"
    with plan.expect_file_chooser() as chooser:
        plan.get_by_role("button", name=re.compile("Upload protocol")).click()
    chooser.value.set_files(str(source))
    plan.get_by_role("button", name="Sample", exact=True).click()
    plan.locator(".cm-body h3", has_text="Sample").wait_for()
    title = plan.get_by_label("Protocol title", exact=True)
    plan.wait_for_function("() => { const t = document.querySelector('.cm-f-title input');"
                           " return t && t.value.includes('fibroblast'); }")
    assert "Slow freezing of a fibroblast suspension" in title.input_value()
    plan.locator(".cm-summary .cm-verdict").wait_for()
    box = plan.get_by_label("Volume (mL)", exact=True)
    box.fill("1.2")
    box.press("Enter")
    plan.wait_for_function("() => document.querySelector('.cm-download-box a') &&"
                           " atob(document.querySelector('.cm-download-box a').href.split(',')[1]).includes('1.2')")
    with plan.expect_download() as got:
        plan.locator(".cm-download-box a").click()
    saved = tmp_path / got.value.suggested_filename
    got.value.save_as(saved)
    expected = yaml.safe_load(source.read_text())
    expected["sample"]["volume_ml"] = 1.2
    assert yaml.safe_load(saved.read_text()) == expected
    _only_local(plan, server)


def test_the_other_pages_open_from_the_plan(plan, server, shot):
    """The plan's links to the other pages work with the sign-in the plan's address gave."""
    with plan.context.expect_page() as opened:
        plan.get_by_role("link", name="archive").click()
    other = opened.value
    other.get_by_label("Archive file", exact=True).wait_for(timeout=120_000)
    shot(other, "archive-from-plan-link")
    other.close()


def test_changing_the_concentration_moves_the_freezing_point_and_margins(plan, server, shot):
    _open_plan(plan, server)
    plan.get_by_role("button", name="Solution", exact=True).click()
    numbers = plan.locator(".cm-step-solution .cm-numbers")
    numbers.locator("td").first.wait_for()
    before_numbers, before_strip = numbers.inner_text(), _strip(plan)
    box = plan.get_by_label("Concentration (% w/w)", exact=True)
    box.fill("15")
    box.press("Enter")
    plan.wait_for_function(
        "(old) => { const s = document.querySelector('.cm-summary'); return s && s.innerText !== old"
        " && !s.innerText.includes('Working'); }", arg=before_strip, timeout=60_000)
    plan.wait_for_function(
        "(old) => document.querySelector('.cm-step-solution .cm-numbers').innerText !== old", arg=before_numbers)
    after_numbers = numbers.inner_text()
    fp_before = _number_after(before_numbers, "Freezing point")
    fp_after = _number_after(after_numbers, "Freezing point")
    assert fp_after < fp_before  # more trehalose, lower liquidus
    assert _strip(plan) != before_strip
    # the chart follows the numbers (drawn after them): wait for it to mark the new solution
    plan.wait_for_function(
        "(want) => { const box = document.querySelector('.cm-step-solution .cm-chart-box');"
        " const m = box && box.innerText.replace(/\u2212/g, '-').match(/this solution: (-?\\d+\\.\\d+)/);"
        " return m && Math.abs(parseFloat(m[1]) - want) < 0.006; }", arg=fp_after, timeout=60_000)
    chart_text = plan.locator(".cm-step-solution .cm-chart-box").inner_text().replace("\u2212", "-")
    marked = re.search(r"this solution: (-?\d+\.\d+)", chart_text)
    assert marked and abs(float(marked.group(1)) - fp_after) < 0.006  # the chart marks the new solution
    shot(plan, "plan-solution-15-percent")


def _number_after(text: str, label: str) -> float:
    for line in text.splitlines():
        if line.lower().startswith(label.lower()):
            return float(line.split("\t")[-1].split()[0].replace("\u2212", "-"))
    raise AssertionError(f"{label!r} not in {text!r}")


def test_a_bad_value_shows_the_fields_error_and_keeps_the_result_stale(plan, server, shot):
    _open_plan(plan, server)
    box = plan.get_by_label("Volume (mL)", exact=True)
    box.fill("-2")
    box.press("Enter")
    error = plan.locator(".cm-step-sample .cm-field-error", has_text="sample.volume_ml")
    error.wait_for()
    assert "-2" in error.inner_text() and "5000" in error.inner_text()
    plan.locator(".cm-summary .cm-stale-note").wait_for()
    assert "fine" in _strip(plan) or "watch" in _strip(plan) or "do not proceed" in _strip(plan)
    shot(plan, "plan-bad-volume")
    box.fill("1")
    box.press("Enter")
    plan.locator(".cm-summary .cm-stale-note").wait_for(state="detached")


def test_sign_into_an_archive_and_verify_it_from_the_archive_notebook(plan, server, page, shot):
    _open_plan(plan, server)
    plan.get_by_role("button", name="Sign & archive", exact=True).click()
    plan.locator(".cm-sign-cautions .cm-caution").first.wait_for()
    plan.get_by_label("I have read the cautions above").check()
    plan.get_by_label("Printed name").fill(server.signer)
    assert plan.get_by_label("Key file (on this computer)").input_value() == str(server.key)
    plan.get_by_label("Passphrase").fill(server.passphrase)
    assert plan.get_by_label("Archive file").input_value() == str(server.archive)
    plan.get_by_label("Register my key in this archive (first use)").check()
    plan.get_by_role("button", name="Sign and archive").click()
    record_hash = plan.locator(".cm-sign-result .cm-record-hash")
    record_hash.wait_for(timeout=60_000)
    digest = record_hash.inner_text()
    assert re.fullmatch(r"sha256:[0-9a-f]{64}", digest)
    assert plan.get_by_label("Passphrase").input_value() == ""  # not kept in the plan
    shot(plan, "plan-7-signed")

    page.goto(server.url("archive"))
    page.locator(".cm-archive").wait_for(timeout=120_000)
    page.locator(".cm-archive-head").wait_for()
    page.get_by_role("button", name="Open and verify").click()
    page.locator(".cm-archive-result .cm-verified").wait_for(timeout=60_000)
    result = page.locator(".cm-archive-result").inner_text()
    assert digest in result and server.signer in result and "valid" in result
    page.frame_locator(".cm-record-frame").locator("body").wait_for()
    shot(page, "archive-verified")
    assert _cut_text(page) == []
    page.get_by_role("button", name="Large type").click()
    page.locator(".cm-archive.cm-large").wait_for()
    assert _cut_text(page) == []  # a PI checking a record on the projector
    _only_local(page, server)


def test_compare_two_scenarios(page, server, shot):
    page.goto(server.url("compare", "scenario=supercooled-open-vial&scenario=rigid-chamber-hold"))
    page.locator(".cm-compare").wait_for(timeout=120_000)
    table = page.locator(".cm-compare-margins")
    table.wait_for()
    header = table.locator("tr").first.inner_text()
    assert "A: supercooled-open-vial" in header and "B: rigid-chamber-hold" in header
    page.locator(".cm-compare-map svg").wait_for(timeout=90_000)
    page.locator(".cm-compare-charts svg").wait_for(timeout=120_000)  # drawn once both are assessed
    assert "own nucleation model" in page.locator(".cm-compare-map").inner_text()
    page.get_by_role("button", name="Large type").click()
    page.locator(".cm-compare.cm-large").wait_for()
    shot(page, "compare-two-scenarios")
    assert _cut_text(page) == []  # projected in large type, every label and button still reads whole
    # a third scenario, a copy of A with a smaller volume: its column, its margins and its mark on the map
    page.get_by_role("button", name="Add", exact=True).click()
    page.get_by_label("Sample volume (mL) – C", exact=True).wait_for()
    box = page.get_by_label("Sample volume (mL) – C", exact=True)
    box.fill("0.25")
    box.press("Enter")
    page.wait_for_function("() => document.querySelector('.cm-compare-margins tr').innerText.includes('C:')")
    page.wait_for_function("() => { const m = document.querySelector('.cm-compare-map svg');"
                           " return m && m.textContent.includes('C'); }", timeout=90_000)
    page.locator(".cm-compare-map svg text", has_text=re.compile(r"^C$|^A C$|^C A$")).first.wait_for(timeout=90_000)
    page.locator(".cm-compare-charts svg text", has_text="C: copy of supercooled-open-vial").first.wait_for(
        timeout=90_000)  # its history joins the overlaid charts
    shot(page, "compare-three-scenarios")
    narrow = page.evaluate("""() => Array.from(document.querySelectorAll('.cm-scenario input, .cm-scenario select'))
      .filter(e => e.offsetParent !== null && e.getBoundingClientRect().width < 150).length""")
    assert narrow == 0  # three columns in large type: every box keeps room for its value
    assert _cut_text(page) == []
    _only_local(page, server)


def test_calibrate_from_an_uploaded_assay_and_save_it(page, server, shot):
    """The calibrate page in the browser: an assay CSV sent through the page's own upload button, the fit
    with its 90 % interval and both charts, then the calibration saved where the person says."""

    assay = Path(__file__).resolve().parents[2] / "protocols" / "assays" / "demo-saline-holds.csv"
    page.goto(server.url("calibrate"))
    page.locator(".cm-calibrate").wait_for(timeout=120_000)
    with page.expect_file_chooser() as chooser:  # the upload button opens the browser's own file dialog
        page.get_by_role("button", name=re.compile("Upload assay")).click()
    chooser.value.set_files(str(assay))
    page.locator(".cm-cal-assay", has_text="samples").wait_for()
    text = page.locator(".cm-cal-assay").inner_text()
    rows = [line for line in assay.read_text().splitlines()[1:] if line and not line.startswith("#")][1:]
    assert f"{len(rows)} samples" in text and "-0.55 °C" in text  # the file's rows and its liquidus_c line
    page.get_by_role("button", name="Fit", exact=True).click()
    page.locator(".cm-cal-result .cm-cal-summary").wait_for(timeout=120_000)
    result = page.locator(".cm-cal-result").inner_text()
    assert "90 % interval" in result or "upper bound" in result
    assert page.locator(".cm-cal-result svg").count() >= 1
    folder = server.folder / "calibrations"
    folder.mkdir(exist_ok=True)
    page.get_by_label("Save in folder", exact=True).fill(str(folder))
    page.get_by_label("Save in folder", exact=True).press("Enter")
    page.get_by_label("Calibration name", exact=True).fill("browser-test")
    page.get_by_label("Calibration name", exact=True).press("Enter")
    page.get_by_role("button", name="Save calibration", exact=True).click()
    page.locator(".cm-cal-saved .cm-cal-path").wait_for()
    saved = Path(page.locator(".cm-cal-saved .cm-cal-path").inner_text())
    assert saved.parent == folder and saved.is_file()
    shot(page, "calibrate-fitted")
    assert _cut_text(page) == []
    _only_local(page, server)
