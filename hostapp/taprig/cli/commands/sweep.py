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
    TO included when a step lands on it), each a finite number; they must rise."""
    import argparse

    from taprig.cli import _number

    try:
        if ":" in text:
            start, stop, step = (_number(part) for part in text.split(":"))
            if not all(map(math.isfinite, (start, stop, step))) or step <= 0:
                raise ValueError
            if stop < start:
                raise argparse.ArgumentTypeError(f"the range {text!r} runs down (FROM {start:g} above TO {stop:g}); "
                                                 "give it from the lower setting up (--up-and-down adds the way back)")
            n = int(math.floor((stop - start) / step + 1e-9)) + 1
            if n > MAX_ANGLES:
                raise argparse.ArgumentTypeError(f"{text!r} is more than {MAX_ANGLES} fan settings")
            values = tuple(round(start + k * step, 12) for k in range(n))
        else:
            values = tuple(_number(part) for part in text.split(","))
    except (ValueError, argparse.ArgumentTypeError) as exc:
        if isinstance(exc, argparse.ArgumentTypeError):
            raise
        raise argparse.ArgumentTypeError(f"expected fan settings as 0.3,0.5,0.8 or FROM:TO:STEP, got {text!r}") from None
    if not all(map(math.isfinite, values)):
        raise argparse.ArgumentTypeError(f"expected finite fan settings, got {text!r}")
    if any(b <= a for a, b in zip(values, values[1:])):
        raise argparse.ArgumentTypeError(f"fan settings {text!r} must rise from first to last (--up-and-down adds "
                                         "the way back)")
    return values


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


def angles(args, rig, by_hand: bool = False) -> list[float]:
    """The sweep's angles [rad], from --from-deg to --to-deg in --step-deg steps (at most ``MAX_ANGLES``).

    A range reaching outside the servo's limits is refused, not clipped; a range that runs down says so.
    """
    from taprig.protocol import ActuatorKind

    _check_numbers(args)
    servo = rig.actuator_of_kind(ActuatorKind.ANGLE)
    if servo is None and not by_hand:
        raise UserError(f"{args.rig}: an angle sweep steps the angle of attack, but this rig has no angle actuator "
                        "(--by-hand: the operator sets each angle; --fans: sweep the fan)", 2)
    if args.stop_deg is None and servo is None:
        raise UserError("--to-deg is needed for a sweep by hand (there is no servo whose limit to go to)", 2)
    stop = math.degrees(servo.max) if args.stop_deg is None else args.stop_deg
    if stop < args.start_deg:
        raise UserError(f"--from-deg {args.start_deg:g} is above --to-deg {stop:g}: the range runs down; give it "
                        "from the lower angle up (--up-and-down adds the way back)", 2)
    if (stop - args.start_deg) / args.step_deg > MAX_ANGLES:
        raise UserError(f"--from-deg {args.start_deg:g} to {stop:g} in steps of {args.step_deg:g}° is more than "
                        f"{MAX_ANGLES} angles; take a larger --step-deg", 2)
    n = int(math.floor((stop - args.start_deg) / args.step_deg + 1e-9)) + 1
    chosen = [math.radians(args.start_deg + k * args.step_deg) for k in range(max(n, 0))]
    if servo is not None:
        lo, hi = math.degrees(servo.min), math.degrees(servo.max)
        if args.start_deg < lo - 1e-9 or stop > hi + 1e-9:
            raise UserError(f"--from-deg {args.start_deg:g} … --to-deg {stop:g} reaches outside the servo's limits "
                            f"{lo:g}…{hi:g}°: angles outside them are refused, not clipped (a sweep needs at least "
                            "3 angles within the servo's limits)", 2)
    if len(chosen) < 3:
        raise UserError(f"--from-deg {args.start_deg:g} to {stop:g} in steps of {args.step_deg:g}° makes "
                        f"{len(chosen)} angle{'s' if len(chosen) != 1 else ''}; a sweep needs at least 3", 2)
    return chosen


def build_plan(args, rig):
    """The sweep plan of the command line for ``rig``, checked against the rig's limits (UserError, exit 2)."""
    from taprig.protocol import ActuatorKind
    from taprig.runtime.plan import PlanError, SweepPlan
    from taprig.runtime.sweep import check_plan

    _check_numbers(args)
    servo, fan = rig.actuator_of_kind(ActuatorKind.ANGLE), rig.actuator_of_kind(ActuatorKind.FAN)
    fans = getattr(args, "fans", None)
    at_deg, by_hand = getattr(args, "at_deg", None), getattr(args, "by_hand", False)
    past, both = getattr(args, "past_stall", None), getattr(args, "up_and_down", False)
    if fan is None:
        raise UserError(f"{args.rig}: this rig has no fan actuator for the sweep to start")
    if fans is None and not fan.min <= args.fan <= fan.max:
        raise UserError(f"--fan {args.fan:g} is outside the fan's range {fan.min:g} … {fan.max:g} ({fan.unit})", 2)
    if by_hand and servo is not None:
        raise UserError(f"--by-hand is for a rig with no angle servo; {args.rig} sets its angle with "
                        f"{servo.name!r}", 2)
    if by_hand and at_deg is not None:
        raise UserError("--by-hand and --at-deg exclude each other (a sweep by hand steps the angle)", 2)
    angle_sweep = by_hand or (servo is not None and at_deg is None)
    try:
        if angle_sweep:
            plan = SweepPlan("angle", tuple(angles(args, rig, by_hand)), fans or (args.fan,), both, past, by_hand)
        else:
            if fans is None:
                what = "this rig has no angle servo" if servo is None else "--at-deg holds the angle"
                raise UserError(f"{what}: give the fan settings to sweep with --fans (0.3,0.5,0.8 or "
                                "FROM:TO:STEP)" + (", or --by-hand to set angles by hand" if rig.section else ""), 2)
            if len(fans) < 2:
                raise UserError(f"--fans gives {len(fans)} setting; a fan sweep needs at least 2", 2)
            if past is not None:
                raise UserError("--past-stall ends an angle sweep past its stall; this is a fan sweep", 2)
            held = (math.radians(at_deg),) if at_deg is not None and servo is not None else ()
            if at_deg is not None and servo is None:
                raise UserError("--at-deg holds the servo's angle, but this rig has no angle servo", 2)
            plan = SweepPlan("fan", held, fans, both)
        check_plan(rig, plan)
    except PlanError as exc:
        raise UserError(str(exc), 2) from None
    return plan


def _fmt(c, name: str, width: int, digits: int) -> str:
    return f"{getattr(c, name):{width}.{digits}f}" if c is not None else f"{'–':>{width}}"


def point_line(point) -> str:
    """One row of the sweep table: α, fan, leg, q, V, Re, Cl (shape fit, wall-corrected) ± u, Cl (trapezoid),
    Cd_p, Cm¼, the suction side's Cp fluctuation (rms), and a venturi's mass flow."""
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
    cl = f"{best.cl:6.3f} ± {best.u_cl:5.3f}" if best is not None else f"{'–':>14}"
    line = (f"{alpha}  {fan}  {leg}  {m.q_pa:7.1f}  {m.v_ms:5.1f}  {m.re:8.2e}  {cl:>15}  "
            f"{_fmt(m.plain, 'cl', 7, 3)}  {_fmt(best, 'cd_p', 7, 4)}  {_fmt(best, 'cm_qc', 7, 4)}")
    if m.mass_flow_kg_s is not None and math.isfinite(m.mass_flow_kg_s):
        line += f"  {m.mass_flow_kg_s * 1e3:7.3f}"
    noted = [NOTED[f] for f in m.flag_names if f in NOTED]
    return line + (f"  [{', '.join(noted)}]" if noted else "")


#: Flags of a point worth a word in its row (why a value is missing, or what it rests on).
NOTED = {"SATURATED": "saturated", "OUT_OF_RANGE": "beyond a sensor's rated range", "NO_FLOW": "no flow",
         "REFERENCE_INVALID": "no valid reference", "DEGRADED": "taps left out", "NO_INTEGRAL": "no integral",
         "COMPRESSIBLE": "compressible", "REVERSED": "flow reversed"}


def header(rig) -> str:
    """The sweep table's header for ``rig``."""
    from taprig.rig import RigKind

    text = (f"{'α [°]':>6}  {'fan':>5}  {'leg':>4}  {'q [Pa]':>7}  {'V m/s':>5}  {'Re':>8}  {'Cl (fit, walls)':>15}  "
            f"{'Cl trap':>7}  {'Cd_p':>7}  {'Cm¼':>7}")
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
    from taprig.runtime.sweep import check_plan, read_resumable
    from taprig.session.store import SessionError

    path = getattr(args, "resume", None)
    if not path:
        return None
    try:
        resumed = read_resumable(path)
    except (PlanError, SessionError) as exc:
        raise UserError(str(exc)) from None
    except OSError as exc:
        raise UserError(f"{path}: cannot read the session ({exc.strerror or exc})") from None
    if resumed.rig_id != rig.id:
        raise UserError(f"{path}: its sweep ran on rig {resumed.rig_id!r}, not {rig.id!r} ({args.rig})")
    if resumed.complete:
        raise UserError(f"{path}: its sweep is complete ({len(resumed.records)} points); nothing to resume")
    try:
        check_plan(rig, resumed.plan)
    except PlanError as exc:
        raise UserError(f"{path}: {exc}") from None
    return resumed


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
        emit(point_line(point), flush=True)
        if self.station is not None:
            self.station.add_sweep_point(point)

    def _carry(self) -> None:
        """Copy the points of the resumed session into this one, each marked with the session it came from."""
        from taprig.cli.ending import emit

        if self.resumed is None:
            return
        r = self.resumed
        self.acq.event("sweep resumed", {"session_id": r.session_id, "file": str(self.args.resume),
                                         "points": len(r.records)})
        for record in r.records:
            carried = dict(record, carried_from=r.session_id)
            if self.acq.writer is not None:
                self.acq.writer.add_point(str(record.get("label") or "sweep point"), carried)
            self.records.append(carried)
        emit(f"resuming the sweep of {self.args.resume}: {len(r.records)} point{'s' if len(r.records) != 1 else ''} "
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
