"""Section shapes: NACA 4-digit formula values, contour conventions, coordinate tables, tap layouts, bad input."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy.optimize import minimize_scalar

from taprig.physics.sections import (
    SectionShape,
    circle_section,
    circular_arc_section,
    cosine_stations,
    from_coordinates,
    naca4,
    naca4_camber,
    naca4_thickness,
    parse_naca4,
    tap_stations_cosine,
    tap_stations_uniform,
)


def test_naca0012_thickness_at_030():
    # docs/REFERENCES.md: NACA 0012 at x = 0.3, y_t = 0.060017 (open TE) / 0.060007 (closed), computed from the
    # Report 460 formula (from memory).
    assert naca4_thickness(0.3, 0.12, closed_te=False) == pytest.approx(0.060017, abs=5e-7)
    assert naca4_thickness(0.3, 0.12, closed_te=True) == pytest.approx(0.060007, abs=5e-7)


def test_naca0012_maximum_thickness_and_trailing_edge():
    # docs/REFERENCES.md: max t/c 0.12003 at x = 0.2998; open-TE half-thickness 0.00126; closed TE is zero.
    best = minimize_scalar(lambda x: -naca4_thickness(x, 0.12, closed_te=False), bounds=(0.1, 0.5), method="bounded",
                           options={"xatol": 1e-8})
    assert best.x == pytest.approx(0.2998, abs=1e-4)
    assert -2.0 * best.fun == pytest.approx(0.12003, abs=5e-6)
    assert naca4_thickness(1.0, 0.12, closed_te=False) == pytest.approx(0.00126, abs=5e-6)
    assert naca4_thickness(1.0, 0.12, closed_te=True) == pytest.approx(0.0, abs=1e-15)


@pytest.mark.parametrize("designation", ["0012", "2412"])
def test_trailing_edge_gap_is_twice_the_half_thickness(designation):
    # docs/REFERENCES.md: open-TE half-thickness of a 12 % section 0.00126, so the base is 0.00252 chord; the
    # thickness is laid off normal to the mean line (NACA Report 460, from memory), so camber leaves the gap alone.
    assert naca4(designation, closed_te=False).trailing_edge_gap == pytest.approx(0.00252, abs=1e-5)
    assert naca4(designation, closed_te=True).trailing_edge_gap == pytest.approx(0.0, abs=1e-12)


def test_naca2412_camber_line():
    # docs/REFERENCES.md: y_c = 0.015, 0.020, 0.015, 0 at x = 0.2, 0.4, 0.7, 1 (Report 460 mean line).
    yc, slope = naca4_camber(np.array([0.2, 0.4, 0.7, 1.0]), 0.02, 0.4)
    np.testing.assert_allclose(yc, [0.015, 0.020, 0.015, 0.0], atol=1e-12)
    assert slope[1] == pytest.approx(0.0, abs=1e-15)  # maximum camber at p = 0.4


def test_naca2412_thickness_applied_normal_to_mean_line():
    # Report 460 construction: at x = p the mean line is level, so the upper surface there is y_c + y_t exactly;
    # elsewhere the surface point is offset along the mean-line normal (x_u = x − y_t sin θ).
    shape = naca4("NACA 2412", 201)
    # (3e-5: linear interpolation between cosine-spaced points, spacing 0.016 at mid-chord)
    assert shape.surface_y(0.4, upper=True) == pytest.approx(0.02 + naca4_thickness(0.4, 0.12), abs=3e-5)
    assert shape.surface_y(0.4, upper=False) == pytest.approx(0.02 - naca4_thickness(0.4, 0.12), abs=3e-5)
    x, yt = 0.1, naca4_thickness(0.1, 0.12)
    yc, slope = naca4_camber(x, 0.02, 0.4)
    theta = np.arctan(slope)
    xu, yu = x - yt * np.sin(theta), yc + yt * np.cos(theta)
    assert shape.surface_y(xu, upper=True) == pytest.approx(yu, abs=2e-5)


@given(st.floats(0.0, 1.0))
def test_surface_y_follows_the_formula_between_points(x):
    # Interpolation in √x on a 201-point cosine-spaced NACA 0012 tracks the formula (Report 460) closely.
    shape = naca4("0012", 201)
    assert shape.surface_y(x, upper=True) == pytest.approx(naca4_thickness(x, 0.12), abs=3e-5)
    assert shape.surface_y(x, upper=False) == pytest.approx(-naca4_thickness(x, 0.12), abs=3e-5)


@pytest.mark.parametrize("designation", ["NACA 0012", "0012", "naca-2412", "4415"])
def test_contour_convention(designation):
    # Contract (docs/api): trailing edge → upper → leading edge → lower → trailing edge, unit chord.
    shape = naca4(designation, 121)
    assert shape.x[0] == pytest.approx(1.0, abs=1e-3) and shape.x[-1] == pytest.approx(1.0, abs=1e-3)
    assert shape.x.min() == pytest.approx(0.0, abs=1e-3)
    stations = np.linspace(0.01, 0.99, 50)
    assert np.all(shape.surface_y(stations, True) > shape.surface_y(stations, False))
    assert np.all(shape.y[1:10] > 0.0) and np.all(shape.y[-10:-1] < shape.y[1:10][::-1])  # upper listed first
    assert shape.x.size == 121 and not shape.x.flags.writeable


def test_parse_designation():
    assert parse_naca4("NACA 2412") == (0.02, 0.4, 0.12)
    assert parse_naca4(" 0012 ") == (0.0, 0.0, 0.12)


@pytest.mark.parametrize("bad", ["NACA 12", "12345", "NACA 00", "abcd", "NACA 0000", "NACA 2012x", "NACA 2012"[:0]])
def test_bad_designation_rejected(bad):
    with pytest.raises(ValueError, match="NACA designation"):
        naca4(bad)


def test_camber_without_position_rejected():
    with pytest.raises(ValueError, match="both"):
        naca4("2012")  # camber 2 % with position 0


def _as_table(shape: SectionShape):
    return shape.x.copy(), shape.y.copy()


@pytest.mark.parametrize("order", ["selig", "selig-reversed", "lednicer-upper-first", "lednicer-lower-first"])
def test_from_coordinates_accepts_both_common_orders(order):
    reference = naca4("2412", 81)
    x, y = _as_table(reference)
    i = reference.leading_edge_index
    upper = (x[i::-1], y[i::-1])
    lower = (x[i:], y[i:])
    if order == "selig":
        tx, ty = x, y
    elif order == "selig-reversed":
        tx, ty = x[::-1], y[::-1]
    elif order == "lednicer-upper-first":
        tx, ty = np.concatenate((upper[0], lower[0])), np.concatenate((upper[1], lower[1]))
    else:
        tx, ty = np.concatenate((lower[0], upper[0])), np.concatenate((lower[1], upper[1]))
    # Scale to a 150 mm chord and shift: the table's units and origin must not matter.
    shape = from_coordinates(0.15 * tx + 0.02, 0.15 * ty - 0.01, name=order)
    x_shift = reference.x.min()  # from_coordinates puts the foremost point at x = 0
    chord = reference.x.max() - x_shift
    np.testing.assert_allclose(shape.x, (reference.x - x_shift) / chord, atol=1e-12)
    np.testing.assert_allclose(shape.y, reference.y / chord, atol=1e-12)


@given(st.floats(1e-3, 1e3), st.floats(-10.0, 10.0), st.floats(-10.0, 10.0))
def test_from_coordinates_normalises_chord(scale, dx, dy):
    x, y = _as_table(naca4("0012", 61))
    shape = from_coordinates(scale * x + dx, scale * y + dy)
    assert shape.x.min() == pytest.approx(0.0, abs=1e-12) and shape.x.max() == pytest.approx(1.0, abs=1e-12)
    np.testing.assert_allclose(shape.y, y, atol=1e-9)


def test_from_coordinates_rejects_open_and_degenerate_tables():
    x, y = _as_table(naca4("0012", 61))
    i = 30
    with pytest.raises(ValueError, match="open contour"):
        from_coordinates(x[: i + 1], y[: i + 1])  # the upper surface only: TE → LE
    with pytest.raises(ValueError, match="chord"):
        from_coordinates(np.full(20, 0.3), np.linspace(-1, 1, 20))  # zero x-extent
    with pytest.raises(ValueError, match="≥ 11"):
        from_coordinates(x[:5], y[:5])
    with pytest.raises(ValueError, match="equal length"):
        from_coordinates(x, y[:-1])
    with pytest.raises(ValueError, match="finite"):
        from_coordinates(np.where(np.arange(x.size) == 3, np.nan, x), y)


def test_section_shape_rejects_clockwise_or_open_contours():
    x, y = _as_table(naca4("0012", 61))
    with pytest.raises(ValueError, match="counter-clockwise"):
        SectionShape("cw", x[::-1], y[::-1])
    with pytest.raises(ValueError, match="open contour"):
        SectionShape("open", x[:40], y[:40])


def test_stations_outside_the_chord_rejected():
    with pytest.raises(ValueError, match="chord stations"):
        naca4("0012").surface_y(1.2, upper=True)


def test_circle_and_arc_geometry():
    # Circle of unit diameter about (0.5, 0) (geometry); arc mean line height h at mid-chord.
    circle = circle_section(65)
    np.testing.assert_allclose(np.hypot(circle.x - 0.5, circle.y), 0.5, atol=1e-15)
    assert circle.perimeter == pytest.approx(np.pi * 0.5 * 2 * np.sin(np.pi / 64) * 64 / np.pi, rel=1e-12)
    arc = circular_arc_section(camber=0.08, thickness=0.03)
    mid = 0.5 * (arc.surface_y(0.5, True) + arc.surface_y(0.5, False))
    assert mid == pytest.approx(0.08, abs=1e-5)
    with pytest.raises(ValueError, match="camber"):
        circular_arc_section(camber=0.6)


def test_tap_layouts():
    # The layouts of docs/REFERENCES.md's trapezoid table: uniform in x with shared LE and TE taps.
    x, upper = tap_stations_uniform(10)
    np.testing.assert_allclose(x, [1.0, 0.8, 0.6, 0.4, 0.2, 0.0, 0.2, 0.4, 0.6, 0.8])
    assert upper.tolist() == [True] * 6 + [False] * 4
    x, upper = tap_stations_cosine(7)
    assert x.size == 7 and upper.sum() == 5 and x[0] == 1.0 and x[4] == 0.0  # TE, 3 interior, LE; 2 lower
    np.testing.assert_allclose(cosine_stations(5), 0.5 * (1 - np.cos(np.linspace(0, np.pi, 5))))
    with pytest.raises(ValueError, match="at least 3 taps"):
        tap_stations_uniform(2)
