"""The dashboard in real headless Chromium (Debian's chromium, driven by playwright) against the simulated rig in
its own process on a pseudo-terminal (``taprig sim``), served by ``taprig live`` in another process.

Screenshots of each view go to ``test-artifacts/dashboard/``. Waits are on the page's own state with timeouts;
nothing here measures time (the benchmark does).
"""

from __future__ import annotations

import math
import os
import shutil
import signal
import subprocess
import sys
from pathlib import Path

import pytest

from taprig.session.store import SessionReader
from tests.web.conftest import replayed_mean

pytestmark = pytest.mark.browser
playwright_api = pytest.importorskip("playwright.sync_api")

ROOT = Path(__file__).resolve().parents[2]
RIGS = ROOT / "rigs"
ARTIFACTS = ROOT / "test-artifacts" / "dashboard"
CHROMIUM = os.environ.get("TAPRIG_CHROMIUM") or shutil.which("chromium") or "/usr/bin/chromium"
TAPRIG = [sys.executable, "-m", "taprig"]
ARGS = ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking",
        "--disable-component-update", "--disable-sync"]


def spawn(*args: str, cwd: Path) -> subprocess.Popen:
    return subprocess.Popen([*TAPRIG, *args], cwd=cwd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True)


def first_lines(proc: subprocess.Popen, n: int) -> list[str]:
    lines = []
    for _ in range(n):
        line = proc.stdout.readline()
        if not line:
            raise AssertionError(f"process ended early: {proc.stderr.read()[-2000:]}")
        lines.append(line.strip())
    return lines


def end(proc: subprocess.Popen) -> str:
    if proc.poll() is None:
        os.killpg(proc.pid, signal.SIGINT)
        try:
            proc.wait(20)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait(5)
    return proc.stderr.read()


@pytest.fixture(scope="module")
def browser():
    if not Path(CHROMIUM).exists():
        pytest.fail(f"Chromium not found at {CHROMIUM}: `make test` installs Debian's chromium (tools/ensure-chromium)")
    with playwright_api.sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, args=ARGS)
        yield b
        b.close()


@pytest.fixture(scope="module")
def bench(tmp_path_factory):
    """The simulated airfoil rig on a pty in its own process, and ``taprig live`` serving the page for it."""
    work = tmp_path_factory.mktemp("bench")
    sim = spawn("sim", "--rig", str(RIGS / "naca0012-20tap.toml"), "--seed", "7", cwd=work)
    pty = first_lines(sim, 1)[0]
    live = spawn("live", "--rig", str(RIGS / "naca0012-20tap.toml"), "--port", pty, "--no-browser", "--http-port", "0",
                 "--sessions", str(work / "sessions"), "--quiet", cwd=work)
    control, view = first_lines(live, 2)
    info = {"control": control.split(": ", 1)[1], "view": view.split(": ", 1)[1], "work": work}
    yield info
    info["stderr"] = end(live)
    end(sim)
    assert "Traceback" not in info["stderr"]


class Page:
    """A page with its console errors collected."""

    def __init__(self, browser, url: str, width: int = 1500, height: int = 1300):
        self.context = browser.new_context(viewport={"width": width, "height": height}, bypass_csp=True)
        self.page = self.context.new_page()
        self.errors: list[str] = []
        self.page.on("console", lambda m: self.errors.append(m.text) if m.type == "error" else None)
        self.page.on("pageerror", lambda e: self.errors.append(str(e)))
        self.page.goto(url)

    def until(self, js: str, timeout_s: float = 90) -> None:
        self.page.wait_for_function(js, timeout=timeout_s * 1000)

    def text(self, selector: str) -> str:
        return self.page.inner_text(selector)

    def shot(self, name: str) -> None:
        ARTIFACTS.mkdir(parents=True, exist_ok=True)
        self.page.screenshot(path=str(ARTIFACTS / f"{name}.png"), full_page=True)

    def close(self) -> None:
        self.context.close()


def set_actuator(page: Page, name: str, value: float) -> None:
    """Set an actuator from the page; on a board that is not simulated the first command asks first."""
    page.page.fill(f"#in-{name}", str(value))
    page.page.click(f"#in-{name} + button")
    if page.page.evaluate("() => document.getElementById('confirm').open"):
        assert "guards on" in page.text("#confirm-text")
        page.page.click("#confirm-yes")
    page.until(f"() => document.getElementById('now-{name}').textContent.startsWith('now {value:.3f}')")


def test_the_page_runs_the_rig_and_the_stop_reaches_the_board(browser, bench):
    page = Page(browser, bench["control"])
    try:
        page.until("() => window.taprig.frames > 3")
        for view in ("#cp-chart canvas", "#tap-chart canvas", "#trend-chart canvas", "#lift-chart canvas", "#linkcard",
                     "#controls", "#stop", "#sessions-card", "#rig-canvas"):
            assert page.page.is_visible(view), view
        assert "guards on" in page.text("#safety")
        assert "NO FLOW" in page.text("#st-flow")
        page.shot("live-wind-off")
        set_actuator(page, "fan", 0.8)
        page.until("() => document.getElementById('st-flow').textContent === 'FLOW'")
        set_actuator(page, "alpha", 6.0)
        page.page.click("#b-zero")  # refused with the fan running: said in words
        page.until("() => document.getElementById('message').textContent.includes('wind-off zero needs it')")
        page.page.click("#b-record")
        page.until("() => document.getElementById('st-rec').textContent.includes('REC')")
        page.until("() => window.taprig.frames > 60")  # the tubing and the fan settle
        page.page.click("#b-capture")
        page.until("() => document.querySelectorAll('#points tbody tr').length === 1")
        page.page.fill("#note", "tufts attached at 6 degrees")
        page.page.click("#b-note")
        page.shot("live-flow")
        # the page's Cl equals the reducer's mean of the very scans it names, its ± the reducer's full mean of the
        # scans named for it (both replayed from the record)
        page.until("() => window.taprig.lastDrawn && window.taprig.lastDrawn.window && /±/.test(window.taprig.lastDrawn.cl)")
        drawn = page.page.evaluate("() => window.taprig.lastDrawn")
        page.page.click("#b-record")
        page.until("() => document.getElementById('st-rec').textContent === 'not recording'")
        page.page.keyboard.press("Escape")  # the stop key: every actuator to its safe value
        page.until("() => /^stop/i.test(document.getElementById('message').textContent)")
        page.until("() => document.getElementById('st-flow').textContent === 'NO FLOW'", 180)  # the fan ran down
        assert "safe value" in page.text("#now-fan") and "safe value" in page.text("#now-alpha")
        seen = page.page.evaluate("() => window.taprig.frames")
        page.until(f"() => window.taprig.frames > {seen} + 60")  # the last of the air has stopped too
        page.page.click("#b-zero")
        page.until("() => document.getElementById('message').textContent === 'wind-off zero taken'")
        page.shot("live-after-stop")
        # the refused zero above answered 409, which Chromium logs as a failed load: that one is expected
        assert [e for e in page.errors if "status of 409" not in e] == []
    finally:
        page.close()
    session = sorted((bench["work"] / "sessions").glob("*.taprig"))[-1]
    with SessionReader(session) as reader:
        assert [e.data["text"] for e in reader.events() if e.kind == "note"] == ["tufts attached at 6 degrees"]
        assert len(reader.points()) == 1
    mean = replayed_mean(session, drawn["window"]["scan_index"], math.radians(6))
    full = replayed_mean(session, drawn["uncertaintyWindow"]["scan_index"], math.radians(6))  # what its ± describes
    value, u = drawn["cl"].split(" ± ")
    digits = len(value.split(".")[1]) if "." in value else 0
    assert abs(float(value) - mean.corrected.cl) <= 0.5 * 10 ** -digits + 1e-12
    assert abs(float(u) - full.corrected.u_cl) <= 0.5 * 10 ** -digits + 1e-12


def test_two_browsers_see_each_others_commands_and_a_view_link_commands_nothing(browser, bench):
    a, b = Page(browser, bench["control"]), Page(browser, bench["view"], width=420, height=900)  # a phone
    try:
        for p in (a, b):
            p.until("() => window.taprig.frames > 2")
        set_actuator(a, "alpha", 4.0)
        b.until("() => document.getElementById('n-alpha').textContent.startsWith('4.00')")
        assert not b.page.is_visible("#controls") and not b.page.is_visible("#stop")
        assert "view-only" in b.text("#keys")
        status = b.page.evaluate("""async () => (await fetch('/api/live/setpoint', {method: 'POST',
            headers: {'Content-Type': 'application/json', 'X-Taprig-Key': sessionStorage.getItem('taprig.key')},
            body: JSON.stringify({actuator: 'fan', value: 1.0})})).status""")
        assert status == 403
        b.shot("view-only-phone")
        set_actuator(a, "alpha", 0.0)
        # the refused command above answered 403, which Chromium logs as a failed load: that one is expected
        assert a.errors == [] and [e for e in b.errors if "status of 403" not in e] == []
    finally:
        a.close()
        b.close()


def test_without_its_key_the_page_says_so(browser, bench):
    url = bench["control"].split("?")[0]
    page = Page(browser, url)
    try:
        page.until("() => document.getElementById('message').textContent.includes('needs its key')")
    finally:
        page.close()


def test_a_sweep_from_the_page(browser, bench):
    page = Page(browser, bench["control"])
    try:
        page.until("() => window.taprig.frames > 2")
        set_actuator(page, "fan", 0.8)
        page.until("() => document.getElementById('st-flow').textContent === 'FLOW'")
        page.until("() => window.taprig.frames > 50")
        for field, value in (("#sw-from", "0"), ("#sw-to", "4"), ("#sw-step", "2"), ("#sw-settle", "0.5"),
                             ("#sw-avg", "0.5")):
            page.page.fill(field, value)
        page.page.click("#b-sweep")
        page.until("() => document.getElementById('sweep-state').textContent === 'sweep done'", 180)
        page.until("() => document.getElementById('lift-legend').textContent.startsWith('Lift slope')")
        rows = page.page.eval_on_selector_all("#points tbody tr td:nth-child(3)", "tds => tds.map(t => t.textContent)")
        assert rows[-3:] == ["0.00", "2.00", "4.00"]
        page.shot("sweep")
        page.page.click("#stop")
        page.until("() => /^stop/i.test(document.getElementById('message').textContent)")
        assert page.errors == []
    finally:
        page.close()


def test_replay_in_the_page_shows_the_recorded_numbers(browser, tmp_path):
    session = tmp_path / "sweep.taprig"
    made = subprocess.run([*TAPRIG, "sweep", "--rig", str(RIGS / "naca0012-20tap.toml"), "--port",
                           "sim://?seed=5&speed=20&watchdog_ms=0", "--from-deg", "0", "--to-deg", "4", "--step-deg", "2",
                           "--settle", "0.5", "--average", "0.5", "--no-dashboard", "-o", str(session)],
                          cwd=tmp_path, capture_output=True, text=True, timeout=600)
    assert made.returncode == 0, made.stderr
    review = spawn("review", str(session), "--no-browser", "--http-port", "0", cwd=tmp_path)
    url = first_lines(review, 1)[0].split(": ", 1)[1]
    page = Page(browser, url)
    try:
        page.until("() => window.taprig.frames > 0")
        assert page.page.is_visible("#playback") and not page.page.is_visible("#controls")
        with SessionReader(session) as reader:
            recorded = [p.data for p in reader.points()]
        page.until(f"() => document.querySelectorAll('#points tbody tr').length === {len(recorded)}")
        cells = page.page.eval_on_selector_all("#points tbody tr td:nth-child(5)", "tds => tds.map(t => t.textContent)")
        assert len(cells) == len(recorded) == 3
        for cell, point in zip(cells, recorded):
            value = cell.split(" ± ")[0]
            digits = len(value.split(".")[1]) if "." in value else 0
            assert abs(float(value) - point["corrected"]["cl"]) <= 0.5 * 10 ** -digits + 1e-12  # to the digits shown
        page.page.select_option("#pb-speed", "0")
        page.page.click("#pb-play")
        page.until("() => document.getElementById('pb-pos').textContent.includes('(end)')", 180)
        page.shot("replay")
        assert page.errors == []
    finally:
        page.close()
        end(review)


def test_a_venturi_bench_runs_from_the_page(browser, tmp_path):
    live = spawn("live", "--rig", str(RIGS / "venturi-8.toml"), "--port", "sim://?seed=3", "--no-browser",
                 "--http-port", "0", "--sessions", str(tmp_path), "--quiet", cwd=tmp_path)
    url = first_lines(live, 2)[0].split(": ", 1)[1]
    page = Page(browser, url)
    try:
        page.until("() => window.taprig.frames > 2")
        assert "venturi" in page.text("#cp-title")
        set_actuator(page, "blower", 0.7)
        page.until("() => document.getElementById('st-flow').textContent === 'FLOW'", 180)
        page.until("() => /g\\/s/.test(document.getElementById('n-mdot').textContent) && "
                   "/L\\/s/.test(document.getElementById('n-qv').textContent)")
        page.shot("venturi")
        page.page.click("#stop")
        page.until("() => document.getElementById('st-flow').textContent === 'NO FLOW'", 180)
        assert page.errors == []
    finally:
        page.close()
        assert "Traceback" not in end(live)


def test_the_sessions_list_downloads_a_handout(browser, tmp_path):
    # The handout button of the sessions list (review of a folder, with the view link: reading needs no control)
    from tests.report.sessions import sweep_session

    folder = tmp_path / "sessions"
    folder.mkdir()
    sweep_session(folder / "wing.taprig", "naca0012-20tap.toml", 0, 6, 2)
    review = spawn("review", str(folder), "--no-browser", "--http-port", "0", cwd=tmp_path)
    url = first_lines(review, 1)[0].split(": ", 1)[1]
    page = Page(browser, url)
    try:
        page.until("() => document.querySelectorAll('#sessions tbody tr').length === 1")
        assert "taprig handout" in page.text("#handout-note")
        with page.page.expect_download(timeout=180_000) as download:
            page.page.click("#sessions button.handout")
        saved = tmp_path / "download.pdf"
        download.value.save_as(saved)
        assert download.value.suggested_filename == "wing-handout.pdf"
        assert saved.read_bytes().startswith(b"%PDF")
        text = subprocess.run([shutil.which("pdftotext") or "pdftotext", str(saved), "-"], capture_output=True,
                              text=True, check=True).stdout
        assert "What the numbers rest on" in text and "Points with their uncertainties" in text
        page.until("() => document.getElementById('message').textContent.includes('downloaded')")
        page.shot("handout-download")
        # a folder-only server has no live display: the page's first ask for one is answered 404, then it lists
        assert [e for e in page.errors if "status of 404" not in e] == [] and len(page.errors) <= 1
    finally:
        page.close()
        assert "Traceback" not in end(review)


def test_a_sweep_by_hand_from_the_page(browser, tmp_path):
    # the 20-tap section with no angle servo: the page asks for each angle and the operator confirms it
    text = (RIGS / "naca0012-20tap.toml").read_text()
    head, servo = text.split('[[actuators]]\nid = 1\nkind = "angle"')
    rig = tmp_path / "by-hand.toml"
    rig.write_text(head + servo.split("\n\n", 1)[1])
    live = spawn("live", "--rig", str(rig), "--port", "sim://?seed=3", "--no-browser", "--http-port", "0",
                 "--sessions", str(tmp_path), "--quiet", cwd=tmp_path)
    url = first_lines(live, 2)[0].split(": ", 1)[1]
    page = Page(browser, url)
    try:
        page.until("() => window.taprig.frames > 2")
        assert page.page.is_visible("#sweep") and "by hand" in page.text("#sw-hand-note")
        set_actuator(page, "fan", 0.8)
        page.until("() => document.getElementById('st-flow').textContent === 'FLOW'", 180)
        for field, value in (("#sw-from", "0"), ("#sw-to", "4"), ("#sw-step", "2"), ("#sw-settle", "0.5"),
                             ("#sw-avg", "0.5")):
            page.page.fill(field, value)
        page.page.click("#b-sweep")
        page.until("() => document.getElementById('sw-hand-text').textContent.includes('α = +0.0°')", 60)
        page.page.click("#sw-hand-ok")  # the asked angle, as offered
        page.until("() => document.getElementById('sw-hand-text').textContent.includes('α = +2.0°')", 180)
        page.page.fill("#sw-hand-angle", "2.5")  # the fixture reached 2.5°: the operator says so
        page.page.click("#sw-hand-ok")
        page.until("() => document.getElementById('sw-hand-text').textContent.includes('α = +4.0°')", 180)
        page.shot("sweep-by-hand")
        page.page.click("#sw-hand-stop")
        page.until("() => document.getElementById('sweep-state').textContent === 'sweep stopped by the operator'", 60)
        assert not page.page.is_visible("#sw-hand")
        rows = page.page.eval_on_selector_all("#points tbody tr td:nth-child(3)", "tds => tds.map(t => t.textContent)")
        assert rows[-2:] == ["0.00", "2.50"]  # the angles the operator set, as recorded
        assert page.errors == []
    finally:
        page.close()
        assert "Traceback" not in end(live)


VENTURI_PITOT = ROOT / "tests" / "analysis" / "venturi-pitot.toml"
SIM_C = 0.97  # the simulated venturi's discharge coefficient, set by the port's venturi_c (docs/simulator.md)


def venturi_live(tmp_path: Path) -> tuple[subprocess.Popen, str]:
    live = spawn("live", "--rig", str(VENTURI_PITOT), "--port",
                 f"sim://?seed=3&speed=max&watchdog_ms=0&venturi_c={SIM_C}", "--no-browser", "--http-port", "0",
                 "--sessions", str(tmp_path), "--quiet", cwd=tmp_path)
    return live, first_lines(live, 2)[0].split(": ", 1)[1]


def shown_value(cell: str) -> tuple[float, float, int]:
    """``value ± u`` as shown: the value, the uncertainty and the decimals the value is shown to."""
    value, u = cell.split(" ± ")
    return float(value), float(u), len(value.split(".")[1]) if "." in value else 0


def test_a_fan_sweep_of_the_venturi_from_the_page_shows_the_sessions_analysis(browser, tmp_path):
    from taprig.analysis import analyse_points
    from taprig.rig import load_rig

    live, url = venturi_live(tmp_path)
    page = Page(browser, url)
    try:
        page.until("() => window.taprig.frames > 2")
        # a venturi has only its fan: the page offers a fan sweep, in the fan's own unit, with its limits and safe value
        assert page.page.is_visible("#sw-k-fan-l") and not page.page.is_visible("#sw-k-angle-l")
        assert not page.page.is_visible("#sw-k-nested-l") and not page.page.is_visible("#sw-angle-part")
        assert "safe (off) value 0" in page.text("#sw-fan-limits") and page.text("#sw-fan-unit") == "duty"
        assert page.page.is_visible("#sw-fan-caution") and "guards on" in page.text("#sw-fan-caution")
        for typed, words in (("0,0.5", "safe (off) value"), ("0.5,1.2", "outside the fan's range")):
            page.page.fill("#sw-fans", typed)
            page.page.click("#b-sweep")
            page.until(f"() => (document.getElementById('err-fans') || {{}}).textContent?.includes({words!r})", 30)
        assert page.page.get_attribute("#sw-fans", "aria-invalid") == "true"
        page.page.click("#b-record")
        page.until("() => document.getElementById('st-rec').textContent.includes('REC')")
        for field, value in (("#sw-fans", "0.4:0.7:0.15"), ("#sw-settle", "0.3"), ("#sw-avg", "0.5"), ("#sw-spin", "2")):
            page.page.fill(field, value)
        page.page.click("#b-sweep")
        assert page.page.query_selector("#err-fans") is None  # the refusal's words went with the refused value
        page.until("() => document.getElementById('sweep-state').textContent === 'sweep done'", 300)
        page.until("() => document.querySelectorAll('#results tbody tr').length === 3")
        page.shot("fan-sweep-venturi")
        cells = page.page.eval_on_selector_all("#results tbody tr td:nth-child(6)", "tds => tds.map(t => t.textContent)")
        fans = page.page.eval_on_selector_all("#results tbody tr td:nth-child(3)", "tds => tds.map(t => t.textContent)")
        lines = page.text("#results-lines")
        page.page.click("#b-record")
        page.until("() => document.getElementById('st-rec').textContent === 'not recording'")
        assert "safe value" in page.text("#now-blower")  # the sweep ran the fan: back to its safe value
        assert page.errors == [] or all("status of 400" in e for e in page.errors)  # the two refusals above
    finally:
        page.close()
        assert "Traceback" not in end(live)
    session = sorted(tmp_path.glob("*.taprig"))[-1]
    with SessionReader(session) as reader:
        records = [p.data for p in reader.points()]
    dc = analyse_points(records, load_rig(VENTURI_PITOT)).discharge
    assert fans == ["0.400", "0.550", "0.700"] and len(records) == 3
    for cell, c, u, state in zip(cells, dc.c, dc.u_c, dc.states):  # each C ± u shown is the analysis's
        if state:  # a sensor saturated or beyond its rated range: the state in words, no C
            assert cell == state
            continue
        value, shown_u, digits = shown_value(cell)
        assert abs(value - c) <= 0.5 * 10 ** -digits + 1e-12 and abs(shown_u - u) <= 0.5 * 10 ** -digits + 1e-12
    assert "C =" in lines or "C " in lines
    assert abs(dc.mean_c - SIM_C) <= 3 * dc.u_mean_c  # the simulated venturi's C, within its stated uncertainty


def test_an_interrupted_sweep_resumes_from_the_page(browser, tmp_path):
    live, url = venturi_live(tmp_path)
    page = Page(browser, url)
    try:
        page.until("() => window.taprig.frames > 2")
        page.page.click("#b-record")
        page.until("() => document.getElementById('st-rec').textContent.includes('REC')")
        for field, value in (("#sw-fans", "0.4:0.7:0.1"), ("#sw-settle", "0.3"), ("#sw-avg", "0.5"), ("#sw-spin", "2")):
            page.page.fill(field, value)
        page.page.click("#b-sweep")
        page.until("() => /— 2 taken/.test(document.getElementById('sweep-state').textContent)", 300)
        page.page.click("#b-sweep-stop")
        page.until("() => document.getElementById('sweep-state').textContent.startsWith('sweep stopped by the operator')",
                   120)
        page.page.click("#b-record")
        page.until("() => document.getElementById('st-rec').textContent === 'not recording'")
        page.page.click("#resume-refresh")
        page.until("() => document.querySelectorAll('#resumable tbody tr').length === 1")
        first = sorted(tmp_path.glob("*.taprig"))[-1]
        with SessionReader(first) as reader:
            taken = len(reader.points())
        page.page.click("#resumable button.resume")
        said = page.text("#resume-text")
        # the page says which point it takes next before the operator confirms
        assert f"point {taken + 1} of 4" in said and f"blower → {0.4 + 0.1 * taken:.3f} duty" in said, said
        page.shot("sweep-resume")
        page.page.uncheck("#resume-zero")  # this simulated pitot reads its offset as a little flow until zeroed
        page.page.click("#resume-go")
        page.until("() => document.getElementById('sweep-state').textContent === 'sweep done'", 300)
        page.until("() => document.querySelectorAll('#results tbody tr').length === 4")
        carried = page.page.eval_on_selector_all("#results tbody tr td:nth-child(2)", "tds => tds.map(t => t.textContent)")
        assert [c.endswith("(carried)") for c in carried] == [True] * taken + [False] * (4 - taken)
        page.until("() => document.querySelectorAll('#resumable tbody tr').length === 0")
        assert page.errors == []
    finally:
        page.close()
        assert "Traceback" not in end(live)
