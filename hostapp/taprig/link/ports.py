"""Opening, listing and re-finding serial ports, and the bulk read every reader here uses.

A port is named by a path (``/dev/ttyACM0``, ``COM5``) or a pyserial URL (``sim://...``, ``loop://``); both go
through ``serial.serial_for_url`` so a simulated rig opens with the same call as a board. A USB board is
re-found after a replug by what does not change: its USB serial number and VID:PID (this module) and the uid in
its self-description (checked by the link).
"""

from __future__ import annotations

import os
from dataclasses import asdict, dataclass

import serial
from serial.tools import list_ports

from taprig.link.errors import LinkError, open_error

#: Bytes drained into one chunk at most; large enough that a full-speed stream is framed in bulk.
CHUNK_LIMIT = 1 << 18


@dataclass(frozen=True)
class PortInfo:
    """One serial port as the operating system lists it.

    ``vid``/``pid`` are ``None`` for ports that are not USB (built-in UARTs, pseudo-terminals).
    """

    device: str
    description: str
    hwid: str
    vid: int | None
    pid: int | None
    serial_number: str | None
    manufacturer: str | None
    location: str | None

    @property
    def vid_pid(self) -> str | None:
        """``"VVVV:PPPP"`` in hex as lsusb writes it, or ``None`` for a non-USB port."""
        if self.vid is None or self.pid is None:
            return None
        return f"{self.vid:04X}:{self.pid:04X}"

    def as_dict(self) -> dict:
        """Return the fields and ``vid_pid`` as a JSON-ready dict."""
        return {**asdict(self), "vid_pid": self.vid_pid}


def list_port_info() -> list[PortInfo]:
    """Return the serial ports present now, sorted by device name."""
    found = []
    for p in list_ports.comports():
        found.append(PortInfo(
            device=p.device, description=p.description or "", hwid=p.hwid or "", vid=p.vid, pid=p.pid,
            serial_number=p.serial_number, manufacturer=p.manufacturer, location=p.location,
        ))
    return sorted(found, key=lambda info: info.device)


def is_url(port: str) -> bool:
    """True for a pyserial URL (``scheme://...``) rather than a device path."""
    return "://" in port


def _same_device(a: str, b: str) -> bool:
    if a == b:
        return True
    try:
        return os.path.realpath(a) == os.path.realpath(b)
    except OSError:
        return False


@dataclass(frozen=True)
class UsbIdentity:
    """What identifies a USB board across replugs, whatever path it comes back on."""

    serial_number: str
    vid: int
    pid: int


def usb_identity(port: str) -> UsbIdentity | None:
    """Return the USB serial number and VID:PID of the port at ``port``, or ``None`` if it has none."""
    if is_url(port):
        return None
    for info in list_port_info():
        if _same_device(info.device, port) and info.serial_number and info.vid is not None and info.pid is not None:
            return UsbIdentity(info.serial_number, info.vid, info.pid)
    return None


def candidate_paths(port: str, identity: UsbIdentity | None) -> list[str]:
    """Where to look for a board that was at ``port``: that path first, then any port with the same USB identity."""
    paths = [port]
    if identity is None:
        return paths
    for info in list_port_info():
        same = (info.serial_number, info.vid, info.pid) == (identity.serial_number, identity.vid, identity.pid)
        if same and not _same_device(info.device, port):
            paths.append(info.device)
    return paths


def open_port(port_or_url: str, *, baudrate: int = 115200, exclusive: bool = True, keep_dtr_rts: bool = False,
              timeout: float = 0.05, write_timeout: float = 1.0) -> serial.SerialBase:
    """Open a serial port or pyserial URL for the link.

    Parameters
    ----------
    port_or_url : str
        A device path (``/dev/ttyACM0``, ``COM5``) or a pyserial URL (``sim://...``).
    baudrate : int
        Line rate for UART bridges [bit/s]; native-USB boards ignore it.
    exclusive : bool
        Lock the port so a second opener fails instead of silently sharing the bytes (POSIX; Windows ports are
        always exclusive). Ignored by URL handlers that do not support it.
    keep_dtr_rts : bool
        Leave DTR and RTS low from the start instead of letting the open assert them, so boards that reset on a
        DTR edge keep running (a rig file asks for this).
    timeout : float
        Read timeout [s]; reads return what has arrived by then, so no read blocks longer.
    write_timeout : float
        Write timeout [s]; a write that cannot finish raises instead of hanging.

    Raises
    ------
    LinkError
        A subclass naming the port and what to do: not found (with the ports present), busy, permission denied,
        not a serial device.
    """
    try:
        port = serial.serial_for_url(port_or_url, do_not_open=True)
    except (ValueError, serial.SerialException) as exc:
        raise open_error(port_or_url, exc) from None
    try:
        port.baudrate = baudrate
    except (ValueError, OverflowError):
        raise LinkError(f"{port_or_url}: baud rate {baudrate} is not a rate this port can be set to "
                        "(check link.baud in the rig file)") from None
    port.timeout = timeout
    port.write_timeout = write_timeout
    if exclusive and hasattr(port, "exclusive"):
        try:
            port.exclusive = True
        except (ValueError, NotImplementedError):  # a platform or handler without exclusive mode: open shared
            pass
    if keep_dtr_rts:
        # Set before open(): pyserial applies these levels while opening, so no reset edge reaches the board.
        port.dtr = False
        port.rts = False
    try:
        port.open()
    except OverflowError:  # a line rate the driver cannot even represent
        raise LinkError(f"{port_or_url}: baud rate {baudrate} is beyond what a serial port can be set to "
                        "(check link.baud in the rig file)") from None
    except (OSError, ValueError, serial.SerialException) as exc:
        raise open_error(port_or_url, exc) from None
    return port


def read_available(port: serial.SerialBase, limit: int = CHUNK_LIMIT) -> bytes:
    """Read what the port holds now, in bulk: never byte by byte.

    Waits up to the port's timeout for the first byte (``read(max(1, in_waiting))``), then drains whatever else
    is already buffered, up to ``limit`` bytes, so a full-speed stream arrives in large chunks (one decoder call
    per chunk) while a slow one is handed on at once. Returns ``b""`` on timeout. ``SerialException``/``OSError``
    from ``read`` or ``in_waiting`` propagate: to the link they mean the device is gone.
    """
    data = port.read(max(1, min(port.in_waiting, limit)))
    if not data:
        return b""
    parts = [data]
    total = len(data)
    while total < limit:
        waiting = port.in_waiting
        if not waiting:
            break
        more = port.read(min(waiting, limit - total))
        if not more:
            break
        parts.append(more)
        total += len(more)
    return parts[0] if len(parts) == 1 else b"".join(parts)

