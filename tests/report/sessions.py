"""Sessions on the simulated rig for the handout's tests (compressed time, invented bench scenarios).

An airfoil rig is swept with ``taprig sweep``; a rig with no angle actuator (venturi, cylinder, bump) gets a
point captured at each of a few fan settings through the runtime (as the dashboard's capture button does).
"""

from __future__ import annotations

from pathlib import Path

from taprig.cli import main
from taprig.link import Link
from taprig.protocol import ActuatorKind
from taprig.reduce import Reducer
from taprig.rig import load_rig
from taprig.runtime.acquisition import Acquisition
from taprig.runtime.recording import new_session
from taprig.runtime.sweep import wait_device_time

ROOT = Path(__file__).resolve().parents[2]
RIGS = ROOT / "rigs"
FAST = "sim://?seed={seed}&speed=max&watchdog_ms=0"


def sweep_session(out: Path, rig: str, start: float = -4.0, stop: float = 14.0, step: float = 2.0, seed: int = 2,
                  fan: float | None = None, extra: tuple[str, ...] = ()) -> Path:
    """``taprig sweep`` of ``rig`` (a file in rigs/) on the simulated board into ``out``."""
    argv = ["sweep", "--rig", str(RIGS / rig), "--port", FAST.format(seed=seed), "--from-deg", str(start), "--to-deg",
            str(stop), "--step-deg", str(step), "--settle", "0.3", "--average", "0.5", "--no-dashboard",
            "-o", str(out), *extra]
    if fan is not None:
        argv += ["--fan", str(fan)]
    code = main(argv)
    assert code == 0, f"sweep of {rig} failed with exit {code}"
    return out


def sweep_with(out: Path, rig: str, *options: str, seed: int = 2) -> Path:
    """``taprig sweep`` of ``rig`` with the plan ``options`` (``--up-and-down``, ``--at-deg 4 --fans 0.4:1:0.2`` …)."""
    code = main(["sweep", "--rig", str(RIGS / rig), "--port", FAST.format(seed=seed), "--settle", "0.3",
                 "--average", "0.5", "--no-dashboard", "-o", str(out), *options])
    assert code == 0, f"sweep of {rig} {' '.join(options)} failed with exit {code}"
    return out


def fan_steps_session(out: Path, rig_path: Path, settings: tuple[float, ...], seed: int = 3, query: str = "",
                      zero: bool = True, calibration=None) -> Path:
    """A point captured at each fan setting of ``settings`` (after a wind-off zero, unless ``zero`` is False) into
    ``out``, reduced with ``calibration`` (recorded with the session) when given."""
    rig = load_rig(rig_path)
    url = f"sim://{rig_path}?seed={seed}&speed=max&watchdog_ms=0" + (f"&{query}" if query else "")
    reducer = Reducer(rig, calibration)
    acq = Acquisition(Link(url, heartbeat=False), rig, reducer,
                      new_session(out, rig, url, reducer.ambient, calibration))
    fan = rig.actuator_of_kind(ActuatorKind.FAN)
    acq.open(500)
    try:
        wait_device_time(acq, 1.0, 30)
        if zero:
            acq.zero(1.0)
        for value in settings:
            acq.set_actuator(fan.name, value)
            wait_device_time(acq, 4.0, 60)
            if value > 0:
                acq.check_flow(1.0)
            acq.capture_point(f"{fan.name} {value:g}", 1.0)
    finally:
        acq.shutdown("points taken")
    return out
