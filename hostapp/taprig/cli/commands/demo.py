"""``taprig demo``: the main job on the simulated rig, no hardware: zero, run up the fan, sweep α, find the stall."""

from __future__ import annotations

import math
import sys
from pathlib import Path

from taprig.cli import UserError

DEFAULT_RIG = Path(__file__).resolve().parents[4] / "rigs" / "naca0012-20tap.toml"

SAFETY = ("Safety on a real rig: fan guards on, eye protection with compressed air, never defeat an interlock; "
          "local codes and your supervisor's rules come first (README, Safety).")


def register(sub) -> None:
    p = sub.add_parser("demo", help="the whole job on the simulated airfoil rig: zero, fan, α sweep, stall",
                       description="Runs the simulated 20-tap NACA 0012 rig through a wind-off zero, a fan run-up "
                                   "and an angle-of-attack sweep, prints each averaged point and the lift curve, "
                                   "and records the session.")
    p.add_argument("--rig", default=str(DEFAULT_RIG), help="rig file to simulate (default: the 20-tap NACA 0012)")
    p.add_argument("--fast", action="store_true", help="compressed time: as fast as the host takes the data")
    p.add_argument("--seed", type=int, default=1, help="simulator seed (default 1)")
    p.add_argument("--fan", type=float, default=0.8, help="fan duty 0–1 during the sweep (default 0.8)")
    p.add_argument("--from-deg", type=float, default=-4.0, dest="start_deg")
    p.add_argument("--to-deg", type=float, default=None, dest="stop_deg", help="default: the servo's upper limit")
    p.add_argument("--step-deg", type=float, default=2.0)
    p.add_argument("-o", "--output", metavar="FILE", help="session file (default: sessions/demo-<time>.taprig)")
    p.set_defaults(func=run, calibration=None, pressure_hpa=None, temperature_c=None, humidity_pct=None,
                   rate=500.0)


def _angles(args, acq) -> list[float]:
    from taprig.protocol import ActuatorKind

    servo = next((a for a in acq.rig.actuators if a.kind is ActuatorKind.ANGLE), None)
    if servo is None:
        raise UserError(f"{args.rig}: the demo sweeps the angle of attack, but this rig has no angle actuator")
    stop = math.degrees(servo.max) if args.stop_deg is None else args.stop_deg
    n = int(math.floor((stop - args.start_deg) / args.step_deg + 1e-9)) + 1
    degrees = [args.start_deg + k * args.step_deg for k in range(n)]
    return [math.radians(d) for d in degrees if servo.min <= math.radians(d) <= servo.max + 1e-12]


def _coeff(c, name: str, fmt: str) -> str:
    return format(getattr(c, name), fmt) if c is not None else format("–", fmt.split(".")[0].rstrip("f") or "")


def _point_line(point) -> str:
    m = point.mean
    best = m.corrected or m.default
    cl = f"{best.cl:6.3f} ± {best.u_cl:5.3f}" if best is not None else f"{'–':>14}"
    return (f"{math.degrees(point.alpha_rad):6.1f}  {m.q_pa:7.1f}  {m.v_ms:5.1f}  {m.re:8.2e}  {cl:>15}  "
            f"{_coeff(m.plain, 'cl', '6.3f')}  {_coeff(best, 'cd_p', '7.4f')}  {_coeff(best, 'cm_qc', '7.4f')}")


def run(args) -> int:
    from taprig.cli.commands.record import open_run, print_summary
    from taprig.runtime.acquisition import AcquisitionError
    from taprig.runtime.sweep import run_sweep, sweep_lift_curve, wait_device_time

    print(SAFETY, file=sys.stderr)
    # In compressed time the simulated clock outruns the host's wall-clock heartbeat, so the simulated board's
    # watchdog would trip at once (docs/simulator.md): it is switched off there, and only there.
    query = f"seed={args.seed}" + ("&speed=max&watchdog_ms=0" if args.fast else "")
    acq, out = open_run(args, f"sim://?{query}", "sessions", stem="demo")
    print(f"simulated rig {acq.rig.name!r} ({acq.description.firmware}, {len(acq.rig.taps)} taps), "
          f"recording to {out}")
    try:
        fan = next(a.name for a in acq.rig.actuators if a.kind.name == "FAN")
        wait_device_time(acq, 1.0, 20)
        acq.zero(1.0)
        print("wind-off zero taken")
        acq.set_actuator(fan, args.fan)
        wait_device_time(acq, 4.0, 30)
        print(f"\n{'α [°]':>6}  {'q [Pa]':>7}  {'V m/s':>5}  {'Re':>8}  {'Cl (fit, walls)':>15}  {'Cl trap':>6}  "
              f"{'Cd_p':>7}  {'Cm¼':>7}")
        points = run_sweep(acq, _angles(args, acq), on_point=lambda p: print(_point_line(p), flush=True))
        curve = sweep_lift_curve(points)
        print(f"\nlift slope {curve.slope * math.pi / 180:.4f} ± {curve.u_slope * math.pi / 180:.4f} per degree "
              f"over {math.degrees(curve.linear_range[0]):.0f}…{math.degrees(curve.linear_range[1]):.0f}° "
              f"(thin-airfoil theory: 0.1097), zero lift at {math.degrees(curve.alpha_zero_lift):.2f}°")
        if curve.stalled:
            print(f"stall at {math.degrees(curve.alpha_stall):.1f}°, Cl max {curve.cl_max:.3f}")
        else:
            print(f"no stall within the sweep (Cl max {curve.cl_max:.3f} at {math.degrees(curve.alpha_cl_max):.1f}°)")
    except AcquisitionError as exc:
        raise UserError(str(exc)) from None
    finally:
        acq.close()
    print_summary(acq, out)
    print(f"next: taprig info {out}   taprig replay {out} --fast   taprig export {out} --format csv -o run.csv")
    return 0
