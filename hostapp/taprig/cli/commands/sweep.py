"""``taprig sweep``: zero, run the fan up, step the angle of attack, average a point at each, find the stall.

On a real board the fan and the servo move, so the command first asks the operator to confirm the rig is safe
(guards on, hands clear) unless ``--yes`` is given; Ctrl-C at any moment sends every actuator to its safe value.
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

from taprig.cli import (UserError, bounded, finite, finite_nonnegative, finite_positive, program_name,
                        scan_rate)
from taprig.cli.dashboard import add_dashboard_options
from taprig.cli.runopts import add_rig_options

#: An angle option [deg]: a finite number within a full turn either way (the servo's own limits are checked later).
ANGLE = bounded(-360.0, 360.0, "deg")

SAFETY = ("Safety on a real rig: fan guards on, eye protection with compressed air, never defeat an interlock; "
          "local codes and your supervisor's rules come first (README, Safety).")


def add_sweep_options(p) -> None:
    """The options a sweep shares with ``taprig demo``."""
    p.add_argument("--fan", type=finite, default=0.8, help="fan setting during the sweep, in the fan's unit (default 0.8)")
    p.add_argument("--from-deg", type=ANGLE, default=-4.0, dest="start_deg", help="first angle [°] (default −4)")
    p.add_argument("--to-deg", type=ANGLE, default=None, dest="stop_deg", help="last angle [°] (default: the servo's upper limit)")
    p.add_argument("--step-deg", type=finite_positive, default=2.0, help="angle step [°] (default 2)")
    p.add_argument("--settle", type=finite_nonnegative, default=1.0, metavar="S", help="wait after each step before averaging [s]")
    p.add_argument("--average", type=finite_positive, default=1.0, metavar="S", help="averaging window of each point [s]")
    p.add_argument("--spin-up", type=finite_nonnegative, default=4.0, metavar="S", help="wait for the flow after starting the fan [s]")
    p.add_argument("--no-zero", action="store_true", help="skip the wind-off zero before the fan starts")
    p.add_argument("--rate", type=scan_rate, default=500.0, metavar="HZ", help="scan rate [Hz] (default 500)")
    p.add_argument("-o", "--output", metavar="FILE", help="session file (default: sessions/<rig>-<time>.taprig)")
    add_dashboard_options(p)


def register(sub) -> None:
    p = sub.add_parser("sweep", help="angle-of-attack sweep on a board: zero, fan, points, lift curve, stall",
                       description="Zero wind-off, start the fan, step the angle-of-attack servo, capture an "
                                   "averaged point with uncertainties at each angle, and report the lift slope, "
                                   "zero-lift angle, maximum lift and stall. The whole run is recorded.")
    add_rig_options(p)
    p.add_argument("--port", required=True, metavar="PORT_OR_URL", help="serial port or URL (sim://… simulates --rig)")
    add_sweep_options(p)
    p.add_argument("--yes", action="store_true", help="do not ask before moving the fan and the servo")
    p.set_defaults(func=run)


MAX_ANGLES = 1000


def _check_numbers(args) -> None:
    """What the argparse types cannot see alone (they check each value: finite, in range; exit 2)."""
    for flag, value in (("--from-deg", args.start_deg), ("--to-deg", args.stop_deg), ("--step-deg", args.step_deg),
                        ("--fan", args.fan), ("--settle", args.settle), ("--average", args.average),
                        ("--spin-up", args.spin_up)):  # also for callers that build the options themselves
        if value is not None and not math.isfinite(value):
            raise UserError(f"{flag} must be a finite number, got {value}", 2)
    for flag, value in (("--settle", args.settle), ("--spin-up", args.spin_up)):
        if value < 0:
            raise UserError(f"{flag} must be 0 s or more, got {value:g}", 2)
    if args.average <= 0:
        raise UserError(f"--average must be more than 0 s, got {args.average:g}", 2)
    if args.step_deg <= 0:
        raise UserError(f"--step-deg must be positive, got {args.step_deg:g}", 2)


def angles(args, rig) -> list[float]:
    """The sweep's angles [rad] within the servo's limits (at most ``MAX_ANGLES``)."""
    from taprig.protocol import ActuatorKind

    _check_numbers(args)
    servo = rig.actuator_of_kind(ActuatorKind.ANGLE)
    if servo is None:
        raise UserError(f"{args.rig}: a sweep steps the angle of attack, but this rig has no angle actuator")
    stop = math.degrees(servo.max) if args.stop_deg is None else args.stop_deg
    if (stop - args.start_deg) / args.step_deg > MAX_ANGLES:
        raise UserError(f"--from-deg {args.start_deg:g} to {stop:g} in steps of {args.step_deg:g}° is more than "
                        f"{MAX_ANGLES} angles; take a larger --step-deg", 2)
    n = int(math.floor((stop - args.start_deg) / args.step_deg + 1e-9)) + 1
    chosen = [math.radians(args.start_deg + k * args.step_deg) for k in range(max(n, 0))]
    inside = [a for a in chosen if servo.min - 1e-12 <= a <= servo.max + 1e-12]
    if len(inside) < 3:
        raise UserError(f"the sweep needs at least 3 angles within the servo's limits "
                        f"{math.degrees(servo.min):g}…{math.degrees(servo.max):g}°; check --from-deg/--to-deg", 2)
    return inside


def _fmt(c, name: str, width: int, digits: int) -> str:
    return f"{getattr(c, name):{width}.{digits}f}" if c is not None else f"{'–':>{width}}"


def point_line(point) -> str:
    """One row of the sweep table: commanded α, q, V, Re, Cl (shape fit, wall-corrected) ± u, Cl (trapezoid)."""
    m = point.mean
    if "BEYOND_RIG" in m.flag_names:  # a speed the rig cannot make: no plain numbers
        return (f"{math.degrees(point.alpha_rad):6.1f}  IMPLAUSIBLE: q {m.q_pa:.3g} Pa is beyond what the rig can "
                "make (check the calibration and the sensors)")
    best = m.corrected or m.default
    cl = f"{best.cl:6.3f} ± {best.u_cl:5.3f}" if best is not None else f"{'–':>14}"
    return (f"{math.degrees(point.alpha_rad):6.1f}  {m.q_pa:7.1f}  {m.v_ms:5.1f}  {m.re:8.2e}  {cl:>15}  "
            f"{_fmt(m.plain, 'cl', 7, 3)}  {_fmt(best, 'cd_p', 7, 4)}  {_fmt(best, 'cm_qc', 7, 4)}")


HEADER = (f"{'α [°]':>6}  {'q [Pa]':>7}  {'V m/s':>5}  {'Re':>8}  {'Cl (fit, walls)':>15}  {'Cl trap':>7}  "
          f"{'Cd_p':>7}  {'Cm¼':>7}")


def sweep(args, port: str, stem: str | None = None, linger: bool = False) -> int:
    """Open ``port``, zero, start the fan, sweep, print the table and the lift curve; record it all.

    The dashboard shows the run (unless ``--no-dashboard``); with ``linger`` it stays up after the sweep, the
    actuators at their safe values, until Ctrl-C. Every ending (the last point, a halt of the board, an error, a
    signal) takes the one shutdown path: actuators to their safe values with the replies awaited, the session
    closed, and the operator told what happened.
    """
    from taprig.cli.commands.record import open_run, print_summary
    from taprig.cli.dashboard import serving
    from taprig.cli.ending import RunEnding, emit, report_ending
    from taprig.cli.runopts import load_rig_arg
    from taprig.protocol import ActuatorKind

    rig = load_rig_arg(args.rig)
    targets = angles(args, rig)  # bad ranges are refused before anything opens or moves
    fan = rig.actuator_of_kind(ActuatorKind.FAN)
    if fan is None:
        raise UserError(f"{args.rig}: this rig has no fan actuator for the sweep to start")
    if not fan.min <= args.fan <= fan.max:
        raise UserError(f"--fan {args.fan:g} is outside the fan's range {fan.min:g} … {fan.max:g} ({fan.unit})", 2)
    command = getattr(args, "command", None) or "sweep"
    with RunEnding() as ending:
        acq, out = open_run(args, port, "sessions", stem=stem, rig=rig)
        ending.attach(acq)
        run = _SweepRun(args, acq, fan, targets, linger)
        # the operator confirmed at the terminal (or with --yes) that the rig may move
        with serving(args, acq, Path(out).parent, confirmed=True) as station:
            run.station = station
            emit(f"{acq.rig.name!r} on {acq.link.port_name} ({acq.description.firmware}, {len(acq.rig.taps)} taps), "
                 f"recording to {out}")
            run.go()
        signal_reason = None if run.lingering else ending.reason  # Ctrl-C is how a lingering dashboard ends
        reason = signal_reason or (acq.halt_reason if acq.halted.is_set() else None) or run.failure
        report = acq.shutdown(reason or ending.reason or "sweep finished")
    points = run.points
    if reason is not None:
        kept = (f"; the {len(points)} point{'s' if len(points) > 1 else ''} taken before "
                f"{'are' if len(points) > 1 else 'is'} kept in the session") if points else ""
        report_ending(command, report, reason + kept)
    else:
        report_ending(command, report)
    run_code = print_summary(acq, out)  # 1 when recording stopped or the link was lost at the end
    me = program_name()
    emit(f"next: {me} info {out}   {me} review {out}   {me} export {out} --format csv -o run.csv")
    if signal_reason is not None:
        return ending.exit_code
    return 0 if reason is None and not run_code else 1


class _SweepRun:
    """Zero, fan, the sweep with its table and lift curve; then, with ``linger``, keep the dashboard up.

    A halt, a stop request or a failure ends it with ``failure`` set (the cause in words); the points taken are
    kept in ``points``.
    """

    def __init__(self, args, acq, fan, targets, linger: bool):
        self.args, self.acq, self.fan, self.targets, self.linger = args, acq, fan, targets, linger
        self.station = None
        self.points = []
        self.failure: str | None = None
        self.lingering = False

    def on_point(self, point) -> None:
        from taprig.cli.ending import emit

        self.points.append(point)
        emit(point_line(point), flush=True)
        if self.station is not None:
            self.station.add_sweep_point(point)

    def go(self) -> None:
        from taprig.cli.ending import emit
        from taprig.cli.live import follow
        from taprig.runtime.acquisition import AcquisitionError
        from taprig.reduce.steady import SteadyCriteria
        from taprig.runtime.sweep import run_sweep, wait_device_time

        args, acq = self.args, self.acq
        try:
            wait_device_time(acq, 1.0, 20)
            if not args.no_zero:
                acq.zero(min(1.0, args.average))
                emit("wind-off zero taken")
            acq.set_actuator(self.fan.name, args.fan)
            wait_device_time(acq, args.spin_up, 30 + args.spin_up)
            acq.check_flow(min(1.0, args.average))
            emit(f"\n{HEADER}")
            run_sweep(acq, self.targets, settle_s=args.settle, average_s=args.average, on_point=self.on_point,
                      steady=SteadyCriteria())
        except AcquisitionError as exc:
            self.failure = str(exc)
            return
        if not self._print_curve():
            self.failure = "no lift curve from these points"
            return
        if self.linger and self.station is not None:
            for actuator in acq.rig.actuators:
                acq.set_actuator(actuator.name, actuator.safe)
            emit("\nsweep done, fan and angle back at their safe values; the dashboard stays up to run the rig from "
                 "the page. Ctrl-C ends.", sys.stderr)
            self.lingering = True
            follow(acq, None, quiet=True)

    def _print_curve(self) -> bool:
        """Print the lift curve of the points; False (and why, on stderr) when they do not make one."""
        from taprig.cli.ending import emit
        from taprig.runtime.sweep import sweep_lift_curve

        try:
            curve = sweep_lift_curve(self.points)
        except ValueError as exc:  # too few usable points for a lift curve
            emit(f"taprig {getattr(self.args, 'command', None) or 'sweep'}: no lift curve: {exc}", sys.stderr)
            return False
        per_deg = math.pi / 180
        emit(f"\nlift slope {curve.slope * per_deg:.4f} ± {curve.u_slope * per_deg:.4f} (scatter about the line) "
             f"per degree over "
             f"{math.degrees(curve.linear_range[0]):.1f}…{math.degrees(curve.linear_range[1]):.1f}° "
             f"(thin-airfoil theory: 0.1097), zero lift at {math.degrees(curve.alpha_zero_lift):.2f}° "
             "(angles corrected for the walls)")
        if curve.stalled:
            emit(f"stall at {math.degrees(curve.alpha_stall):.1f}°, Cl max {curve.cl_max:.3f}")
        else:
            emit(f"no stall within the sweep (Cl max {curve.cl_max:.3f} at {math.degrees(curve.alpha_cl_max):.1f}°)")
        return True


def run(args) -> int:
    print(SAFETY, file=sys.stderr)
    if not args.port.lower().startswith("sim://") and not args.yes:
        if not sys.stdin.isatty():
            raise UserError("a sweep on a real board moves the fan and the servo: confirm with --yes "
                            "(no terminal to ask at)")
        answer = input("The fan and the angle servo will move. Guards on, hands and loose items clear? [y/N] ")
        if not answer.strip().lower().startswith("y"):
            print("nothing moved", file=sys.stderr)
            return 1
    return sweep(args, args.port)
