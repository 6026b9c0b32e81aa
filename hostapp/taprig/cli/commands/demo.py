"""``taprig demo``: the main job on the simulated rig, no hardware: zero, run up the fan, sweep α, find the stall."""

from __future__ import annotations

import sys
from pathlib import Path

from taprig.cli.commands.sweep import SAFETY, add_sweep_options

DEFAULT_RIG = Path(__file__).resolve().parents[4] / "rigs" / "naca0012-20tap.toml"


def register(sub) -> None:
    p = sub.add_parser("demo", help="the whole job on the simulated airfoil rig: zero, fan, α sweep, stall",
                       description="Runs `taprig sweep` on the simulated 20-tap NACA 0012 rig: a wind-off zero, "
                                   "a fan run-up and an angle-of-attack sweep, each averaged point and the lift "
                                   "curve printed, the session recorded. No hardware needed.")
    p.add_argument("--rig", default=str(DEFAULT_RIG), help="rig file to simulate (default: the 20-tap NACA 0012)")
    p.add_argument("--fast", action="store_true", help="compressed time: as fast as the host takes the data")
    p.add_argument("--seed", type=int, default=1, help="simulator seed (default 1)")
    add_sweep_options(p)
    p.set_defaults(func=run, calibration=None, pressure_hpa=None, temperature_c=None, humidity_pct=None)


def run(args) -> int:
    from taprig.cli.commands.sweep import sweep

    print(SAFETY, file=sys.stderr)
    # In compressed time the simulated clock outruns the host's wall-clock heartbeat, so the simulated board's
    # watchdog would trip at once (docs/simulator.md): it is switched off there, and only there.
    query = f"seed={args.seed}" + ("&speed=max&watchdog_ms=0" if args.fast else "")
    # With a person at a terminal the dashboard stays up after the sweep, to run the rig from the page.
    linger = not args.no_dashboard and not args.fast and sys.stdin.isatty()
    return sweep(args, f"sim://?{query}", stem="demo", linger=linger)
