"""Make docs/dashboard.png: the dashboard on the simulated 20-tap airfoil rig after a sweep from the page.

Run from the repository root with the virtualenv's Python (after `make setup browser`):
    .venv/bin/python tools/dashboard-screenshot.py [OUT.png]
"""

import os
import signal
import subprocess
import sys
import tempfile
from pathlib import Path

from playwright.sync_api import sync_playwright

ROOT = Path(__file__).resolve().parents[1]
OUT = Path(sys.argv[1]) if len(sys.argv) > 1 else ROOT / "docs" / "dashboard.png"

with tempfile.TemporaryDirectory() as tmp:
    live = subprocess.Popen([sys.executable, "-m", "taprig", "live", "--rig", str(ROOT / "rigs" / "naca0012-20tap.toml"),
                             "--port", "sim://?seed=11", "--no-browser", "--http-port", "0", "--sessions", tmp, "--quiet"],
                            stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True, start_new_session=True)
    url = live.stdout.readline().split(": ", 1)[1].strip()
    try:
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path="/usr/bin/chromium",
                                        args=["--no-sandbox", "--disable-gpu", "--disable-background-networking"])
            page = browser.new_page(viewport={"width": 1500, "height": 1150}, bypass_csp=True)
            page.goto(url)
            page.wait_for_function("() => window.taprig && window.taprig.frames > 20")
            page.click("#b-zero")
            page.wait_for_function("() => document.getElementById('message').textContent === 'wind-off zero taken'")
            page.fill("#in-fan", "0.8")
            page.click("#in-fan + button")
            page.wait_for_function("() => document.getElementById('st-flow').textContent === 'FLOW'", timeout=30000)
            page.wait_for_timeout(5000)
            for field, value in (("#sw-from", "-4"), ("#sw-to", "14"), ("#sw-step", "2"), ("#sw-settle", "1"),
                                 ("#sw-avg", "1")):
                page.fill(field, value)
            page.click("#b-sweep")
            page.wait_for_function("() => document.getElementById('sweep-state').textContent === 'sweep done'",
                                   timeout=120000)
            page.fill("#in-alpha", "8")
            page.click("#in-alpha + button")
            page.wait_for_timeout(4000)
            page.evaluate("() => { document.activeElement.blur(); window.scrollTo(0, 0); }")
            page.wait_for_timeout(500)
            page.screenshot(path=str(OUT))
            browser.close()
    finally:
        os.killpg(live.pid, signal.SIGINT)
        live.wait(30)
print(f"wrote {OUT}")
