"""Stopping `coldmargin app` with SIGTERM stops voila too (it runs in its own session)."""

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


def test_sigterm_to_the_launcher_stops_voila(tmp_path):
    proc = subprocess.Popen(
        [sys.executable, "-m", "planner.cli", "app", "--port", "0", "--jupyter-dir", str(tmp_path / "jupyter")],
        cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
    )
    try:
        deadline = time.monotonic() + 60
        for line in proc.stdout:
            if "Stop with Ctrl+C" in line or time.monotonic() > deadline:
                break
        children = []
        while not children and time.monotonic() < deadline:
            children = _children(proc.pid)
            time.sleep(0.1)
        assert children, "voila was not started"
        proc.send_signal(signal.SIGTERM)
        proc.wait(timeout=40)
        deadline = time.monotonic() + 30
        while any(_alive(c) for c in children) and time.monotonic() < deadline:
            time.sleep(0.2)
        assert not any(_alive(c) for c in children), "voila outlived the launcher"
    finally:
        if proc.poll() is None:
            proc.kill()
        for c in _children(proc.pid):
            try:
                os.killpg(c, signal.SIGKILL)
            except (ProcessLookupError, PermissionError):
                pass
