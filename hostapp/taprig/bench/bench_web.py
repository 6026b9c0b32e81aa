"""Benchmark ``web``: the dashboard at 64 channels × 2 kHz, measured in a real browser (Debian's Chromium).

1. Browser latency: ``taprig sim`` runs the 64-channel bench rig in its own process on a pseudo-terminal, in real
   time at 2 kHz; this process runs the acquisition, records, and serves the dashboard. One Chromium page draws
   the stream; for each update it records the time from the newest chunk's arrival at the host to the end of the
   frame that drew it (median and p99) and the updates per second. Baseline in the same run: a page that polls the
   newest update every 100 ms (what a plain polling page would do), measured the same way.
2. Viewer load: this process's CPU (acquisition, recorder, reducer, display updates, server) with no viewer, then
   with ten pages open; the difference is what ten viewers cost, in % of one core. Baseline: the same ten viewers
   with every stream serialising its own copy of each update (no shared text). The recording's scans lost and
   gaps during the viewer phase are counted.
3. Charting library: the Cp view (20 taps with error bars, a 200-node fit curve) redrawn 300 times in one page by
   uPlot (served with taprig) and by Chart.js (installed from npm into .cache for the comparison only), in ms per
   redraw.
4. Memory: 400 viewers connect to the event stream and leave; the resident set size before and after.
"""

from __future__ import annotations

import http.client
import os
import shutil
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

from taprig.bench import Record

ROOT = Path(__file__).resolve().parents[3]
RIG = ROOT / "rigs" / "bench-64.toml"
RATE_HZ = 2000.0
CHROMIUM = os.environ.get("TAPRIG_CHROMIUM") or shutil.which("chromium") or "/usr/bin/chromium"
ARGS = ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking",
        "--disable-component-update", "--disable-sync"]


class _Run:
    """The simulated bench rig in its own process, and this process acquiring, recording and serving the page."""

    def __init__(self, folder: Path):
        from taprig.bench.bench_live import _start_sim
        from taprig.link import Link
        from taprig.reduce import Reducer
        from taprig.rig import load_rig
        from taprig.runtime.acquisition import Acquisition
        from taprig.runtime.recording import new_session
        from taprig.runtime.station import Station
        from taprig.web.app import Sources
        from taprig.web.server import serve

        self.sim, pty = _start_sim()
        rig = load_rig(RIG)
        reducer = Reducer(rig)
        self.writer = new_session(folder / "bench.taprig", rig, pty, reducer.ambient)
        self.acq = Acquisition(Link(pty), rig, reducer, self.writer)
        self.acq.open(RATE_HZ)
        self.station = Station(self.acq)
        self.dashboard = serve(Sources(self.station, None), "127.0.0.1", 0, tries=1)
        self.url = self.dashboard.url()

    def counters(self) -> dict:
        return self.acq.link.counters.as_dict()

    def close(self) -> None:
        self.dashboard.close()
        self.station.close()
        self.acq.close()
        self.sim.terminate()
        self.sim.wait(10)


def _percentile(values: list[float], q: float) -> float:
    values = sorted(values)
    return values[min(len(values) - 1, int(q * len(values)))] if values else float("nan")


_POLLING = """async ([ms, key]) => {
  const lat = []; let n = 0; const t0 = performance.now();
  while (performance.now() - t0 < ms) {
    const f = await (await fetch('/api/live/latest', {headers: {'X-Taprig-Key': key}})).json();
    await new Promise((r) => requestAnimationFrame(r));
    if (f.host_ns) lat.push(performance.timeOrigin + performance.now() - f.host_ns / 1e6);
    n++; await new Promise((r) => setTimeout(r, 100));
  }
  return {lat, rate: n / (ms / 1000)};
}"""


def _browser_figures(run: _Run, browser, seconds: float) -> list[Record]:
    page = browser.new_page(viewport={"width": 1400, "height": 1100}, bypass_csp=True)
    page.goto(run.url)
    page.wait_for_function("() => window.taprig && window.taprig.drawn > 10", timeout=30000)
    page.evaluate("() => { window.taprig.latencies.length = 0; window.taprig.t0 = performance.now(); "
                  "window.taprig.d0 = window.taprig.drawn; }")
    page.wait_for_timeout(seconds * 1000)
    stats = page.evaluate("() => ({lat: window.taprig.latencies.slice(), "
                          "rate: (window.taprig.drawn - window.taprig.d0) / ((performance.now() - window.taprig.t0) / 1000)})")
    page.close()
    naive = browser.new_page(bypass_csp=True)  # a plain page of the same origin that only polls
    naive.goto(run.url.replace("/?key=", "/api/live/describe?key="))
    polled = naive.evaluate(_POLLING, [seconds * 1000, run.dashboard.keys.view])
    naive.close()
    med, p99 = _percentile(stats["lat"], 0.5), _percentile(stats["lat"], 0.99)
    pmed, pp99 = _percentile(polled["lat"], 0.5), _percentile(polled["lat"], 0.99)
    return [
        Record("web: browser latency, median (frame at host → drawn)", med, "ms", pmed, pmed / med if med else None,
               "p99 ≤ 50 ms"),
        Record("web: browser latency, p99", p99, "ms", pp99, pp99 / p99 if p99 else None, "≤ 50 ms"),
        Record("web: updates drawn per second (64 ch × 2 kHz)", stats["rate"], "1/s", polled["rate"],
               stats["rate"] / polled["rate"] if polled["rate"] else None, "≥ 20"),
    ]


def _cpu(seconds: float) -> float:
    c0, t0 = time.process_time(), time.perf_counter()
    time.sleep(seconds)
    return 100.0 * (time.process_time() - c0) / (time.perf_counter() - t0)


def _viewer_figures(run: _Run, browser, seconds: float) -> list[Record]:
    from taprig.runtime import station as station_module

    idle = _cpu(seconds)
    before = run.counters()
    pages = []
    for _ in range(10):
        page = browser.new_page(viewport={"width": 1000, "height": 900}, bypass_csp=True)
        page.goto(run.url)
        pages.append(page)
    for page in pages:
        page.wait_for_function("() => window.taprig && window.taprig.frames > 3", timeout=60000)
    shared = _cpu(seconds)
    original = station_module.Frame.text, station_module.Frame.event
    station_module.Frame.text = lambda self: __import__("json").dumps(self.data, separators=(",", ":")).encode()
    station_module.Frame.event = lambda self: b"data: " + self.text() + b"\n\n"
    try:
        naive = _cpu(seconds)
    finally:
        station_module.Frame.text, station_module.Frame.event = original
    for page in pages:
        page.close()
    after = run.counters()
    lost = after["scans_lost"] - before["scans_lost"]
    gaps = after["gaps"] - before["gaps"]
    cost, naive_cost = shared - idle, naive - idle
    return [
        Record("web: CPU of the acquisition process, no viewer", idle, "% core"),
        Record("web: CPU added by ten viewers", cost, "% core", naive_cost,
               naive_cost / cost if cost > 0 else None, "≤ 5"),
        Record("web: scans lost / gaps while ten viewers watched", float(lost + gaps), "count", None, None, "0"),
    ]


_CHART_PAGE = """<!doctype html><html><body><div id="c" style="width:900px;height:400px"></div>
<canvas id="k" width="900" height="400"></canvas></body></html>"""

_DATA = """
const N = 20, M = 200;
const xs = Array.from({length: N}, (_, i) => 0.5 * (1 - Math.cos(Math.PI * i / (N - 1))));
const fx = Array.from({length: M}, (_, i) => 0.5 * (1 - Math.cos(Math.PI * i / (M - 1))));
const cpAt = (x, k) => 1 - 4 * Math.sin(Math.PI * x + k) ** 2 * 0.3;
"""

_UPLOT = _DATA + """
(n) => {
  const all = [...new Set([...xs, ...fx])].sort((a, b) => a - b);
  const u = new uPlot({width: 900, height: 400, scales: {x: {time: false}, y: {dir: -1}},
    series: [{}, {points: {show: true, size: 8}, paths: () => null}, {width: 2}]}, [all, all.map(() => null), all.map(() => null)],
    document.getElementById('c'));
  const t0 = performance.now();
  for (let k = 0; k < n; k++) {
    const m = new Map(xs.map((x) => [x, cpAt(x, k * 0.01)])), f = new Map(fx.map((x) => [x, cpAt(x, k * 0.01)]));
    u.setData([all, all.map((x) => m.get(x) ?? null), all.map((x) => f.get(x) ?? null)]);
    const ctx = u.ctx; ctx.beginPath();
    xs.forEach((x) => { const cx = u.valToPos(x, 'x', true); ctx.moveTo(cx, u.valToPos(cpAt(x, 0) - 0.05, 'y', true)); ctx.lineTo(cx, u.valToPos(cpAt(x, 0) + 0.05, 'y', true)); });
    ctx.stroke();
  }
  return (performance.now() - t0) / n;
}"""

_CHARTJS = _DATA + """
(n) => {
  const c = new Chart(document.getElementById('k'), {type: 'scatter', options: {animation: false, responsive: false,
      scales: {y: {reverse: true}}, plugins: {legend: {display: false}}},
    data: {datasets: [{data: []}, {data: [], showLine: true, pointRadius: 0}]}});
  const t0 = performance.now();
  for (let k = 0; k < n; k++) {
    c.data.datasets[0].data = xs.map((x) => ({x, y: cpAt(x, k * 0.01)}));
    c.data.datasets[1].data = fx.map((x) => ({x, y: cpAt(x, k * 0.01)}));
    c.update('none');
  }
  return (performance.now() - t0) / n;
}"""


def _chartjs_file() -> Path | None:
    """Chart.js from npm into .cache/bench-npm (for this comparison only; taprig does not ship it)."""
    dest = ROOT / ".cache" / "bench-npm"
    found = dest / "node_modules" / "chart.js" / "dist" / "chart.umd.js"
    if not found.exists() and shutil.which("npm"):
        dest.mkdir(parents=True, exist_ok=True)
        subprocess.run(["npm", "install", "--silent", "--no-audit", "--no-fund", "--prefix", str(dest), "chart.js@4"],
                       stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, timeout=300, check=False)
    return found if found.exists() else None


def _chart_figures(browser, repeats: int) -> list[Record]:
    uplot = ROOT / "hostapp" / "taprig" / "web" / "static" / "vendor" / "uplot" / "uPlot.iife.min.js"
    with tempfile.TemporaryDirectory() as tmp:
        page_path = Path(tmp) / "chart.html"
        page_path.write_text(_CHART_PAGE)
        page = browser.new_page()
        page.goto(page_path.as_uri())
        page.add_script_tag(path=str(uplot))
        ms_uplot = page.evaluate(_UPLOT, repeats)
        chartjs = _chartjs_file()
        ms_chartjs = None
        if chartjs is not None:
            page.add_script_tag(path=str(chartjs))
            ms_chartjs = page.evaluate(_CHARTJS, repeats)
        page.close()
    return [Record("web: Cp view redraw, uPlot (served) vs Chart.js", ms_uplot, "ms", ms_chartjs,
                   ms_chartjs / ms_uplot if ms_chartjs else None, "fastest of the candidates")]


def _memory_figures(run: _Run, connections: int) -> list[Record]:
    import psutil

    proc = psutil.Process()
    host, port = run.dashboard.host, run.dashboard.port
    key = run.dashboard.keys.view

    def visit() -> None:
        conn = http.client.HTTPConnection(host, port, timeout=10)
        conn.request("GET", f"/api/live/stream?key={key}")
        resp = conn.getresponse()
        resp.read1(4096)
        resp.read1(65536)
        conn.close()

    for _ in range(20):
        visit()
    rss0 = proc.memory_info().rss
    threads = []
    for i in range(connections):
        t = threading.Thread(target=visit)
        t.start()
        threads.append(t)
        if len(threads) >= 8:
            threads.pop(0).join()
    for t in threads:
        t.join()
    time.sleep(6)  # each stream notices its viewer left at its next write
    rss1 = proc.memory_info().rss
    return [Record(f"web: memory after {connections} viewers came and went", (rss1 - rss0) / 2**20, "MiB growth",
                   None, None, "flat")]


def run(quick: bool) -> list[Record]:
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        return [Record("web: skipped (the playwright package is not installed)", float("nan"), "")]
    if not Path(CHROMIUM).exists():
        return [Record("web: skipped (Chromium not found; make test installs it)", float("nan"), "")]
    seconds = 4.0 if quick else 10.0
    out: list[Record] = []
    with tempfile.TemporaryDirectory() as tmp, sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=ARGS)
        try:
            out += _chart_figures(browser, 100 if quick else 300)
            bench = _Run(Path(tmp))
            try:
                out += _browser_figures(bench, browser, seconds)
                out += _viewer_figures(bench, browser, seconds)
                out += _memory_figures(bench, 100 if quick else 400)
            finally:
                bench.close()
        finally:
            browser.close()
    return out


if __name__ == "__main__":  # pragma: no cover
    for record in run("--quick" in sys.argv):
        print(record)
