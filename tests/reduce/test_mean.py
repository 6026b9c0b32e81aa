"""Block means: GUM uncertainties, the shape-aware integrator on the exact Joukowski Cp, wall corrections, venturi."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from uncertainties import ufloat

from taprig.physics.joukowski import JoukowskiSection
from taprig.physics.sections import tap_stations_cosine, tap_stations_uniform
from taprig.physics.uncertainty import cp_covariance_absolute
from taprig.physics.walls import WallCorrection
from taprig.reduce import Ambient, Coefficients, ReduceOptions, Reducer, ScanFlag
from taprig.reduce.mean import wall_corrected
from taprig.rig import load_rig, parse_rig

RIGS = Path(__file__).resolve().parents[2] / "rigs"


# u = 2 Pa per channel as a rectangular ±a bound over a 200 kPa span: a = √3·2 Pa → % FS (GUM 4.3.7).
PCT_FOR_2PA = 100.0 * 2.0 * math.sqrt(3.0) / 200000.0
TAPS = [("T1", 0.3, "upper"), ("T2", 0.1, "upper"), ("T3", 0.1, "lower"), ("T4", 0.3, "lower")]
CPS = np.array([1.0, 0.0, -1.0, -3.0])  # docs/REFERENCES.md's Cp values, one per tap


def _constant_block(make_block, reducer, p_row, n=20):
    return make_block(reducer, np.tile(p_row, (n, 1)))  # no noise: only the type-B budget is left


def test_u_cp_three_absolute_channels_matches_gum_values(make_block, airfoil_rig):
    # docs/REFERENCES.md: (u/q)√(1 + (1 − Cp)² + Cp²) with u = 2 Pa, q = 250 Pa → 0.011314, 0.011314, 0.019596,
    # 0.040792 (JCGM 100:2008 §5.1.2).
    reducer = Reducer(parse_rig(airfoil_rig(TAPS, pct=PCT_FOR_2PA), "abs.toml"))
    ps, q = 100000.0, 250.0
    by_name = dict(zip([t[0] for t in TAPS], ps + CPS * q))
    row = [ps, ps + q] + [by_name[t[0]] for t in TAPS]
    mean = reducer.reduce_mean(_constant_block(make_block, reducer, row))
    u = dict(zip(mean.tap_names, mean.u_cp))
    expected = {"T1": 0.011314, "T2": 0.011314, "T3": 0.019596, "T4": 0.040792}
    assert {k: round(v, 6) for k, v in u.items()} == pytest.approx(expected, abs=2e-6)
    # Cross-check with the uncertainties package (linear propagation, independent of our Jacobian).
    u_ps, u_pt = ufloat(ps, 2.0), ufloat(ps + q, 2.0)
    for name, cp in zip(["T1", "T2", "T3", "T4"], CPS):
        tap = ufloat(ps + cp * q, 2.0)
        assert u[name] == pytest.approx(((tap - u_ps) / (u_pt - u_ps)).std_dev, rel=1e-6)
    # and the off-diagonal terms against the physics helper's closed form (GUM §5.2.2)
    order = [list(mean.tap_names).index(n) for n in ["T1", "T2", "T3", "T4"]]
    ref = cp_covariance_absolute(CPS, q, 2.0, 2.0, 2.0)
    np.testing.assert_allclose(mean.cov_cp[np.ix_(order, order)], ref, rtol=1e-6, atol=1e-12)


def test_u_cp_two_differential_channels_matches_gum_values(make_block, airfoil_rig):
    # docs/REFERENCES.md: (u/q)√(1 + Cp²): Cp = 0 → 0.008000; −3 → 0.025298 (JCGM 100:2008 §5.1.2).
    reducer = Reducer(parse_rig(airfoil_rig(TAPS, layout="differential", pct=PCT_FOR_2PA), "diff.toml"))
    q = 250.0
    by_name = dict(zip([t[0] for t in TAPS], CPS * q))
    mean = reducer.reduce_mean(_constant_block(make_block, reducer, [q] + [by_name[t[0]] for t in TAPS]))
    u = dict(zip(mean.tap_names, mean.u_cp))
    assert round(u["T2"], 6) == pytest.approx(0.008000, abs=2e-6)
    assert round(u["T4"], 6) == pytest.approx(0.025298, abs=2e-6)


def test_noise_enters_as_the_standard_error_of_the_mean(make_block, airfoil_rig):
    # Differential layout, no type-B term: u(Cp) of a tap is the SEM of its channel / q for white noise
    # (GUM §4.2.3), checked against a seeded Monte Carlo estimate of the scatter of block means.
    reducer = Reducer(parse_rig(airfoil_rig(TAPS, layout="differential"), "noise.toml"),
                      options=ReduceOptions(autocorrelated_noise=False))
    rng = np.random.default_rng(11)
    q, n, sigma = 250.0, 400, 5.0
    base = np.array([q, -100.0, -300.0, 50.0, 20.0])
    means = []
    for _ in range(200):
        p = base + rng.normal(0.0, sigma, (n, base.size)) * np.array([0, 1, 1, 1, 1])
        means.append(reducer.reduce_mean(make_block(reducer, p)))
    scatter = np.std([m.cp for m in means], axis=0, ddof=1)
    stated = np.mean([m.u_cp for m in means], axis=0)
    np.testing.assert_allclose(stated, sigma / math.sqrt(n) / q, rtol=0.1)
    np.testing.assert_allclose(scatter, stated, rtol=0.25)  # 200 draws: ±10 % on a standard deviation


def _joukowski_reducer(airfoil_rig, foil: JoukowskiSection, x_c, upper):
    shape = foil.shape(401)
    coords = 'coordinates = {{ x = [{}], y = [{}] }}'.format(
        ", ".join(f"{v:.12f}" for v in shape.x), ", ".join(f"{v:.12f}" for v in shape.y))
    taps = [(f"P{i:02d}", float(min(max(x, 0.0), 1.0)), "upper" if u else "lower") for i, (x, u) in enumerate(zip(x_c, upper))]
    return Reducer(parse_rig(airfoil_rig(taps, layout="differential", section=coords), "jouk.toml")), taps


LAYOUTS = {
    "20 uniform in x": (tap_stations_uniform(20), 0.01),
    "20 clustered": (tap_stations_cosine(20), 0.005),
    # the layout of rigs/cambered-balance.toml: 6 suction-side taps, 3 pressure-side
    "9 (6 upper, 3 lower)": ((np.array([0.7, 0.45, 0.25, 0.12, 0.05, 0.015, 0.08, 0.35, 0.65]),
                              np.array([True] * 6 + [False] * 3)), 0.03),
}
CASES = {"symmetric 5°": (-0.1 + 0j, 5.0, 0.5973989261), "cambered 5°": (-0.1 + 0.1j, 5.0, 1.2180717599)}


@pytest.mark.parametrize("case", CASES)
def test_shape_integrator_recovers_exact_joukowski_cl(case, make_block, airfoil_rig, capsys):
    # Exact Cl = 8π(R/ℓ) sin(α + β) of the Joukowski airfoil (docs/REFERENCES.md); targets of issue 4: within 1 %
    # with 20 taps uniform in x, 0.5 % with 20 clustered taps, 3 % with a sparse 9-tap layout.
    centre, alpha_deg, exact = CASES[case]
    foil = JoukowskiSection(centre)
    alpha = math.radians(alpha_deg)
    assert float(foil.cl(alpha)) == pytest.approx(exact, rel=1e-9)
    rows = []
    for label, ((x_c, upper), tolerance) in LAYOUTS.items():
        reducer, taps = _joukowski_reducer(airfoil_rig, foil, x_c, upper)
        cp = dict(zip([t[0] for t in taps], foil.cp_at(alpha, np.array([t[1] for t in taps]), np.array(upper))))
        q = 300.0
        row = [q] + [cp[t[0]] * q for t in taps]  # the tap differentials p − p∞ = Cp q [Pa], through the counts
        mean = reducer.reduce_mean(make_block(reducer, np.tile(row, (4, 1))), alpha)
        err_shape = mean.shape.cl / exact - 1.0
        err_plain = mean.plain.cl / exact - 1.0
        rows.append(f"{case:12s} {label:22s} plain {100 * err_plain:+7.2f} %  shape {100 * err_shape:+7.3f} %  "
                    f"u_int {mean.shape.integration_u_cl:.4f}")
        assert abs(err_shape) < tolerance, rows[-1]
    with capsys.disabled():
        print("\n" + "\n".join(rows))


def test_wall_corrections_match_the_worked_example(airfoil_rig):
    # docs/REFERENCES.md worked example (Barlow, Rae & Pope, 3rd ed., ch. 9, from memory): c = 0.10 m, h = b = 0.30 m,
    # 12 % section, Cl_u 0.8, α_u 6°, Cm_u −0.05, Cd_u 0.02, K1 = 0.74 → Cl 0.76557, α 6.1250°, Cm −0.04462,
    # Cd 0.019461, q/q_u 1.02019. The example takes the area as 0.685 c t = 8.221e-4 m²; the reducer uses the NACA
    # 0012 contour's own area, 0.6809 c t = 8.170e-4 m² (∫2y_t dx of the closed-TE thickness formula), which
    # lowers ε_sb by 0.6 % and moves Cl by +7e-5, q/q_u by −9e-5 and Cd by +2.4e-6: hence the tolerances.
    reducer = Reducer(parse_rig(airfoil_rig(TAPS), "walls.toml"))
    raw = Coefficients("plain", 0.8, 0.02, -0.05, 0.01, 0.001, 0.002)
    corrected, wall = wall_corrected(reducer, raw, math.radians(6.0))
    assert isinstance(wall, WallCorrection)
    assert float(wall.solid_blockage) == pytest.approx(0.006759 * 8.170e-4 / 8.221e-4, rel=1e-3)
    assert corrected.cl == pytest.approx(0.76557, abs=1e-4)
    assert math.degrees(float(wall.alpha)) == pytest.approx(6.1250, abs=2e-4)
    assert corrected.cm_qc == pytest.approx(-0.04462, abs=2e-5)
    assert corrected.cd_p == pytest.approx(0.019461, abs=5e-6)  # +2.4e-6 from the smaller ε_sb
    assert float(wall.q_ratio) == pytest.approx(1.02019, abs=1e-4)
    assert corrected.u_cl == pytest.approx(0.01 * 0.76557 / 0.8, rel=1e-3)  # first-order factor on u


VENTURI = """
format = 1
id = "venturi-test"
name = "venturi"
kind = "venturi"
[fluid]
medium = "water"
temperature_c = 20.0
[sensors.fine]
kind = "linear"
gain_pa_per_count = 1e-4
offset_pa = 0.0
range_pa = [-100000.0, 100000.0]
adc_bits = 32
accuracy_pct_fs = 0.0
[[channels]]
index = 0
name = "s1"
encoding = "i32"
sensor = "fine"
measures = "gauge"
[[channels]]
index = 1
name = "s2"
encoding = "i32"
sensor = "fine"
measures = "gauge"
[[channels]]
index = 2
name = "s3"
encoding = "i32"
sensor = "fine"
measures = "gauge"
[reference]
inlet = "S1"
[[taps]]
name = "S1"
channel = "s1"
x_mm = 0.0
area_mm2 = 1963.495408
[[taps]]
name = "S2"
channel = "s2"
x_mm = 50.0
area_mm2 = 490.873852
[[taps]]
name = "S3"
channel = "s3"
x_mm = 25.0
area_mm2 = 981.747704
"""


def test_venturi_station_cp_follows_bernoulli(make_block):
    # Continuity + Bernoulli (docs/REFERENCES.md): Cp = 1 − (A_ref/A)²; D/d = 2 throat → −15. Water (ε = 1) and
    # C = 1, so the ISO 5167-4 flow of the inlet − throat differential is the ideal one: q_m = ρ A1 √(2 q1/ρ).
    reducer = Reducer(parse_rig(VENTURI, "venturi.toml"), options=ReduceOptions(discharge_coefficient=1.0))
    q1 = 40.0
    ideal = np.array([0.0, 1.0 - 4.0, 1.0 - 16.0])  # S1, S3 (half area), S2 (quarter area) in station order
    p_by_station = dict(zip(("S1", "S3", "S2"), 500.0 + ideal * q1))
    mean = reducer.reduce_mean(make_block(reducer, np.tile([p_by_station[n] for n in ("S1", "S2", "S3")], (5, 1))))
    assert mean.tap_names == ("S1", "S3", "S2")
    np.testing.assert_allclose(mean.cp, ideal, atol=1e-9)
    np.testing.assert_allclose(mean.cp_ideal, ideal, atol=1e-6)
    rho = reducer.fluid.density
    assert mean.mass_flow_kg_s == pytest.approx(rho * 1963.495408e-6 * math.sqrt(2 * q1 / rho), rel=1e-8)
    assert mean.q_pa == pytest.approx(q1, rel=1e-8)


def test_mean_of_a_no_flow_block(make_block, airfoil_rig):
    reducer = Reducer(parse_rig(airfoil_rig(TAPS, layout="differential"), "zero.toml"))
    mean = reducer.reduce_mean(make_block(reducer, np.zeros((10, 5))))
    assert mean.flags & ScanFlag.NO_FLOW and np.all(np.isnan(mean.cp)) and mean.plain is None


def test_ambient_water_properties_follow_physics():
    # Tanaka et al. (2001) water density at 20 °C: 998.207 kg/m³ (docs/REFERENCES.md, CoolProp 998.2072).
    props = Ambient(temperature=293.15).properties("water")
    assert props.density == pytest.approx(998.2072, abs=2e-3) and math.isnan(props.speed_of_sound)


@pytest.mark.parametrize("rig", ["airfoil", "balance", "venturi"])
def test_values_only_mean_has_the_full_means_values_and_no_uncertainty(rig, make_block, airfoil_rig):
    # A display takes the uncertainties from a full mean a few times a second; the values it shows in between must
    # be the very numbers the full mean gives for the same scans (same code, so equal to the last bit).
    if rig == "airfoil":
        reducer = Reducer(parse_rig(airfoil_rig(TAPS, layout="differential"), "values.toml"))
        base = np.array([250.0, -100.0, -300.0, 50.0, 20.0])
    elif rig == "balance":  # rigs/cambered-balance.toml: pitot, 6 upper and 3 lower gauge taps, a lift load cell [N]
        reducer = Reducer(load_rig(RIGS / "cambered-balance.toml"))
        base = np.array([250.0, -400.0, -350.0, -300.0, -200.0, -120.0, -40.0, 150.0, 60.0, 20.0, 12.0])
    else:
        reducer = Reducer(parse_rig(VENTURI, "venturi.toml"))
        base = np.array([540.0, 500.0 - 15.0 * 40.0, 500.0 - 3.0 * 40.0])
    p = base + np.random.default_rng(5).normal(0.0, 2.0, (300, base.size))
    block = make_block(reducer, p)
    full, values = reducer.reduce_mean(block, 0.05), reducer.reduce_mean(block, 0.05, uncertainties=False)
    for name in ("p_pa", "cp") + (("cp_ideal",) if rig == "venturi" else ()):
        assert np.array_equal(getattr(values, name), getattr(full, name), equal_nan=True)
    for name in ("q_pa", "v_ms", "re", "mach", "alpha_rad", "flags", "used_scans", "lift_n", "mass_flow_kg_s",
                 "excluded_taps", "scan_flag_counts"):
        assert getattr(values, name) == getattr(full, name) or (math.isnan(getattr(full, name)) and
                                                                 math.isnan(getattr(values, name)))
    for which in ("plain", "shape", "corrected"):
        a, b = getattr(values, which), getattr(full, which)
        assert (a is None) == (b is None)
        if b is not None:
            assert (a.cl, a.cd_p, a.cm_qc) == (b.cl, b.cd_p, b.cm_qc) and math.isnan(a.u_cl)
    assert full.uncertainty_method != values.uncertainty_method
    assert np.isnan(values.u_cp).all() and np.isnan(values.u_p_pa).all() and math.isnan(values.u_q_pa)
    assert values.u_mass_flow_kg_s is None and values.u_cl_balance is None and np.isfinite(full.u_cp).all()
