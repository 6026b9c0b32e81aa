"""``taprig handout FILE…``: a PDF an instructor can hand out, from one or more session files.

Cover (rig, date, ambient conditions, the reference-pressure assumption, what the numbers rest on and what they
omit, calibration with its residuals, the link's counters, safety), then per rig kind the lift curve with fit,
stall, hysteresis and balance, or the venturi's pressures, flow and discharge coefficient, or Cp against potential
flow; the Cp of every point; the table of points with uncertainties. Several sessions add a comparison page
(``--align alpha`` or ``q``). ``--png DIR`` writes the figures alone. Built by :mod:`taprig.report`.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

from taprig.cli import UserError


def register(sub) -> None:
    p = sub.add_parser("handout", help="write a PDF handout (or the figures alone) from session files",
                       description="Write a PDF from one or more session files: cover with the rig, date, ambient "
                                   "conditions, assumptions, calibration, the link's counters and the safety note; "
                                   "lift curve or venturi or cylinder page; Cp of every point; table of points with "
                                   "uncertainties. Several sessions are also compared on one figure.")
    p.add_argument("files", nargs="+", metavar="FILE", help="session file(s) (.taprig)")
    p.add_argument("-o", "--output", metavar="PDF",
                   help="PDF to write (default: the first session's name with .pdf)")
    p.add_argument("--png", metavar="DIR", help="write each figure alone as PNG into DIR instead of the PDF")
    p.add_argument("--align", choices=("alpha", "q"), default="alpha",
                   help="comparison of several sessions: by commanded angle of attack (default) or by q")
    p.add_argument("--coefficients", choices=("best", "corrected", "shape", "plain"), default="best",
                   help="which coefficients the lift analysis uses (default: wall-corrected where recorded, else "
                        "the shape-aware fit, else the trapezoid)")
    p.add_argument("--force", action="store_true", help="replace a PDF that already exists")
    p.set_defaults(func=run)


def run(args) -> int:
    from taprig.report import HandoutError, write_figures, write_handout

    started = time.perf_counter()
    try:
        if args.png:
            written = write_figures(args.files, args.png, args.align, args.coefficients)
            print(f"{len(written)} figures written to {args.png} ({time.perf_counter() - started:.1f} s)")
            return 0
        out = Path(args.output) if args.output else Path(args.files[0]).with_suffix(".pdf")
        if out.suffix.lower() != ".pdf":
            raise UserError(f"{out}: a handout is written as .pdf; name the output with that suffix", 2)
        if out.exists() and not args.force:
            raise UserError(f"{out}: already exists; choose another name with -o, or --force to replace it", 2)
        pages = write_handout(args.files, out, args.align, args.coefficients)
    except HandoutError as exc:
        raise UserError(str(exc), exc.code) from None
    print(f"{out}: {pages} pages ({time.perf_counter() - started:.1f} s)")
    print("figures alone, for a write-up: add --png DIR", file=sys.stderr)
    return 0
