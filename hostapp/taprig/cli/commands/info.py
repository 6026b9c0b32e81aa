"""``taprig info FILE``: what a session holds, from its metadata and a fresh decode of every stored byte.

The counts (scans, frames, CRC errors, gaps, scans lost) come from decoding the chunks again, so they are right
even for a run that was killed; when the live run stored its counters at stop they are compared, and a
difference is reported (a clean recording agrees exactly). ``--json`` prints one object (keys in
:func:`taprig.session.api.session_summary`).
"""

from __future__ import annotations

import json
import sys

from taprig.cli.commands.replay import progress_bar, session_errors


def register(sub) -> None:
    p = sub.add_parser("info", help="summarise a session file (rig, duration, scans, errors, events, points)",
                       description="Summarise a session: metadata, and counts from decoding every stored byte.")
    p.add_argument("file", metavar="FILE", help="session file (.taprig)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=run)


def _not_stopped(summary: dict) -> str:
    if summary.get("being_recorded"):
        return "(being recorded now: these counts are what was committed so far)"
    return "(not stopped cleanly)"


def _text(summary: dict) -> list[str]:
    lines = [
        f"session   {summary['path']}  (format {summary['format_version']}, {summary['software'] or 'unknown software'})",
        f"rig       {summary['rig']}  {summary['rig_name'] or ''}".rstrip(),
        f"port      {summary['port']}",
        f"started   {summary['started']}   stopped {summary['stopped'] or _not_stopped(summary)}",
        f"duration  {summary['duration_s']:.1f} s   {summary['chunks']} chunks, {summary['bytes']:,} bytes",
        f"scans     {summary['scans']}   frames {summary['frames']}",
        f"errors    crc {summary['crc_errors']}  framing {summary['framing_errors']}  gaps {summary['gaps']}  "
        f"frames lost {summary['frames_lost']}  scans lost {summary['scans_lost']}  resets {summary['resets']}",
        f"link      {summary['link_events']} events, {summary['link_outages']} outages",
        f"operator  {summary['events']} events, {summary['points']} points",
    ]
    if summary["counters_match"] is False:
        lines.append("warning   the live counters stored at stop differ from this decode in: "
                     + ", ".join(summary["counters_differing"]))
    lines += [f"assumes   {sentence}" for sentence in summary.get("assumptions", [])]
    if summary["recording_error"]:
        lines.append(f"recording {summary['recording_error']}")
    return lines


def run(args) -> int:
    from taprig.session.api import Session

    with session_errors():
        session = Session(args.file)
    with session, session_errors(), progress_bar("decoding", 1) as update:
        summary = session.summary(progress=update)
    if args.json:
        print(json.dumps(summary, indent=1))
    else:
        print("\n".join(_text(summary)), file=sys.stdout)
    return 0
