"""GUM uncertainty helpers against the uncertainties package, seeded Monte Carlo (JCGM 101) and docs/REFERENCES.md."""

import numpy as np
import pytest
import uncertainties
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy.signal import lfilter
from uncertainties import ufloat

from taprig.physics.uncertainty import (
    Distribution,
    combine_in_quadrature,
    cp_covariance_absolute,
    cp_covariance_differential,
    cp_uncertainty_absolute,
    cp_uncertainty_differential,
    effective_sample_count,
    propagate_covariance,
    propagate_uncertainty,
    standard_error_of_mean,
    type_b_from_full_scale,
)

U, Q, P_INF = 2.0, 250.0, 101000.0  # docs/REFERENCES.md "Pitot-static and uncertainty": u = 2 Pa, q = 250 Pa


def _absolute_channels(cps):
    """Shared static and total channels plus one tap channel per Cp, as independent ufloats."""
    p_inf = ufloat(P_INF, U)
    p_0 = ufloat(P_INF + Q, U)
    taps = [ufloat(P_INF + cp * Q, U) for cp in cps]
    return [(p - p_inf) / (p_0 - p_inf) for p in taps]


@pytest.mark.parametrize(
    ("cp", "expected"),
    # docs/REFERENCES.md: three uncorrelated absolute channels (JCGM 100:2008 §5.1.2)
    [(1.0, 0.011314), (0.0, 0.011314), (-1.0, 0.019596), (-3.0, 0.040792)],
)
def test_cp_uncertainty_absolute_reference_rows(cp, expected):
    u = cp_uncertainty_absolute(cp, Q, U, U, U)
    assert_allclose(u, expected, atol=5e-7)  # six printed decimals
    assert_allclose(u, _absolute_channels([cp])[0].std_dev, rtol=1e-12)  # uncertainties: first-order propagation


@pytest.mark.parametrize("cp", [1.0, -1.0, -3.0])
def test_cp_uncertainty_absolute_monte_carlo(cp):
    rng = np.random.default_rng(20240611)
    n = 1_000_000
    p_inf = P_INF + U * rng.standard_normal(n)
    p_0 = P_INF + Q + U * rng.standard_normal(n)
    p = P_INF + cp * Q + U * rng.standard_normal(n)
    # JCGM 101:2008 Monte Carlo; the std of 1e6 draws has a relative SE of 7e-4 → rtol 3e-3
    assert_allclose(cp_uncertainty_absolute(cp, Q, U, U, U), np.std((p - p_inf) / (p_0 - p_inf)), rtol=3e-3)


# docs/REFERENCES.md, two differential transducers
@pytest.mark.parametrize(("cp", "expected"), [(0.0, 0.008000), (-3.0, 0.025298)])
def test_cp_uncertainty_differential_reference_rows(cp, expected):
    u = cp_uncertainty_differential(cp, Q, U, U)
    assert_allclose(u, expected, atol=5e-7)
    dp, q = ufloat(cp * Q, U), ufloat(Q, U)
    assert_allclose(u, (dp / q).std_dev, rtol=1e-12)  # uncertainties package


def test_absolute_covariance_matches_uncertainties_package():
    cps = [1.0, 0.3, -0.5, -2.0]
    u_tap = np.array([2.0, 1.5, 3.0, 2.5])
    p_inf, p_0 = ufloat(P_INF, 1.2), ufloat(P_INF + Q, 0.8)
    taps = [ufloat(P_INF + cp * Q, u) for cp, u in zip(cps, u_tap)]
    expected = np.array(uncertainties.covariance_matrix([(p - p_inf) / (p_0 - p_inf) for p in taps]))
    # correlation enters only through the shared static and total channels (GUM §5.2.2)
    assert_allclose(cp_covariance_absolute(cps, Q, u_tap, 1.2, 0.8), expected, rtol=1e-12, atol=1e-18)


def test_differential_covariance_matches_uncertainties_package():
    cps = [0.5, -1.0, -3.0]
    q = ufloat(Q, 2.0)
    ratios = [ufloat(cp * Q, 1.5) / q for cp in cps]
    expected = np.array(uncertainties.covariance_matrix(ratios))
    assert_allclose(cp_covariance_differential(cps, Q, 1.5, 2.0), expected, rtol=1e-12, atol=1e-18)


def test_covariance_diagonal_is_the_single_tap_uncertainty():
    cps = np.array([1.0, 0.0, -1.0, -3.0])
    cov = cp_covariance_absolute(cps, Q, U, U, U)
    assert_allclose(np.sqrt(np.diag(cov)), cp_uncertainty_absolute(cps, Q, U, U, U), rtol=1e-14)


def test_lift_like_sum_propagates_correlated_cp():
    # a linear functional y = Σ w_i Cp_i (as a trapezoid lift integral is) against uncertainties and Monte Carlo
    cps = np.array([1.0, -0.8, -1.5, -0.4, 0.1])
    weights = np.array([[0.05, 0.2, 0.25, 0.3, 0.2]])
    cov = cp_covariance_absolute(cps, Q, U, U, U)
    ufl = _absolute_channels(cps)
    expected = sum(w * c for w, c in zip(weights[0], ufl)).std_dev  # uncertainties package, exact correlations
    assert_allclose(propagate_uncertainty(weights, cov), [expected], rtol=1e-12)
    rng = np.random.default_rng(7)
    draws = rng.multivariate_normal(cps, cov, size=400_000) @ weights[0]
    assert_allclose(propagate_uncertainty(weights, cov), [np.std(draws)], rtol=5e-3)  # JCGM 101, 4e5 draws


def test_propagation_is_vectorised_over_blocks():
    rng = np.random.default_rng(3)
    cps = rng.uniform(-2.0, 1.0, size=(6, 5))  # 6 blocks × 5 taps
    q = rng.uniform(100.0, 400.0, size=6)
    cov = cp_covariance_differential(cps, q, 2.0, 1.0)
    assert cov.shape == (6, 5, 5)
    jac = rng.normal(size=(6, 3, 5))  # e.g. (Cn, Ca, Cm) per block
    full = propagate_covariance(jac, cov)
    assert full.shape == (6, 3, 3)
    for k in range(6):
        assert_allclose(full[k], jac[k] @ cov[k] @ jac[k].T, rtol=1e-12)
        assert_allclose(cov[k], cp_covariance_differential(cps[k], q[k], 2.0, 1.0), rtol=1e-14)
    assert_allclose(propagate_uncertainty(jac, cov), np.sqrt(np.diagonal(full, axis1=1, axis2=2)), rtol=1e-12)


def test_full_scale_accuracy_conventions():
    # JCGM 100:2008 §4.3.7: a ±a bound read as rectangular gives a/√3; checked against a seeded uniform sample
    a = 0.25 / 100 * 1000.0
    u = type_b_from_full_scale(0.25, 1000.0)
    rng = np.random.default_rng(11)
    assert_allclose(u, np.std(rng.uniform(-a, a, 1_000_000)), rtol=3e-3)
    assert_allclose(type_b_from_full_scale(0.25, 1000.0, Distribution.NORMAL_K2), a / 2.0)  # §4.3.3, k = 2
    assert_allclose(type_b_from_full_scale(0.25, 1000.0, Distribution.TRIANGULAR), a / np.sqrt(6.0))  # §4.3.9


def test_quadrature_matches_uncertainties_sum():
    parts = [0.5, 1.2, 2.0]
    total = sum(ufloat(0.0, u) for u in parts)  # independent components, unit sensitivity
    assert_allclose(combine_in_quadrature(*parts), total.std_dev, rtol=1e-14)
    assert combine_in_quadrature(np.ones((4, 2)), 1.0).shape == (4, 2)


def test_standard_error_of_white_noise_mean():
    rng = np.random.default_rng(5)
    x = rng.normal(size=(2000, 3))
    # GUM §4.2.3: s/√n; for white noise n_eff ≈ n, so the corrected value is within a few per cent
    assert_allclose(standard_error_of_mean(x), x.std(axis=0, ddof=1) / np.sqrt(2000), rtol=1e-14)
    assert_allclose(standard_error_of_mean(x, autocorrelated=True), standard_error_of_mean(x), rtol=0.12)


def test_autocorrelated_mean_uncertainty_against_monte_carlo():
    # AR(1) records, φ = 0.8: the spread of the record means over many seeded records is the truth
    # (Zhang, Metrologia 43 (2006) S276); the n_eff estimate must match it, the naive s/√n is ~3× too small
    rng = np.random.default_rng(42)
    phi, n, records = 0.8, 4000, 300
    x = lfilter([1.0], [1.0, -phi], rng.standard_normal((n, records)), axis=0)
    true_spread = np.std(x.mean(axis=0), ddof=1)
    assert_allclose(np.mean(standard_error_of_mean(x, autocorrelated=True)), true_spread, rtol=0.15)
    assert np.mean(standard_error_of_mean(x)) < 0.5 * true_spread
    # n_eff ≈ n(1 − φ)/(1 + φ) for AR(1) (Bayley & Hammersley 1946)
    assert_allclose(np.median(effective_sample_count(x)), n * (1 - phi) / (1 + phi), rtol=0.2)


@given(st.integers(2, 300), st.floats(-5.0, 5.0))
def test_effective_count_bounds(n, offset):
    x = np.random.default_rng(n).normal(size=n) + offset
    n_eff = effective_sample_count(x)
    assert 1.0 <= n_eff <= n


def test_constant_record_gives_zero_uncertainty():
    assert standard_error_of_mean(np.full(50, 3.0), autocorrelated=True) == 0.0


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda: cp_uncertainty_absolute(0.0, 0.0, 2.0, 2.0, 2.0), "dynamic pressure"),
        (lambda: cp_uncertainty_absolute(0.0, 250.0, -2.0, 2.0, 2.0), "tap-channel"),
        (lambda: cp_covariance_differential([0.0, 1.0], -5.0, 2.0, 2.0), "dynamic pressure"),
        (lambda: cp_covariance_absolute([0.0, 1.0], 250.0, [2.0, -1.0], 2.0, 2.0), "tap-channel"),
        (lambda: propagate_covariance(np.ones((2, 3)), np.eye(2)), "Jacobian"),
        (lambda: propagate_uncertainty(np.ones(3), np.eye(3)), "Jacobian"),
        (lambda: standard_error_of_mean([1.0]), "at least 2"),
        (lambda: type_b_from_full_scale(-0.1, 1000.0), "accuracy"),
        (lambda: combine_in_quadrature(), "at least one"),
    ],
)
def test_bad_inputs_raise(call, message):
    with pytest.raises(ValueError, match=message):
        call()
