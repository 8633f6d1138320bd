"""Serving the planner in the browser: voila on 127.0.0.1 with a token, from ``coldmargin app``.

What the server is started with, and why:

- bound to ``127.0.0.1`` only, with a random token printed in the address (``?token=…``); another
  computer cannot reach it unless someone forwards the port on purpose;
- the port asked for, else the next free one (``--port 0`` takes any free port);
- every notebook in ``notebooks/`` is reachable (the plan notebook links the others);
- sources are stripped from the page and tracebacks are not sent to viewers;
- idle kernels are culled (one kernel per open page, ~225 MB each), and an optional pool of
  pre-started kernels makes pages open fast for a lab meeting. The trade-off of ``--pool N``: N kernels
  run the plan notebook as the server starts (about 5 s of one core each, so start the server a minute
  or two before the meeting) and hold N × ~225 MB while nobody looks; in return a page opens with its
  first step already computed. ``coldmargin app`` keeps one by default, so the first page opens quickly;
  ``--pool 0`` keeps none. Without a pool every viewer's kernel starts when the page is asked for,
  and ten viewers at once share the machine's cores for all ten runs. Each used kernel is replaced in
  the pool, so the pool keeps its size all meeting; for a meeting of ten, ``--pool 10``;
- the Jupyter state folders point at a folder of the app's own (a temporary one unless
  ``--jupyter-dir`` names one), so the user's own Jupyter settings and extensions are neither read nor
  changed;
- a page template of our own serves every asset locally (no content-delivery network is asked for fonts).
"""

from __future__ import annotations

import argparse
import os
import secrets
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path

from planner.errors import InputError

NOTEBOOKS = ("plan", "compare", "calibrate", "archive")
DEFAULT_PORT = 8866
HOST = "127.0.0.1"
STATIC = Path(__file__).resolve().parent / "static"
TEMPLATE = "coldmargin"
POOL_REFILL_DELAY_S = 60
# one kernel runs the plan notebook while the person who typed `make app` opens the link: that page
# then opens in ~2 s instead of ~6 s (the notebook's own run: imports, first assessment, first chart)
DEFAULT_POOL = 1


def notebooks_dir() -> Path:
    """The folder of the app's notebooks: ``$COLDMARGIN_NOTEBOOKS`` or ``notebooks/`` of the source tree."""
    if os.environ.get("COLDMARGIN_NOTEBOOKS"):
        return Path(os.environ["COLDMARGIN_NOTEBOOKS"])
    return Path(__file__).resolve().parents[1] / "notebooks"


def port_is_free(port: int, host: str = HOST) -> bool:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        try:
            s.bind((host, port))
        except OSError:
            return False
    return True


def free_port(preferred: int = DEFAULT_PORT, host: str = HOST, tries: int = 50) -> int:
    """``preferred`` if free, else the next free port above it, else any free port the system gives."""
    if preferred:
        for port in range(preferred, min(preferred + tries, 65536)):
            if port_is_free(port, host):
                return port
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind((host, 0))
        return int(s.getsockname()[1])


@dataclass(frozen=True)
class ServeConfig:
    """Everything the voila command line and its environment are built from."""

    notebook: str = "plan"
    port: int = DEFAULT_PORT
    token: str = ""
    pool: int = 0
    cull_idle_s: int = 1800
    cull_interval_s: int = 60
    timeout_s: int = 180
    protocol: Path | None = None
    archive: Path | None = None
    key: Path | None = None
    jupyter_dir: Path | None = None
    large_type: bool = False

    def check(self) -> ServeConfig:
        if self.notebook not in NOTEBOOKS:
            from planner.errors import choice_error

            raise choice_error("--notebook", self.notebook, NOTEBOOKS)
        if not 0 <= self.port <= 65535:
            raise InputError("--port", self.port, "0 (any free port) to 65535")
        if not 0 <= self.pool <= 32:
            raise InputError("--pool", self.pool, "0 to 32 pre-started kernels")
        if not 60 <= self.cull_idle_s <= 7 * 86400:
            raise InputError("--cull-idle-min", self.cull_idle_s / 60, "1 to 10080 minutes")
        if not 10 <= self.timeout_s <= 3600:
            raise InputError("--timeout-s", self.timeout_s, "10 to 3600 seconds")
        if self.protocol is not None and not self.protocol.is_file():
            raise InputError("--protocol", str(self.protocol), "an existing protocol file")
        if not (notebooks_dir() / f"{self.notebook}.ipynb").is_file():
            raise InputError("--notebook", str(notebooks_dir() / f"{self.notebook}.ipynb"), "an existing notebook")
        return self


# voila started the way ``python -m voila`` starts it, but without rfc3987_syntax: jsonschema (under the
# server's event logging) imports it only to check the "iri" string format, and building its grammars
# takes 1.5 s on an idle core and over 8 s on a busy one. Without it jsonschema leaves that one format
# unchecked; no schema the server or the app uses relies on it.
LAUNCH = ("import sys; sys.modules.setdefault('rfc3987_syntax', None); "
          "from voila.app import main; sys.argv[0] = 'voila'; main()")


def voila_command(cfg: ServeConfig, port: int) -> list[str]:
    """The voila command line for ``cfg`` on ``port`` (the caller has checked the port is free)."""
    cmd = [
        sys.executable, "-c", LAUNCH, str(notebooks_dir()),
        "--no-browser",
        f"--port={port}",
        f"--Voila.ip={HOST}",
        "--Voila.port_retries=0",
        f"--token={cfg.token}",
        f"--template={TEMPLATE}",
        "--strip_sources=True",
        "--show_tracebacks=False",
        "--theme=light",
        f"--VoilaExecutor.timeout={cfg.timeout_s}",
        # nbclient waits only 4 s (its default) for a cell's output after the cell's reply, then renders the
        # page without it: a blank page. With many viewers at once the output of one cell holding the app's
        # widgets arrives later than that, so it is given as long as the notebook itself.
        f"--VoilaExecutor.iopub_timeout={cfg.timeout_s}",
        f"--MappingKernelManager.cull_idle_timeout={cfg.cull_idle_s}",
        f"--MappingKernelManager.cull_interval={cfg.cull_interval_s}",
        "--MappingKernelManager.cull_connected=False",
    ]
    if cfg.pool > 0:
        cmd += ["--preheat_kernel=True", f"--pool_size={cfg.pool}"]
        # the pool is for the page each viewer opens (the planner); voila would keep a pool of the same size
        # for every other notebook too (ten viewers: 20 kernels more), so the others start kernels on demand
        cmd += [f"--VoilaKernelManager.preheat_denylist={name}.ipynb" for name in NOTEBOOKS if name != "plan"]
        # a used kernel is replaced a minute later, not at once: ten arrivals then do not share the cores
        # with ten refills running the notebook
        cmd += [f"--VoilaKernelManager.fill_delay={POOL_REFILL_DELAY_S}"]
    return cmd


def voila_environment(cfg: ServeConfig, state_dir: Path, base: dict[str, str] | None = None,
                      chart_socket: Path | None = None) -> dict[str, str]:
    """The environment voila and its kernels run with: own Jupyter folders, the app's settings, and the
    shared chart renderer's socket when there is one (:mod:`planner.renderer`)."""
    env = dict(os.environ if base is None else base)
    for name, sub in (("JUPYTER_CONFIG_DIR", "config"), ("JUPYTER_DATA_DIR", "data"),
                      ("JUPYTER_RUNTIME_DIR", "runtime"), ("IPYTHONDIR", "ipython")):
        path = state_dir / sub
        path.mkdir(parents=True, exist_ok=True)
        env[name] = str(path)
    # our page template lives in planner/static/voila/templates; JUPYTER_PATH adds it to the search path
    env["JUPYTER_PATH"] = os.pathsep.join([str(STATIC), *([env["JUPYTER_PATH"]] if env.get("JUPYTER_PATH") else [])])
    env["JUPYTER_PLATFORM_DIRS"] = "1"
    env["PYDEVD_DISABLE_FILE_VALIDATION"] = "1"
    if cfg.protocol is not None:
        env["COLDMARGIN_PROTOCOL"] = str(cfg.protocol.resolve())
    if cfg.archive is not None:
        env["COLDMARGIN_ARCHIVE"] = str(cfg.archive.resolve())
    if cfg.key is not None:
        env["COLDMARGIN_KEY"] = str(cfg.key.resolve())
    if cfg.large_type:
        env["COLDMARGIN_LARGE_TYPE"] = "1"
    env["COLDMARGIN_NOTEBOOKS"] = str(notebooks_dir())
    from planner.renderer import SOCKET_ENV

    env.pop(SOCKET_ENV, None)
    if chart_socket is not None:
        env[SOCKET_ENV] = str(chart_socket)
    return env


def page_url(port: int, token: str, notebook: str = "plan") -> str:
    return f"http://{HOST}:{port}/voila/render/{notebook}.ipynb?token={token}"


def add_app_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``coldmargin app``."""
    parser.add_argument("--protocol", type=Path, help="protocol file the planner opens with")
    parser.add_argument("--notebook", default="plan", choices=NOTEBOOKS, help="page to open first (default: plan)")
    parser.add_argument("--port", type=int, default=DEFAULT_PORT,
                        help=f"port on 127.0.0.1 (default {DEFAULT_PORT}; the next free one if taken; 0: any)")
    parser.add_argument("--pool", type=int, default=DEFAULT_POOL,
                        help="kernels to keep pre-started for fast page loads: one per expected viewer, e.g. 10 for a lab "
                             "meeting of ten (each holds ~225 MB; start the server a minute or two early; default "
                             f"{DEFAULT_POOL}: the first page opens with its first step already computed; 0: none)")
    parser.add_argument("--cull-idle-min", type=float, default=30.0,
                        help="shut down a page's kernel after this many idle minutes (default 30)")
    parser.add_argument("--timeout-s", type=int, default=180, help="longest a notebook may take to start (default 180)")
    parser.add_argument("--archive", type=Path, help="archive the sign step proposes (default $COLDMARGIN_ARCHIVE)")
    parser.add_argument("--key", type=Path, help="key file the sign step proposes (default $COLDMARGIN_KEY)")
    parser.add_argument("--jupyter-dir", type=Path,
                        help="folder for the server's Jupyter state (default: a temporary folder, removed on exit)")
    parser.add_argument("--large-type", action="store_true", help="start with large type (projector)")
    parser.add_argument("--print-command", action="store_true", help="print the voila command and exit")


def config_from_args(args: argparse.Namespace) -> ServeConfig:
    token = os.environ.get("COLDMARGIN_APP_TOKEN") or secrets.token_urlsafe(24)
    return ServeConfig(
        notebook=args.notebook, port=args.port, token=token, pool=args.pool,
        cull_idle_s=int(round(args.cull_idle_min * 60)), timeout_s=args.timeout_s, protocol=args.protocol,
        archive=args.archive, key=args.key, jupyter_dir=args.jupyter_dir, large_type=args.large_type,
    ).check()


def _raise_interrupt(signum, frame):
    raise KeyboardInterrupt


def _signal_group(proc: subprocess.Popen, sig: int) -> None:
    """Signal voila's process group (it leads its own session), or voila alone if the group is gone."""
    try:
        os.killpg(proc.pid, sig)
    except ProcessLookupError:
        pass
    except PermissionError:
        proc.send_signal(sig)


def compile_package(folder: Path | None = None) -> bool:
    """Write the bytecode of the planner's modules (``__pycache__``) if it is missing or older than the source.

    Every kernel imports the planner; without bytecode on disk each one compiles the sources again (about
    0.3 s of a page's start here). An environment with ``PYTHONDONTWRITEBYTECODE`` set never writes it, so
    the app writes it once at start. A folder that cannot be written is left as it is (returns False).
    """
    import compileall

    folder = Path(__file__).resolve().parent if folder is None else folder
    try:
        return bool(compileall.compile_dir(str(folder), quiet=2, workers=1))
    except OSError:
        return False


def run_app(args: argparse.Namespace) -> int:
    """Start voila in the foreground and print the address to open; returns its exit code."""
    cfg = config_from_args(args)
    port = free_port(cfg.port) if cfg.port else free_port(0)
    own_dir = cfg.jupyter_dir is None
    state_dir = Path(tempfile.mkdtemp(prefix="coldmargin-jupyter-")) if own_dir else cfg.jupyter_dir
    state_dir.mkdir(parents=True, exist_ok=True)
    cmd = voila_command(cfg, port)
    if getattr(args, "print_command", False):
        shown = [c if not c.startswith("--token=") else "--token=(hidden)" for c in cmd]
        print(" ".join(shown))
        if own_dir:
            shutil.rmtree(state_dir, ignore_errors=True)
        return 0
    if port != cfg.port and cfg.port:
        print(f"coldmargin: port {cfg.port} is taken; using {port}", file=sys.stderr)
    print("coldmargin planner – open this address in a browser on this computer:")
    print(f"  {page_url(port, cfg.token, cfg.notebook)}")
    # the token is printed once: the address above signs the browser in, and the other pages then open
    print("Other pages: " + ", ".join(page_url(port, cfg.token, n).split("?")[0] for n in NOTEBOOKS if n != cfg.notebook)
          + " (open the address above first: it signs this browser in; the planner links to them too)")
    print("The token in the address is the key to this server: share it only with people who may use it.")
    print("Planning support only: a margin is never a guarantee; local codes and biosafety rules decide.")
    print("Stop with Ctrl+C.", flush=True)
    compile_package()
    from planner import renderer

    # one warm chart renderer for every kernel, started alongside voila (a kernel that cannot reach it
    # draws its charts itself)
    try:
        charts, chart_socket = renderer.start(state_dir, wait=False)
    except OSError as exc:
        print(f"coldmargin: no shared chart renderer ({exc}); each page draws its own charts", file=sys.stderr)
        charts, chart_socket = None, None
    env = voila_environment(cfg, state_dir, chart_socket=chart_socket)
    proc = subprocess.Popen(cmd, env=env, start_new_session=True)
    # voila runs in its own session, so a SIGTERM or SIGHUP sent to this process alone would leave it and
    # its kernels running: treat them like Ctrl+C and stop the whole voila process group.
    previous = {sig: signal.signal(sig, _raise_interrupt) for sig in (signal.SIGTERM, signal.SIGHUP)}
    try:
        return proc.wait()
    except KeyboardInterrupt:
        _signal_group(proc, signal.SIGTERM)
        try:
            return proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            _signal_group(proc, signal.SIGKILL)
            return proc.wait()
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        if charts is not None:
            renderer.stop(charts)
        if own_dir:
            shutil.rmtree(state_dir, ignore_errors=True)


def main(argv: list[str] | None = None) -> int:
    """``python -m planner.serve``: the same as ``coldmargin app``."""
    parser = argparse.ArgumentParser(prog="coldmargin app", description="Serve the planner in the browser.")
    add_app_arguments(parser)
    args = parser.parse_args(argv)
    try:
        return run_app(args)
    except InputError as exc:
        print(f"coldmargin: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
