"""The exact Joukowski solution (the oracle of the panel and integration tests) checked against the circle flow."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from taprig.physics.integration import section_coefficients
from taprig.physics.joukowski import JoukowskiSection

# docs/REFERENCES.md, "Airfoils and the lift integral": (μ, α [deg], R, β [deg], ℓ, exact Cl).
CASES = [
    (-0.1 + 0.0j, 5.0, 1.1, 0.0, 4.0333333, 0.5973989261),
    (-0.1 + 0.1j, 5.0, 1.1045361, 5.194429, 4.0336042, 1.2180717599),
    (-0.1 + 0.1j, 0.0, 1.1045361, 5.194429, 4.0336042, 0.6230839722),
]


@pytest.mark.parametrize(("mu", "alpha", "radius", "beta", "chord", "cl"), CASES)
def test_reference_table(mu, alpha, radius, beta, chord, cl):
    foil = JoukowskiSection(mu)
    assert foil.radius == pytest.approx(radius, abs=5e-8)
    assert np.degrees(foil.beta) == pytest.approx(beta, abs=5e-7)
    assert foil.chord == pytest.approx(chord, abs=5e-8)
    # printed to 10 decimals; the table's R and ℓ are rounded to 8 digits, hence 1e-9
    assert foil.cl(np.radians(alpha)) == pytest.approx(cl, abs=1e-9)


def _circle_flow_speed(foil: JoukowskiSection, alpha: float, theta: np.ndarray) -> np.ndarray:
    """|dw/dz| from the complex potential of the circle flow with circulation, by the chain rule (textbook form).

    w(ζ) = V[(ζ − μ)e^{−iα} + R² e^{iα}/(ζ − μ)] + iΓ/(2π) ln(ζ − μ), Γ = 4πVR sin(α + β) (Kutta), and
    dw/dz = (dw/dζ)/(dz/dζ) with dz/dζ = 1 − c²/ζ² (Milne-Thomson, from memory). Independent of the closed form
    q = 2V|sin(θ − α) + sin(α + β)|/|1 − c²/ζ²| used in the module.
    """
    zeta = foil.centre + foil.radius * np.exp(1j * theta)
    gamma = 4 * np.pi * foil.radius * np.sin(alpha + foil.beta)
    dw = np.exp(-1j * alpha) - foil.radius**2 * np.exp(1j * alpha) / (zeta - foil.centre) ** 2 \
        + 1j * gamma / (2 * np.pi * (zeta - foil.centre))
    return np.abs(dw / (1 - 1 / zeta**2))


@pytest.mark.parametrize("mu", [-0.1 + 0.0j, -0.1 + 0.1j, -0.05 + 0.03j])
@pytest.mark.parametrize("alpha_deg", [-4.0, 0.0, 5.0, 10.0])
def test_surface_speed_matches_complex_potential(mu, alpha_deg):
    foil = JoukowskiSection(mu)
    alpha = np.radians(alpha_deg)
    theta = foil.theta_te + np.linspace(0.05, 2 * np.pi - 0.05, 97)
    np.testing.assert_allclose(foil.speed(alpha, theta), _circle_flow_speed(foil, alpha, theta), rtol=1e-12)


def test_trailing_edge_limit_is_continuous():
    # docs/REFERENCES.md: trailing-edge limit of q is V c cos(α + β)/R; approach it from both sides.
    foil = JoukowskiSection(-0.1 + 0.1j)
    alpha = np.radians(5.0)
    limit = np.cos(alpha + foil.beta) / foil.radius
    near = foil.speed(alpha, foil.theta_te + np.array([-1e-5, 1e-5]))
    assert foil.speed(alpha, foil.theta_te) == pytest.approx(limit, rel=1e-14)
    np.testing.assert_allclose(near, limit, rtol=1e-4)


@pytest.mark.parametrize(("mu", "alpha"), [(c[0], c[1]) for c in CASES])
def test_dense_pressure_integral_gives_the_exact_lift(mu, alpha):
    # Quadrature of the exact Cp round 8000 equal-angle points (2nd-order trapezoid) against 8π(R/ℓ) sin(α + β).
    foil = JoukowskiSection(mu)
    a = np.radians(alpha)
    theta = foil.equal_angle_taps(8000)
    x, y = foil.xy(theta)
    result = section_coefficients(x, y, foil.cp_theta(a, theta), a)
    assert result.cl == pytest.approx(foil.cl(a), rel=2e-5)
    assert result.cd_p == pytest.approx(0.0, abs=2e-5)  # d'Alembert: no drag in potential flow


def test_symmetric_lift_slope():
    # docs/REFERENCES.md: 11.8 %-thick Joukowski inviscid slope 8πR/ℓ = 6.854 per rad.
    assert JoukowskiSection(-0.1).lift_slope() == pytest.approx(6.854, abs=5e-4)


def test_shape_is_a_unit_chord_table():
    foil = JoukowskiSection(-0.1 + 0.1j)
    shape = foil.shape(301)
    assert shape.x.min() == 0.0 and shape.x.max() == 1.0 and shape.x.size == 301
    # every table point lies on the mapped circle: recover its circle angle from x and compare y
    upper = np.arange(shape.x.size) <= shape.leading_edge_index
    np.testing.assert_allclose(foil.xy(foil.theta_at(shape.x, upper))[1], shape.y, atol=1e-8)  # steep at the nose


@given(st.floats(0.0, 1.0), st.booleans())
def test_theta_at_inverts_the_mapping(x_c, upper):
    foil = JoukowskiSection(-0.1 + 0.1j)
    theta = foil.theta_at(x_c, upper)
    assert foil.xy(theta)[0] == pytest.approx(x_c, abs=1e-12)
    assert bool(foil.side_of(theta)) == upper or x_c < 1e-9 or x_c > 1 - 1e-9


def test_bad_centre_rejected():
    with pytest.raises(ValueError, match="Re μ < 0"):
        JoukowskiSection(0.1 + 0.0j)
    with pytest.raises(ValueError, match="at least 3"):
        JoukowskiSection(-0.1).equal_angle_taps(2)
