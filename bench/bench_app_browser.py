"""Browser timings of the front end against the targets of the app's speed goals (median of 3).

Serves the app with ``streamlit run`` on a free localhost port, drives Debian's Chromium with
Playwright on the demo study and prints, for each measure, the three timings, their median and
the target:

- cold start: process start to the first view showing the cohort summary (target < 5 s);
- Results view re-rendered with the run cached, reached from another view (target < 0.5 s);
- a figure switched on the Results view: from the choice in the open list to the other figure shown
  (target < 0.5 s);
- a nomogram at a time that is not one of the study's horizons (target < 1 s);
- Export ready: results.json and the bundle, then the report (target < 3 s), visited after the
  Results and Nomogram views as a user would (the report is written in the background after the
  run); with ``--at-once``, visited the moment the run finishes instead (the worst case);
- cancel: click to "cancelled" while a long run is under way (target < 2 s);
- the first figure after a run: from "Finished in" on the page to the figure's download buttons
  (no target; the figures are drawn in a worker process after the run).

Beside each timing it prints the app server's CPU seconds spent meanwhile (from /proc; for the
cold start, since the server started): the machine's load changes them much less than the wall
times, so they compare two versions measured under different loads. The worker processes'
CPU is not counted.

    python bench/bench_app_browser.py [--replicates 2] [--at-once] [--cold-only]

For the cached Results view, the figure switch, the nomogram and Export it also prints where the
time went: the app's own script runs meanwhile (count, wall and thread CPU seconds, written by the
app to the file named in ``WORKBENCH_RUN_LOG``), the websocket messages and bytes the server sent
and the files the page fetched, when the first and last message came after the start and how long
the page took after the last one, and the browser's main-thread seconds (Chromium's own metrics
over the DevTools protocol: all tasks, JavaScript, layout and style; and long tasks over 50 ms
from a PerformanceObserver), and the CPU seconds of the Chromium processes (from /proc, like the
server's: the main-thread seconds are wall times and grow with the machine's load). For the cold start it prints when the server answered, when the page
had loaded its scripts, when the first script run ended and when the view was ready. Medians of
every part are printed at the end. The polling below runs in the page too, so the browser's
seconds include some of the bench's own querying.

A view counts as ready when its expected text is visible and Streamlit's running indicator
is gone (polled every 50 ms), so each timing includes up to ~0.1 s of polling. Timings depend on
what else runs on the machine: run it on a quiet machine and report the load next to it.
Needs the browser installed by tests/app/install_browser.sh.

Measured 2026-12-03, one round each, the code before and after the per-figure plan, static
Results tables and the nomogram's reused axes, back to back on a machine at a load average of
about 40 on 2 cores (five other helpers' work; the wall times are many times the quiet
machine's, the server CPU seconds less so). Wall s (server CPU s), before -> after: cold start
29.9 (3.27) -> 29.5 (3.23); first figure after the run 95.8 (5.54) -> 24.2 (1.70); Results view,
cached 9.75 (0.65) -> 8.66 (2.80); figure switch 9.29 (0.58) -> 2.32 (0.63); nomogram at a new
time 10.6 (1.74) -> 8.12 (1.33); Export ready 11.9 (2.99) -> 12.8 (2.58); report 309 (30.3) ->
247 (32.1); cancel 1.00 (0.10) -> 4.05 (0.78). No target was met at that load; none can be
judged from it. Script-thread CPU from a temporary trace of the same rounds: cached Results
view 0.036 -> 0.057 s; nomogram at a new time 0.52 -> 0.44 s (axes 0.039 -> 0.004 s, drawing
~0.16 s, its SVG ~0.22-0.29 s); the Export view's script thread 18.9 s in both, about what the
report takes to write: it seems to have been written in the server's own process, not in the
files worker, in both rounds (not investigated further).
A second pair, the two versions run at the same time (load about 30), wall s (server CPU s),
before -> after: cold start 12.6 (3.39) -> 42.7 (3.59); first figure after the run 43.4 (0.83) ->
8.78 (0.63); Results view, cached 1.86 (0.13) -> 4.83 (0.48); figure switch 2.37 (0.19) -> 0.95
(0.06); nomogram 5.22 (0.65) -> 4.56 (0.52); Export ready 1.89 (0.23) -> 2.16 (0.32); report 119
(1.17) -> 56.5 (0.66); cancel 0.61 (0.08) -> 0.76 (0.45). Only the first figure after a run
improved clearly in both pairs; the cached Results view did not (better in one pair, worse in
the other; after the change the figure worker is still drawing the other figures then).
Measured 2026-12-04 16:27-16:53 UTC (3 rounds, load average 15-24 from other work: wall times say
nothing about the targets), after the report was kept out of the server's script thread and the
workers stopped running the app's main script: "Export report ready" 148 s median (107-262) with
the server's CPU meanwhile 1.2 s median (1.17-1.83): the report was written in the files worker
in every round (written in the server, its CPU was 18.9-30 s in the rounds above).

Measured 2026-12-04, before -> after the static HTML tables (Results and Data views), the Results
figure in a fragment, the worker processes no longer running the app script, the deferred Nomogram
files and the warmed launch; the two versions run at the same time, medians of 3, load average
14-20 on 2 cores (other helpers' work; the bench and its server run at nice 19, so the wall times
are several times a quiet machine's). Where the time went, before -> after: cached Results view:
script 0.05 -> 0.03 s CPU, 38 -> 28 kB in 79 -> 74 messages, browser main thread 2.35 -> 1.13 s
(JavaScript 1.63 -> 0.82, long tasks 1.47 -> 0.48); wall 7.0 -> 3.9 s (first message after 1.35 /
1.29 s: the starved server). Figure switch: 31 kB in 63 messages -> 3.5 kB in 15 (the fragment
alone), browser 1.00 -> 0.55 s (long tasks 0.70 -> 0.24); wall 1.6 -> 2.4 s (first message after
0.5 -> 1.0 s). Nomogram at a new time: script 0.33 -> 0.35 s CPU, 285 kB (the SVG) both, wall 6.1
-> 7.5 s. Switching Data <-> Results three times on one server (load about 18), before -> after:
Results browser main thread 1.67 -> 0.80 s (JavaScript 1.35 -> 0.38), Data 1.17 -> 0.87 s (0.86 ->
0.50). Cold start, alternating the versions with ``--cold-only`` (load 11): 4.68, 5.44, 5.27 s
(server CPU 1.92, 1.87, 2.14) -> 4.45, 3.96, 4.92 s (2.08, 1.87, 2.36); from the first message to
the view 2.3-3.0 s -> 1.2-1.7 s, the server answering 0.2-0.4 s later and the page's scripts
loading 0.3 s slower while the warm-up imports run. None of these is a quiet-machine figure.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from workbench.app import launch  # noqa: E402

CHROMIUM = "/usr/bin/chromium"
ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync"]
TARGETS = {"cold start to first view": 5.0, "Results view, cached run": 0.5, "Results figure switch": 0.5,
           "nomogram at a new time": 1.0, "Export ready (results, bundle)": 3.0, "Export report ready": 3.0,
           "Export ready (results, bundle), at once": 3.0, "Export report ready, at once": 3.0,
           "cancel acts": 2.0, "first figure after the run": None}


def serve():
    port = launch.free_port(8711)
    log = tempfile.TemporaryFile()
    proc = subprocess.Popen(launch.command(port, sys.executable), cwd=REPO, stdout=log, stderr=log,
                            env={**os.environ, "PYTHONPATH": str(REPO), "WORKBENCH_RUN_LOG": str(RUN_LOG)})
    url = f"http://127.0.0.1:{port}"
    while True:
        try:
            with urllib.request.urlopen(f"{url}/_stcore/health", timeout=2) as r:
                if r.read().strip() == b"ok":
                    return proc, url
        except OSError:
            if proc.poll() is not None:
                log.seek(0)
                raise RuntimeError(log.read().decode(errors="replace")[-2000:]) from None
            time.sleep(0.05)


def stop(proc):
    proc.terminate()
    try:
        proc.wait(20)
    except subprocess.TimeoutExpired:
        proc.kill()


def ready(page, text: str, timeout_ms: int = 600_000) -> None:
    """Wait until ``text`` is visible and the script run has finished."""
    page.get_by_text(text, exact=False).first.wait_for(timeout=timeout_ms)
    status = page.locator("[data-testid='stStatusWidget']")
    deadline = time.monotonic() + timeout_ms / 1000
    while status.count() and status.first.is_visible() and time.monotonic() < deadline:
        time.sleep(0.05)


def goto(page, title: str, text: str) -> float:
    t0 = time.monotonic()
    page.locator("[data-testid='stSidebarNav'] a").filter(has_text=title).first.click()
    page.get_by_role("heading", name=title, exact=True).first.wait_for()
    ready(page, text)
    return time.monotonic() - t0


SERVER: dict[str, int] = {}
"""The pid of the app server under test (its CPU seconds are read from /proc)."""
CPU: dict[str, list[float]] = {}
PARTS: dict[str, list[dict]] = {}
"""Per measure and round, where the time went (:func:`parts`)."""
RUN_LOG = Path(tempfile.gettempdir()) / f"workbench-bench-runs-{os.getpid()}.tsv"
"""The app's own log of its script runs (``WORKBENCH_RUN_LOG``, workbench/app/main.py)."""

# Counted in the page from its first moment: every websocket message the server sends (bytes,
# when the first and last came, in the page's clock), the main thread's long tasks (> 50 ms)
# and the files it fetched (the pictures are separate requests to /media/, not in the messages).
PROBE = """
window.__wbNet = {n: 0, bytes: 0, times: []};
const WbSocket = window.WebSocket;
window.WebSocket = class extends WbSocket {
  constructor(...args) {
    super(...args);
    this.addEventListener('message', (e) => {
      const d = e.data, s = window.__wbNet;
      s.n += 1;
      s.bytes += d.byteLength ?? d.size ?? d.length ?? 0;
      s.times.push(performance.now());
    });
  }
};
window.__wbLong = [];
new PerformanceObserver((l) => { for (const e of l.getEntries()) window.__wbLong.push([e.startTime, e.duration]); })
  .observe({type: 'longtask', buffered: true});
"""
SINCE = """(t0) => {
  const s = window.__wbNet, after = s.times.filter((t) => t >= t0);
  const files = performance.getEntriesByType('resource').filter((r) => r.startTime >= t0);
  return {now: performance.now(), messages: after.length, first: after.length ? after[0] : null,
          last: after.length ? after[after.length - 1] : null,
          long: window.__wbLong.filter((x) => x[0] >= t0).reduce((a, x) => a + x[1], 0),
          files: files.length, file_bytes: files.reduce((a, r) => a + (r.encodedBodySize || 0), 0)};
}"""
BROWSER_METRICS = ("TaskDuration", "ScriptDuration", "LayoutDuration", "RecalcStyleDuration")


def browser_cpu() -> float:
    """CPU seconds used so far by the Chromium processes this bench started (renderer, GPU, browser):
    less sensitive to the machine's load than the main-thread seconds, which are wall times."""
    parents, names = {}, {}
    for d in Path("/proc").iterdir():
        if not d.name.isdigit():
            continue
        try:
            stat = (d / "stat").read_text()
        except OSError:
            continue
        head, rest = stat.rsplit(")", 1)
        names[int(d.name)] = head.split("(", 1)[1]
        parents[int(d.name)] = int(rest.split()[1])
    ours = set()
    for pid in parents:
        p = pid
        while p in parents and p not in (0, 1):
            if p == os.getpid():
                ours.add(pid)
                break
            p = parents[p]
    total = 0.0
    for pid in ours:
        if names.get(pid, "").startswith("chrom"):
            try:
                total += _cpu_seconds(pid)
            except OSError:
                continue
    return total


class Probe:
    """Where a timed step's time went: the server's script runs, the bytes sent to the page, and the
    browser's own work (Chromium's main-thread metrics over the Chrome DevTools Protocol)."""

    def __init__(self, page) -> None:
        self.page = page
        self.cdp = page.context.new_cdp_session(page)
        self.cdp.send("Performance.enable")

    def _metrics(self) -> dict:
        got = self.cdp.send("Performance.getMetrics")["metrics"]
        return {m["name"]: m["value"] for m in got if m["name"] in BROWSER_METRICS}

    def mark(self) -> dict:
        bytes_, now = self.page.evaluate("() => [window.__wbNet.bytes, performance.now()]")
        return {"bytes": bytes_, "t": now, "metrics": self._metrics(), "epoch": time.time(), "cpu": browser_cpu(),
                "log": RUN_LOG.stat().st_size if RUN_LOG.exists() else 0}

    def parts(self, m: dict) -> dict:
        """The step since mark ``m``: server script runs (count, wall, CPU), websocket bytes, first and
        last message after the start, then the browser until ready; browser main-thread seconds."""
        got = self.page.evaluate(SINCE, m["t"])
        net = self.page.evaluate("() => window.__wbNet.bytes")
        metrics = self._metrics()
        runs = []
        if RUN_LOG.exists():
            with RUN_LOG.open(encoding="utf-8") as f:
                f.seek(m["log"])
                runs = [line.rstrip("\n").split("\t") for line in f if line.strip()]
        ms = 1000.0
        return {
            "script runs": len(runs),
            "script wall": sum(float(r[2]) for r in runs),
            "script CPU": sum(float(r[3]) for r in runs),
            "kB sent": (net - m["bytes"]) / 1024,
            "messages": got["messages"],
            "kB files": got["file_bytes"] / 1024,
            "to 1st message": (got["first"] - m["t"]) / ms if got["first"] is not None else float("nan"),
            "to last message": (got["last"] - m["t"]) / ms if got["last"] is not None else float("nan"),
            "last message to ready": (got["now"] - got["last"]) / ms if got["last"] is not None else float("nan"),
            "browser CPU": browser_cpu() - m["cpu"],
            "browser busy": metrics["TaskDuration"] - m["metrics"]["TaskDuration"],
            "browser script": metrics["ScriptDuration"] - m["metrics"]["ScriptDuration"],
            "layout+style": (metrics["LayoutDuration"] - m["metrics"]["LayoutDuration"]
                             + metrics["RecalcStyleDuration"] - m["metrics"]["RecalcStyleDuration"]),
            "long tasks": got["long"] / ms,
        }


PROBES: dict[str, Probe] = {}

COLD = """() => {
  const nav = performance.getEntriesByType('navigation')[0], s = window.__wbNet;
  return {origin: performance.timeOrigin, now: performance.now(), dom: nav ? nav.domContentLoadedEventEnd : null,
          first: s.times.length ? s.times[0] : null, last: s.times.length ? s.times[s.times.length - 1] : null,
          kb: s.bytes / 1024, files: performance.getEntriesByType('resource')
            .reduce((a, r) => a + (r.encodedBodySize || 0), 0) / 1024};
}"""


def cold_parts(page, epoch0: float, up: float) -> str:
    """The cold start split: server up (health answered), the page's HTML and scripts loaded, the
    first script run (the app's run log), the first and last message, ready; seconds from the start."""
    got = page.evaluate(COLD)
    at = lambda t: (got["origin"] + t) / 1000 - epoch0  # noqa: E731  (page clock -> seconds from the start)
    runs = [line.split("\t") for line in RUN_LOG.read_text(encoding="utf-8").splitlines()] if RUN_LOG.exists() else []
    first = (f"first script run ended at {float(runs[0][0]) - epoch0:.2f} s ({float(runs[0][2]):.2f} s wall, "
             f"{float(runs[0][3]):.2f} s CPU; {len(runs)} run(s))") if runs else "no script run logged"
    return (f"server up at {up - epoch0:.2f} s; page loaded (DOMContentLoaded) at {at(got['dom'] or 0):.2f} s; "
            f"first message at {at(got['first'] or 0):.2f} s; {first}; last message at {at(got['last'] or 0):.2f} s; "
            f"ready at {at(got['now']):.2f} s; sent {got['kb']:.0f} kB in messages + {got['files']:.0f} kB files")


def mark() -> tuple[float, dict | None]:
    """Server CPU seconds and the probe's mark at the start of a timed step."""
    probe = PROBES.get("page")
    return server_cpu(), (probe.mark() if probe is not None else None)


def server_cpu() -> float:
    return _cpu_seconds(SERVER["pid"]) if "pid" in SERVER else float("nan")


def record(times: dict, name: str, seconds: float, cpu0=None) -> None:
    """One timing; with ``cpu0`` (the server's CPU seconds when it started, or :func:`mark`'s pair)
    also the server's CPU seconds spent meanwhile, which the machine's load changes much less than
    the wall time, and with a probe's mark where the time went (:meth:`Probe.parts`)."""
    times[name].append(seconds)
    m = None
    if isinstance(cpu0, tuple):
        cpu0, m = cpu0
    cpu = "" if cpu0 is None else f" (server CPU {server_cpu() - cpu0:.2f} s)"
    if cpu0 is not None:
        CPU.setdefault(name, []).append(server_cpu() - cpu0)
    print(f"  {name}: {seconds:.2f} s{cpu}", flush=True)
    if m is not None:
        p = PARTS.setdefault(name, [])
        p.append(PROBES["page"].parts(m))
        print("    " + _parts_text(p[-1]), flush=True)


def _parts_text(p: dict) -> str:
    return (f"script {p['script runs']:.0f} run(s) {p['script wall']:.2f} s wall, {p['script CPU']:.2f} s CPU; "
            f"sent {p['kB sent']:.0f} kB in {p['messages']:.0f} messages + {p['kB files']:.0f} kB files; "
            f"1st message {p['to 1st message']:.2f} s, last {p['to last message']:.2f} s, then "
            f"{p['last message to ready']:.2f} s to ready; browser CPU {p['browser CPU']:.2f} s, main thread busy "
            f"{p['browser busy']:.2f} s "
            f"(script {p['browser script']:.2f}, layout+style {p['layout+style']:.2f}; long tasks "
            f"{p['long tasks']:.2f} s)")


def one_round(page, args, times) -> None:
    goto(page, "Results", "Run the study")
    for name, value in (("Bootstrap replicates for this run", args.replicates), ("Parallel workers", 1)):
        box = page.get_by_role("spinbutton", name=name)
        box.fill(str(value))
        box.press("Enter")
        ready(page, "Run the study")
    page.get_by_role("button", name="Run the study").click()
    page.get_by_text("Finished in", exact=False).first.wait_for(timeout=600_000)
    t0, c0 = time.monotonic(), server_cpu()
    page.get_by_role("button", name="Download PDF").first.wait_for(timeout=600_000)
    ready(page, "Finished in")
    record(times, "first figure after the run", time.monotonic() - t0, c0)

    def export(label: str) -> None:
        c0 = mark()
        t0 = time.monotonic()
        record(times, f"Export ready (results, bundle){label}", goto(page, "Export", "Download the model bundle (zip)"),
               c0)
        ready(page, "Download the report (HTML)")
        record(times, f"Export report ready{label}", time.monotonic() - t0, c0)

    if args.at_once:  # the worst case: the background build has had no time at all
        export(", at once")
    goto(page, "Data", "Cohort summary")
    c0 = mark()
    record(times, "Results view, cached run", goto(page, "Results", "Download PDF"), c0)
    select = page.get_by_label("Figure", exact=True).first
    # the picture beside the figure's own download buttons (the comparison above has images too)
    shown = (page.locator("[data-testid='stHorizontalBlock']")
             .filter(has=page.get_by_role("button", name="Download PNG")).last
             .locator("[data-testid='stImage'] img").first)
    before = shown.get_attribute("src")
    for _ in range(3):  # the list sometimes closes when a redraw lands on the click: open it again
        select.click()
        try:
            page.get_by_role("option").nth(1).wait_for(timeout=5000)
            break
        except Exception:  # noqa: BLE001
            continue
    # timed from the choice in the open list to the other figure on the page (its picture's
    # address changes) with the script run finished; opening the list is the browser's part
    c0 = mark()
    t0 = time.monotonic()
    page.get_by_role("option").nth(1).click()
    deadline = time.monotonic() + 120
    while shown.get_attribute("src") == before and time.monotonic() < deadline:
        time.sleep(0.02)
    if shown.get_attribute("src") == before:
        raise RuntimeError(f"the Results figure did not change after choosing another one (src {before[:60]})")
    ready(page, "Download PDF")
    record(times, "Results figure switch", time.monotonic() - t0, c0)
    goto(page, "Nomogram", "Download PNG")
    box = page.get_by_role("textbox", name="Other times (months, comma separated)")
    c0 = mark()
    t0 = time.monotonic()
    new = 18 + len(times["nomogram at a new time"])
    box.fill(str(new))
    box.press("Enter")
    ready(page, f", {new}, ")  # the axes caption lists the new time among the horizons
    record(times, "nomogram at a new time", time.monotonic() - t0, c0)
    if not args.at_once:  # a user who looked at the results and the nomogram first
        export("")
    goto(page, "Results", "Run the study")
    reps = page.get_by_role("spinbutton", name="Bootstrap replicates for this run")
    reps.fill("500")
    reps.press("Enter")
    ready(page, "Run the study")
    page.get_by_role("button", name="Run the study").click()
    page.get_by_text("replicates (elapsed", exact=False).first.wait_for(timeout=600_000)
    t0, c0 = time.monotonic(), server_cpu()
    page.get_by_role("button", name="Cancel the run").click()
    page.get_by_text("The run was cancelled").wait_for(timeout=600_000)
    record(times, "cancel acts", time.monotonic() - t0, c0)


def _cpu_seconds(pid: int) -> float:
    """User + system CPU time of a process so far (Linux /proc)."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--replicates", type=int, default=2)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--at-once", action="store_true", help="visit Export the moment the run finishes")
    ap.add_argument("--cold-only", action="store_true",
                    help="time the cold start only, with the server's CPU seconds (less sensitive to load)")
    args = ap.parse_args(argv)
    from playwright.sync_api import sync_playwright

    times: dict[str, list[float]] = {k: [] for k in TARGETS}
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=CHROMIUM, headless=True, args=ARGS)
        for _ in range(args.repeats):
            t0, epoch0 = time.monotonic(), time.time()
            RUN_LOG.unlink(missing_ok=True)
            proc, url = serve()
            up = time.time()
            SERVER["pid"] = proc.pid
            try:
                page = browser.new_page(viewport={"width": 1440, "height": 1000})
                page.add_init_script(PROBE)
                PROBES["page"] = Probe(page)
                page.goto(url)
                ready(page, "Cohort summary")
                record(times, "cold start to first view", time.monotonic() - t0, 0.0)
                print("    " + cold_parts(page, epoch0, up), flush=True)
                if not args.cold_only:
                    one_round(page, args, times)
                page.close()
            finally:
                PROBES.pop("page", None)
                stop(proc)
        browser.close()
    print(f"{'measure':40s} {'runs (s)':24s} {'median':>8s} {'target':>8s}  met  {'server CPU, median':>18s}")
    for k, v in times.items():
        if not v:
            continue  # the other Export case (see --at-once)
        med = statistics.median(v)
        runs = ", ".join(f"{x:.2f}" for x in v)
        target = TARGETS[k]
        met = "-" if target is None else ("yes" if med < target else "NO")
        cpu = f"{statistics.median(CPU[k]):18.2f}" if CPU.get(k) else f"{'-':>18s}"
        print(f"{k:40s} {runs:24s} {med:8.2f} {'-' if target is None else f'{target:.2f}':>8s}  {met:3s}  {cpu}")
    if PARTS:
        print("\nwhere the time went (medians over the rounds; seconds unless said; the browser's main-thread "
              "seconds overlap the wall time after the last message):")
        keys = list(next(iter(PARTS.values()))[0])
        print(f"{'measure':34s} " + " ".join(f"{k:>10.10s}" for k in keys))
        for name, rows in PARTS.items():
            print(f"{name:34.34s} " + " ".join(f"{statistics.median(r[k] for r in rows):10.2f}" for k in keys))
    RUN_LOG.unlink(missing_ok=True)
    print(f"load average at the end: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")
    return 0


if __name__ == "__main__":
    sys.exit(main())
