"""Refer every tap to the freestream: the pressure differences behind Cp as linear forms of the channel readings.

A rig mixes absolute, gauge (room-referenced) and differential channels. Each channel reads the pressure at its
port minus the pressure its sensor is referred to, so every port pressure is a linear form of the readings plus a
few unknown base pressures: the room (``ATM``), the freestream static (``STATIC``) and total (``TOTAL``) ports.
The rig's ``[reference]`` table defines the bases; substituting them gives, for each tap, ``p_tap − p∞`` and for
the flow ``q = K (p0 − p∞)`` as sums of channel readings with constant coefficients. Those coefficients are the
whole of what the reducer needs: it evaluates them per scan with array gathers, and they are the sensitivity
coefficients ∂(p − p∞)/∂p_channel of the uncertainty budget (JCGM 100:2008 §5.1.3).

When no channel measures the freestream static (a pitot differential and room-referenced taps, the common bench
arrangement), the rig must say where it comes from (``[reference] static_source``): an open-circuit suction tunnel
(p∞ = room − (1 + K) q with the inlet loss K), a tunnel calibration factor measured with the empty tunnel
(p∞ = room − f q), or an open jet (p∞ = room). There is no silent default: an unstated static is an error.
:attr:`ReferenceForms.assumptions` states the choice; the factor's uncertainty enters the budget through
:attr:`ReferenceForms.static_sensitivity` (∂Cp_i/∂f).
"""

from __future__ import annotations

from dataclasses import dataclass

from taprig.rig import Measures, Rig, RigKind

#: Symbols for the base pressures; channel readings are keyed by their device index (int).
ATM, STATIC, TOTAL, ONE = "room pressure", "freestream static", "freestream total", "constant"

Form = dict  # {device index | symbol: coefficient}


class ReduceError(ValueError):
    """A rig, block or argument the reducer cannot work with; the message names what and what was expected."""


def _add(a: Form, b: Form, scale: float = 1.0) -> Form:
    out = dict(a)
    for key, value in b.items():
        out[key] = out.get(key, 0.0) + scale * value
    return {k: v for k, v in out.items() if v != 0.0}


def _port(rig: Rig, name: str, chain: tuple[str, ...] = ()) -> Form:
    """The pressure at channel ``name``'s port, as a form of readings and base symbols."""
    if name in chain:
        raise ReduceError(f"rig {rig.id!r}: channels {' → '.join(chain + (name,))} refer to each other in a loop")
    channel = rig.channel(name)
    own = {channel.index: 1.0}
    if channel.measures is Measures.ABSOLUTE:
        return own
    if channel.measures is Measures.GAUGE:
        return _add(own, {ATM: 1.0})
    base = {"static": {STATIC: 1.0}, "total": {TOTAL: 1.0}}.get(channel.relative_to)
    return _add(own, base if base is not None else _port(rig, channel.relative_to, chain + (name,)))


@dataclass(frozen=True)
class ReferenceForms:
    """Linear forms of one rig (keys: device index, or :data:`ONE` for a constant in Pa).

    ``taps``: ``p_tap − p∞`` per tap, in the order given; ``q``: ``K (p0 − p∞)`` or None when the rig has no
    total-pressure source; ``inlet_absolute``: the absolute pressure of the freestream static port, the room
    taken as ``ambient_pressure`` when no channel measures it; ``assumptions``: sentences for people.
    """

    taps: tuple[Form, ...]
    q: Form | None
    static_absolute: Form
    assumptions: tuple[str, ...]
    static_sensitivity: tuple[float, ...] = ()  # ∂Cp_i/∂f per tap when p∞ = room − f q (else empty)
    static_factor_u: float = 0.0  # u(f) [-]


def _definitions(rig: Rig, tap_channels: dict[str, str]) -> tuple[dict[str, Form], list[str]]:
    ref = rig.reference
    defs: dict[str, Form] = {}
    notes: list[str] = []
    if ref.atmosphere is not None:
        defs[ATM] = _port(rig, ref.atmosphere)
    if ref.static is not None:
        defs[STATIC] = _port(rig, ref.static)
    elif rig.kind is RigKind.VENTURI and ref.inlet is not None:
        defs[STATIC] = _port(rig, tap_channels[ref.inlet])
        notes.append(f"venturi stations are referred to the inlet station {ref.inlet!r}")
    total = ref.total if ref.total is not None else ref.pitot
    if total is not None:
        defs[TOTAL] = _port(rig, total)
    return defs, notes


def _resolve(form: Form, defs: dict[str, Form], depth: int = 0) -> Form:
    if depth > 8:
        raise ReduceError("the rig's reference pressures are defined in terms of each other in a loop")
    out: Form = {}
    for key, value in form.items():
        if isinstance(key, str) and key in defs:
            out = _add(out, _resolve(defs[key], defs, depth + 1), value)
        else:
            out = _add(out, {key: value})
    return out


def _channels_only(form: Form, what: str, rig: Rig) -> Form:
    left = sorted(k for k in form if isinstance(k, str) and k != ONE)
    if left:
        raise ReduceError(
            f"rig {rig.id!r}: {what} cannot be referred to the freestream: it still depends on the "
            f"{', '.join(left)}, which no channel of [reference] measures"
        )
    return form


def reference_forms(rig: Rig, tap_names: tuple[str, ...], ambient_pressure: float) -> ReferenceForms:
    """Resolve the rig's references into linear forms of its channel readings (see the module docstring).

    Parameters
    ----------
    rig : Rig
        The validated rig.
    tap_names : tuple of str
        Taps in the order the reducer keeps them (the rig's tap layout).
    ambient_pressure : float
        Room pressure [Pa], used only where an absolute pressure is needed and no channel measures the room.

    Raises
    ------
    ReduceError
        If a tap or q cannot be referred to the freestream with the rig's channels.
    """
    tap_channels = {t.name: t.channel for t in rig.taps}
    defs, notes = _definitions(rig, tap_channels)
    raw = [_add(_port(rig, tap_channels[name]), {STATIC: 1.0}, -1.0) for name in tap_names]
    sensitivity: tuple[float, ...] = ()
    u_factor = 0.0
    if STATIC not in defs and any(STATIC in _resolve(form, defs) for form in raw):
        # Room-referenced taps and no static channel: the rig states how the static lies below the room.
        offset = rig.reference.static_offset()
        if offset is None:
            raise ReduceError(
                f"rig {rig.id!r}: no channel measures the freestream static pressure and the rig does not say "
                "where it comes from; set [reference] static_source (suction, factor or room, docs/rig-file.md)")
        factor, u_factor = offset
        q_raw = _resolve({TOTAL: rig.reference.pitot_coefficient, STATIC: -rig.reference.pitot_coefficient}, defs) \
            if TOTAL in defs else {STATIC: 1.0}
        if STATIC in q_raw and factor != 0.0:
            raise ReduceError(f"rig {rig.id!r}: static_source {rig.reference.static_source.value!r} needs q from a "
                              "pitot differential (reference.pitot)")
        defs[STATIC] = _add({ATM: 1.0}, {k: v for k, v in q_raw.items() if k != STATIC}, -factor) if factor else \
            {ATM: 1.0}
        sensitivity = tuple(-float(_resolve(form, {k: v for k, v in defs.items() if k != STATIC}).get(STATIC, 0.0))
                            for form in raw)
    if rig.reference.static is not None or sensitivity:
        notes.insert(0, rig.reference.static_statement())
    taps = []
    for name, form in zip(tap_names, raw):
        taps.append(_channels_only(_resolve(form, defs), f"tap {name!r}", rig))
    q = None
    if TOTAL in defs:
        k = rig.reference.pitot_coefficient
        q = _channels_only(_resolve({TOTAL: k, STATIC: -k}, defs), "the dynamic pressure", rig)
    absolute_defs = dict(defs)
    absolute_defs.setdefault(ATM, {ONE: ambient_pressure})  # the room, when no barometer channel reads it
    absolute_defs.setdefault(STATIC, {ATM: 1.0})
    static_abs = _resolve({STATIC: 1.0}, absolute_defs)
    return ReferenceForms(tuple(taps), q, _channels_only(static_abs, "the freestream static", rig), tuple(notes),
                          sensitivity, float(u_factor) if sensitivity else 0.0)
