"""The shared chart renderer: what it draws equals vl-convert's own drawing, it is used when the app names
it, a process that cannot reach it draws by itself, and it does not outlive the app that started it."""

from __future__ import annotations

import json
import os
import re
import stat
import subprocess
import sys
import time

import pytest
import vl_convert

from planner import renderer

# a small invented chart with texts to compare
SPEC = json.dumps({
    "data": {"values": [{"t": 0, "v": 1.0}, {"t": 1, "v": 0.7}, {"t": 2, "v": 1.1}]},
    "mark": "line", "title": "Cell volume (test)",
    "encoding": {"x": {"field": "t", "type": "quantitative", "title": "time (min)"},
                 "y": {"field": "v", "type": "quantitative", "title": "relative volume"}},
})


def _texts(svg: str) -> list[str]:
    return re.findall(r"<text[^>]*>([^<]*)</text>", svg)


@pytest.fixture(scope="module")
def running(tmp_path_factory):
    proc, path = renderer.start(tmp_path_factory.mktemp("charts"))
    yield proc, path
    renderer.stop(proc)


def test_the_renderer_draws_what_vl_convert_draws(running):
    _, path = running
    svg = renderer.request(SPEC, path)
    assert svg.startswith("<svg") and _texts(svg) == _texts(vl_convert.vegalite_to_svg(SPEC))
    assert "Cell volume (test)" in _texts(svg)
    png = renderer.request(SPEC, path, "png", 2.0)
    assert png.startswith(b"\x89PNG\r\n\x1a\n")  # the PNG signature (PNG specification, section 5.2)
    local = vl_convert.vegalite_to_png(SPEC, scale=2.0)
    assert png[16:24] == local[16:24]  # the same width and height in the IHDR chunk


def test_a_spec_vl_convert_refuses_is_refused_with_its_reason(running):
    _, path = running
    with pytest.raises(renderer.RendererError, match=r"\w"):
        renderer.request('{"mark": 12}', path)
    assert renderer.request(renderer.TINY_SPEC, path).startswith("<svg")  # and it goes on drawing


def test_only_its_owner_may_use_the_socket(running):
    _, path = running
    assert stat.S_IMODE(os.stat(path).st_mode) == 0o600


def test_a_process_the_app_points_at_the_renderer_never_starts_an_engine(running):
    _, path = running
    code = ("import sys; from planner.renderer import draw, TINY_SPEC; s = draw(TINY_SPEC); "
            "print('vl_convert' in sys.modules, s[:4])")
    out = subprocess.run([sys.executable, "-c", code], env={**os.environ, renderer.SOCKET_ENV: str(path)},
                         capture_output=True, text=True, timeout=120, check=True).stdout.split()
    assert out == ["False", "<svg"]


def test_without_a_renderer_to_reach_a_chart_is_drawn_here(tmp_path, monkeypatch):
    monkeypatch.setenv(renderer.SOCKET_ENV, str(tmp_path / "gone.sock"))
    assert _texts(renderer.draw(SPEC)) == _texts(vl_convert.vegalite_to_svg(SPEC))


def test_the_renderer_stops_when_the_app_that_started_it_is_gone(tmp_path):
    code = ("import sys; from pathlib import Path; from planner import renderer; "
            f"proc, _ = renderer.start(Path({str(tmp_path)!r})); print(proc.pid, flush=True)")
    parent = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120, check=True)
    pid = int(parent.stdout.split()[0])  # the app (parent) has exited without stopping it
    deadline = time.monotonic() + 15
    while time.monotonic() < deadline:
        try:
            os.kill(pid, 0)
        except ProcessLookupError:
            break
        if open(f"/proc/{pid}/stat").read().split()[2] == "Z":
            break  # exited; its zombie waits for a reaper only
        time.sleep(0.2)
    else:
        os.kill(pid, 9)
        pytest.fail("the renderer outlived the process that started it")
