"""``taprig sim --rig RIG``: run the simulated board of a rig on a pseudo-terminal and print its device path.

Any serial client can then open that path as if it were a board on USB (the host in another process, a terminal
program, a logger). The first line on stdout is the path; everything else goes to stderr. The options of the
``sim://`` URL are flags here (``burst_rate`` → ``--burst-rate``). POSIX only: Windows has no pseudo-terminals,
and there the ``sim://`` URL gives the same board inside the host process.

Time follows the wall clock (scaled by ``--speed``); with ``--speed max`` the board runs as fast as the client
drains the terminal. A write stall leaves the client's bytes waiting in the terminal's buffer; a disconnect closes
the terminal, so the client's next read fails as when a USB board is pulled. SIGUSR1 presses the board's reset
button and SIGUSR2 pulls its cable, at a moment of the caller's choosing (tests of how a host copes).
"""

from __future__ import annotations

import os
import select
import signal
import sys
import time
from dataclasses import fields

from taprig.cli import UserError, finite_positive

#: Longest wait between two looks at the clock [s]: bounds the reaction to a stop request.
TICK_S = 0.05
#: Bytes the bridge holds for a client that does not read before it discards new output (a board's full buffer).
BACKLOG_LIMIT = 1 << 20
#: Simulated time one step moves the board in compressed time [ns].
COMPRESSED_STEP_NS = 100_000_000
#: In compressed time, a board with nothing due within this simulated time [ns] is idle: wait for the client.
IDLE_HORIZON_NS = 2_000_000_000


def register(sub) -> None:
    """Add the ``sim`` subcommand."""
    from taprig.sim.options import SimOptions

    p = sub.add_parser("sim", help="run a simulated rig on a pseudo-terminal and print its device path")
    p.add_argument("--rig", required=True, help="rig file (TOML) to simulate")
    p.add_argument("--seconds", type=finite_positive, default=None, help="stop after this many seconds of wall time")
    p.add_argument("--command-log", metavar="FILE", default=None,
                   help="append every command the board receives (all but heartbeats) to FILE, one JSON line each")
    for f in fields(SimOptions):
        p.add_argument(f"--{f.name.replace('_', '-')}", dest=f"opt_{f.name}", metavar="VALUE",
                       help=f"{SimOptions.help_of(f.name)} (default {_default_text(f.default)})")
    p.set_defaults(func=run)


def _default_text(value) -> str:
    if isinstance(value, bool):
        return "1" if value else "0"
    if isinstance(value, tuple):
        return ",".join(map(str, value)) or "none"
    return str(value)


def options_from_args(args):
    """The :class:`SimOptions` given by the flags (UserError names the flag and what was expected)."""
    from taprig.sim.options import OptionError, SimOptions

    pairs = [(f.name, getattr(args, f"opt_{f.name}")) for f in fields(SimOptions)]
    try:
        return SimOptions.from_pairs([(name, text) for name, text in pairs if text is not None], "taprig sim")
    except OptionError as exc:
        raise UserError(f"--{exc.name.replace('_', '-')} {exc.text!r}: {exc.reason}", 2) from None


def run(args) -> int:
    """Load the rig, open a pseudo-terminal, print its path and serve the board until stopped."""
    if os.name != "posix":
        raise UserError("needs a POSIX system for a pseudo-terminal; on this system open sim://RIG.toml directly")
    from taprig.rig.errors import RigError
    from taprig.rig.loader import load_rig
    from taprig.sim.device import SimulatedDevice

    options = options_from_args(args)
    try:
        rig = load_rig(args.rig)
    except (RigError, OSError) as exc:
        raise UserError(str(exc)) from None
    from taprig.sim import registry

    device = SimulatedDevice(rig, options)
    try:
        log = open(args.command_log, "a", encoding="utf-8") if args.command_log else None
    except OSError as exc:
        raise UserError(f"{args.command_log}: cannot open the command log ({exc.strerror or exc})") from None
    bridge = PtyBridge(device, options.speed, log)
    entry = registry.announce(bridge.path, rig.id, args.rig)  # so that `taprig ports` lists it
    print(bridge.path, flush=True)
    print(f"taprig sim: rig {rig.id!r} on {bridge.path} (Ctrl-C to stop)", file=sys.stderr, flush=True)
    handlers = {signal.SIGTERM: bridge.stop}
    if hasattr(signal, "SIGUSR1"):
        handlers.update({signal.SIGUSR1: bridge.press_reset, signal.SIGUSR2: bridge.unplug})
    previous = {sig: signal.signal(sig, handler) for sig, handler in handlers.items()}
    try:
        bridge.serve(args.seconds)
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        registry.withdraw(entry)
        bridge.close()
        if log is not None:
            log.close()
    print(f"taprig sim: {bridge.summary()}", file=sys.stderr)
    return 0


class PtyBridge:
    """Moves bytes between a :class:`taprig.sim.device.SimulatedDevice` and the master side of a pseudo-terminal."""

    def __init__(self, device, speed: float, command_log=None):
        import tty

        self.device = device
        self._log = command_log
        self._logged = 0
        self._state = device.state
        self._resets = device.tally.resets
        self._action: str | None = None
        self._speed = speed
        self._master, self._slave = os.openpty()
        tty.setraw(self._slave)  # no echo, no line editing: the terminal carries bytes unchanged
        os.set_blocking(self._master, False)
        self.path = os.ttyname(self._slave)
        self._pending = bytearray()
        self._running = True
        self._t0 = time.monotonic()
        self.bytes_out = 0
        self.bytes_discarded = 0

    def stop(self, *_signal_args) -> None:
        """Ask :meth:`serve` to return (safe to call from a signal handler)."""
        self._running = False

    def press_reset(self, *_signal_args) -> None:
        """Ask for a reboot of the board at the next turn of :meth:`serve` (safe from a signal handler)."""
        self._action = "reset"

    def unplug(self, *_signal_args) -> None:
        """Ask for the board to vanish at the next turn of :meth:`serve` (safe from a signal handler)."""
        self._action = "unplug"

    def close(self) -> None:
        """Close both sides of the terminal (idempotent)."""
        for fd in (self._master, self._slave):
            if fd is not None:
                try:
                    os.close(fd)
                except OSError:
                    pass
        self._master = self._slave = None

    def summary(self) -> str:
        """One line on what went over the terminal."""
        text = f"{self.bytes_out} bytes sent, tally of injected faults {self.device.tally.as_dict()}"
        if self.bytes_discarded:
            text += f", {self.bytes_discarded} bytes discarded while no client read them"
        return text

    def _sim_now_ns(self) -> int:
        return int((time.monotonic() - self._t0) * self._speed * 1e9)

    def serve(self, seconds: float | None) -> None:
        """Run until stopped, ``seconds`` of wall time have passed, or the injected disconnect."""
        end = None if seconds is None else time.monotonic() + seconds
        compressed = self._speed == float("inf")
        while self._running and (end is None or time.monotonic() < end):
            device = self.device
            action, self._action = self._action, None
            if action == "reset":
                device.produce_until(max(device.now_ns, self._sim_now_ns()) if not compressed else device.now_ns)
                device.press_reset()
            elif action == "unplug":
                device.unplug()
                self._pending.clear()  # what was on its way is lost with the cable
            if compressed:
                if not self._pending and self._busy():
                    device.produce_until(int(max(device.next_due_ns(), device.now_ns + COMPRESSED_STEP_NS)))
            else:
                device.produce_until(max(device.now_ns, self._sim_now_ns()))
            self._take(device.read())
            self._note_safety()
            if device.disconnected and not self._pending:
                print("taprig sim: device disconnected (injected fault)", file=sys.stderr)
                return
            self._exchange(self._wait_s(compressed))

    def _note_safety(self) -> None:
        """Say on stderr (and in the command log) when the board makes itself safe: a watchdog trip, a reboot."""
        from taprig.protocol import DeviceState

        device = self.device
        state, resets = device.state, device.tally.resets
        events = []
        if state is DeviceState.SAFE and self._state is not DeviceState.SAFE:
            events.append("watchdog")
        if resets != self._resets:
            events.append("reset")
        self._state, self._resets = state, resets
        for event in events:
            print(f"taprig sim: {event} at {device.now_ns / 1e9:.3f} s: actuators at safe values", file=sys.stderr,
                  flush=True)
            if self._log is not None:
                import json

                self._log.write(json.dumps({"t_s": device.now_ns / 1e9, "event": event}) + "\n")
                self._log.flush()

    def _log_commands(self) -> None:
        """Append the commands received since the last call to the command log, one JSON object a line."""
        if self._log is None:
            return
        import dataclasses
        import json

        codes = self.device.command_codes
        for index, (t_ns, state, msg) in enumerate(self.device.commands[self._logged:], self._logged):
            fields_ = {k: v for k, v in dataclasses.asdict(msg).items() if k != "req"}
            reply = codes.get(index)
            self._log.write(json.dumps({"t_s": t_ns / 1e9, "command": type(msg).__name__, **fields_,
                                        "state_before": state.name,
                                        "reply": reply.name if reply is not None else None}) + "\n")
        self._logged = len(self.device.commands)
        self._log.flush()

    def _take(self, data: bytes) -> None:
        if len(self._pending) > BACKLOG_LIMIT:
            self.bytes_discarded += len(data)
        else:
            self._pending += data

    def _busy(self) -> bool:
        """True if the board has something to send within the idle horizon (compressed time)."""
        return self.device.next_due_ns() - self.device.now_ns <= IDLE_HORIZON_NS

    def _wait_s(self, compressed: bool) -> float:
        if compressed:
            return 0.0 if not self._pending and self._busy() else TICK_S
        due = self.device.next_due_ns()
        if due == float("inf"):
            return TICK_S
        return min(TICK_S, max((due - self._sim_now_ns()) / (self._speed * 1e9), 0.0))

    def _exchange(self, wait_s: float) -> None:
        """Wait up to ``wait_s`` for the client; pass its bytes to the board and the board's bytes to it."""
        device = self.device
        stalled = device.stalled_until(device.now_ns) is not None
        readers = [] if stalled else [self._master]
        writers = [self._master] if self._pending else []
        readable, writable, _ = select.select(readers, writers, [], wait_s)
        if readable:
            try:
                data = os.read(self._master, 65536)
            except (BlockingIOError, InterruptedError):
                data = b""
            if data and not self._speed == float("inf"):
                device.produce_until(max(device.now_ns, self._sim_now_ns()))
                self._take(device.read())
            device.receive(data)
            self._log_commands()
        if writable:
            try:
                n = os.write(self._master, self._pending[:65536])
            except (BlockingIOError, InterruptedError):
                n = 0
            self.bytes_out += n
            del self._pending[:n]
