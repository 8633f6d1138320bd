"""Drawing charts (vl-convert), and one drawing process shared by every kernel of the app.

:func:`draw` turns a Vega-Lite spec into SVG or PNG, offline. Each kernel of the app would otherwise start
vl-convert's engine itself: about 70 MB of memory and 0.6–0.9 s of interpreter time per kernel, paid again
by every viewer who opens a page. ``coldmargin app`` starts one renderer next to voila, already warm, and
tells the kernels its socket in ``COLDMARGIN_CHART_SOCKET``; :func:`draw` then sends the spec there. A
process that cannot reach the renderer draws the chart itself, as outside the app, so a renderer that
died costs time, never a chart.

The socket is a Unix socket in the app's private state folder (made with mode 0700; the socket 0600), so
only the person who started the app can use it. One message each way: a request is a 4-byte big-endian
length and a UTF-8 JSON object ``{"format": "svg" | "png", "scale": float, "spec": str}``; an answer is a
status byte (0 drawn, 1 refused), a 4-byte length, and the drawing (SVG text or PNG bytes) or the reason.
"""

from __future__ import annotations

import json
import os
import socket
import socketserver
import struct
import subprocess
import sys
import threading
import time
from pathlib import Path

SOCKET_ENV = "COLDMARGIN_CHART_SOCKET"
START_TIMEOUT_S = 30.0
ANSWER_TIMEOUT_S = 60.0  # ten viewers' first charts may queue behind one another
MAX_MESSAGE = 64 * 1024 * 1024
TINY_SPEC = json.dumps({"data": {"values": [{"x": 0}]}, "mark": "point",
                        "encoding": {"x": {"field": "x", "type": "quantitative"}}})
_LOCK = threading.Lock()  # one drawing at a time in a process's engine


class RendererError(RuntimeError):
    """The renderer refused a spec (the reason is vl-convert's own message)."""


def _local(spec: str, fmt: str, scale: float) -> str | bytes:
    import vl_convert

    with _LOCK:
        if fmt == "png":
            return vl_convert.vegalite_to_png(spec, scale=scale)
        return vl_convert.vegalite_to_svg(spec)


def draw(spec: str, fmt: str = "svg", scale: float = 1.0) -> str | bytes:
    """A Vega-Lite spec (JSON text) drawn offline: SVG text, or PNG bytes at ``scale`` times its size.

    Through the app's shared renderer when ``COLDMARGIN_CHART_SOCKET`` names one that answers; here
    otherwise.
    """
    if fmt not in ("svg", "png"):
        raise ValueError(f"chart format {fmt!r}: svg or png")
    path = os.environ.get(SOCKET_ENV)
    if path:
        try:
            return request(spec, path, fmt, scale)
        except OSError:
            pass  # the shared renderer is gone or stuck: this process draws the chart itself
    return _local(spec, fmt, scale)


def _read_exact(conn: socket.socket, n: int) -> bytes:
    chunks, got = [], 0
    while got < n:
        chunk = conn.recv(min(n - got, 1 << 20))
        if not chunk:
            raise ConnectionError("the chart renderer closed the connection")
        chunks.append(chunk)
        got += len(chunk)
    return b"".join(chunks)


def request(spec: str, path: str | os.PathLike, fmt: str = "svg", scale: float = 1.0,
            timeout: float = ANSWER_TIMEOUT_S) -> str | bytes:
    """The drawing of ``spec`` by the renderer listening at ``path``.

    Raises
    ------
    OSError
        The renderer cannot be reached or did not answer in time.
    RendererError
        The renderer refused the spec.
    """
    data = json.dumps({"format": fmt, "scale": scale, "spec": spec}).encode("utf-8")
    with socket.socket(socket.AF_UNIX, socket.SOCK_STREAM) as conn:
        conn.settimeout(timeout)
        conn.connect(str(path))
        conn.sendall(struct.pack(">I", len(data)) + data)
        status, length = struct.unpack(">BI", _read_exact(conn, 5))
        if length > MAX_MESSAGE:
            raise ConnectionError("the chart renderer sent an answer too large to be a chart")
        answer = _read_exact(conn, length)
    if status != 0:
        raise RendererError(answer.decode("utf-8", errors="replace"))
    return answer if fmt == "png" else answer.decode("utf-8")


class _Handler(socketserver.BaseRequestHandler):
    def handle(self) -> None:
        conn: socket.socket = self.request
        conn.settimeout(ANSWER_TIMEOUT_S)
        try:
            (length,) = struct.unpack(">I", _read_exact(conn, 4))
            if length > MAX_MESSAGE:
                return
            message = json.loads(_read_exact(conn, length).decode("utf-8"))
            fmt, scale, spec = str(message["format"]), float(message["scale"]), str(message["spec"])
        except (OSError, ValueError, KeyError, TypeError):
            return  # a client that went away, or not one of ours
        try:
            drawn = _local(spec, fmt if fmt in ("svg", "png") else "svg", scale)
            answer, status = (drawn if isinstance(drawn, bytes) else drawn.encode("utf-8")), 0
        except Exception as exc:  # the spec's fault: said to the caller, which shows "No chart (...)"
            answer, status = f"{type(exc).__name__}: {exc}".encode(), 1
        try:
            conn.sendall(struct.pack(">BI", status, len(answer)) + answer)
        except OSError:
            pass


class _Server(socketserver.ThreadingMixIn, socketserver.UnixStreamServer):
    daemon_threads = True


def serve(path: str | os.PathLike, parent_pid: int | None = None) -> None:
    """Warm the engine, listen at ``path`` and draw until stopped, or until ``parent_pid`` is gone."""
    _local(TINY_SPEC, "svg", 1.0)  # the engine's start, paid once before the first kernel asks
    path = Path(path)
    path.unlink(missing_ok=True)
    os.umask(0o177)  # the socket is made 0600: no moment in which another user could connect
    with _Server(str(path), _Handler) as server:
        os.chmod(path, 0o600)
        if parent_pid is not None:
            def watch() -> None:
                while os.getppid() == parent_pid:
                    time.sleep(1.0)
                server.shutdown()  # orphaned: the app that started it is gone

            threading.Thread(target=watch, daemon=True).start()
        server.serve_forever(poll_interval=0.5)
    path.unlink(missing_ok=True)


def start(folder: Path, wait: bool = True) -> tuple[subprocess.Popen, Path]:
    """Start a renderer with its socket in ``folder`` (a folder private to this user).

    With ``wait`` it is returned once it answers. Without, at once: the app starts voila meanwhile (a
    page's first chart is drawn after the page is up, by when the renderer is ready; a kernel that asks
    sooner draws that chart itself).
    """
    path = Path(folder) / "charts.sock"
    proc = subprocess.Popen([sys.executable, "-m", "planner.renderer", str(path), str(os.getpid())],
                            stdin=subprocess.DEVNULL, start_new_session=True)
    if not wait:
        return proc, path
    deadline = time.monotonic() + START_TIMEOUT_S
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise RuntimeError(f"the chart renderer exited with {proc.returncode}")
        if path.exists():
            try:
                request(TINY_SPEC, path, timeout=5.0)
                return proc, path
            except OSError:
                pass
        time.sleep(0.05)
    stop(proc)
    raise RuntimeError(f"the chart renderer did not answer within {START_TIMEOUT_S:g} s")


def stop(proc: subprocess.Popen) -> None:
    """Stop a renderer started by :func:`start`."""
    if proc.poll() is None:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=10)


if __name__ == "__main__":
    serve(sys.argv[1], int(sys.argv[2]) if len(sys.argv) > 2 else None)
