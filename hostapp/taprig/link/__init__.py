"""taprig.link: the serial link to a board (or to the simulated rig by its ``sim://`` URL).

Importing this package registers :mod:`taprig.link.handlers` as a pyserial URL handler package, so every opener in
the process (taprig's or any pyserial client's) resolves ``sim://`` and the other taprig schemes.

- :func:`open_port`, :func:`list_port_info`: open a path or URL with clear errors; list the ports present;
- :class:`Link`: reader thread, decoder, subscribers, handshake, commands, heartbeat, reconnection;
- :class:`LinkEvent`, :class:`LinkGap`: what the link reports besides the bytes;
- the :class:`LinkError` family.
"""

import serial

HANDLER_PACKAGE = "taprig.link.handlers"
if HANDLER_PACKAGE not in serial.protocol_handler_packages:
    serial.protocol_handler_packages.append(HANDLER_PACKAGE)

from taprig.link.errors import (  # noqa: E402  (the handler package is registered before anything can open a URL)
    CommandRefusedError,
    CommandTimeoutError,
    HandshakeTimeoutError,
    LinkDownError,
    LinkError,
    NotSerialDeviceError,
    PortBusyError,
    PortNotFoundError,
    PortPermissionError,
    ProtocolVersionError,
)
from taprig.link.events import ByteRateMeter, LinkEvent, LinkEventKind, LinkGap  # noqa: E402
from taprig.link.link import Link  # noqa: E402
from taprig.link.ports import PortInfo, UsbIdentity, list_port_info, open_port, read_available  # noqa: E402

__all__ = [
    "HANDLER_PACKAGE",
    "ByteRateMeter",
    "CommandRefusedError",
    "CommandTimeoutError",
    "HandshakeTimeoutError",
    "Link",
    "LinkDownError",
    "LinkError",
    "LinkEvent",
    "LinkEventKind",
    "LinkGap",
    "NotSerialDeviceError",
    "PortBusyError",
    "PortInfo",
    "PortNotFoundError",
    "PortPermissionError",
    "ProtocolVersionError",
    "UsbIdentity",
    "list_port_info",
    "open_port",
    "read_available",
]
