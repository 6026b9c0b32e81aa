"""The link and the board's safe hold after a watchdog trip (PROTOCOL.md §4, protocol 1.1): what the host learns
from the description, the refusal it gets for a move sent after a trip, and ALLOW_MOVES."""

from __future__ import annotations

import dataclasses
import threading
import time
from pathlib import Path

import pytest
from link_fakedevice import make_description

from taprig.link import CommandRefusedError, Link
from taprig.protocol import AllowMoves, DeviceState, ReplyCode, SetActuator

RIG = Path(__file__).resolve().parents[2] / "rigs" / "naca0012-20tap.toml"


def wait_until(predicate, timeout=10.0, what="condition"):
    deadline = time.monotonic() + timeout
    tick = threading.Event()
    while not predicate():
        assert time.monotonic() < deadline, f"{what} not reached within {timeout} s"
        tick.wait(0.01)


@pytest.mark.parametrize("minor, holds", [(0, False), (1, True), (7, True)])
def test_the_description_says_whether_the_board_holds_its_safe_state(ptys, devices, links, minor, holds):
    # PROTOCOL.md §2: proto_minor is how a host learns what a board does beyond 1.0; the hold came with 1.1
    pty = ptys()
    devices(pty, description=dataclasses.replace(make_description(), proto_minor=minor))
    link = links(pty.path)
    assert not link.board_holds_safe  # nothing known before the description
    link.open()
    assert link.board_holds_safe is holds


def test_a_move_after_the_trip_is_refused_with_busy_until_allow_moves():
    # The simulated board (protocol 1.1) in this process, no heartbeat from the host: its watchdog trips.
    link = Link(f"sim://{RIG}?seed=3&speed=1&watchdog_ms=1000", heartbeat=False)
    link.open()
    try:
        board = link._port.device
        assert link.board_holds_safe and link.description.proto_minor == 1
        link.set_actuator(0, 0.6)
        link.start_stream(200.0)
        wait_until(lambda: board.held, what="the watchdog trip")
        with pytest.raises(CommandRefusedError, match="BUSY") as caught:
            link.set_actuator(0, 0.7)  # a move decided before the host froze, arriving after the trip
        assert caught.value.code is ReplyCode.BUSY and "ALLOW_MOVES" in caught.value.detail
        assert board.actuators[0].setpoint == 0.0 and board.state is DeviceState.SAFE
        link.set_actuator(0, 0.0)  # a safe value is always taken
        link.allow_moves()
        assert board.actuators[0].setpoint == 0.0  # ALLOW_MOVES moves nothing
        link.set_actuator(0, 0.4)
        assert board.actuators[0].setpoint == pytest.approx(0.4)  # (until the next trip, 1 s on: no heartbeat)
        sent = [m for _, _, m in board.commands]
        codes = [board.command_codes[i] for i, m in enumerate(sent) if isinstance(m, SetActuator)]
        assert codes == [ReplyCode.OK, ReplyCode.BUSY, ReplyCode.OK, ReplyCode.OK]
        assert [type(m) for m in sent].count(AllowMoves) == 1
        assert [m.value for m in sent if isinstance(m, SetActuator)] == pytest.approx([0.6, 0.7, 0.0, 0.4])
    finally:
        link.close()
