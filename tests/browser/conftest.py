"""Fixtures for the real-browser tests: voila on a free loopback port, Debian's chromium via Playwright.

One voila server per test module (started in its own process group with temporary Jupyter folders, a
temporary archive and a test key; polled on /voila/static/voila.js; stopped by its pid), one browser per
module. Without /usr/bin/chromium the tests fail when CI=true and are skipped otherwise, with the reason.
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import tempfile
import time
import urllib.request
from dataclasses import dataclass
from pathlib import Path

import pytest

CHROMIUM = Path("/usr/bin/chromium")
ROOT = Path(__file__).resolve().parents[2]
SCREENSHOTS = ROOT / "test-output" / "screenshots"
CHROMIUM_ARGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
    "--disable-component-update", "--disable-quic", "--no-first-run", "--disable-sync",
    # no internet for the page: every host name but the loopback address fails to resolve, and anything
    # asked for by address goes to a proxy that is not there (loopback never goes through a proxy)
    "--host-resolver-rules=MAP * ~NOTFOUND, EXCLUDE 127.0.0.1",
    "--proxy-server=http://127.0.0.1:9",
]
START_TIMEOUT_S = 90
PASSPHRASE = "test passphrase for the browser run"
SIGNER = "Ada Example"


def _need_chromium() -> None:
    if CHROMIUM.is_file():
        return
    reason = f"{CHROMIUM} is missing (install it with: apt-get install -y chromium)"
    if os.environ.get("CI") == "true":
        pytest.fail(reason)
    pytest.skip(reason)


@dataclass
class Server:
    port: int
    token: str
    pid: int
    folder: Path
    archive: Path
    key: Path
    log: Path
    signer: str = SIGNER
    passphrase: str = PASSPHRASE

    def url(self, notebook: str, query: str = "") -> str:
        extra = f"&{query}" if query else ""
        return f"http://127.0.0.1:{self.port}/voila/render/{notebook}.ipynb?token={self.token}{extra}"


def _wait_ready(port: int, token: str, proc: subprocess.Popen, log: Path) -> None:
    deadline = time.monotonic() + START_TIMEOUT_S
    url = f"http://127.0.0.1:{port}/voila/static/voila.js?token={token}"
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise RuntimeError(f"voila exited with {proc.returncode}:\n{log.read_text()[-3000:]}")
        try:
            with urllib.request.urlopen(url, timeout=2) as r:
                if r.status == 200:
                    return
        except OSError:
            time.sleep(0.3)
    raise RuntimeError(f"voila did not answer within {START_TIMEOUT_S} s:\n{log.read_text()[-3000:]}")


@pytest.fixture(scope="module")
def server():
    _need_chromium()
    from planner.keys import generate_key
    from planner.serve import ServeConfig, free_port, voila_command, voila_environment

    # a folder of our own: the server outlives pytest's numbered temporary folders in a busy /tmp
    folder = Path(tempfile.mkdtemp(prefix="coldmargin-browser-"))
    key = folder / "signer.key"
    generate_key(SIGNER, "ada", key, PASSPHRASE, kdf_rounds=1)
    archive = folder / "archive.sqlite"
    token = "browser-test-token"
    cfg = ServeConfig(token=token, protocol=ROOT / "protocols" / "supercooled-open-vial.yaml", archive=archive,
                      key=key, timeout_s=240).check()
    port = free_port(0)
    from planner import renderer

    charts, chart_socket = renderer.start(folder)  # as `coldmargin app`: one chart renderer for every page
    env = voila_environment(cfg, folder / "jupyter", chart_socket=chart_socket)
    log = folder / "voila.log"
    with open(log, "wb") as out:
        proc = subprocess.Popen(voila_command(cfg, port), env=env, stdout=out, stderr=subprocess.STDOUT,
                                cwd=folder, start_new_session=True)
    try:
        _wait_ready(port, token, proc, log)
        yield Server(port, token, proc.pid, folder, archive, key, log)
    finally:
        try:
            os.killpg(proc.pid, signal.SIGTERM)
        except ProcessLookupError:
            pass
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait(timeout=10)
        renderer.stop(charts)
        SCREENSHOTS.parent.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(log, SCREENSHOTS.parent / "voila.log")  # kept for reading after a failure
        shutil.rmtree(folder, ignore_errors=True)


@pytest.fixture(scope="module")
def browser(server):
    from playwright.sync_api import sync_playwright

    with sync_playwright() as pw:
        b = pw.chromium.launch(executable_path=str(CHROMIUM), headless=True, args=CHROMIUM_ARGS)
        yield b
        b.close()


@pytest.fixture
def page(browser):
    context = browser.new_context(viewport={"width": 1300, "height": 2400}, accept_downloads=True)
    p = context.new_page()
    p.set_default_timeout(60_000)
    p.requests_seen = []
    p.on("request", lambda r: p.requests_seen.append(r.url))
    yield p
    context.close()


@pytest.fixture(scope="session")
def shot():
    """Save a full-page screenshot under test-output/screenshots/NAME.png (look at them after a run)."""

    def take(page, name: str) -> Path:
        SCREENSHOTS.mkdir(parents=True, exist_ok=True)
        path = SCREENSHOTS / f"{name}.png"
        page.screenshot(path=str(path), full_page=True)
        return path

    return take
