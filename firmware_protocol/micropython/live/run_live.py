"""Run the reference firmware as a live board on a pseudo-terminal, under a real MicroPython (its WebAssembly
port, run by node), with simulated sensors. Prints the device path on its first line; ``taprig record`` or any
serial client can then open it as if a board were plugged in. Ctrl-C (or SIGTERM, or ``--seconds``) stops it.

    python firmware_protocol/micropython/live/run_live.py [--seconds S]

Needs node and the npm package ``@micropython/micropython-webassembly-pyscript`` (``bash tools/ensure-micropython``
puts it in ``.cache/micropython/node_modules``; ``TAPRIG_MICROPYTHON_NODE_MODULES`` names another folder). POSIX
only. See ../README.md, "A live board without hardware".
"""

from __future__ import annotations

import argparse
import os
import select
import shutil
import signal
import subprocess
import sys
import time
import tty
from pathlib import Path

HERE = Path(__file__).resolve().parent
FIRMWARE_DIR = HERE.parent
REPO = FIRMWARE_DIR.parents[1]
PACKAGE = Path("@micropython") / "micropython-webassembly-pyscript"
BACKLOG_LIMIT = 1 << 20  # bytes held for a client that does not read, as a board's full buffer would drop them


def node_modules() -> Path:
    given = os.environ.get("TAPRIG_MICROPYTHON_NODE_MODULES")
    return Path(given) if given else REPO / ".cache" / "micropython" / "node_modules"


def main(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--seconds", type=float, default=None, help="stop after this many seconds")
    args = parser.parse_args(argv)
    node, modules = shutil.which("node"), node_modules()
    if node is None or not (modules / PACKAGE).is_dir():
        print(f"run_live: needs node and {PACKAGE} under {modules} (bash tools/ensure-micropython)", file=sys.stderr)
        return 1
    master, slave = os.openpty()
    tty.setraw(slave)  # bytes pass unchanged: no echo, no line editing
    os.set_blocking(master, False)
    path = os.ttyname(slave)
    board = subprocess.Popen([node, str(HERE / "board.mjs"), str(FIRMWARE_DIR), str(modules)],
                             stdin=subprocess.PIPE, stdout=subprocess.PIPE, bufsize=0)
    registered = _register(path)
    print(path, flush=True)
    print(f"run_live: the reference firmware under MicroPython on {path} (Ctrl-C to stop)", file=sys.stderr,
          flush=True)
    running = [True]
    signal.signal(signal.SIGTERM, lambda *_: running.__setitem__(0, False))
    end = None if args.seconds is None else time.monotonic() + args.seconds
    backlog = bytearray()
    try:
        while running[0] and board.poll() is None and (end is None or time.monotonic() < end):
            ready, _, _ = select.select([master, board.stdout], [], [], 0.05)
            if board.stdout in ready:
                data = os.read(board.stdout.fileno(), 65536)
                backlog += data[:max(0, BACKLOG_LIMIT - len(backlog))]
            if master in ready:
                try:
                    data = os.read(master, 65536)
                except OSError:  # no client has the terminal open
                    data = b""
                if data:
                    board.stdin.write(data)
            if backlog:
                try:
                    sent = os.write(master, backlog)
                except (BlockingIOError, OSError):
                    sent = 0
                del backlog[:sent]
    except KeyboardInterrupt:
        pass
    finally:
        _withdraw(registered)
        board.terminate()
        try:
            board.wait(timeout=5)
        except subprocess.TimeoutExpired:
            board.kill()
            board.wait()
        for fd in (master, slave):
            os.close(fd)
    code = board.returncode
    return 0 if code in (0, -signal.SIGTERM) or not running[0] or end is not None else 1


def _register(path: str):
    """List the board in `taprig ports` when taprig is importable (it is from the project's virtualenv)."""
    try:
        from taprig.sim import registry
    except ImportError:
        return None
    return registry.announce(path, "makerspace-4tap (reference firmware, MicroPython)", str(HERE / "makerspace-4tap.toml"))


def _withdraw(entry) -> None:
    if entry is not None:
        from taprig.sim import registry

        registry.withdraw(entry)


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
