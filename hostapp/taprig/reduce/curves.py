"""Curves drawn beside the measurement: the shape fit through the taps and the theory each rig kind is read
against (ideal venturi, potential-flow cylinder, thin-airfoil lift slope). Pure: what a viewer draws, computed
here so the dashboard and the report only show it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from taprig.physics.flow import cylinder_cp
from taprig.physics.integration import ShapeFitIntegrator
from taprig.reduce.mean import ReducedMean
from taprig.rig import RigKind

#: Thin-airfoil theory's lift slope dCl/dα = 2π [1/rad] (REFERENCES.md, "thin-airfoil lift slope").
THIN_AIRFOIL_SLOPE = 2.0 * math.pi


@dataclass(frozen=True)
class Curve:
    """A curve to draw: ``x`` and ``y`` of equal length, with a label that says what it is and where from.

    ``upper`` marks the upper-surface part of a section curve (None for curves that are not round a section).
    """

    label: str
    x: np.ndarray
    y: np.ndarray
    upper: np.ndarray | None = None


def shape_fit_curve(reducer, mean: ReducedMean) -> Curve | None:
    """The shape-aware integrator's fitted Cp round the section, through the usable taps of ``mean``.

    None when the rig has no shape fit (not an airfoil, no section, too few usable taps) or the mean has no
    coefficients. The curve is the fit that :class:`taprig.physics.integration.ShapeFitIntegrator` integrates.
    """
    contour = reducer.layout.contour
    if contour is None or mean.shape is None:
        return None
    cp = mean.cp[contour.columns]
    keep = np.isfinite(cp) & ~np.isin(np.asarray(reducer.tap_names)[contour.columns], mean.excluded_taps)
    fit = reducer.shape_integrator(tuple(int(i) for i in np.flatnonzero(keep)))
    if fit is None:
        return None
    if not isinstance(fit, ShapeFitIntegrator):  # a cylinder's Fourier fit is not drawn along x/c
        return None
    x, upper, fitted = fit.fitted_cp(cp[keep])
    return Curve("shape fit through the taps", x, fitted, upper)


def reference_curves(reducer, points: int = 121) -> list[Curve]:
    """Theory to draw beside the measured Cp of this rig kind (labelled as theory).

    Venturi: the ideal station Cp from continuity and Bernoulli, 1 − (A_ref/A)², at the taps' stations [x in m].
    Cylinder: potential flow Cp = 1 − 4 sin²θ [θ in degrees]. Airfoil and others: none (the lift curve's theory
    is :data:`THIN_AIRFOIL_SLOPE`).
    """
    rig = reducer.rig
    if rig.kind is RigKind.VENTURI and reducer.layout.venturi is not None:
        stations = np.asarray(rig.tap_layout().x, dtype=float)
        return [Curve("ideal: continuity + Bernoulli", stations, np.asarray(reducer.layout.venturi.cp_ideal))]
    if rig.kind is RigKind.CYLINDER:
        theta = np.linspace(0.0, math.pi, points)
        return [Curve("potential flow: 1 − 4 sin²θ", np.degrees(theta), cylinder_cp(theta))]
    return []
