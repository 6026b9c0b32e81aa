"""``taprig sweep``: zero, run the fan up, step the angle of attack or the fan, average a point at each, and say
what the points show (lift curve, stall, hysteresis, unsteadiness; a venturi's discharge coefficient).

The plan (:mod:`taprig.runtime.plan`) is built from the options and checked against the rig before anything opens:
angles or fan settings outside the actuators' limits are refused (exit 2), never clipped. On a real board the fan
and the servo move, so the command first asks the operator to confirm the rig is safe (guards on, hands clear)
unless ``--yes`` is given; Ctrl-C at any moment sends every actuator to its safe value.
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


def fan_settings(text: str) -> tuple[float, ...]:
    """An argparse type: fan settings as a list (``0.3,0.5,0.8``) or a range ``FROM:TO:STEP`` (``0.3:0.9:0.2``,
    TO included when a step lands on it), each a finite number; they must rise
    (:func:`taprig.runtime.plan.parse_fan_settings`)."""
    import argparse

    from taprig.runtime.plan import PlanError, parse_fan_settings

    try:
        return parse_fan_settings(text, "")
    except PlanError as exc:
        raise argparse.ArgumentTypeError(str(exc).strip()) from None


def add_sweep_options(p) -> None:
    """The options a sweep shares with ``taprig demo``."""
    p.add_argument("--fan", type=finite, default=0.8, help="fan setting during an angle sweep, in the fan's unit (default 0.8)")
    p.add_argument("--fans", type=fan_settings, default=None, metavar="LIST|FROM:TO:STEP",
                   help="sweep the fan through these settings (0.3,0.5,0.8 or 0.3:0.9:0.2): a Reynolds-number sweep "
                        "with --at-deg, a venturi's flow against Δp, a cylinder at several speeds; on a rig with an "
                        "angle servo and no --at-deg, the angle sweep is run at each setting (nested)")
    p.add_argument("--from-deg", type=ANGLE, default=-4.0, dest="start_deg", help="first angle [°] (default −4)")
    p.add_argument("--to-deg", type=ANGLE, default=None, dest="stop_deg", help="last angle [°] (default: the servo's upper limit)")
    p.add_argument("--step-deg", type=finite_positive, default=2.0, help="angle step [°] (default 2)")
    p.add_argument("--at-deg", type=ANGLE, default=None, help="hold this angle [°] and sweep the fan (--fans)")
    p.add_argument("--up-and-down", action="store_true",
                   help="come back down through the same points (hysteresis; points labelled up or down)")
    p.add_argument("--past-stall", type=nonnegative_int, default=None, metavar="N",
                   help="end the way up N points past the stall found in the points so far (then down, or back "
                        "to the safe values)")
    p.add_argument("--by-hand", action="store_true",
                   help="a rig with no angle servo: the operator sets each angle by hand and confirms at the "
                        "terminal (or types the angle set)")
    p.add_argument("--settle", type=finite_nonnegative, default=1.0, metavar="S", help="wait after each step before averaging [s]")
    p.add_argument("--average", type=finite_positive, default=1.0, metavar="S", help="averaging window of each point [s]")
    p.add_argument("--spin-up", type=finite_nonnegative, default=4.0, metavar="S", help="wait for the flow after setting the fan [s]")
    p.add_argument("--no-zero", action="store_true", help="skip the wind-off zero before the fan starts")
    p.add_argument("--rate", type=scan_rate, default=500.0, metavar="HZ", help="scan rate [Hz] (default 500)")
    p.add_argument("-o", "--output", metavar="FILE", help="session file (default: sessions/<rig>-<time>.taprig)")
    add_dashboard_options(p)


def nonnegative_int(text: str) -> int:
    """An argparse type: a whole number >= 0."""
    import argparse

    try:
        value = int(text)
    except ValueError:
        value = -1
    if value < 0:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 0, got {text!r}")
    return value


def register(sub) -> None:
    p = sub.add_parser("sweep", help="sweep the angle or the fan on a board: zero, points, lift curve, stall, C",
                       description="Zero wind-off, start the fan, step the angle of attack (servo, or by hand) or "
                                   "the fan, capture an averaged point with uncertainties at each, and report what "
                                   "the points show: lift slope, zero-lift angle, maximum lift, stall, hysteresis, "
                                   "unsteadiness; a venturi's discharge coefficient. The whole run is recorded; "
                                   "--resume goes on with an interrupted sweep. Safety: docs/sweeps.md.")
    add_rig_options(p)
    p.add_argument("--port", required=True, metavar="PORT_OR_URL", help="serial port or URL (sim://… simulates --rig)")
    add_sweep_options(p)
    p.add_argument("--resume", metavar="SESSION",
                   help="go on with the interrupted sweep of this session: the same plan and pacing, the points it "
                        "holds copied into the new session, only the missing ones taken")
    p.add_argument("--yes", action="store_true", help="do not ask before moving the fan and the servo")
    p.set_defaults(func=run)


def _check_numbers(args) -> None:
    """What the argparse types cannot see alone (they check each value: finite, in range; exit 2)."""
    for flag, value in (("--settle", args.settle), ("--average", args.average), ("--spin-up", args.spin_up)):
        if value is not None and not math.isfinite(value):  # also for callers that build the options themselves
            raise UserError(f"{flag} must be a finite number, got {value}", 2)
    for flag, value in (("--settle", args.settle), ("--spin-up", args.spin_up)):
        if value < 0:
            raise UserError(f"{flag} must be 0 s or more, got {value:g}", 2)
    if args.average <= 0:
        raise UserError(f"--average must be more than 0 s, got {args.average:g}", 2)


def build_plan(args, rig):
    """The sweep plan of the command line for ``rig`` (:func:`taprig.runtime.plan.plan_from_request`, as the
    dashboard makes its plans), checked against the rig's limits (UserError, exit 2)."""
    from taprig.runtime.plan import PlanError, SweepRequest, plan_from_request
    from taprig.runtime.sweep import check_plan

    _check_numbers(args)
    request = SweepRequest(getattr(args, "fans", None), args.fan, args.start_deg, args.stop_deg, args.step_deg,
                           getattr(args, "at_deg", None), getattr(args, "up_and_down", False),
                           getattr(args, "past_stall", None), getattr(args, "by_hand", False))
    try:
        plan = plan_from_request(rig, request)
        check_plan(rig, plan)
    except PlanError as exc:
        raise UserError(str(exc), 2) from None
    return plan


def _fmt(c, name: str, width: int, digits: int) -> str:
    return f"{getattr(c, name):{width}.{digits}f}" if c is not None else f"{'–':>{width}}"


def point_line(point, kind) -> str:
    """One row of the sweep table for a rig of ``kind`` (:class:`taprig.rig.RigKind`): α, fan, leg, q, V, Re, then
    what the kind computes (``kind.coefficients``): an airfoil's Cl (shape fit, wall-corrected) ± u, Cl
    (trapezoid), Cd_p and Cm¼; a cylinder's Cd_p ± u; a venturi's mass flow; nothing more for a bump."""
    m = point.mean
    record = point.record or {}
    alpha = f"{math.degrees(point.alpha_rad):6.1f}" if point.alpha_rad is not None else f"{'–':>6}"
    fan = record.get("fan")
    fan = f"{fan:5.3g}" if isinstance(fan, (int, float)) else f"{'–':>5}"
    leg = f"{record.get('leg') or '':>4}"
    if "BEYOND_RIG" in m.flag_names:  # a speed the rig cannot make: no plain numbers
        return (f"{alpha}  {fan}  {leg}  IMPLAUSIBLE: q {m.q_pa:.3g} Pa is beyond what the rig can make (check the "
                "calibration and the sensors)")
    best = m.corrected or m.default
    line = f"{alpha}  {fan}  {leg}  {m.q_pa:7.1f}  {m.v_ms:5.1f}  {m.re:8.2e}"
    claimed = kind.coefficients
    if "cl" in claimed:
        cl = f"{best.cl:6.3f} ± {best.u_cl:5.3f}" if best is not None else f"{'–':>14}"
        line += f"  {cl:>15}  {_fmt(m.plain, 'cl', 7, 3)}  {_fmt(best, 'cd_p', 7, 4)}  {_fmt(best, 'cm_qc', 7, 4)}"
    elif "cd_p" in claimed:
        cd = f"{best.cd_p:6.4f} ± {best.u_cd_p:6.4f}" if best is not None else f"{'–':>15}"
        line += f"  {cd:>15}"
    if m.mass_flow_kg_s is not None and math.isfinite(m.mass_flow_kg_s):
        line += f"  {m.mass_flow_kg_s * 1e3:7.3f}"
    noted = [NOTED[f] for f in m.flag_names if f in NOTED]
    return line + (f"  [{', '.join(noted)}]" if noted else "")


#: Flags of a point worth a word in its row (why a value is missing, or what it rests on).
NOTED = {"SATURATED": "saturated", "OUT_OF_RANGE": "beyond a sensor's rated range", "NO_FLOW": "no flow",
         "REFERENCE_INVALID": "no valid reference", "DEGRADED": "taps left out", "NO_INTEGRAL": "no integral",
         "COMPRESSIBLE": "compressible", "REVERSED": "flow reversed"}


def header(rig) -> str:
    """The sweep table's header for ``rig``: the columns of :func:`point_line` for its kind."""
    from taprig.rig import RigKind

    text = f"{'α [°]':>6}  {'fan':>5}  {'leg':>4}  {'q [Pa]':>7}  {'V m/s':>5}  {'Re':>8}"
    claimed = rig.kind.coefficients
    if "cl" in claimed:
        text += f"  {'Cl (fit, walls)':>15}  {'Cl trap':>7}  {'Cd_p':>7}  {'Cm¼':>7}"
    elif "cd_p" in claimed:
        text += f"  {'Cd_p':>15}"
    return text + (f"  {'ṁ [g/s]':>7}" if rig.kind is RigKind.VENTURI else "")


def sweep(args, port: str, stem: str | None = None, linger: bool = False) -> int:
    """Open ``port``, zero, start the fan, sweep, print the table and what the points show; record it all.

    The plan is built and checked before anything opens (bad values: exit 2). The dashboard shows the run (unless
    ``--no-dashboard``); with ``linger`` it stays up after the sweep, the actuators at their safe values, until
    Ctrl-C. Every ending (the last point, a halt of the board, an error, a signal) takes the one shutdown path:
    actuators to their safe values with the replies awaited, the session closed, and the operator told what
    happened.
    """
    from taprig.cli.commands.record import open_run, print_summary
    from taprig.cli.dashboard import serving
    from taprig.cli.ending import RunEnding, emit, report_ending
    from taprig.cli.runopts import load_rig_arg

    rig = load_rig_arg(args.rig)
    resumed = _resumable(args, rig)
    plan = resumed.plan if resumed is not None else build_plan(args, rig)  # refused before anything opens
    if resumed is not None:
        args.settle, args.average, args.spin_up = resumed.settle_s, resumed.average_s, resumed.spin_up_s
    command = getattr(args, "command", None) or "sweep"
    with RunEnding() as ending:
        acq, out = open_run(args, port, "sessions", stem=stem, rig=rig, paced=True)
        ending.attach(acq)
        run = _SweepRun(args, acq, plan, linger, resumed)
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
    if reason is not None and not run.complete and command == "sweep" and run.records:
        emit(f"to go on where it stopped: {me} sweep --rig {args.rig} --port {args.port} --resume {out}")
    emit(f"next: {me} info {out}   {me} review {out}   {me} export {out} --format csv -o run.csv")
    if signal_reason is not None:
        return ending.exit_code
    return 0 if reason is None and not run_code else 1


def _resumable(args, rig):
    """The interrupted sweep named by --resume (None without it); refused when it cannot go on here."""
    from taprig.runtime.plan import PlanError
    from taprig.runtime.resume import open_resumable

    path = getattr(args, "resume", None)
    if not path:
        return None
    try:
        return open_resumable(path, rig)
    except PlanError as exc:
        raise UserError(f"{exc} ({args.rig})" if "its sweep ran on rig" in str(exc) else str(exc)) from None


class TerminalOperator:
    """The operator at the terminal sets each angle by hand: Enter confirms the asked angle, a number gives the
    angle actually set [°], ``q`` stops the sweep. Waits in short steps, so a stop request (Ctrl-C, a halt)
    ends the wait."""

    def __init__(self, acq, stream=None, out=None):
        self.acq = acq
        self.stream = stream if stream is not None else sys.stdin
        self.out = out if out is not None else sys.stderr

    def set_angle(self, point):
        asked = math.degrees(point.alpha_rad)
        print(f"set the model to α = {asked:+.1f}° ({point.leg}), hands clear, then Enter "
              "(or type the angle set, in degrees; q stops the sweep): ", end="", file=self.out, flush=True)
        while True:
            line = self._line()
            if line is None or line.strip().lower() in ("q", "quit", "stop"):
                return None
            text = line.strip()
            if not text:
                return point.alpha_rad
            try:
                value = float(text)
            except ValueError:
                value = math.nan
            if math.isfinite(value) and -90 <= value <= 90:
                return math.radians(value)
            print(f"{text!r} is not an angle in degrees (−90…90); Enter for {asked:+.1f}°, q to stop: ", end="",
                  file=self.out, flush=True)

    def _line(self) -> str | None:
        """The operator's next line (None at end of input); a stop request ends the wait."""
        import select

        try:
            fd = self.stream.fileno()
        except (AttributeError, OSError, ValueError):
            fd = None
        while fd is not None:
            self.acq.check_running()
            ready, _, _ = select.select([fd], [], [], 0.2)
            if ready:
                break
        line = self.stream.readline()
        self.acq.check_running()
        return line if line else None


class _SweepRun:
    """Zero, fan, the plan's points with their table and analysis; then, with ``linger``, keep the dashboard up.

    A halt, a stop request or a failure ends it with ``failure`` set (the cause in words); the points taken are
    kept in ``points`` (and with the points of a resumed session, in ``records``).
    """

    def __init__(self, args, acq, plan, linger: bool, resumed=None):
        self.args, self.acq, self.plan, self.linger, self.resumed = args, acq, plan, linger, resumed
        self.station = None
        self.points = []
        self.records = []
        self.failure: str | None = None
        self.lingering = False
        self.complete = False

    def on_point(self, point) -> None:
        from taprig.cli.ending import emit

        self.points.append(point)
        self.records.append(point.record)
        emit(point_line(point, self.acq.rig.kind), flush=True)
        if self.station is not None:
            self.station.add_sweep_point(point)

    def _carry(self) -> None:
        """Copy the points of the resumed session into this one, each marked with the session it came from."""
        from taprig.cli.ending import emit
        from taprig.runtime.resume import carry_points

        if self.resumed is None:
            return
        self.records.extend(carry_points(self.acq, self.resumed, self.args.resume))
        n = len(self.resumed.records)
        emit(f"resuming the sweep of {self.args.resume}: {n} point{'s' if n != 1 else ''} "
             "taken there are carried into this session")

    def go(self) -> None:
        from taprig.cli.ending import emit
        from taprig.cli.live import follow
        from taprig.reduce.steady import SteadyCriteria
        from taprig.runtime.acquisition import AcquisitionError
        from taprig.runtime.plan import PlanError
        from taprig.runtime.sweep import Timeline, run_plan

        args, acq = self.args, self.acq
        try:
            clock = Timeline.begin(acq, 20)  # device time: the same scans in real and in compressed time
            clock.wait(1.0)
            if not args.no_zero:
                acq.zero(min(1.0, args.average), window=clock.window(min(1.0, args.average)))
                emit("wind-off zero taken")
            self._carry()
            emit(f"\n{header(acq.rig)}")
            operator = TerminalOperator(acq) if self.plan.by_hand else None
            run_plan(acq, self.plan, settle_s=args.settle, average_s=args.average, on_point=self.on_point,
                     steady=SteadyCriteria(), done=list(self.records), spin_up_s=args.spin_up, operator=operator,
                     start_ns=clock.cursor)
        except (AcquisitionError, PlanError) as exc:
            self.failure = str(exc)
            return
        self.complete = self.plan.next_point(self.records) is None
        if not self.complete:
            self.failure = "sweep stopped by the operator"
            return
        if not self._print_analysis():
            self.failure = "no lift curve from these points"
            return
        if self.linger and self.station is not None:
            for actuator in acq.rig.actuators:
                acq.set_actuator(actuator.name, actuator.safe)
            emit("\nsweep done, fan and angle back at their safe values; the dashboard stays up to run the rig from "
                 "the page. Ctrl-C ends.", sys.stderr)
            self.lingering = True
            follow(acq, None, quiet=True)

    def _print_analysis(self) -> bool:
        """Print what the points show (:func:`taprig.analysis.analyse_points`); False (and why, on stderr) when an
        angle sweep of a section gives no lift curve."""
        from taprig.cli.ending import emit
        from taprig.cli.sweep_summary import summary_lines

        ok, lines, problems = summary_lines(self.records, self.acq.rig, self.plan)
        for line in lines:
            emit(line)
        for line in problems:
            emit(f"taprig {getattr(self.args, 'command', None) or 'sweep'}: {line}", sys.stderr)
        return ok


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
