"""The dashboard options every acquiring command shares, and starting the server for a run (``--http-port``,
``--listen``, ``--no-browser``, ``--no-dashboard``)."""

from __future__ import annotations

import sys
from contextlib import contextmanager
from pathlib import Path

from taprig.cli import UserError, bounded

port_number = bounded(0, 65535, "")


def add_dashboard_options(p, serve_by_default: bool = True) -> None:
    """``--http-port``, ``--listen``, ``--no-browser`` and (for commands that serve by default) ``--no-dashboard``."""
    from taprig.web.server import DEFAULT_PORT

    g = p.add_argument_group("dashboard (a page in the browser, served by this run)")
    g.add_argument("--http-port", type=port_number, default=None, metavar="N",
                   help=f"serve the dashboard on port N (default {DEFAULT_PORT}, or the next free one)")
    g.add_argument("--listen", default="127.0.0.1", metavar="ADDR",
                   help="address to serve on (default 127.0.0.1, this computer only); 0.0.0.0 serves the network, "
                        "where everyone needs the link with its key")
    g.add_argument("--no-browser", action="store_true", help="print the dashboard's link but open no browser")
    if serve_by_default:
        g.add_argument("--no-dashboard", action="store_true", help="serve no dashboard (terminal only)")


def start_dashboard(args, station=None, sessions_dir: str | Path | None = None, replay: Path | None = None):
    """Serve the dashboard for this run and print its link as the first line; None with ``--no-dashboard``.

    With ``replay`` (a session file) that session is opened for replay and the printed links open it.
    """
    from taprig.web.app import Sources
    from taprig.web.server import DEFAULT_PORT, ServeError, is_loopback, open_browser, serve

    if getattr(args, "no_dashboard", False):
        return None
    folder = Path(sessions_dir) if sessions_dir is not None else None
    port = DEFAULT_PORT if args.http_port is None else int(args.http_port)
    try:
        dashboard = serve(Sources(station, folder), args.listen, port, tries=20 if args.http_port is None else 1)
    except (ServeError, OSError) as exc:
        raise UserError(str(exc)) from None
    suffix = ""
    if replay is not None:
        from taprig.session.replay import ReplayError
        from taprig.session.store import SessionError

        try:
            suffix = f"&source={dashboard.sources.open_replay(Path(replay))}"
        except (ReplayError, SessionError, ValueError) as exc:
            dashboard.close()
            raise UserError(str(exc).splitlines()[0]) from None
    url = dashboard.url() + suffix
    print(f"dashboard: {url}", flush=True)
    print(f"view-only link (cannot command anything): {dashboard.url('view')}{suffix}", flush=True)
    if not is_loopback(args.listen):
        print("the first link controls the rig: give it to no one else; hand out the view-only link",
              file=sys.stderr)
    if not args.no_browser:
        open_browser(url)
    return dashboard


@contextmanager
def serving(args, acquisition, sessions_dir: str | Path, new_writer=None, confirmed: bool = False):
    """The live part of an acquiring command: a station and (unless ``--no-dashboard``) its page around the block.

    Yields the :class:`~taprig.runtime.station.Station` (None with ``--no-dashboard``). A defect inside takes the
    run's one shutdown path before it propagates; the page and the station are closed on the way out either way.
    ``confirmed``: the operator already confirmed at the terminal that the rig may move.
    """
    from taprig.runtime.station import Station

    station = dashboard = None
    try:
        if not getattr(args, "no_dashboard", False):
            real = not acquisition.link.port_name.lower().startswith("sim://")
            station = Station(acquisition, new_writer=new_writer, real_board=real and not confirmed)
            dashboard = start_dashboard(args, station, sessions_dir=sessions_dir)
        yield station
    except BaseException:  # a defect: the rig is made safe and the session closed before it is reported
        acquisition.shutdown("internal error")
        raise
    finally:
        if dashboard is not None:
            dashboard.close()
        if station is not None:
            station.close()
