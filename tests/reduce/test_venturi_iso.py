"""Venturi flow by ISO 5167-4 on a reduced block: ρ1 at the upstream tap, expansibility, and the flow's uncertainty.

References: fluids' differential_pressure_meter_solver (ISO 5167 machined-convergent venturi) with CoolProp's
humid-air density at the upstream tap; the uncertainty against the `uncertainties` package's linear propagation
of the ISO flow equation with the same input uncertainties (an independent differentiation).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from CoolProp.HumidAirProp import HAPropsSI
from fluids.flow_meter import differential_pressure_meter_solver, nozzle_expansibility
from uncertainties import ufloat
from uncertainties import umath

from taprig.protocol import RawBlock
from taprig.reduce import Ambient, Reducer
from taprig.rig import parse_rig

RIG_TEXT = (Path(__file__).resolve().parents[2] / "rigs" / "venturi-8.toml").read_text(encoding="utf-8")
# a blower-fed venturi at +3 kPa inlet gauge: every station on a ±10 kPa gauge bridge (the example's low-range
# parts, the stations referred to the inlet's line, are sized for its suction-side bench)
WIDE = RIG_TEXT.replace('measures = "differential"\nrelative_to = "s1"', 'measures = "gauge"')
for _range in ("250.0", "500.0", "1000.0"):
    WIDE = WIDE.replace(f"pmin_pa = -{_range}\npmax_pa = {_range}", "pmin_pa = -10000.0\npmax_pa = 10000.0")
assert WIDE.count("pmin_pa = -10000.0") == 3 and "relative_to" not in WIDE
INLET_GAUGE, DP = 3000.0, 500.0


@pytest.fixture(scope="module")
def run():
    rig = parse_rig(WIDE, "venturi-wide.toml")
    ambient = Ambient(101325.0, 293.15, 0.5)
    reducer = Reducer(rig, ambient=ambient)
    layout = rig.tap_layout()
    ideal = 1.0 - (layout.area[0] / layout.area) ** 2
    # stations: inlet +3 kPa gauge, the rest on the ideal line scaled so the throat is 500 Pa below the inlet
    gauge = INLET_GAUGE + ideal / (-ideal.min()) * DP
    channels = tuple(sorted(c.index for c in rig.channels))
    by_channel = {int(c): g for c, g in zip(layout.channels, gauge)}
    counts = np.array([rig.sensor_of(i).si_to_counts(by_channel[i]) for i in channels], dtype=float)
    rng = np.random.default_rng(3)
    block = np.round(counts + rng.normal(0.0, 1.0, (400, len(channels))))
    n = block.shape[0]
    return rig, reducer, reducer.reduce_mean(RawBlock(block, channels, np.arange(n) * 2_000_000, np.arange(n)))


def test_mass_flow_uses_the_density_at_the_upstream_tap(run):
    rig, reducer, mean = run
    p1 = 101325.0 + mean.p_pa[mean.column_names.index("S1")]
    dp = mean.p_pa[mean.column_names.index("S1")] - mean.p_pa[mean.column_names.index("S4")]
    rho1 = 1.0 / HAPropsSI("Vha", "T", 293.15, "P", p1, "R", 0.5)  # CoolProp humid air at the upstream tap
    expected = differential_pressure_meter_solver(D=0.05, D2=0.025, P1=p1, P2=p1 - dp, rho=rho1, mu=1.8e-5, k=1.4,
                                                  meter_type="machined convergent venturi tube")
    assert mean.mass_flow_kg_s == pytest.approx(expected, rel=2e-4)
    # before: the room's density made the flow 1.5 % low at +3 kPa inlet gauge (√(ρ_room/ρ1))
    assert np.sqrt(reducer.fluid.density / rho1) == pytest.approx(1 - 0.0147, abs=1e-3)


def test_mass_flow_uncertainty_follows_iso_5167(run):
    rig, reducer, mean = run
    opts = reducer.options
    s1, s4 = mean.column_names.index("S1"), mean.column_names.index("S4")
    p1 = 101325.0 + mean.p_pa[s1]
    dp_n = mean.p_pa[s1] - mean.p_pa[s4]
    u_dp = np.sqrt(mean.u_p_pa[s1] ** 2 + mean.u_p_pa[s4] ** 2)  # independent channels (datasheet + noise)
    area = rig.tap_layout().area
    dn, big_dn = np.sqrt(4 * area.min() / np.pi), np.sqrt(4 * area[0] / np.pi)  # from the rig's areas (≈ 25, 50 mm)
    beta = dn / big_dn
    c = ufloat(opts.discharge_coefficient, opts.discharge_coefficient * opts.discharge_coefficient_u_rel)
    d = ufloat(dn, dn * opts.venturi_diameter_u_rel)
    big_d = ufloat(big_dn, big_dn * opts.venturi_diameter_u_rel)
    dp = ufloat(dp_n, u_dp)
    u_p1 = np.hypot(mean.u_p_pa[s1], opts.ambient_pressure_u)
    rho_n = reducer.fluid.density * p1 / 101325.0
    rho = ufloat(rho_n, rho_n * np.hypot(u_p1 / p1, opts.temperature_u / 293.15))
    eps_n = nozzle_expansibility(big_dn, dn, p1, p1 - dp_n, 1.4)  # fluids: ISO 5167-3/-4 expansibility
    eps_u = 0.5 * (4 + 100 * beta**8) * dp_n / p1 / 100.0
    # ISO 5167-1 eq. (1): q_m = C/√(1 − β⁴) ε π/4 d² √(2 Δp ρ1), with β = d/D and ε carried as its own input
    eps_of_reducer = mean.mass_flow_kg_s / (0.995 / np.sqrt(1 - beta**4) * np.pi / 4 * dn**2
                                            * np.sqrt(2 * dp_n * rho_n))
    eps = ufloat(eps_of_reducer, eps_of_reducer * eps_u)
    assert eps.n == pytest.approx(eps_n, rel=1e-6)  # the reducer's ε is the standard's
    qm = c / umath.sqrt(1 - (d / big_d) ** 4) * eps * np.pi / 4 * d**2 * umath.sqrt(2 * dp * rho)
    assert qm.n == pytest.approx(mean.mass_flow_kg_s, rel=1e-9)
    assert mean.u_mass_flow_kg_s == pytest.approx(qm.s, rel=0.02)
    # at least C's 0.5 %; here the uncalibrated ±10 kPa bridges' 25 Pa on a 500 Pa differential add ~3 %
    assert 0.005 < mean.u_mass_flow_kg_s / mean.mass_flow_kg_s < 0.05


def test_station_cp_is_measured_with_its_uncertainty_against_the_ideal_line(run):
    rig, reducer, mean = run
    # continuity + Bernoulli: Cp = 1 − (A1/A)² (docs/REFERENCES.md); the stations were set on the ideal line, and
    # the measured Cp differs from it by the discharge coefficient and ε only at the throat's scale
    assert np.all(np.isfinite(mean.u_cp)) and np.all(mean.u_cp[1:] > 0)
    throat = int(np.argmin(mean.cp_ideal))
    ratio = mean.cp[throat] / mean.cp_ideal[throat]
    assert ratio == pytest.approx(1.0 / (0.995 * 0.99) ** 2, rel=0.02)
    # u(Cp) carries C's uncertainty (2 × 0.5 % of Cp at the throat)
    assert mean.u_cp[throat] >= 2 * 0.005 * abs(mean.cp[throat])
