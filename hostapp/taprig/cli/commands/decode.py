"""``taprig decode FILE|PORT|URL``: print decoded frames as JSON lines, then the decoder's counters.

A FILE is raw wire bytes, a text file of hex digits (whitespace allowed), or a golden-vector JSON file
(``firmware_protocol/vectors/vectors.json``: every case is decoded by a fresh decoder and checked against the
counters it expects). A PORT or URL is opened and handshaken (``--no-handshake`` only listens), optionally
started streaming (``--start RATE``), read for ``--seconds`` and stopped. The line format is in
``docs/decode-output.md``.
"""

from __future__ import annotations

import json
import math
import queue
import string
import sys
import time
from dataclasses import fields, is_dataclass
from enum import Enum
from pathlib import Path

from taprig.cli import UserError, bounded, finite_nonnegative, positive_int, program_name, scan_rate

#: Longest single wait for the link's next item [s]; a long --seconds is waited out in such steps (a queue
#: timeout beyond the platform's time_t would overflow).
WAIT_STEP_S = 1.0
#: Files are fed to the decoder in chunks of this size, as the link reads a fast port.
FEED_CHUNK = 1 << 16
_HEX_TEXT = set(string.hexdigits + string.whitespace)


def register(sub) -> None:
    p = sub.add_parser("decode", help="print decoded frames from a capture file, a port or a URL as JSON lines")
    p.add_argument("source", metavar="FILE|PORT|URL",
                   help="raw capture, hex text or golden-vector JSON file; or a serial port path or URL")
    p.add_argument("--format", choices=("auto", "raw", "hex", "vectors"), default="auto",
                   help="how to read FILE (default: guess from its content)")
    p.add_argument("--case", help="with a vector file: decode only the case of this name")
    p.add_argument("--commands", action="store_true",
                   help="FILE holds what a host sent (decode as the board does: host → device types); a vector "
                        "file's cases say this themselves")
    p.add_argument("--seconds", type=finite_nonnegative, default=5.0, metavar="S", help="how long to read a port (default 5)")
    p.add_argument("--no-handshake", action="store_true", help="port: only listen (send nothing, not even DESCRIBE)")
    p.add_argument("--start", type=scan_rate, metavar="RATE", help="port: start streaming all channels at RATE [Hz]")
    p.add_argument("--baud", type=positive_int, default=115200, help="port: baud rate for UART bridges (default 115200)")
    p.add_argument("--handshake-timeout", type=bounded(0.0, 3600.0, "s", low_open=True), default=3.0,
                   metavar="S", help="port: give up when no DESCRIPTION arrives within S seconds (default 3, at most "
                                     "an hour)")
    p.set_defaults(func=run)


# ----- JSON form of decoded items ----------------------------------------------------------------------------

def _number(value: float) -> float | int | str:
    """A count as JSON: integral values as integers, non-finite ones (f32 channels) as strings."""
    if not math.isfinite(value):
        return "NaN" if math.isnan(value) else ("Infinity" if value > 0 else "-Infinity")
    return int(value) if float(value).is_integer() else float(value)


def _jsonable(value):
    if isinstance(value, Enum):
        return value.name
    if is_dataclass(value):
        return {f.name: _jsonable(getattr(value, f.name)) for f in fields(value)}
    if isinstance(value, (tuple, list)):
        return [_jsonable(v) for v in value]
    if isinstance(value, float):
        return _number(value)
    return value


def item_record(item) -> dict:
    """Return the JSON object of one decoded item (a message dataclass or a ``RawBlock``)."""
    from taprig.protocol import MsgType, RawBlock

    if isinstance(item, RawBlock):
        return {
            "type": MsgType.SAMPLES.name, "shape": list(item.counts.shape), "channels": list(item.channels),
            "first_scan": int(item.scan_index[0]), "last_scan": int(item.scan_index[-1]),
            "t_first_ns": int(item.t_ns[0]), "t_last_ns": int(item.t_ns[-1]),
            "first_counts": [_number(v) for v in item.counts[0].tolist()],
        }
    name = _type_name(type(item).__name__)
    return {"type": name, **_jsonable(item)}


def _type_name(class_name: str) -> str:
    """``SetActuator`` → ``SET_ACTUATOR``: the type's name as PROTOCOL.md writes it."""
    return "".join("_" + c if c.isupper() and i else c for i, c in enumerate(class_name)).upper()


def _emit(record: dict) -> None:
    print(json.dumps(record, separators=(", ", ": ")))


# ----- files ---------------------------------------------------------------------------------------------------

def _classify(source: str) -> str:
    if "://" in source:
        return "port"
    path = Path(source)
    if path.is_file():
        return "file"
    if path.exists():
        return "directory" if path.is_dir() else "port"
    if source.upper().startswith("COM") or source.startswith("/dev/"):
        return "port"
    raise UserError(f"no such file or port: {source}")


def _guess_format(path: Path, data: bytes) -> str:
    head = data.lstrip()[:1]
    if path.suffix.lower() == ".json" or head in (b"{", b"["):
        return "vectors"
    if data.strip() and all(chr(b) in _HEX_TEXT for b in data):
        return "hex"
    return "raw"


def _hex_bytes(path: Path, data: bytes) -> bytes:
    digits = "".join(data.decode("ascii", errors="replace").split())
    try:
        return bytes.fromhex(digits)
    except ValueError:
        raise UserError(f"{path}: expected hex digits in pairs (whitespace allowed); found "
                        f"{len(digits)} digits or a character that is not hex") from None


def _vector_cases(path: Path, data: bytes, only: str | None) -> list[dict]:
    try:
        doc = json.loads(data)
    except (ValueError, UnicodeDecodeError) as exc:
        raise UserError(f"{path}: not valid JSON ({exc})") from None
    cases = doc.get("cases") if isinstance(doc, dict) and "cases" in doc else [doc]
    if not isinstance(cases, list) or not all(isinstance(c, dict) and isinstance(c.get("hex"), str) for c in cases):
        raise UserError(f"{path}: expected a golden-vector file: an object with 'cases', a list of objects "
                        f"each with a 'hex' string (see firmware_protocol/vectors/README.md)")
    if only is not None:
        cases = [c for c in cases if c.get("name") == only]
        if not cases:
            raise UserError(f"{path}: no case named {only!r}")
    return cases


def _database_refusal(path: Path) -> str:
    """Why an SQLite file is not decoded: a session has its own commands; any other database is no capture."""
    from taprig.session.store import SessionError, SessionReader

    try:
        SessionReader(path).close()
    except SessionError:
        return f"{path} is an SQLite database, not a capture file (decode reads raw, hex or golden-vector files)"
    name = program_name()
    return f"{path} is a taprig session file: use {name} info / {name} replay"


def _no_frames_warning(path: Path, data: bytes, fmt: str, counters: dict) -> str:
    """The stderr line for a file with no good frame in it, with a hint when the file is plain text."""
    line = (f"taprig decode: warning: {path}: no good frames in {len(data)} bytes read as {fmt} "
            f"(framing errors {counters['framing_errors']}, crc errors {counters['crc_errors']}, "
            f"oversize {counters['oversize']})")
    try:
        data.decode("utf-8")
    except UnicodeDecodeError:
        return line
    return line + "; the file is text, not a capture (a rig or calibration file?)" if fmt == "raw" else line


def _decode_bytes(data: bytes, decoder, extra: dict | None = None) -> None:
    for start in range(0, len(data), FEED_CHUNK):
        for item in decoder.feed(data[start:start + FEED_CHUNK]):
            _emit({**(extra or {}), **item_record(item)})


def _decode_file(path: Path, fmt: str, only_case: str | None, receiver: str = "host") -> dict:
    from taprig.protocol import StreamDecoder
    from taprig.session.store import SQLITE_HEADER

    try:
        data = path.read_bytes()
    except OSError as exc:
        raise UserError(f"cannot read {path}: {exc.strerror or exc}") from None
    if data.startswith(SQLITE_HEADER):
        raise UserError(_database_refusal(path))
    fmt = _guess_format(path, data) if fmt == "auto" else fmt
    if fmt != "vectors":
        if only_case is not None:
            raise UserError("--case applies to golden-vector files only")
        decoder = StreamDecoder(receiver=receiver)
        _decode_bytes(_hex_bytes(path, data) if fmt == "hex" else data, decoder)
        counters = decoder.counters.as_dict()
        if counters["frames"] == 0:
            print(_no_frames_warning(path, data, fmt, counters), file=sys.stderr)
        return counters
    totals: dict[str, int] = {}
    for case in _vector_cases(path, data, only_case):
        name = case.get("name", "")
        # PROTOCOL.md §1: each case names the end that decodes it (host, or device for commands)
        decoder = StreamDecoder(receiver="device" if case.get("receiver") == "device" else "host")
        _decode_bytes(_hex_bytes(path, case["hex"].encode("ascii", errors="replace")), decoder, {"case": name})
        got = decoder.counters.as_dict()
        record = {"case": name, "case_counters": got}
        if isinstance(case.get("counters"), dict):
            record["matches_expected"] = all(got.get(k) == v for k, v in case["counters"].items())
        _emit(record)
        for key, value in got.items():
            totals[key] = totals.get(key, 0) + value
    return totals


# ----- ports -----------------------------------------------------------------------------------------------------

def _event_record(event) -> dict:
    record = {"event": event.kind.value, "host_time_ns": event.host_time_ns, "port": event.port,
              "detail": event.detail}
    if event.gap is not None:
        record["gap"] = {"start_ns": event.gap.start_ns, "end_ns": event.gap.end_ns,
                         "bytes_lost": event.gap.bytes_lost, "frames_lost": event.gap.frames_lost}
    return record


def _open_link(args, inbox: queue.Queue):
    from taprig.link import Link, LinkError

    link = Link(args.source, baudrate=args.baud, handshake_timeout_s=args.handshake_timeout,
                heartbeat=not args.no_handshake)
    link.subscribe(on_chunk=lambda chunk, t, items: inbox.put(items), on_event=inbox.put)
    try:
        link.open(handshake=not args.no_handshake)
        if args.start is not None:
            link.start_stream(args.start)
    except LinkError as exc:
        link.close()
        raise UserError(str(exc)) from None
    return link


def _print_inbox(inbox: queue.Queue, timeout: float) -> None:
    from taprig.link import LinkEvent

    try:
        got = inbox.get(timeout=max(0.0, timeout))
    except queue.Empty:
        return
    if isinstance(got, LinkEvent):
        _emit(_event_record(got))
    else:
        for item in got:
            _emit(item_record(item))


def _decode_port(args) -> dict:
    from taprig.link import LinkError

    if args.no_handshake and args.start is not None:
        raise UserError("--start needs the handshake (the device's channels); drop --no-handshake", 2)
    inbox: queue.Queue = queue.Queue()
    link = _open_link(args, inbox)
    deadline = time.monotonic() + max(0.0, args.seconds)
    try:
        while time.monotonic() < deadline:
            _print_inbox(inbox, min(deadline - time.monotonic(), WAIT_STEP_S))
        if args.start is not None:
            try:
                link.stop_stream()
            except LinkError as exc:
                print(f"taprig decode: could not stop the stream: {exc}", file=sys.stderr)
    finally:
        link.close()
    while not inbox.empty():
        _print_inbox(inbox, 0.0)
    _emit({"link": {"port": link.port_name, "bytes": link.bytes_received, "byte_rate": round(link.byte_rate(), 1),
                    "mean_byte_rate": round(link.meter.mean_rate(), 1), "outages": len(link.gaps)}})
    return link.counters.as_dict()


def run(args) -> int:
    kind = _classify(args.source)
    if kind == "directory":
        raise UserError(f"{args.source} is a directory; expected a capture file, a port or a URL")
    receiver = "device" if args.commands else "host"
    counters = (_decode_file(Path(args.source), args.format, args.case, receiver) if kind == "file"
                else _decode_port(args))
    _emit({"counters": counters})
    sys.stdout.flush()
    return 0
