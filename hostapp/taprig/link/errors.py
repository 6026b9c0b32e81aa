"""The link's errors: one family under :class:`LinkError`, each message fit for the person at the terminal.

Opening a port fails in a handful of ways that a user can act on (wrong name, another program holds the port,
missing group membership, not a serial device at all). pyserial reports them all as ``SerialException`` with an
errno or an OS message; :func:`open_error` turns one into the matching subclass with a message that says what to do.
"""

from __future__ import annotations

import errno
import os
import sys
from pathlib import Path

from serial import SerialException


class LinkError(Exception):
    """Any failure of the serial link, with a message that names the port and what to do."""


class PortNotFoundError(LinkError):
    """The port or device path does not exist."""


class PortBusyError(LinkError):
    """Another program (or another opener in this one) holds the port."""


class PortPermissionError(LinkError):
    """The operating system refused access to the port."""


class NotSerialDeviceError(LinkError):
    """The path exists but is not a serial device (a regular file, /dev/null, ...)."""


class HandshakeTimeoutError(LinkError):
    """No DESCRIPTION arrived within the handshake timeout; the message reports what did arrive."""


class ProtocolVersionError(LinkError):
    """The device speaks a protocol major version this host does not know."""


class CommandTimeoutError(LinkError):
    """A command got no REPLY with its request id within its timeout."""


class CommandRefusedError(LinkError):
    """The device answered a command with a REPLY code other than OK.

    ``code`` is the :class:`taprig.protocol.ReplyCode` (or the raw int if unknown), ``detail`` the device's text.
    """

    def __init__(self, message: str, code: int, detail: str):
        super().__init__(message)
        self.code = code
        self.detail = detail


class LinkDownError(LinkError):
    """The link is lost (reconnecting) or closed, so the request cannot be sent or answered."""


def _available_ports_text() -> str:
    from serial.tools import list_ports

    try:
        devices = sorted(p.device for p in list_ports.comports())
    except (OSError, SerialException):  # enumeration itself can fail on odd systems; say so, do not mask the error
        return "serial ports could not be listed"
    if not devices:
        return "no serial ports are present (is the board plugged in?)"
    return "ports present: " + ", ".join(devices)


def holders_of(path: str) -> list[str]:
    """Return ``"name (pid N)"`` for each process that has ``path`` open (Linux /proc; empty elsewhere).

    Best effort: processes we may not inspect are skipped, and the scan stops after a few thousand entries so it
    never takes long.
    """
    proc = Path("/proc")
    if not sys.platform.startswith("linux") or not proc.is_dir():
        return []
    target = os.path.realpath(path)
    found = []
    for n, pid_dir in enumerate(proc.iterdir()):
        if n > 5000:
            break
        if not pid_dir.name.isdigit() or int(pid_dir.name) == os.getpid():
            continue
        try:
            if any(os.path.realpath(fd) == target for fd in (pid_dir / "fd").iterdir()):
                found.append(f"{(pid_dir / 'comm').read_text().strip()} (pid {pid_dir.name})")
        except OSError:
            continue
    return found


def _busy_message(port: str) -> str:
    holders = holders_of(port)
    who = "held by " + ", ".join(holders) if holders else "held by another program (a serial monitor, another taprig?)"
    return f"port {port} is busy: {who}; close that program and try again"


def _permission_message(port: str) -> str:
    if sys.platform.startswith("linux"):
        return (f"permission denied opening {port}: add your user to the 'dialout' group "
                f"(sudo usermod -aG dialout $USER; on some systems the group is 'uucp'), then log out and in again")
    if sys.platform == "win32":
        # Windows reports a port held by another program as "access denied" too.
        return f"access denied opening {port}: another program probably holds it; close it and try again"
    return f"permission denied opening {port}: your user may not use serial ports; ask for access to {port}"


def open_error(port: str, exc: BaseException) -> LinkError:
    """Translate an exception from opening ``port`` into the matching :class:`LinkError` subclass.

    Parameters
    ----------
    port : str
        The path or URL the user gave.
    exc : BaseException
        What pyserial (or the OS) raised.
    """
    code = getattr(exc, "errno", None)
    text = str(exc)
    lowered = text.lower()
    if code == errno.ENOENT or isinstance(exc, FileNotFoundError) or "filenotfounderror" in lowered:
        return PortNotFoundError(f"no serial port {port}; {_available_ports_text()}")
    if code in (errno.EBUSY, errno.EAGAIN, errno.EWOULDBLOCK) or "exclusively lock" in lowered:
        return PortBusyError(_busy_message(port))
    if code in (errno.EACCES, errno.EPERM) or isinstance(exc, PermissionError) or "permissionerror" in lowered:
        return PortPermissionError(_permission_message(port))
    if "inappropriate ioctl" in lowered or code in (errno.ENOTTY, errno.ENXIO, errno.ENODEV, errno.EISDIR):
        return NotSerialDeviceError(f"{port} is not a serial device ({text})")
    if not text.startswith(f"cannot open {port}"):  # the sim:// handler already names the URL
        text = f"cannot open {port}: {text}"
    if isinstance(exc, ValueError) and "url" in lowered:
        return PortNotFoundError(text)
    return LinkError(text)
