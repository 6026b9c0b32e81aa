"""taprig.sim — a physics-based simulated rig that speaks the wire protocol of ``firmware_protocol/PROTOCOL.md``.

- :mod:`~taprig.sim.flows`, :mod:`~taprig.sim.airfoil`, :mod:`~taprig.sim.plant`: flow models (pure): the tunnel
  stream, venturi, cylinder, bump, and a section's panel Cp with a stall model; what every channel sees;
- :mod:`~taprig.sim.sensors`: sensor models (pure): tubing lag, noise, offset drift, quantisation, saturation;
- :mod:`~taprig.sim.faults`: link faults injected by a seeded plan, with an exact tally;
- :mod:`~taprig.sim.board`: the board's self-description, sensor bank, actuators and stream plans (pure);
- :mod:`~taprig.sim.device`: :class:`SimulatedDevice`, the stateful board with a simulated clock and no I/O;
- :mod:`~taprig.sim.options`: :class:`SimOptions` and the ``sim://`` URL form.

The pyserial handler (``taprig.link.handlers.protocol_sim``) and ``taprig sim`` (a pseudo-terminal) drive the
device from outside; see ``docs/simulator.md``.
"""

from taprig.sim.options import (
    RIG_ENVIRONMENT_VARIABLE,
    OptionError,
    SimOptions,
    SimTarget,
    parse_sim_url,
    sim_url,
    to_query,
    with_rig,
)

_HEAVY = {"SimulatedDevice": "taprig.sim.device", "FaultTally": "taprig.sim.faults"}


def __getattr__(name: str):
    # The device pulls in the flow models (scipy, the panel method); commands that only parse a URL or its
    # options should not pay for that at start-up.
    if name in _HEAVY:
        import importlib

        return getattr(importlib.import_module(_HEAVY[name]), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


__all__ = [
    "RIG_ENVIRONMENT_VARIABLE",
    "FaultTally",
    "OptionError",
    "SimOptions",
    "SimTarget",
    "SimulatedDevice",
    "parse_sim_url",
    "sim_url",
    "to_query",
    "with_rig",
]
