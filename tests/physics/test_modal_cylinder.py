"""The cylinder's modal (Fourier-series) integrator against exact integrals by adaptive quadrature (scipy.integrate
.quad, an independent computation) and potential flow (docs/REFERENCES.md: zero drag, zero lift)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import quad

from taprig.physics.integration import ModalCircleIntegrator, trapezoid_weights
from taprig.reduce.layout import _cylinder_contour


def _separated(separation_deg: float, base: float, slope: float = 2.2):
    """A subcritical-looking Cp(φ) test function: 1 − slope·sin²φ to the separation angle, then a 15° ramp to a
    flat base pressure (values invented for the test; the kink is what makes a sparse integral hard)."""
    ps = np.radians(separation_deg)
    cs = 1.0 - slope * np.sin(ps) ** 2

    def cp(phi):
        a = np.abs((np.asarray(phi) + np.pi) % (2.0 * np.pi) - np.pi)
        return np.where(a <= ps, 1.0 - slope * np.sin(a) ** 2,
                        cs + (base - cs) * np.minimum((a - ps) / np.radians(15.0), 1.0))

    kinks = [s * np.radians(d) for s in (1, -1) for d in (separation_deg, separation_deg + 15.0)]
    exact = 0.5 * quad(lambda p: float(cp(p)) * np.cos(p), -np.pi, np.pi, points=kinks, limit=400)[0]
    return cp, exact


def _contour(step_deg: float):
    c = _cylinder_contour(np.radians(np.arange(0.0, 180.0 + 1e-9, step_deg)))
    return c.x_c, c.y_c, np.arctan2(2.0 * c.y_c, 1.0 - 2.0 * c.x_c)


@pytest.mark.parametrize("step", [10.0, 15.0, 20.0, 30.0])
def test_potential_flow_integrates_to_zero(step):
    x, y, phi = _contour(step)
    result = ModalCircleIntegrator(x, y).integrate(1.0 - 4.0 * np.sin(phi) ** 2, 0.0).coefficients
    assert abs(float(result.cd_p)) < 1e-12 and abs(float(result.cl)) < 1e-12  # potential-flow theory


@pytest.mark.parametrize("separation, base", [(75.0, -1.2), (80.0, -1.0), (70.0, -0.9), (85.0, -0.6)])
@pytest.mark.parametrize("step", [10.0, 15.0, 20.0, 30.0])
def test_separated_drag_within_its_stated_error_and_better_than_the_trapezoid(separation, base, step):
    cp_of, exact = _separated(separation, base)
    x, y, phi = _contour(step)
    cp = cp_of(phi)
    modal = ModalCircleIntegrator(x, y).integrate(cp, 0.0)
    error = abs(float(modal.coefficients.cd_p) - exact)
    # the stated error estimate holds the true error within 2.5 of it (as the plain trapezoid's claim)
    assert error <= 2.5 * float(modal.u_cd_p) + 1e-6
    plain = abs(float(trapezoid_weights(x, y).apply(cp, 0.0).cd_p) - exact)
    assert error < plain  # and the modal form beats the polygon trapezoid over the same taps,
    if step <= 15.0:  # by four times or more at the example rig's 15° spacing and finer (measured: 5–40×)
        assert error < plain / 4.0


def test_lift_and_moment_of_an_asymmetric_distribution():
    # Cp = 1 − 4 sin²φ + c sin φ (a circulation-like asymmetry): Cn = −(π/2)c, Cm¼ = (π/8)c exactly
    # (the series' integrals in this module's conventions; pressure of a circle acts through its centre)
    c = 0.3
    theta = np.radians(np.arange(0.0, 360.0, 15.0))
    phi = np.mod(theta, 2 * np.pi)
    order = np.argsort(np.mod(np.pi - phi, 2.0 * np.pi), kind="stable")
    phi = phi[order]
    x, y = 0.5 * (1.0 - np.cos(phi)), 0.5 * np.sin(phi)
    result = ModalCircleIntegrator(x, y).integrate(1.0 - 4.0 * np.sin(phi) ** 2 + c * np.sin(phi), 0.0).coefficients
    assert float(result.cn) == pytest.approx(-0.5 * np.pi * c, abs=1e-12)
    assert float(result.cm_qc) == pytest.approx(0.125 * np.pi * c, abs=1e-12)
    assert float(result.cd_p) == pytest.approx(0.0, abs=1e-12)
