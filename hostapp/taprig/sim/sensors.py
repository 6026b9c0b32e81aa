"""Sensor models of the simulated rig: what stands between the true pressure at a tap and the counts on the wire.

Pure functions of arrays (the simulated clock and the random draws are passed in). The chain for one channel is

    true pressure ─► pneumatic tubing (first-order lag) ─► sensing element (+ offset drift with temperature,
    + white noise) ─► inverse transfer function (SI → counts) ─► quantisation to whole counts
    ─► saturation at the converter's rails and the channel's encoding limits

The transfer functions are the rig model's own (every sensor of ``taprig.rig`` is affine, and its ``slope`` and
``intercept`` are gathered into arrays), so the simulator and the reducer can never disagree about a sensor: the
simulator only adds the defects a real part has.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.signal import lfilter

from taprig.protocol import Encoding

#: Integer limits of each wire encoding [counts]; f32 channels are not quantised.
ENCODING_LIMITS: dict[Encoding, tuple[float, float]] = {
    Encoding.I16: (-(2.0**15), 2.0**15 - 1),
    Encoding.U16: (0.0, 2.0**16 - 1),
    Encoding.I32: (-(2.0**31), 2.0**31 - 1),
    Encoding.U32: (0.0, 2.0**32 - 1),
}

#: White noise of a low-cost pressure sensor, as a fraction of its full scale (rms) (from memory: data sheets of
#: inexpensive piezoresistive parts quote an output noise of the order of 0.05–0.2 % FS).
DEFAULT_NOISE_FRACTION_FS = 1e-3
#: Offset drift with temperature as a fraction of full scale per kelvin (from memory: a total error band of
#: about ±1.5 % FS over 0–50 °C for such parts, i.e. a few 0.01 % FS/K).
DEFAULT_TEMPCO_FRACTION_FS = 2e-4
#: Internal volume of a small sensor's port and cavity [m³] (from memory, order of 0.1 cm³).
DEFAULT_SENSOR_VOLUME = 1e-7


def tubing_time_constant(
    length: float, bore: float, viscosity: float, pressure: float, sensor_volume: float = DEFAULT_SENSOR_VOLUME
) -> float:
    r"""Time constant of a pneumatic line feeding a closed sensor volume, lumped resistance–capacitance model.

    .. math::
        R = \frac{128\,\mu L}{\pi d^4}, \qquad C = \frac{V_s + \pi d^2 L / 4}{p}, \qquad \tau = R\,C

    ``R`` is the Hagen–Poiseuille resistance of the tube to laminar flow, ``C`` the isothermal compliance of the
    gas in the sensor cavity and the tube. Valid while the line is short against the acoustic wavelength of the
    signal (inertance and wave effects neglected).

    Parameters
    ----------
    length : float
        Tube length L [m].
    bore : float
        Tube inner diameter d [m].
    viscosity : float
        Dynamic viscosity μ of the gas in the tube [Pa·s].
    pressure : float
        Absolute pressure of the gas p [Pa].
    sensor_volume : float
        Internal volume of the sensor's port and cavity V_s [m³].

    Returns
    -------
    float
        Time constant τ [s]; 0 for a tube of zero length.

    References
    ----------
    Hagen–Poiseuille law for the resistance; the RC lumping of a tube and a transducer volume is common practice
    in pressure-measurement texts (formula from memory).

    Examples
    --------
    >>> round(tubing_time_constant(0.5, 1.0e-3, 1.81e-5, 101325.0) * 1e3, 3)
    1.793
    """
    if length <= 0.0:
        return 0.0
    resistance = 128.0 * viscosity * length / (np.pi * bore**4)
    compliance = (sensor_volume + np.pi * bore**2 * length / 4.0) / pressure
    return float(resistance * compliance)


def lag_coefficients(dt: float, tau: np.ndarray) -> np.ndarray:
    r"""Pole of the exact discretisation of a first-order lag sampled every ``dt``.

    .. math:: y_n = a\,y_{n-1} + (1 - a)\,x_n, \qquad a = e^{-\Delta t / \tau}

    Parameters
    ----------
    dt : float
        Sample interval Δt [s].
    tau : ndarray
        Time constant of each channel τ [s]; 0 means no lag (a = 0).

    Returns
    -------
    ndarray
        ``a`` per channel [-].

    References
    ----------
    Zero-order-hold discretisation of dy/dt = (x − y)/τ (common practice).
    """
    tau = np.asarray(tau, dtype=float)
    with np.errstate(divide="ignore"):
        return np.where(tau > 0.0, np.exp(-dt / np.where(tau > 0.0, tau, 1.0)), 0.0)


def first_order_lag(x: np.ndarray, pole: np.ndarray, state: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    r"""Run a block of scans through one first-order lag per channel.

    .. math:: y_n = a\,y_{n-1} + (1 - a)\,x_n

    Channels sharing a pole (the usual case: one kind of tubing) are filtered together by one
    :func:`scipy.signal.lfilter` call along the scans axis, so the cost is a C loop per distinct pole.

    Parameters
    ----------
    x : ndarray
        Input, scans × channels [any unit].
    pole : ndarray
        ``a`` per channel [-], from :func:`lag_coefficients`.
    state : ndarray
        Output of the previous scan per channel [unit of x].

    Returns
    -------
    (ndarray, ndarray)
        The lagged block and the new state (its last row).
    """
    y = np.array(x, dtype=float, copy=True)
    if y.shape[0] == 0:
        return y, state
    for a in np.unique(pole):
        if a == 0.0:
            continue
        cols = pole == a
        y[:, cols], _ = lfilter([1.0 - a], [1.0, -a], x[:, cols], axis=0, zi=(a * state[cols])[None, :])
    return y, y[-1].copy()


def board_temperature(t_s: np.ndarray, ambient: float, rise: float, warm_up: float) -> np.ndarray:
    r"""Temperature of the board as it warms after power-up.

    .. math:: T(t) = T_a + \Delta T\,(1 - e^{-t/\tau_w})

    Parameters
    ----------
    t_s : ndarray
        Time since power-up t [s].
    ambient : float
        Ambient temperature T_a [K].
    rise : float
        Final rise of the board above ambient ΔT [K].
    warm_up : float
        Warm-up time constant τ_w [s].

    Returns
    -------
    ndarray
        Board temperature [K].

    References
    ----------
    Newton's law of cooling for a lumped body heated at constant power (common practice).
    """
    return ambient + rise * (1.0 - np.exp(-np.asarray(t_s, dtype=float) / warm_up))


@dataclass(frozen=True)
class SensorBank:
    """The transfer functions and defects of every channel of a rig, as arrays over channels.

    ``slope`` / ``intercept`` are the rig sensors' affine transfer functions (SI value = slope · counts +
    intercept), ``noise`` the rms white noise [SI unit of the channel], ``tempco`` the offset drift per kelvin of
    board temperature [unit/K], ``lo_counts`` / ``hi_counts`` the tighter of each converter's rails and its wire
    encoding's limits [counts] and ``integer`` whether a channel's counts are whole numbers (False for f32).
    """

    slope: np.ndarray
    intercept: np.ndarray
    noise: np.ndarray
    tempco: np.ndarray
    lo_counts: np.ndarray
    hi_counts: np.ndarray
    integer: np.ndarray


def sensor_reading(lagged: np.ndarray, bank: SensorBank, white: np.ndarray, temperature_rise: np.ndarray) -> np.ndarray:
    r"""What the sensing element reports in SI, before conversion: lagged input + offset drift + noise.

    .. math:: s = x_{lag} + k_T\,(T_b - T_{ref}) + \sigma\,\xi, \qquad \xi \sim N(0, 1)

    Parameters
    ----------
    lagged : ndarray
        Value at the sensor port after the tubing, scans × channels [SI].
    bank : SensorBank
        The channels' defects.
    white : ndarray
        Standard normal draws, scans × channels [-] (zeros for a noiseless run).
    temperature_rise : ndarray
        Board temperature minus the temperature at which the sensors were zeroed, per scan [K].

    Returns
    -------
    ndarray
        Sensor reading in SI, scans × channels.

    References
    ----------
    Additive offset-drift and white-noise model of a transducer (common practice).
    """
    drift = bank.tempco[None, :] * np.asarray(temperature_rise, dtype=float)[:, None]
    return lagged + drift + bank.noise[None, :] * white


def digitise(value: np.ndarray, bank: SensorBank) -> np.ndarray:
    r"""Convert SI readings to wire counts: inverse transfer function, rounding, saturation at the rails.

    .. math:: n = \operatorname{clip}\left(\operatorname{round}\left(\frac{s - b}{m}\right),\;
              n_{lo},\; n_{hi}\right)

    with m, b the slope and intercept of the sensor's transfer function s = m n + b. A reading beyond the rails
    sticks there, as the output of a real converter does; f32 channels are not rounded.

    Parameters
    ----------
    value : ndarray
        Sensor reading, scans × channels [SI].
    bank : SensorBank
        The channels' transfer functions and limits.

    Returns
    -------
    ndarray
        Counts [counts], float64 (exact integers where the encoding is integer).

    References
    ----------
    Round-to-nearest quantisation of an ADC with output clipping (common practice).
    """
    counts = (value - bank.intercept[None, :]) / bank.slope[None, :]
    rounded = np.where(bank.integer[None, :], np.rint(counts), counts)
    return np.clip(rounded, bank.lo_counts[None, :], bank.hi_counts[None, :])


def encoding_limits(encodings: list[Encoding]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return (low, high, is_integer) arrays [counts] for a list of channel encodings (f32 is unbounded)."""
    unbounded = (-np.inf, np.inf)
    lo = np.array([ENCODING_LIMITS.get(e, unbounded)[0] for e in encodings], dtype=float)
    hi = np.array([ENCODING_LIMITS.get(e, unbounded)[1] for e in encodings], dtype=float)
    integer = np.array([e in ENCODING_LIMITS for e in encodings], dtype=bool)
    return lo, hi, integer
