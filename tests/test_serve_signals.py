"""Stopping `coldmargin app` with SIGTERM stops voila too (it runs in its own session); the address it
prints is the one voila was started on."""

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _children(pid: int) -> list[int]:
    path = Path(f"/proc/{pid}/task/{pid}/children")
    return [int(x) for x in path.read_text().split()] if path.exists() else []


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    stat = Path(f"/proc/{pid}/stat")
    return not (stat.exists() and stat.read_text().split()[2] == "Z")


def _voila_argument(pid: int, prefix: str) -> str | None:
    """The value of voila's ``prefix…`` argument, read from its command line."""
    args = Path(f"/proc/{pid}/cmdline").read_bytes().decode().split("\0")
    return next((a[len(prefix):] for a in args if a.startswith(prefix)), None)


def test_sigterm_to_the_launcher_stops_voila(tmp_path):
    token = "test-token-for-the-printed-address"
    # --pool 0: no kernel is started ahead, so the short-lived server costs little
    proc = subprocess.Popen(
        [sys.executable, "-m", "planner.cli", "app", "--port", "0", "--pool", "0",
         "--jupyter-dir", str(tmp_path / "jupyter")],
        cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
        env={**os.environ, "COLDMARGIN_APP_TOKEN": token},
    )
    children: list[int] = []
    try:
        deadline = time.monotonic() + 60
        printed = []
        for line in proc.stdout:
            printed.append(line.rstrip("\n"))
            if "Stop with Ctrl+C" in line or time.monotonic() > deadline:
                break
        while not children and time.monotonic() < deadline:
            children = _children(proc.pid)
            time.sleep(0.1)
        assert children, "voila was not started"
        # two children: voila and the shared chart renderer; both must stop with the launcher
        deadline_both = time.monotonic() + 20
        while len(children) < 2 and time.monotonic() < deadline_both:
            time.sleep(0.1)
            children = _children(proc.pid)
        commands = {c: Path(f"/proc/{c}/cmdline").read_bytes() for c in children}
        voila = [c for c, cmd in commands.items() if b"voila" in cmd]
        assert voila and any(b"planner.renderer" in cmd for cmd in commands.values()), commands
        children = voila + [c for c in children if c not in voila]
        environ = dict(e.split(b"=", 1) for e in Path(f"/proc/{voila[0]}/environ").read_bytes().split(b"\0") if b"=" in e)
        # voila's kernels are told where the renderer listens, inside the app's own folder
        assert environ.get(b"COLDMARGIN_CHART_SOCKET") == str(tmp_path / "jupyter" / "charts.sock").encode()
        given = {arg: _voila_argument(children[0], arg) for arg in ("--port=", "--token=", "--Voila.port_retries=")}
        proc.send_signal(signal.SIGTERM)
        proc.wait(timeout=40)
        deadline = time.monotonic() + 30
        while any(_alive(c) for c in children) and time.monotonic() < deadline:
            time.sleep(0.2)
        assert not any(_alive(c) for c in children), "voila outlived the launcher"
    finally:
        if proc.poll() is None:
            proc.kill()
        for c in children or _children(proc.pid):
            try:
                os.killpg(c, signal.SIGKILL)
            except (ProcessLookupError, PermissionError):
                pass
    # the address printed is the page on the port voila was given (it does not retry another port), with
    # the token voila checks
    port = given["--port="]
    assert given["--Voila.port_retries="] == "0" and given["--token="] == token
    assert port and port.isdigit() and int(port) > 0  # --port 0 asked for any free port
    assert f"  http://127.0.0.1:{port}/voila/render/plan.ipynb?token={token}" in printed, printed
    others = next(line for line in printed if line.startswith("Other pages: "))
    assert f"http://127.0.0.1:{port}/voila/render/compare.ipynb" in others and token not in others
