"""``taprig recover DAMAGED -o NEW``: copy what is intact of a damaged session into a new file, counting the loss."""

from __future__ import annotations

from taprig.cli import UserError


def register(sub) -> None:
    p = sub.add_parser("recover", help="copy the intact rows of a damaged session into a new session file",
                       description="Read every row of a damaged session file on its own, copy each one that still "
                                   "reads into a new session file, and count what could not be read.")
    p.add_argument("file", metavar="FILE", help="the damaged session file")
    p.add_argument("-o", "--output", required=True, metavar="NEW", help="the new session file (.taprig)")
    p.set_defaults(func=run)


def run(args) -> int:
    from pathlib import Path

    from taprig.session.recover import recover_session
    from taprig.session.store import SessionError

    if Path(args.output).suffix.lower() != ".taprig":
        raise UserError(f"{args.output}: session files are named *.taprig", 2)
    if not Path(args.file).is_file():
        raise UserError(f"{args.file}: no such session file")
    try:
        counts = recover_session(args.file, args.output)
    except SessionError as exc:
        raise UserError(str(exc)) from None
    lost = sum(c["lost"] for c in counts.values())
    for table, c in counts.items():
        print(f"{table:12s} kept {c['kept']:7d}   lost {c['lost']:7d}")
    print(f"{args.output}: {'nothing was lost' if not lost else f'{lost} rows could not be read and are missing'}")
    return 0
