"""Serving the dashboard: the next free port after a taken default, a clear refusal otherwise, loopback by default."""

from __future__ import annotations

import urllib.request

import pytest

from taprig.cli import main
from taprig.web.app import Sources
from taprig.web.server import ServeError, is_loopback, serve


def test_a_taken_port_moves_on_to_the_next_or_is_refused_in_words():
    first = serve(Sources(None, None), "127.0.0.1", 0, tries=1)
    try:
        second = serve(Sources(None, None), "127.0.0.1", first.port, tries=5)
        try:
            assert second.port != first.port
            assert urllib.request.urlopen(f"http://127.0.0.1:{second.port}/").status == 200
        finally:
            second.close()
        with pytest.raises(ServeError, match="choose another with --http-port"):
            serve(Sources(None, None), "127.0.0.1", first.port, tries=1)
    finally:
        first.close()


def test_links_carry_the_keys_and_bind_loopback_by_default():
    dashboard = serve(Sources(None, None), "127.0.0.1", 0, tries=1)
    try:
        assert dashboard.url().startswith("http://127.0.0.1:") and dashboard.keys.control in dashboard.url()
        assert dashboard.keys.view in dashboard.url("view") and dashboard.keys.control not in dashboard.url("view")
    finally:
        dashboard.close()
    assert is_loopback("127.0.0.1") and is_loopback("::1") and not is_loopback("0.0.0.0")


def test_an_address_not_of_this_computer_is_refused_with_one_line(capsys, tmp_path):
    (tmp_path / "s").mkdir()
    code = main(["review", str(tmp_path / "s"), "--listen", "192.0.2.1", "--http-port", "8765", "--no-browser"])
    err = capsys.readouterr().err
    assert code == 1 and "cannot serve the dashboard on 192.0.2.1" in err and "Traceback" not in err
    assert main(["review", str(tmp_path / "none")]) == 1
