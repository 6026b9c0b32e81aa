"""Liquid-column manometers and local gravity.

A U-tube, an inclined tube or a well-type (single-leg) manometer turns a column reading into a pressure
difference. These functions do that with the corrections a careful bench reading needs: the density of the air
above the liquid, the inclination, the drop of the reservoir level in a well-type gauge, and local gravity.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from taprig.physics.constants import STANDARD_GRAVITY, require_in_range, require_nonnegative, require_positive

# WGS-84 normal gravity, Somigliana closed form (NIMA TR8350.2, 3rd ed., 2000, eq. 4-1 and Table 3.4).
_G_EQUATOR = 9.7803253359  # normal gravity at the equator [m/s²]
_SOMIGLIANA_K = 0.00193185265241  # (b γ_p − a γ_e)/(a γ_e) [-]
_E2 = 0.00669437999013  # first eccentricity squared [-]
FREE_AIR_GRADIENT = 3.086e-6  # vertical gradient of gravity near the surface [1/s²] (common practice)


def column_pressure(
    height: ArrayLike,
    liquid_density: ArrayLike,
    gravity: ArrayLike = STANDARD_GRAVITY,
    air_density: ArrayLike = 0.0,
) -> np.ndarray:
    r"""Pressure difference balanced by a vertical liquid column, with the optional air-leg correction.

    .. math:: \Delta p = (\rho_l - \rho_a)\, g\, h

    Parameters
    ----------
    height : array_like
        Vertical height of the column h [m] (may be negative: the sign follows the reading).
    liquid_density : array_like
        Density of the manometer liquid ρ_l [kg/m³].
    gravity : array_like, optional
        Local gravity g [m/s²], default standard gravity 9.80665.
    air_density : array_like, optional
        Density of the air (or gas) filling the other parts of both legs ρ_a [kg/m³]; 0 ignores it. With water the
        correction is −0.12 %.

    Returns
    -------
    ndarray
        Pressure difference Δp [Pa].

    Examples
    --------
    >>> round(float(column_pressure(0.050, 998.2071)), 3)
    489.453

    References
    ----------
    Hydrostatic equation; e.g. R. P. Benedict, *Fundamentals of Temperature, Pressure and Flow Measurements*,
    3rd ed., Wiley (1984), ch. 16 (common practice).
    """
    rho_l = require_positive("liquid density", liquid_density, "kg/m^3")
    rho_a = require_nonnegative("air density", air_density, "kg/m^3")
    if np.any(rho_a >= rho_l):
        raise ValueError("air density must be below the manometer liquid's density")
    g = require_positive("gravity", gravity, "m/s^2")
    return (rho_l - rho_a) * g * np.asarray(height, dtype=float)


def inclined_height(length: ArrayLike, angle: ArrayLike) -> np.ndarray:
    r"""Vertical height of a reading taken along an inclined tube.

    .. math:: h = L \sin\theta

    Parameters
    ----------
    length : array_like
        Distance moved by the meniscus along the tube L [m].
    angle : array_like
        Inclination of the tube above the horizontal θ [rad], in (0, π/2].

    Returns
    -------
    ndarray
        Vertical height h [m].

    Examples
    --------
    >>> round(float(inclined_height(0.100, np.radians(10.0))), 6)
    0.017365

    References
    ----------
    Geometry (common practice).
    """
    theta = require_in_range("tube inclination", angle, 0.0, np.pi / 2, "rad")
    if np.any(theta == 0.0):
        raise ValueError("tube inclination must be above 0 rad: a horizontal tube has no column height")
    return np.asarray(length, dtype=float) * np.sin(theta)


def well_manometer_height(reading: ArrayLike, angle: ArrayLike, area_ratio: ArrayLike = 0.0) -> np.ndarray:
    r"""Vertical column height of a well-type (single-leg) gauge, including the drop of the reservoir level.

    .. math:: h = L\left(\sin\theta + \frac{a}{A}\right)

    Liquid that rises a distance L along the tube leaves the reservoir, lowering its level by L a/A.

    Parameters
    ----------
    reading : array_like
        Meniscus travel along the tube L [m], measured from the zero mark.
    angle : array_like
        Tube inclination above the horizontal θ [rad]; π/2 for a vertical single-leg gauge.
    area_ratio : array_like, optional
        Bore area of the tube over the free-surface area of the well a/A [-], 0 ≤ a/A < 1; 0 (the default)
        for a gauge whose scale already compensates the well.

    Returns
    -------
    ndarray
        Vertical height difference between the two free surfaces h [m].

    Examples
    --------
    >>> round(float(well_manometer_height(0.100, np.radians(10.0), 0.01)), 6)
    0.018365

    References
    ----------
    Benedict (1984), ch. 16 (common practice).
    """
    ratio = require_in_range("tube-to-well area ratio", area_ratio, 0.0, 1.0, "")
    if np.any(ratio >= 1.0):
        raise ValueError("tube-to-well area ratio must be below 1: the well is wider than the tube")
    theta = require_in_range("tube inclination", angle, 0.0, np.pi / 2, "rad")
    return np.asarray(reading, dtype=float) * (np.sin(theta) + ratio)


def normal_gravity(latitude: ArrayLike, height: ArrayLike = 0.0) -> np.ndarray:
    r"""Local gravity from latitude and height: WGS-84 (Somigliana) normal gravity with a free-air correction.

    .. math::
        g = g_e \frac{1 + k \sin^2\varphi}{\sqrt{1 - e^2 \sin^2\varphi}} - 3.086\times10^{-6}\,\mathrm{s^{-2}}\; H

    Parameters
    ----------
    latitude : array_like
        Geodetic latitude φ [rad], −π/2 to π/2.
    height : array_like, optional
        Height above the ellipsoid (≈ above sea level) H [m], default 0.

    Returns
    -------
    ndarray
        Gravity g [m/s²].

    Notes
    -----
    Normal gravity ignores local anomalies (typically < 5e-4 m/s², 50 ppm); the linear free-air term is good to
    ~1e-6 m/s² below 10 km. For a manometer 50 ppm is far below the reading resolution; the choice between this and
    standard gravity is ~0.3 %.

    Examples
    --------
    >>> round(float(normal_gravity(np.radians(45.0))), 5)
    9.8062

    References
    ----------
    National Imagery and Mapping Agency, *Department of Defense World Geodetic System 1984*, TR8350.2, 3rd ed.
    (2000), eq. (4-1); free-air gradient from common practice.
    """
    phi = require_in_range("latitude", latitude, -np.pi / 2, np.pi / 2, "rad")
    s2 = np.sin(phi) ** 2
    return _G_EQUATOR * (1.0 + _SOMIGLIANA_K * s2) / np.sqrt(1.0 - _E2 * s2) - FREE_AIR_GRADIENT * np.asarray(
        height, dtype=float
    )
