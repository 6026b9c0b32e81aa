"""``taprig ports``: list the serial ports present, with what identifies a USB board across replugs, and the
simulated boards that ``taprig sim`` is running on pseudo-terminals (which the operating system does not list)."""

from __future__ import annotations

import json

from taprig.cli import UserError


def register(sub) -> None:
    p = sub.add_parser("ports", help="list serial ports (device, description, USB VID:PID, serial number) and "
                                     "running simulated boards")
    p.add_argument("--json", action="store_true",
                   help="print a JSON list of ports (simulated boards have \"simulated\": true)")
    p.set_defaults(func=run)


def _table(rows: list[tuple[str, ...]]) -> list[str]:
    widths = [max(len(row[i]) for row in rows) for i in range(len(rows[0]))]
    lines = ["  ".join(cell.ljust(w) for cell, w in zip(row, widths)).rstrip() for row in rows]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return lines


PTY_HINT = ("a pseudo-terminal (another simulator, a serial bridge) is not listed by the system: the program "
            "that opened it prints its path (taprig sim prints it on its first line)")


def run(args) -> int:
    from taprig.link import list_port_info
    from taprig.sim import registry

    try:
        ports = list_port_info()
    except OSError as exc:
        raise UserError(f"cannot list serial ports: {exc}") from None
    sims = registry.running()
    if args.json:
        listed = [{**p.as_dict(), "simulated": False} for p in ports]
        listed += [{"device": s.device, "description": f"taprig sim: rig {s.rig_id}", "hwid": "", "vid": None,
                    "pid": None, "serial_number": None, "manufacturer": None, "location": None, "vid_pid": None,
                    "simulated": True, "rig_id": s.rig_id, "rig_file": s.rig_file, "process_id": s.pid}
                   for s in sims]
        print(json.dumps(listed, indent=1))
        return 0
    if ports:
        rows = [("device", "description", "VID:PID", "serial number", "manufacturer")]
        rows += [(p.device, p.description, p.vid_pid or "-", p.serial_number or "-", p.manufacturer or "-")
                 for p in ports]
        print("\n".join(_table(rows)))
    else:
        print("no serial ports found (is the board plugged in, and its USB cable a data cable?)")
    if sims:
        rows = [("simulated board", "rig", "rig file", "process")]
        rows += [(s.device, s.rig_id, s.rig_file, str(s.pid)) for s in sims]
        print()
        print("\n".join(_table(rows)))
    else:
        print(f"no simulated boards running (taprig sim --rig RIG starts one); {PTY_HINT}")
    return 0
