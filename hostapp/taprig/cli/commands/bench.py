"""``taprig bench``: run the benchmark suites and print a table or JSON records."""

from __future__ import annotations

import json
import sys

from taprig.cli import UserError


def register(sub) -> None:
    p = sub.add_parser("bench", help="measure throughput against naive baselines in the same run")
    p.add_argument("suites", nargs="*", help="suite names (default: all)")
    p.add_argument("--json", action="store_true", help="print a JSON list of records")
    p.add_argument("--quick", action="store_true", help="short runs (for smoke tests, figures are rough)")
    p.set_defaults(func=run)


def _fmt(x) -> str:
    if x is None:
        return "-"
    if abs(x) >= 1e5 or (abs(x) < 1e-2 and x != 0):
        return f"{x:.3g}"
    return f"{x:,.2f}"


def run(args) -> int:
    from taprig.bench import suites

    available = suites()
    chosen = args.suites or list(available)
    unknown = [s for s in chosen if s not in available]
    if unknown:
        raise UserError(f"unknown suite(s) {', '.join(unknown)}; expected one of: {', '.join(available)}", 2)
    records = []
    for name in chosen:
        if not args.json:
            print(f"running {name} ...", file=sys.stderr, flush=True)
        records.extend(available[name].run(quick=args.quick))
    if args.json:
        print(json.dumps([r.as_dict() for r in records], indent=1))
        return 0
    rows = [("benchmark", "value", "unit", "baseline", "ratio", "target", "met")]
    rows += [(r.name, _fmt(r.value), r.unit, _fmt(r.baseline), _fmt(r.ratio), r.target or "",
              {True: "yes", False: "NO", None: ""}[getattr(r, "met", None)]) for r in records]
    widths = [max(len(row[i]) for row in rows) for i in range(len(rows[0]))]
    for i, row in enumerate(rows):
        print("  ".join(c.ljust(w) if j in (0, 2, 5, 6) else c.rjust(w) for j, (c, w) in enumerate(zip(row, widths))))
        if i == 0:
            print("  ".join("-" * w for w in widths))
    return 0
