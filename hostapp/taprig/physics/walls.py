"""Classical 2-D wind-tunnel wall corrections for a section spanning a closed test section.

The walls squeeze the flow round the model (solid blockage) and round its wake (wake blockage), and straighten
the streamlines (streamline curvature, which adds camber). The corrections here are the first-order ones of
Allen & Vincenti as collected by Barlow, Rae & Pope; they are good while the blockage factors stay below a few
per cent, which is the case for chord/height up to about 0.4.

The formulas below were recalled from memory of Barlow, Rae & Pope (3rd ed., ch. 9) and are implemented exactly
as recorded in docs/REFERENCES.md; check them against the book before relying on them as an oracle.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import Enum

import numpy as np
from numpy.typing import ArrayLike

from taprig.physics.constants import require_positive


class SpanOrientation(Enum):
    """Which tunnel dimension the model spans; it sets the body-shape factor K1 of solid blockage.

    Values from Barlow, Rae & Pope, 3rd ed., §9.2 (from memory).
    """

    SPANS_WIDTH = 0.74  # model spans the tunnel breadth (horizontal model)
    SPANS_HEIGHT = 0.52  # model spans the tunnel height (vertical model)


@dataclass(frozen=True, slots=True)
class WallCorrection:
    """Every factor of a 2-D wall correction and the corrected coefficients (arrays broadcast over the inputs).

    Attributes: ``sigma`` streamline-curvature parameter σ, ``solid_blockage`` ε_sb, ``wake_blockage`` ε_wb,
    ``total_blockage`` ε [-]; ``q_ratio`` = q/q_u [-]; corrected ``cl``, ``cd``, ``cm_quarter_chord`` [-] and
    ``alpha`` [rad].
    """

    sigma: np.ndarray
    solid_blockage: np.ndarray
    wake_blockage: np.ndarray
    total_blockage: np.ndarray
    q_ratio: np.ndarray
    cl: np.ndarray
    alpha: np.ndarray
    cm_quarter_chord: np.ndarray
    cd: np.ndarray


def streamline_curvature_parameter(chord: ArrayLike, tunnel_height: ArrayLike) -> np.ndarray:
    r"""Streamline-curvature parameter of a 2-D model between two walls.

    .. math:: \sigma = \frac{\pi^2}{48}\left(\frac{c}{h}\right)^2

    Parameters
    ----------
    chord : array_like
        Model chord c [m].
    tunnel_height : array_like
        Tunnel dimension normal to the chord and the span h [m] (the wall-to-wall distance the lift acts across).

    Returns
    -------
    ndarray
        σ [-].

    Examples
    --------
    >>> round(float(streamline_curvature_parameter(0.10, 0.30)), 6)
    0.022846

    References
    ----------
    Barlow, Rae & Pope, *Low-Speed Wind Tunnel Testing*, 3rd ed. (1999), eq. (9.3) (from memory);
    H. J. Allen, W. G. Vincenti, NACA TR 782 (1944).
    """
    c = require_positive("chord", chord, "m")
    h = require_positive("tunnel height", tunnel_height, "m")
    return np.pi**2 / 48.0 * (c / h) ** 2


def solid_blockage(
    model_volume: ArrayLike,
    tunnel_area: ArrayLike,
    orientation: SpanOrientation = SpanOrientation.SPANS_WIDTH,
) -> np.ndarray:
    r"""Solid-blockage velocity increment of a 2-D model.

    .. math:: \varepsilon_{sb} = \frac{K_1 V_{model}}{C^{3/2}}

    Parameters
    ----------
    model_volume : array_like
        Model volume inside the test section V_model [m³] (section area × span).
    tunnel_area : array_like
        Test-section cross-section area C [m²] (height × width).
    orientation : SpanOrientation, optional
        Which dimension the model spans (K1 = 0.74 breadth, 0.52 height).

    Returns
    -------
    ndarray
        ε_sb [-].

    Examples
    --------
    >>> round(float(solid_blockage(8.221e-4 * 0.30, 0.09)), 6)
    0.006759

    References
    ----------
    Barlow, Rae & Pope, 3rd ed., eq. (9.17) (from memory).
    """
    volume = require_positive("model volume", model_volume, "m^3")
    area = require_positive("tunnel cross-section area", tunnel_area, "m^2")
    return orientation.value * volume / area**1.5


def wake_blockage(chord: ArrayLike, tunnel_height: ArrayLike, cd_uncorrected: ArrayLike) -> np.ndarray:
    r"""Wake-blockage velocity increment of a 2-D model (Maskell-type, from the measured drag).

    .. math:: \varepsilon_{wb} = \frac{c}{2h}\, C_{d,u}

    Parameters
    ----------
    chord : array_like
        Model chord c [m].
    tunnel_height : array_like
        Tunnel height h [m].
    cd_uncorrected : array_like
        Uncorrected drag coefficient C_d,u [-].

    Returns
    -------
    ndarray
        ε_wb [-].

    Examples
    --------
    >>> round(float(wake_blockage(0.10, 0.30, 0.02)), 6)
    0.003333

    References
    ----------
    Barlow, Rae & Pope, 3rd ed., eq. (9.22) (from memory).
    """
    c = require_positive("chord", chord, "m")
    h = require_positive("tunnel height", tunnel_height, "m")
    return c / (2.0 * h) * np.asarray(cd_uncorrected, dtype=float)


def correct_2d(
    cl_u: ArrayLike,
    alpha_u: ArrayLike,
    cm_u: ArrayLike,
    cd_u: ArrayLike,
    chord: float,
    tunnel_height: float,
    tunnel_width: float,
    section_area: float,
    orientation: SpanOrientation = SpanOrientation.SPANS_WIDTH,
) -> WallCorrection:
    r"""Wall-corrected section coefficients of a 2-D model spanning a closed test section.

    .. math::
        \varepsilon = \varepsilon_{sb} + \varepsilon_{wb}, \quad q = q_u (1 + 2\varepsilon), \quad
        C_l = C_{l,u}(1 - \sigma - 2\varepsilon), \quad
        \alpha = \alpha_u + \frac{\sigma}{2\pi}\left(C_{l,u} + 4 C_{m,u}\right),

        C_{m,c/4} = C_{m,u}(1 - 2\varepsilon) + \frac{\sigma C_l}{4}, \quad
        C_d = C_{d,u}(1 - 3\varepsilon_{sb} - 2\varepsilon_{wb})

    Parameters
    ----------
    cl_u, cm_u, cd_u : array_like
        Uncorrected lift, quarter-chord moment and drag coefficients [-] (referred to the uncorrected q).
    alpha_u : array_like
        Uncorrected (geometric) angle of attack α_u [rad].
    chord : float
        Model chord c [m].
    tunnel_height : float
        Test-section dimension across which the lift acts h [m].
    tunnel_width : float
        Test-section dimension along the span b [m] (= model span).
    section_area : float
        Cross-section area of the model profile [m²] (about 0.685 c·t for a NACA 4-digit thickness form, from
        integrating its thickness formula; compute it from the contour for anything else).
    orientation : SpanOrientation, optional
        Which dimension the model spans.

    Returns
    -------
    WallCorrection
        All factors and the corrected coefficients.

    Notes
    -----
    The book writes the angle correction with 57.3σ/2π in degrees; in radians the factor is σ/2π. Cm uses the
    corrected Cl, as in the worked example of docs/REFERENCES.md. First-order theory: keep c/h below ~0.4.

    Examples
    --------
    >>> r = correct_2d(0.8, np.radians(6.0), -0.05, 0.02, 0.10, 0.30, 0.30, 8.221e-4)
    >>> round(float(r.cl), 5), round(float(np.degrees(r.alpha)), 4), round(float(r.q_ratio), 5)
    (0.76557, 6.125, 1.02019)

    References
    ----------
    Barlow, Rae & Pope, *Low-Speed Wind Tunnel Testing*, 3rd ed. (1999), §9.3–9.5 (from memory);
    Allen & Vincenti, NACA TR 782 (1944).
    """
    width = require_positive("tunnel width", tunnel_width, "m")
    area = require_positive("section area", section_area, "m^2")
    sigma = streamline_curvature_parameter(chord, tunnel_height)
    eps_sb = solid_blockage(area * width, tunnel_height * width, orientation)
    # one common shape for every output, so a polar of angles with a scalar Cd_u still gives arrays per point
    cl_u, alpha_u, cm_u, cd_u = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in (cl_u, alpha_u, cm_u, cd_u)))
    eps_wb = wake_blockage(chord, tunnel_height, cd_u)
    eps = eps_sb + eps_wb
    cl = cl_u * (1.0 - sigma - 2.0 * eps)
    return WallCorrection(
        sigma=sigma,
        solid_blockage=eps_sb,
        wake_blockage=eps_wb,
        total_blockage=eps,
        q_ratio=1.0 + 2.0 * eps,
        cl=cl,
        alpha=alpha_u + sigma / (2.0 * np.pi) * (cl_u + 4.0 * cm_u),
        cm_quarter_chord=cm_u * (1.0 - 2.0 * eps) + sigma * cl / 4.0,
        cd=cd_u * (1.0 - 3.0 * eps_sb - 2.0 * eps_wb),
    )
