"""Serving the dashboard: a threaded HTTP server on its own thread, the links to print, a browser to open."""

from __future__ import annotations

import ipaddress
import logging
import os
import socket
import sys
import threading
import webbrowser
from dataclasses import dataclass

from werkzeug.serving import BaseWSGIServer, make_server

from taprig.web.app import Keys, Sources, create_app

DEFAULT_PORT = 8765


class ServeError(Exception):
    """The dashboard cannot be served (address in use, not an address of this machine), with the reason."""


@dataclass
class Dashboard:
    """A running dashboard server: its links and how to stop it."""

    server: BaseWSGIServer
    thread: threading.Thread
    keys: Keys
    sources: Sources
    host: str

    @property
    def port(self) -> int:
        return self.server.socket.getsockname()[1]

    def url(self, role: str = "control") -> str:
        """The link to open: with the control key, or the view-only key for ``role="view"``."""
        host = self.host if self.host not in ("0.0.0.0", "::") else _this_host()
        if ":" in host:
            host = f"[{host}]"
        key = self.keys.control if role == "control" else self.keys.view
        return f"http://{host}:{self.port}/?key={key}"

    def close(self) -> None:
        """Stop serving, end every event stream and close the replays it opened."""
        self.sources.close()
        self.server.shutdown()
        self.server.server_close()
        self.thread.join(5)


def _this_host() -> str:
    try:
        return socket.gethostbyname(socket.gethostname())
    except OSError:
        return "127.0.0.1"


def is_loopback(host: str) -> bool:
    """True for 127.0.0.0/8, ::1 and localhost."""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def serve(sources: Sources, host: str = "127.0.0.1", port: int = DEFAULT_PORT, tries: int = 20) -> Dashboard:
    """Serve the dashboard on ``host``:``port`` (the next free port after it when ``tries`` > 1)."""
    logging.getLogger("werkzeug").setLevel(logging.ERROR)  # the terminal keeps its one-line status
    keys = Keys()
    app = create_app(sources, keys)
    server, last = None, None
    for candidate in range(port, port + max(tries, 1)) if port else (0,):
        try:
            sock = _listening_socket(host, candidate)
        except OSError as exc:
            last = exc
            continue
        try:  # werkzeug takes the socket bound here (its own bind would end the process on a port in use)
            server = make_server(host, sock.getsockname()[1], app, threaded=True, fd=sock.fileno())
        finally:
            sock.close()  # the server holds its own duplicate
        break
    if server is None:
        span = f"port {port}" if tries <= 1 else f"ports {port}…{port + tries - 1}"
        raise ServeError(f"cannot serve the dashboard on {host} {span}: "
                         f"{(last.strerror or last) if last else 'unavailable'}; choose another with --http-port")
    server.daemon_threads = True
    thread = threading.Thread(target=server.serve_forever, kwargs={"poll_interval": 0.2}, name="taprig-http",
                              daemon=True)
    thread.start()
    return Dashboard(server, thread, keys, sources, host)


def _listening_socket(host: str, port: int) -> socket.socket:
    """A TCP socket bound to ``host``:``port`` and listening (OSError when the port is taken or not ours)."""
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    sock = socket.socket(family, socket.SOCK_STREAM)
    try:
        sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        sock.bind((host, port))
        sock.listen(128)
    except OSError:
        sock.close()
        raise
    return sock


def can_show_browser() -> bool:
    """Whether a browser can open here (a desktop session, not a headless machine or an SSH login)."""
    if sys.platform in ("darwin", "win32"):
        return True
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))


def open_browser(url: str) -> bool:
    """Open ``url`` in the user's browser where there is a display; False when none could be opened."""
    if not can_show_browser():
        return False
    try:
        return webbrowser.open(url, new=2)
    except webbrowser.Error:
        return False
