"""Benchmarks of the planner in the browser (voila + Debian's chromium). Prints figures; asserts nothing.

1. cold start: voila process start → the plan page's first interactive step (the summary strip shows the
   overall state), the page asked for as soon as the server answers, with no pool and with the app's
   default pool of one pre-started kernel; and page loads once a pool is ready;
2. round trips of one input change → updated summary strip, measured in the page (Enter pressed → the
   strip's last change, by the page's clock) and as seen by the test driver: 20 new values with each
   result read (chart drawn) before the next change, 20 new values back to back, and 20 changes flipping
   between two values (answered from the app's cache), on the open-vial and the rigid-chamber demos;
3. memory of one kernel after the full demo (every step visited);
4. ten viewers opening the app at once: time until all ten are interactive, and the machine's memory.

Run: ``.venv/bin/python benchmarks/bench_app.py [--quick] [--no-viewers]``; only the ten viewers:
``--viewers-only [--viewers-pool 10]``; cold starts only: ``--cold-only [--cold-runs N] [--cold-pools 0,1]``.
``BENCH_VOILA_LOG=1`` prints each server's voila warnings (and keeps its log in /tmp) when it stops;
``BENCH_NO_RENDERER=1`` starts the servers without the shared chart renderer (each kernel draws its own).

Figures on this machine (2 cores, quiet: load average under 2 at each start), 2026-12-02:

- cold start, medians of 3: no pool 6.3 s to the first interactive step (assessed and chart drawn by
  6.4 s); default pool of one, page asked for at once 6.2 s (the pool kernel is still running the
  notebook); a page once the pool is ready: 1.9–2.2 s. The notebook's own run is about 2.3 s of it:
  imports for the assessment (~0.95 s, mostly scipy), the first assessment (~0.2 s), the first chart
  (altair import ~0.45 s, vl-convert's engine start 0.6–0.9 s, which holds the interpreter lock, so a
  thread does not help); the kernel's start and the page's scripts take the rest.
- round trips, medians over 20, in the page / seen by the driver, after a chart is no longer drawn for
  a result that a newer assessment is already replacing: open vial 89 / 132 ms (each result read),
  163 / 213 ms (back to back), 92 / 136 ms (cached); rigid chamber 160 / 200 ms, 210 / 262 ms,
  89 / 135 ms. Before that change the rigid chamber's back-to-back figure was 301 / 349 ms: the chart of
  one change was still being drawn when the next arrived.
- kernel memory after the full demo: 292 MB (open vial), 366 MB (rigid chamber).
- ten viewers at once, each in its own chromium on the same 2 cores: ``--pool 10``: kernels ready 28 s
  after the server started, all ten interactive 40.2 s and 39.2 s after the ten browsers were launched
  (first 33.5 / 35.0 s: ten browser processes starting on two cores); 224 MB per kernel; at least
  18.7 GB of memory stayed available. No pool: all ten interactive after 106 s.
- 2026-12-02, later quiet runs (load average under 1): cold start, medians of 3 and of 7, pool 0 4.3–4.6 s,
  pool 1 (page asked for at once) 4.1–4.8 s.
- 2026-12-02, second session, a slower day (the unchanged code's cold start measured 6.2 s against 4.3 s
  the session before; round trips ~20 % slower). The first chart now waits for the page's own signal,
  and voila waits for a cell's output as long as for the notebook:
  - cold start, rigid demo: no pool, interleaved with the previous code, medians of 12: 5.0 s against
    6.2 s; then medians of 7: 5.2 s (chart 6.1 s). Pool of one, page asked for at once: 6.3 s, then
    5.7 s (median of 5) once the pre-started kernel held its chart too. A page on a ready pool kernel:
    1.9–2.4 s, its chart within 0.35 s of that.
  - round trips in the page / seen by the driver, medians over 20: open vial 107 / 175, 166 / 240,
    111 / 168 ms; rigid chamber 189 / 248, 231 / 298, 121 / 169 ms. Kernel memory 298 / 371 MB.
  - ten viewers at once: no pool 10 of 10, all interactive after 85.9 s (80.2 s in another run; before,
    0 of 10 in two runs with the chart held and nbclient's 4 s output wait); ``--pool 10``: kernels ready
    20.6 s after start, all ten interactive 48.8 s after launch, 218 MB per kernel, 18.9 GB of memory
    still available.
- 2026-12-02, third session, a quiet machine (load average 0.2-1.4 at the start of each run), rigid demo:
  - cold start, medians of 7: no pool 3.1 s to the first interactive step (assessed 3.1 s, chart 3.8-3.9
    s); pool of one, page asked for at once 3.1-3.5 s. A page on a ready pool of two: 1.3-1.6 s; the pool
    is ready (voila's log says it is filled and the kernels have gone quiet) 6.1 s after start.
  - round trips in the page / seen by the driver, medians over 20: open vial 68 / 107, 82-91 / 125-131,
    53 / 91 ms; rigid chamber 119-120 / 154-159, 136-145 / 187-188, 53-60 / 89-107 ms. Kernel memory
    287-318 MB (open vial), 367-398 MB (rigid chamber).
  - ten viewers at once: no pool, all ten interactive after 53.8 s and 54.7 s (about 250 MB per kernel,
    at least 19.3 GB available); ``--pool 10``: kernels ready 14.5 s after start, all ten interactive
    29.8 s after launch, 219 MB per kernel, 18.7 GB still available.
  - with the shared chart renderer (``BENCH_NO_RENDERER=1`` runs without it), interleaved medians of 3:
    cold start interactive 3.2-3.3 s with and without; first chart 3.6 s against 4.0-4.1 s. Kernel
    memory after the full demo 173 MB (open vial) and 249 MB (rigid); ten viewers with no pool 54.1 s
    against 54.4 s, 148 MB per kernel against 220 MB; round trips 69 / 110, 79 / 113, 50 / 80 ms (open
    vial) and 118 / 151, 141 / 179, 52 / 81 ms (rigid); a page on a ready pool of two 1.1-1.2 s.
  - and with the first step's map written without altair, interleaved with the code before, medians of 3
    and 5: first chart 3.3-3.6 s against 3.6-4.0 s; first interactive step 3.1-3.6 s against 3.2-3.4 s.
    Ten viewers with no pool: all interactive after 51.1 s, 119 MB per kernel (220 MB at the session's
    start, 148 MB with the renderer alone).
- earlier: about 560 widgets a page made 0 of 10 viewers usable within 240 s (the widget manager's
  one-shot request for all states has a 4 s limit); the first page now holds the first step only.
"""

from __future__ import annotations

import argparse
import os
import shutil
import signal
import statistics
import subprocess
import tempfile
import time
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
CHROMIUM = "/usr/bin/chromium"
ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
        "--disable-component-update", "--disable-quic", "--no-first-run", "--disable-sync",
        # ten viewers are ten pages of one browser: keep the ones not in front rendering, as ten screens would
        "--disable-background-timer-throttling", "--disable-renderer-backgrounding",
        "--disable-backgrounding-occluded-windows"]


# the app's targets on this machine (a figure, never an assert: timings vary from day to day)
COLD_START_TARGET_S = 5.0
ROUND_TRIP_TARGET_MS = 300.0


def against(value: float, target: float, unit: str) -> str:
    return f"target {target:g} {unit} {'met' if value <= target else 'MISSED'}"


RUNNING: list = []  # servers started by this script, stopped on any exit
RENDERERS: dict = {}  # server folder -> its shared chart renderer


OPEN_VIAL = ROOT / "protocols" / "supercooled-open-vial.yaml"
RIGID = ROOT / "protocols" / "rigid-chamber-hold.yaml"  # the demo `make app` opens


def start(pool: int = 0, protocol: Path = OPEN_VIAL):
    from planner.serve import ServeConfig, compile_package, free_port, voila_command, voila_environment

    folder = Path(tempfile.mkdtemp(prefix="coldmargin-bench-"))
    cfg = ServeConfig(token="bench", pool=pool, protocol=protocol, timeout_s=300).check()
    port = free_port(0)
    t0 = time.monotonic()
    compile_package()  # as `coldmargin app` does before it starts voila (~20 ms when the bytecode is current)
    log = (folder / "voila.log").open("wb")  # read by stop(): voila's warnings say why a page stayed blank
    chart_socket = None
    if os.environ.get("BENCH_NO_RENDERER") != "1":  # as `coldmargin app`: one shared chart renderer
        from planner import renderer

        charts, chart_socket = renderer.start(folder, wait=False)
        RENDERERS[folder] = charts
    proc = subprocess.Popen(voila_command(cfg, port), env=voila_environment(cfg, folder / "jupyter",
                                                                            chart_socket=chart_socket),
                            stdout=log, stderr=subprocess.STDOUT, cwd=folder, start_new_session=True)
    log.close()
    RUNNING.append((proc, folder))
    while True:
        try:
            urllib.request.urlopen(f"http://127.0.0.1:{port}/voila/static/voila.js?token=bench", timeout=2)
            break
        except OSError:
            if proc.poll() is not None:
                raise RuntimeError("voila exited") from None
            time.sleep(0.1)
    return proc, port, folder, t0, time.monotonic() - t0


def log_warnings(folder: Path) -> None:
    """Print voila's warnings and errors of one server (each kind once, with its count)."""
    path = Path(folder) / "voila.log"
    if not path.exists():
        return
    seen: dict[str, int] = {}
    for line in path.read_text(errors="replace").splitlines():
        # nbclient's executor logs through a logger of its own, without voila's "[W ..." prefix
        if line.startswith(("[W ", "[E ", "[C ")) or "Timeout waiting for IOPub" in line:
            kind = line.split("] ", 1)[-1][:160]
            seen[kind] = seen.get(kind, 0) + 1
    for kind, n in seen.items():
        print(f"  voila log, {n}x: {kind}")


def stop(proc, folder) -> None:
    if (proc, folder) in RUNNING:
        RUNNING.remove((proc, folder))
    if proc.poll() is None:
        os.killpg(proc.pid, signal.SIGTERM)
        try:
            proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
    charts = RENDERERS.pop(folder, None)
    if charts is not None:
        from planner import renderer

        renderer.stop(charts)
    if os.environ.get("BENCH_VOILA_LOG") == "1":
        log_warnings(folder)
        shutil.copy(Path(folder) / "voila.log", Path(tempfile.gettempdir()) / f"coldmargin-voila-{proc.pid}.log")
    shutil.rmtree(folder, ignore_errors=True)


def url(port: int, notebook: str = "plan") -> str:
    return f"http://127.0.0.1:{port}/voila/render/{notebook}.ipynb?token=bench"


def interactive(page, timeout_ms: int = 300_000) -> None:
    """The first step's inputs are on the page (a person can type)."""
    page.get_by_label("Volume (mL)", exact=True).wait_for(timeout=timeout_ms)


def assessed(page, timeout_ms: int = 300_000) -> None:
    """The first assessment is in the summary strip."""
    page.locator(".cm-summary .cm-verdict").wait_for(timeout=timeout_ms)


def kernel_pids(voila_pid: int) -> list[int]:
    out = []
    for d in Path("/proc").iterdir():
        if not d.name.isdigit():
            continue
        try:
            cmd = (d / "cmdline").read_bytes().replace(b"\0", b" ")
            stat = (d / "stat").read_text().split()
        except OSError:
            continue
        if b"ipykernel" in cmd and int(stat[3]) == voila_pid:
            out.append(int(d.name))
    return out


def rss_mb(pid: int) -> float:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024
    return float("nan")


def available_mb() -> float:
    for line in Path("/proc/meminfo").read_text().splitlines():
        if line.startswith("MemAvailable:"):
            return int(line.split()[1]) / 1024
    return float("nan")


# In the page: the time of the Enter key press and of each change to the summary strip, by the page's own
# clock (what a person at the screen sees, without the test driver's own messages to the browser).
WATCH_STRIP = """() => { window.cmMarks = []; const s = document.querySelector('.cm-summary');
  new MutationObserver(() => { window.cmMarks.push([performance.now(), s.innerText.includes('Working')]); })
    .observe(s, {subtree: true, childList: true, characterData: true});
  document.addEventListener('keydown', (e) => { if (e.key === 'Enter') window.cmEnter = performance.now(); },
                            true); }"""


def change_and_wait(page, box, value: str) -> tuple[float, float]:
    """One change typed and entered: seconds until the strip shows the new result, seen from the driver
    and seen in the page (Enter pressed → last change of the strip that is not "Working")."""
    before = page.locator(".cm-summary").inner_text()
    page.evaluate("() => { window.cmMarks = []; }")
    t = time.perf_counter()
    box.fill(value)
    box.press("Enter")
    page.wait_for_function(
        "(old) => { const s = document.querySelector('.cm-summary');"
        " return s && s.innerText !== old && !s.innerText.includes('Working'); }", arg=before, timeout=120_000)
    outside = time.perf_counter() - t
    inside = page.evaluate("() => { const m = window.cmMarks.filter(x => !x[1]);"
                           " return m.length ? (m[m.length - 1][0] - window.cmEnter) / 1000 : NaN; }")
    return outside, inside


def first_chart(page, timeout_ms: int = 300_000) -> None:
    """The first step's chart is drawn (an SVG in its box)."""
    page.locator(".cm-chart-sample svg").first.wait_for(timeout=timeout_ms)


def round_trips(page, protocol_label: str, changes: int) -> None:
    """Concentration changes on the Solution step: new values (full assessments), then two values in turn
    (the app's cache). Back to back, as fast as the driver can type: the chart of one change is still being
    drawn when the next arrives, which a person typing would seldom do."""
    page.get_by_role("button", name="Solution", exact=True).click()
    box = page.get_by_label("Concentration (% w/w)", exact=True)
    start = float(box.input_value())
    page.evaluate(WATCH_STRIP)

    def settled(value: str) -> tuple[float, float]:
        out = change_and_wait(page, box, value)
        page.wait_for_function("() => !document.querySelector('.cm-chart-solution .cm-chart-updating')",
                               timeout=120_000)
        time.sleep(0.2)
        return out

    read = [settled(f"{start - 0.1 * (i + 1):.2f}") for i in range(changes)]
    fresh = [change_and_wait(page, box, f"{start + 0.5 * (i + 1):.1f}") for i in range(changes)]
    cached = [change_and_wait(page, box, f"{start + 1.0:.1f}" if i % 2 else f"{start + 2.0:.1f}")
              for i in range(changes)]
    for what, runs in (("new value, each result read (chart drawn) before the next change", read),
                       ("new value, back to back", fresh), ("flipping between two values (cached)", cached)):
        outside = [a * 1000 for a, _ in runs]
        inside = [b * 1000 for _, b in runs]
        print(f"round trip, {protocol_label}, {what}: in the page median {statistics.median(inside):.0f} ms "
              f"(min {min(inside):.0f}, max {max(inside):.0f}); seen by the driver median "
              f"{statistics.median(outside):.0f} ms (min {min(outside):.0f}, max {max(outside):.0f}) over {changes}; "
              f"{against(statistics.median(outside), ROUND_TRIP_TARGET_MS, 'ms')} (driver's median)")


# what a page that never became usable holds (printed with its console)
PAGE_STATE = """() => JSON.stringify({ready: document.readyState, app: !!window.jupyterapp,
  loading: !!document.getElementById('loading'), cells: (document.getElementById('rendered_cells') || {}).style?.display,
  outputs: document.querySelectorAll('.jp-OutputArea-output').length, widgets: document.querySelectorAll('.jupyter-widgets').length,
  views: document.querySelectorAll('script[type="application/vnd.voila.cell-output+json"]').length,
  text: document.body.innerText.slice(0, 200)})"""


def one_viewer(page_url: str, started: float) -> None:
    """One viewer in its own browser (a separate process, as on its own computer): prints seconds from
    ``started`` (time.time() of the launch) to interactive and to the first assessment."""
    import sys

    from playwright.sync_api import sync_playwright

    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=CHROMIUM, headless=True, args=ARGS)
        page = browser.new_page()
        page.set_default_timeout(600_000)
        console: list[str] = []
        page.on("console", lambda m: console.append(f"{time.time() - started:.1f} s {m.type}: {m.text}"))
        page.goto(page_url)
        try:
            interactive(page, timeout_ms=int(os.environ.get("BENCH_VIEWER_TIMEOUT_S", "600")) * 1000)
        except Exception:
            shot = Path(tempfile.gettempdir()) / f"coldmargin-viewer-{os.getpid()}.png"
            page.screenshot(path=str(shot))
            console.append("page: " + page.evaluate(PAGE_STATE))
            print(f"not interactive; screenshot {shot}; console:", *console[-30:], sep="\n  ", file=sys.stderr)
            raise
        ready = time.time() - started
        assessed(page, timeout_ms=600_000)
        print(f"{ready:.2f} {time.time() - started:.2f}", flush=True)
        time.sleep(5)  # stay connected while the others finish, as a viewer would
        browser.close()


def pool_ready(proc, folder: Path, pool: int, limit_s: float = 300.0) -> float:
    """Seconds until voila's log says the pool of ``pool`` pre-started kernels is filled (each has run the
    notebook) and then no kernel has used any CPU for 2 s (the chart-engine warm-up is done too); bounded
    by ``limit_s``, NaN when it never happens. A CPU-time threshold alone went stale as the start got
    faster: a ready kernel now uses about 1.7 s of CPU."""
    t0 = time.monotonic()
    log = folder / "voila.log"
    last: dict[int, int] = {}
    quiet_since = None
    while time.monotonic() - t0 < limit_s:
        filled = log.exists() and f"is filled with {pool} kernel(s)" in log.read_text(errors="replace")
        now: dict[int, int] = {}
        for pid in kernel_pids(proc.pid):
            try:
                stat = Path(f"/proc/{pid}/stat").read_text().split()
            except OSError:
                continue
            now[pid] = int(stat[13]) + int(stat[14])  # clock ticks, 100 per second
        if filled and len(now) >= pool and now == last:
            quiet_since = quiet_since or time.monotonic()
            if time.monotonic() - quiet_since >= 2:
                return time.monotonic() - t0
        else:
            quiet_since = None
        last = now
        time.sleep(0.5)
    return float("nan")


def viewers_at_once(browser, viewers: int, pool: int = 0) -> None:
    """Ten viewers opening the app at once, each in its own browser process (as on ten laptops): time
    until all are interactive, kernel and machine memory. With ``pool`` > 0 the viewers arrive after the
    pre-started kernels have run the notebook (a server started before the meeting)."""
    import sys

    proc, port, folder, t0, up = start(pool=pool)
    if pool:
        print(f"pool of {pool}: kernels ready {pool_ready(proc, folder, pool) + up:.1f} s after the server started")
    before = available_mb()
    started = time.time()
    runs = [subprocess.Popen([sys.executable, __file__, "--one-viewer", url(port), f"{started}"],
                             stdout=subprocess.PIPE, text=True) for _ in range(viewers)]
    times = []
    peak_kernels, peak_rss = 0, 0.0
    before_low = before
    while any(r.poll() is None for r in runs):
        pids = kernel_pids(proc.pid)
        rss = sum(rss_mb(p) for p in pids)
        if rss > peak_rss:
            peak_kernels, peak_rss = len(pids), rss
        before_low = min(before_low, available_mb())
        time.sleep(1)
    for r in runs:
        out = r.stdout.read().split()
        if len(out) == 2:
            times.append((float(out[0]), float(out[1])))
    ready = [a for a, _ in times]
    done = [b for _, b in times]
    if not times:
        print(f"{viewers} viewers at once (pool {pool}): none reached the app")
        stop(proc, folder)
        return
    print(f"{viewers} viewers at once (each its own browser, pool {pool}): {len(times)} reached the app; "
          f"all interactive after "
          f"{max(ready):.1f} s (first {min(ready):.1f} s, median {statistics.median(ready):.1f} s), all assessed "
          f"after {max(done):.1f} s; {peak_kernels} kernels, {peak_rss:.0f} MB at most in all "
          f"({peak_rss / max(peak_kernels, 1):.0f} MB each); machine memory available {before:.0f} MB before, "
          f"{before_low:.0f} MB at the lowest (the ten browsers included)")
    stop(proc, folder)


def main() -> None:
    from playwright.sync_api import sync_playwright

    parser = argparse.ArgumentParser()
    parser.add_argument("--quick", action="store_true", help="fewer repetitions")
    parser.add_argument("--cold-only", action="store_true", help="only the cold-start figures")
    parser.add_argument("--viewers-only", action="store_true", help="only the ten-viewers figure")
    parser.add_argument("--no-viewers", action="store_true", help="skip the ten-viewers figures")
    parser.add_argument("--viewers-pool", type=int, default=0, help="pre-started kernels for --viewers-only")
    parser.add_argument("--cold-runs", type=int, default=0, help="cold starts for each pool size (default 3)")
    parser.add_argument("--cold-pools", default="0,1", help="pool sizes of the cold starts (default 0,1)")
    parser.add_argument("--one-viewer", nargs=2, metavar=("URL", "STARTED"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.one_viewer:
        one_viewer(args.one_viewer[0], float(args.one_viewer[1]))
        return
    cold_runs = args.cold_runs or (1 if args.quick else 3)
    changes = 8 if args.quick else 20
    viewers = int(os.environ.get("BENCH_VIEWERS", "10"))
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=CHROMIUM, headless=True, args=ARGS)

        # 1. cold start: the server started and the page opened at once, with no pool and with the app's
        # default pool of one pre-started kernel (which is still running the notebook when the page asks)
        for pool in (() if args.viewers_only else [int(n) for n in args.cold_pools.split(",")]):
            cold, strip, chart = [], [], []
            for _ in range(cold_runs):
                proc, port, folder, t0, up = start(pool=pool, protocol=RIGID)
                page = browser.new_page(viewport={"width": 1300, "height": 1400})
                page.set_default_timeout(300_000)
                page.goto(url(port))
                interactive(page)
                cold.append(time.monotonic() - t0)
                assessed(page)
                strip.append(time.monotonic() - t0)
                first_chart(page)
                chart.append(time.monotonic() - t0)
                print(f"cold start, pool {pool}: server answering {up:.1f} s, first interactive step {cold[-1]:.1f} s, "
                      f"first assessment in the strip {strip[-1]:.1f} s, first chart {chart[-1]:.1f} s")
                page.close()
                stop(proc, folder)
            print(f"cold start, pool {pool}, medians over {len(cold)}: interactive {statistics.median(cold):.1f} s, "
                  f"assessed {statistics.median(strip):.1f} s, chart {statistics.median(chart):.1f} s; "
                  f"{against(statistics.median(cold), COLD_START_TARGET_S, 's')} (interactive)")

        if args.viewers_only:
            viewers_at_once(browser, viewers, pool=args.viewers_pool)
            browser.close()
            return
        if args.cold_only:
            browser.close()
            return

        # 2. round trips, 3. memory of the kernel after the full demo
        for protocol, label in ((OPEN_VIAL, "open-vial demo"), (RIGID, "rigid-chamber demo")):
            proc, port, folder, t0, up = start(pool=0, protocol=protocol)
            page = browser.new_page(viewport={"width": 1300, "height": 1400})
            page.set_default_timeout(300_000)
            t = time.monotonic()
            page.goto(url(port))
            interactive(page)
            assessed(page)
            time.sleep(2)  # let the first chart finish, as a person reading the page would
            round_trips(page, label, changes)
            for name in ("Sample", "Container", "Solution", "Schedule", "Cells", "Review", "Sign & archive"):
                page.get_by_role("button", name=name, exact=True).click()
                page.locator(".cm-body h3", has_text=name).first.wait_for()
            time.sleep(2)
            pids = kernel_pids(proc.pid)
            print(f"kernel memory after the full demo ({label}): " + ", ".join(f"{rss_mb(p):.0f} MB" for p in pids)
                  + f" ({len(pids)} kernel(s) alive on this server)")
            page.close()
            stop(proc, folder)

        # pre-started pool: page loads
        proc, port, folder, t0, up = start(pool=2, protocol=RIGID)
        ready = pool_ready(proc, folder, 2) + up
        loads = []
        for _ in range(2):
            page = browser.new_page()
            page.set_default_timeout(300_000)
            t = time.monotonic()
            page.goto(url(port))
            interactive(page)
            a = time.monotonic() - t
            assessed(page)
            loads.append((a, time.monotonic() - t))
            page.close()
            time.sleep(3)
        print(f"pool of 2: kernels ready {ready:.1f} s after start; page loads interactive / assessed: "
              + ", ".join(f"{a:.1f} / {b:.1f} s" for a, b in loads))
        stop(proc, folder)

        if args.no_viewers:
            browser.close()
            return
        viewers_at_once(browser, viewers)
        viewers_at_once(browser, viewers, pool=viewers)
        browser.close()


if __name__ == "__main__":
    try:
        main()
    finally:
        for proc, folder in list(RUNNING):
            stop(proc, folder)
