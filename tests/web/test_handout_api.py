"""The dashboard's handout download (GET /api/sessions/handout): the same PDF as `taprig handout`, for a view key
too, one sentence for a request that cannot have one."""

from __future__ import annotations

import shutil
import subprocess

import pytest

from taprig.cli import main
from taprig.web.app import Keys, Sources, create_app
from tests.report.sessions import RIGS, sweep_session


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    folder = tmp_path_factory.mktemp("sessions")
    sweep_session(folder / "wing.taprig", "naca0012-20tap.toml", 0, 6, 2)
    assert main(["record", "--rig", str(RIGS / "cylinder.toml"), "--port", "sim://?seed=1&speed=max&watchdog_ms=0",
                 "--duration", "0.5", "--no-dashboard", "--quiet", "-o", str(folder / "empty.taprig")]) == 0
    keys = Keys()
    sources = Sources(None, folder)
    app = create_app(sources, keys, log=lambda text: None)
    yield app.test_client(), keys, folder
    sources.close()


def test_a_view_key_downloads_the_sessions_handout(server, tmp_path):
    client, keys, _ = server
    resp = client.get("/api/sessions/handout?name=wing.taprig", headers={"X-Taprig-Key": keys.view})
    assert resp.status_code == 200 and resp.mimetype == "application/pdf"
    assert 'filename="wing-handout.pdf"' in resp.headers["Content-Disposition"]
    assert resp.data.startswith(b"%PDF")
    pdf = tmp_path / "h.pdf"
    pdf.write_bytes(resp.data)
    tool = shutil.which("pdftotext") or pytest.fail("pdftotext not found (tools/ensure-poppler)")
    text = subprocess.run([tool, str(pdf), "-"], capture_output=True, text=True, check=True).stdout
    assert "What the numbers rest on" in text and "Lift curve" in text and "wing.taprig" in text


@pytest.mark.parametrize("query, key, status, words", [
    ("name=wing.taprig", None, 401, "needs its key"),
    ("name=../wing.taprig", "view", 404, "no session file"),
    ("name=other.taprig", "view", 404, "no session file"),
    ("", "view", 400, "name"),
    ("name=empty.taprig", "view", 409, "holds no points"),
])
def test_a_request_that_cannot_have_a_handout_gets_one_sentence(server, query, key, status, words):
    client, keys, _ = server
    headers = {"X-Taprig-Key": keys.view} if key else {}
    resp = client.get(f"/api/sessions/handout?{query}", headers=headers)
    assert resp.status_code == status and words in resp.get_json()["error"]
