"""Panel method and shape-aware integration: build time and evaluation rate against naive baselines.

Build (issue 3 target: well under 0.1 s for 100–300 panels): ``PanelModel`` of a 201-point NACA 2412 (200 panels)
beside the same influence matrix filled by a per-element Python double loop and solved the same way. Evaluation
(issue 4 target ≥ 50 block means/s): ``ShapeFitIntegrator.integrate`` of one 20-tap block mean, and of 1,000 at
once, beside the naive way of building the fit's design matrices afresh for every mean (the panel model kept).
"""

from __future__ import annotations

import math

import numpy as np

from taprig.bench import Record, best_of
from taprig.physics.integration import ShapeFitIntegrator
from taprig.physics.panel import PanelModel
from taprig.physics.sections import naca4, tap_stations_cosine


def _naive_influence(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Kuethe & Chow's normal influence coefficients, one element at a time (the textbook loop)."""
    m = x.size - 1
    an = np.zeros((m + 1, m + 1))
    for i in range(m):
        xm, ym = 0.5 * (x[i] + x[i + 1]), 0.5 * (y[i] + y[i + 1])
        ti = math.atan2(y[i + 1] - y[i], x[i + 1] - x[i])
        for j in range(m):
            tj = math.atan2(y[j + 1] - y[j], x[j + 1] - x[j])
            if i == j:
                cn1, cn2 = -1.0, 1.0
            else:
                s = math.hypot(x[j + 1] - x[j], y[j + 1] - y[j])
                rx, ry = xm - x[j], ym - y[j]
                a = -rx * math.cos(tj) - ry * math.sin(tj)
                b = rx * rx + ry * ry
                c, d = math.sin(ti - tj), math.cos(ti - tj)
                e = rx * math.sin(tj) - ry * math.cos(tj)
                f = math.log1p(s * (s + 2 * a) / b)
                g = math.atan2(e * s, b + a * s)
                q = rx * math.cos(ti - 2 * tj) - ry * math.sin(ti - 2 * tj)
                cn2 = d + 0.5 * q * f / s - (a * c + d * e) * g / s
                cn1 = 0.5 * d * f + c * g - cn2
            an[i, j] += cn1
            an[i, j + 1] += cn2
    an[m, 0] = an[m, m] = 1.0
    return an


def run(quick: bool) -> list[Record]:
    """Measure build time and evaluation rates with their baselines (see the module docstring)."""
    shape = naca4("2412", 201)
    repeats = 3 if quick else 15
    t_build = best_of(lambda: PanelModel(shape), repeats)
    t_naive_build = best_of(lambda: np.linalg.solve(_naive_influence(shape.x[::-1], shape.y[::-1]),
                                                    np.ones(shape.x.size)), 1 if quick else 3)
    x, upper = tap_stations_cosine(22)
    x, upper = x[1:-1], upper[1:-1]  # 20 taps, none on the trailing edge
    fit = ShapeFitIntegrator(shape, x, upper)
    alpha = math.radians(5.0)
    one = fit.model.cp_at(alpha, x, upper)
    many = np.tile(one, (1000, 1)) + np.random.default_rng(1).normal(0.0, 0.01, (1000, x.size))
    t_one = best_of(lambda: fit.integrate(one, alpha), repeats * 10)
    t_many = best_of(lambda: fit.integrate(many, alpha), repeats)
    # Naive: the design matrices (basis at the taps and on the dense contour, prior, projector, the
    # alternative fits of the error estimate) built again for every mean; only the panel model is kept.
    t_naive = best_of(lambda: ShapeFitIntegrator(shape, x, upper, model=fit.model).integrate(one, alpha), repeats)
    return [
        Record("panel model build, 200 panels", t_build * 1e3, "ms", t_naive_build * 1e3, t_naive_build / t_build,
               "< 100 ms"),
        Record("shape-fit integrate, one block mean", 1.0 / t_one, "means/s", 1.0 / t_naive, t_naive / t_one,
               ">= 50 means/s"),
        Record("shape-fit integrate, 1000 means per call", 1000.0 / t_many, "means/s", 1.0 / t_naive,
               t_naive * 1000.0 / t_many, ">= 50 means/s"),
    ]
