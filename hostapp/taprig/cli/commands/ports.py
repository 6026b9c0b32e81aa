"""``taprig ports``: list the serial ports present, with what identifies a USB board across replugs."""

from __future__ import annotations

import json

from taprig.cli import UserError


def register(sub) -> None:
    p = sub.add_parser("ports", help="list serial ports (device, description, USB VID:PID, serial number)")
    p.add_argument("--json", action="store_true", help="print a JSON list of ports")
    p.set_defaults(func=run)


def _table(rows: list[tuple[str, ...]]) -> list[str]:
    widths = [max(len(row[i]) for row in rows) for i in range(len(rows[0]))]
    lines = ["  ".join(cell.ljust(w) for cell, w in zip(row, widths)).rstrip() for row in rows]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return lines


def run(args) -> int:
    from taprig.link import list_port_info

    try:
        ports = list_port_info()
    except OSError as exc:
        raise UserError(f"cannot list serial ports: {exc}") from None
    if args.json:
        print(json.dumps([p.as_dict() for p in ports], indent=1))
        return 0
    if not ports:
        print("no serial ports found (is the board plugged in, and its USB cable a data cable?)")
        return 0
    rows = [("device", "description", "VID:PID", "serial number", "manufacturer")]
    rows += [(p.device, p.description, p.vid_pid or "-", p.serial_number or "-", p.manufacturer or "-")
             for p in ports]
    print("\n".join(_table(rows)))
    return 0
