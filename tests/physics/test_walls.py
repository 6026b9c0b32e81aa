"""2-D wall corrections against the worked example in docs/REFERENCES.md.

The formulas and the example were recalled from memory of Barlow, Rae & Pope (3rd ed., ch. 9) / Allen & Vincenti
(NACA TR 782), not read from the book: these tests check that the code implements exactly those formulas; verify
them against the book before treating the numbers as an independent oracle.
"""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from taprig.physics.walls import (
    SpanOrientation,
    correct_2d,
    solid_blockage,
    streamline_curvature_parameter,
    wake_blockage,
)

# docs/REFERENCES.md worked example: c = 0.10 m, h = b = 0.30 m, 12 % NACA section area 8.221e-4 m²,
# Cl_u = 0.8, α_u = 6°, Cm_u = −0.05, Cd_u = 0.02, K1 = 0.74 (from memory)
CHORD, HEIGHT, WIDTH, AREA = 0.10, 0.30, 0.30, 8.221e-4


def _example():
    return correct_2d(0.8, np.radians(6.0), -0.05, 0.02, CHORD, HEIGHT, WIDTH, AREA, SpanOrientation.SPANS_WIDTH)


def test_worked_example_factors():
    r = _example()
    # docs/REFERENCES.md: σ = 0.022846, ε_wb = 0.003333, ε_sb = 0.006759, ε = 0.010093 (printed to 6 decimals)
    assert_allclose(r.sigma, 0.022846, atol=5e-7)
    assert_allclose(r.wake_blockage, 0.003333, atol=5e-7)
    assert_allclose(r.solid_blockage, 0.006759, atol=5e-7)
    assert_allclose(r.total_blockage, 0.010093, atol=5e-7)


def test_worked_example_corrected_coefficients():
    r = _example()
    # docs/REFERENCES.md: Cl = 0.76557, α = 6.1250°, Cm = −0.04462, Cd = 0.019461, q/q_u = 1.02019
    assert_allclose(r.cl, 0.76557, atol=5e-6)
    assert_allclose(np.degrees(r.alpha), 6.1250, atol=5e-5)  # the book's 57.3 vs 180/π differs by 3e-5 °
    assert_allclose(r.cm_quarter_chord, -0.04462, atol=5e-6)
    assert_allclose(r.cd, 0.019461, atol=5e-7)
    assert_allclose(r.q_ratio, 1.02019, atol=5e-6)


def test_factor_functions_match_their_formulas():
    # formulas of docs/REFERENCES.md written out independently
    assert_allclose(streamline_curvature_parameter(CHORD, HEIGHT), np.pi**2 / 48 * (CHORD / HEIGHT) ** 2)
    assert_allclose(wake_blockage(CHORD, HEIGHT, 0.02), CHORD / (2 * HEIGHT) * 0.02)
    volume, tunnel = AREA * WIDTH, HEIGHT * WIDTH
    assert_allclose(solid_blockage(volume, tunnel), 0.74 * volume / tunnel**1.5)
    # K1 = 0.52 for a model spanning the height (docs/REFERENCES.md, from memory)
    assert_allclose(solid_blockage(volume, tunnel, SpanOrientation.SPANS_HEIGHT), 0.52 * volume / tunnel**1.5)


def test_vectorised_over_a_polar():
    alpha = np.radians(np.linspace(-4.0, 12.0, 9))
    cl_u = 0.1 * np.degrees(alpha)
    r = correct_2d(cl_u, alpha, -0.02, 0.012, CHORD, HEIGHT, WIDTH, AREA)
    assert r.cl.shape == r.alpha.shape == r.cm_quarter_chord.shape == r.cd.shape == (9,)
    single = correct_2d(cl_u[3], alpha[3], -0.02, 0.012, CHORD, HEIGHT, WIDTH, AREA)
    assert_allclose(r.cl[3], single.cl, rtol=1e-15)


@given(st.floats(0.0, 1.5), st.floats(0.002, 0.2), st.floats(1.0, 100.0))
def test_corrections_vanish_in_a_large_tunnel(cl_u, cd_u, scale):
    # as c/h → 0 every factor → 0 and the corrected values → the measured ones (common practice)
    r = correct_2d(cl_u, 0.1, -0.05, cd_u, CHORD, HEIGHT * scale * 1000, WIDTH * scale * 1000, AREA)
    assert_allclose([r.cl, r.cd, r.alpha], [cl_u, cd_u, 0.1], rtol=1e-4, atol=1e-6)


@given(st.floats(0.1, 1.5), st.floats(0.002, 0.2))
def test_blockage_raises_q_and_lowers_cl(cl_u, cd_u):
    r = correct_2d(cl_u, 0.1, 0.0, cd_u, CHORD, HEIGHT, WIDTH, AREA)
    assert r.q_ratio > 1.0
    assert r.cl < cl_u
    assert r.cd < cd_u


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"chord": -0.1}, "chord"),
        ({"tunnel_height": 0.0}, "tunnel height"),
        ({"tunnel_width": -0.3}, "tunnel width"),
        ({"section_area": -1e-4}, "section area"),
    ],
)
def test_bad_geometry_raises(kwargs, message):
    args = {"chord": CHORD, "tunnel_height": HEIGHT, "tunnel_width": WIDTH, "section_area": AREA} | kwargs
    with pytest.raises(ValueError, match=message):
        correct_2d(0.8, 0.1, -0.05, 0.02, **args)
